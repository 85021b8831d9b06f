"""What people read of a response: the text summary, the table, the
magnitude/phase and distortion plots, the report files, and the overlay of
compared responses."""

from __future__ import annotations

import csv
import math
from pathlib import Path

import numpy as np
from matplotlib.figure import Figure

from benchkit.analysis.tone import HARMONIC_OVER_FLOOR_DB
from benchkit.analysis.uncertainty import lookup, shown_quantity
from benchkit.report import tables
from benchkit.report.files import report_folder, stem_of, title_of
from benchkit.report.overlays import colour, finish_overlay
from benchkit.report.plots import FAINT, hz_label, legend_clear, log_hz_axis, MARK, save_png, TRACE
from benchkit.units import quantity


def response_summary(r, title: str = "") -> str:
    """The derived figures of a frequency response, one screen."""
    d = r.to_dict()

    def hz(v, key=None):
        return "beyond the measured range" if v is None else shown_quantity(v, lookup(d, key) if key else None, "Hz")

    def db(v):
        return "not measured" if v is None else f"{v:+.2f} dB"

    lines = [title] if title else []
    lines += [
        f"  method       {r.method}, referred by {r.scale_source}; magnitude in {r.mag_units}",
        f"  at {r.reference_hz:g} Hz   {r.ref_db:+.2f} dB",
        f"  -3 dB        {hz(d['low_3db_hz'], 'low_3db_hz')} and {hz(d['high_3db_hz'], 'high_3db_hz')}"
        + ("   (+- is the expanded uncertainty, k = 2)" if (d.get("uncertainty") or {}).get("standard") else ""),
        f"  -1 dB        {hz(d['low_1db_hz'], 'low_1db_hz')} and {hz(d['high_1db_hz'], 'high_1db_hz')}",
        f"  ripple       {'not measured' if d['ripple_db'] is None else format(d['ripple_db'], '.2f') + ' dB peak to peak'}",
        f"  20 Hz, 20 kHz {db(d['level_20hz_db'])}, {db(d['level_20khz_db'])}",
    ]
    fit = r.corner_fit
    if fit is not None:
        verdict = "fits" if fit.fits else "does not fit"
        lines.append(f"  low corner   {verdict} a first-order high-pass at {quantity(fit.corner_hz, 'Hz', 4)} (RMS error {fit.rms_error_db:.2f} dB)")
        if r.coupling_capacitor_f is not None:
            lines.append(f"  coupling C   {r.coupling_capacitor_f * 1e6:.4g} uF into {r.load_ohms:g} ohm (C = 1/(2 pi R f))")
    thd = [v for v in r.thd_db if v == v]
    if thd:
        lines.append(f"  THD          {min(thd):.1f} to {max(thd):.1f} dB over frequency")
        buried = int(np.count_nonzero(r.thd_in_noise))
        if buried:
            lines.append(f"  in the noise THD at {buried} of {len(thd)} frequencies stands less than "
                         f"{HARMONIC_OVER_FLOOR_DB:g} dB over what noise alone reads as (marked on the plot)")
    lines += [f"  warning      {w}" for w in r.warnings]
    return "\n".join(lines)


def write_response_csv(result, path: Path) -> Path:
    """One row per frequency: magnitude, phase, group delay, THD (THD+N
    for stepped sines), what noise alone reads as THD there and whether
    THD stands in it, and H2..H5, raw (never smoothed); empty where not
    measured."""
    from benchkit.analysis.response import group_delay_s

    gd = group_delay_s(result.freq_hz, result.phase_deg)
    orders = [c.order for c in result.harmonics]
    with path.open("w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(["freq_hz", f"mag_db ({result.mag_units})", "phase_deg", "group_delay_s", "thd_db", "thdn_db",
                    "thd_floor_db", "thd_in_noise"] + [f"h{k}_dbc" for k in orders])
        floor, buried = result.thd_floor_db, result.thd_in_noise
        for i, f in enumerate(result.freq_hz):
            cells = [result.thd_db[i], None if result.thdn_db is None else result.thdn_db[i],
                     None if floor is None else floor[i]]
            cells = ["" if v is None or not math.isfinite(v) else f"{v:.2f}" for v in cells]
            cells.append("yes" if buried[i] else "" if floor is None or not math.isfinite(result.thd_db[i]) else "no")
            cells += ["" if not math.isfinite(c.level_dbc[i]) else f"{c.level_dbc[i]:.2f}" for c in result.harmonics]
            w.writerow([f"{f:.4f}", f"{result.mag_db[i]:.4f}", f"{result.phase_deg[i]:.3f}", f"{gd[i]:.4e}", *cells])
    return path


def _response_caption(r) -> str:
    sweep = r.info.get("sweep")
    how = (f"synchronized sweep {sweep['f1_hz']:g} to {sweep['f2_hz']:g} Hz, {quantity(sweep['duration_s'], 's', 3)}, "
           f"{sweep['level_dbfs']:.1f} dBFS" if sweep else f"stepped sines, {r.freq_hz.size} frequencies")
    return f"{how}; referred by {r.scale_source}; magnitude in {r.mag_units}"


def response_figure(result, title: str, smooth_fraction: int | None = None) -> Figure:
    """Magnitude over a phase and a group delay panel, log frequency, the
    -3 dB corners marked (each label on the inner side of its line, so
    that neither runs off the plot); smoothing (1/N octave) changes the
    plot only."""
    from benchkit.analysis import response as resp

    f = result.freq_hz
    fig = Figure(figsize=(10, 7.6))
    grid = fig.add_gridspec(3, 1, height_ratios=(2.0, 1.0, 1.0))
    ax, axp, axd = (fig.add_subplot(grid[i, 0]) for i in range(3))
    mag = resp.smooth(f, result.mag_db, smooth_fraction) if smooth_fraction else result.mag_db
    ax.plot(f, mag, color=TRACE, lw=1.2)
    ref = result.ref_db
    low, high = result.corners_3db
    for x, inward in ((low, 1), (high, -1)):
        if x is not None:
            ax.axvline(x, color=MARK, lw=0.8, ls="--")
            ax.annotate(f"-3 dB {hz_label(round(x, 2 if x < 100 else 0))} Hz", (x, ref - 3), textcoords="offset points",
                        xytext=(5 * inward, -12), ha="left" if inward > 0 else "right", fontsize=8, color=MARK)
    ax.axhline(ref - 3, color=FAINT, lw=0.6, ls=":")
    span = max(6.0, float(np.nanmax(mag) - np.nanmin(mag)) + 2.0)
    ax.set_ylim(min(ref - 6, float(np.nanmin(mag)) - 1), max(ref + 3, float(np.nanmax(mag)) + 1) if span < 60 else ref + 6)
    ax.set_ylabel(result.mag_units.replace("dB re the level at", "dB re"))
    smooth_note = f", 1/{smooth_fraction}-octave smoothing for display" if smooth_fraction else ""
    ax.set_title(f"{title}: magnitude{smooth_note}", loc="left", fontsize=10)
    axp.plot(f, result.phase_deg, color=TRACE, lw=1.0)
    axp.set_ylabel("phase (deg)")
    # group delay, -d(phase)/d(omega): a coupling capacitor's low corner shows as delay rising below it
    delay_ms = 1e3 * resp.group_delay_s(f, result.phase_deg)
    axd.plot(f, delay_ms, color=TRACE, lw=1.0)
    finite = delay_ms[np.isfinite(delay_ms)]
    if finite.size:
        lo_d, hi_d = np.percentile(finite, [1, 99])
        pad = max(0.1 * (hi_d - lo_d), 0.01)
        axd.set_ylim(lo_d - pad, hi_d + pad)
    axd.set_ylabel("group delay (ms)")
    axd.set_xlabel("frequency (Hz)")
    for a in (ax, axp, axd):
        log_hz_axis(a)
    fig.text(0.01, 0.01, _response_caption(result), fontsize=7.5, color="#333333", ha="left", va="bottom")
    fig.subplots_adjust(left=0.09, right=0.97, top=0.95, bottom=0.09, hspace=0.32)
    return fig


def response_png(result, path: Path, title: str, smooth_fraction: int | None = None) -> Path:
    """:func:`response_figure`, written to ``path``."""
    return save_png(response_figure(result, title, smooth_fraction=smooth_fraction), path)


def _plot_marked(ax, f, y, buried, label: str, **style) -> None:
    """A curve drawn solid where it stands over its noise floor and dotted,
    fainter, where it does not (the dotted stretches reach one point into
    their neighbours, so the two join)."""
    y = np.asarray(y, float)
    near = buried.copy()
    near[1:] |= buried[:-1]
    near[:-1] |= buried[1:]
    ax.plot(f, np.where(buried, np.nan, y), label=label, **style)
    if buried.any():
        ax.plot(f, np.where(near, y, np.nan), **{**style, "ls": ":", "alpha": 0.55})


def distortion_figure(result, title: str) -> Figure:
    """THD (and THD+N for stepped sines), H2 and H3 against the
    fundamental's frequency, in dB re the fundamental; where a sweep knows
    what noise alone reads as, that floor is drawn and the points that do
    not stand over it are dotted."""
    from matplotlib.lines import Line2D

    fig = Figure(figsize=(10, 5.2))
    ax = fig.add_subplot(1, 1, 1)
    f = result.freq_hz
    floor = result.thd_floor_db
    if floor is not None:
        ax.plot(f, floor, color=FAINT, lw=0.9, ls="-.", label="noise floor (THD)")
    _plot_marked(ax, f, result.thd_db, result.thd_in_noise, "THD", color=TRACE, lw=1.4)
    if result.thdn_db is not None:
        ax.plot(f, result.thdn_db, color=FAINT, lw=1.2, ls="--", label="THD+N")
    for c, shade in zip(result.harmonics[:2], (MARK, "#4b8a3e")):
        _plot_marked(ax, c.freq_hz, c.level_dbc, c.in_noise, f"H{c.order}", color=shade, lw=0.9)
    if result.thd_in_noise.any() or any(c.in_noise.any() for c in result.harmonics[:2]):
        ax.add_line(Line2D([], [], color=TRACE, lw=1.2, ls=":", alpha=0.55,
                           label=f"dotted: < {HARMONIC_OVER_FLOOR_DB:g} dB over the noise"))
    log_hz_axis(ax)
    ax.set_xlabel("fundamental frequency (Hz)")
    ax.set_ylabel("dB re the fundamental")
    ax.set_title(f"{title}: distortion against frequency", loc="left", fontsize=10)
    fig.text(0.01, 0.01, _response_caption(result), fontsize=7.5, color="#333333", ha="left", va="bottom")
    fig.subplots_adjust(left=0.09, right=0.97, top=0.92, bottom=0.15)
    legend_clear(ax, fontsize=8, frameon=False)
    return fig


def distortion_png(result, path: Path, title: str) -> Path:
    """:func:`distortion_figure`, written to ``path``."""
    return save_png(distortion_figure(result, title), path)


def response_reports(result, path: Path, channel: int, out: Path, smooth: int | None = None) -> list[Path]:
    report_folder(out)
    stem = stem_of(path, channel)
    return [
        tables.write_json(result.to_dict(), out / f"{stem}.response.json"),
        write_response_csv(result, out / f"{stem}.response.csv"),
        response_png(result, out / f"{stem}.response.png", title_of(path), smooth),
        distortion_png(result, out / f"{stem}.distortion.png", title_of(path)),
    ]


def responses_figure(docs, labels, title: str, warnings) -> Figure:
    fig = Figure(figsize=(10, 6.4))
    ax, axp = fig.add_subplot(2, 1, 1), fig.add_subplot(2, 1, 2)
    for i, (label, d) in enumerate(zip(labels, docs)):
        r = d.get("response") or {}
        f = np.asarray(r.get("freq_hz") or [], float)
        ax.plot(f, np.asarray(r.get("mag_db") or [], float), lw=1.1, color=colour(i), label=label)
        axp.plot(f, np.asarray(r.get("phase_deg") or [], float), lw=0.9, color=colour(i))
    ax.set_ylabel(str(docs[0].get("mag_units", "dB")).replace("dB re the level at", "dB re"))
    axp.set_ylabel("phase (deg)")
    axp.set_xlabel("frequency (Hz)")
    for a in (ax, axp):
        log_hz_axis(a)
        a.grid(True, which="both", color="#e6e6e6", lw=0.5)
    fig.subplots_adjust(hspace=0.28)
    return finish_overlay(fig, ax, f"{title}: magnitude and phase", warnings, "", "lower center", 0.09)


def responses_png(docs, labels, path: Path, title: str, warnings) -> Path:
    """:func:`responses_figure`, written to ``path``."""
    return save_png(responses_figure(docs, labels, title, warnings), path)
