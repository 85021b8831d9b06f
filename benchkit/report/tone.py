"""What people read of a tone run and a single tone: the text summary, the
harmonics, spectrum and steps tables, the spectrum and residual plots, the
report files, and the spectra of compared runs."""

from __future__ import annotations

import csv
from pathlib import Path

import numpy as np
from matplotlib.figure import Figure
from matplotlib.ticker import FuncFormatter

from benchkit.analysis import spectrum as sp
from benchkit.analysis.tone import ToneResult
from benchkit.analysis.uncertainty import shown, shown_parts, shown_quantity
from benchkit.errors import read_warnings
from benchkit.report import overlays, tables
from benchkit.report.files import report_folder, stem_of, title_of
from benchkit.report.overlays import colour, finish_overlay
from benchkit.report.plots import (BAND, FAINT, floored, hz_label, labels_apart, LABELLED_HARMONICS, MARK, renderer_of, save_png,
                                   shared_scale, volts_axis,
                                   TRACE)
from benchkit.units import in_one_unit, level_view, quantity

#: the warnings that make a result not valid, named on its NOT VALID line
NOT_VALID_CODES = ("input-clipped", "dropout")


#: Plain readings of the harmonic profile (common practice).
PROFILE_TEXT = {
    "even-order": "even-order dominant: an asymmetric transfer curve, the usual signature of a single-ended stage",
    "odd-order": "odd-order dominant: a symmetric curvature, as from a push-pull stage or a symmetric soft limit",
    "high-order-tail": (
        "a long high-order tail: hard clipping or a sharp kink in the transfer curve; the residual plot shows which"
    ),
    "mixed": "even and odd orders alike: more than one mechanism at work",
    "below-noise": "no harmonic stands clear of the noise: the residual is noise, not distortion",
}


def conditions_line(r: ToneResult) -> str:
    """The conditions a tone result holds under, in one line."""
    lo, hi = r.bandwidth_hz
    scale = "no voltage scale" if r.volts_per_fs is None else f"{r.volts_per_fs:g} V peak per FS ({r.scale_source})"
    return (
        f"{r.sample_rate_hz:g} Hz, {r.n_samples} samples ({quantity(r.duration_s, 's', 3)}), band {lo:g} to {hi:g} Hz, "
        f"{sp.WINDOW_NAME.split(',')[0]} window, averages {r.averages}, "
        f"fit to H{r.fitted_orders}, {scale}"
    )


def _dominant(r: ToneResult, *keys: str) -> str:
    """", the calibration dominates the W" for the first of ``keys`` with a named dominant contribution."""
    named = (r.uncertainty or {}).get("dominant") or {}
    for key in keys:
        if named.get(key):
            return f"; the {named[key]} dominates the {'W' if key == 'power_w' else 'volts'}"
    return ""


def tone_summary(r: ToneResult, name: str = "", channel: int | None = None) -> str:
    """The figures of a tone analysis on one screen, ending with a plain
    reading of the harmonic profile."""
    lines = []
    head = " ".join(x for x in (name, f"channel {channel}" if channel else "") if x)
    if head:
        lines.append(head)
    if not r.valid:
        lines.append("  NOT VALID: " + "; ".join(w for w in read_warnings(r.warnings) if w.code in NOT_VALID_CODES))
    u = (r.uncertainty or {}).get("standard") or {}
    fund = f"  fundamental  {r.fundamental_hz:.4f} Hz   {shown(r.fundamental_dbfs, u.get('fundamental_dbfs'))} dBFS"
    if r.fundamental_vrms is not None:
        fund += f"   {shown_quantity(r.fundamental_vrms, u.get('fundamental_vrms'), 'Vrms')}"
    if r.power_w is not None:
        fund += f"   {shown_quantity(r.power_w, u.get('power_w'), 'W')} into {r.load_ohms:g} ohm"
    view = level_view()
    if view.own(r.fundamental_dbfs, r.fundamental_vrms, r.power_w):
        fund += f"   {view.text(r.fundamental_dbfs, r.fundamental_vrms, r.power_w)}"
    lines.append(fund)
    lines.append(f"               (+- is the expanded uncertainty, k = 2{_dominant(r, 'power_w', 'fundamental_vrms')})")
    heard = sum(h.above_noise for h in r.harmonics)
    if not r.harmonics:
        lines.append(f"  THD          not defined: every harmonic lies above the band "
                     f"(up to {r.bandwidth_hz[1]:g} Hz)")
    elif r.thd_upper_bound:
        lines.append(f"  THD          < {r.thd_pct:.4g} %   < {r.thd_db:.2f} dB   (H2..H{r.harmonics[-1].order}: "
                     "none over the noise)")
    else:
        lines.append(f"  THD          {r.thd_pct:.4g} %   {shown(r.thd_db, u.get('thd_db'))} dB   "
                     f"(H2..H{r.harmonics[-1].order}: {heard} over the noise)")
    lines.append(f"  THD+N        {r.thdn_pct:.4g} %   {shown(r.thdn_db, u.get('thdn_db'))} dB   SINAD {r.sinad_db:.2f} dB")
    noise = f"  noise        {r.noise_dbfs:.1f} dBFS"
    if r.noise_vrms is not None:
        noise += f"   {quantity(r.noise_vrms, 'Vrms')}"
    if view.own(r.noise_dbfs, r.noise_vrms):
        noise += f"   {view.text(r.noise_dbfs, r.noise_vrms)}"
    lines.append(noise)
    lines.append(f"  DC {r.dc_fs:+.3g} FS   peak {r.peak_fs:.4g} FS   crest factor {r.crest_factor:.3f}")
    if r.harmonics:
        hs = "  ".join(f"H{h.order} {h.level_dbc:.1f}" if h.above_noise else f"H{h.order} ({h.level_dbc:.1f})"
                       for h in r.harmonics[:9])
        lines.append(f"  dBc          {hs}")
        if not all(h.above_noise for h in r.harmonics[:9]):
            lines.append("               (in brackets: not over the noise, left out of THD)")
    lines.append(f"  conditions   {conditions_line(r)}")
    for w in r.warnings:
        lines.append(f"  warning      {w}")
    lines.append(f"  reading      {PROFILE_TEXT[r.harmonic_profile]}")
    return "\n".join(lines)


def _harmonic_cell(h) -> str:
    """A harmonic's level, bracketed when it cannot be told from the noise,
    "above band" when the band leaves it out."""
    if h is None:
        return "above band"
    return f"{h.level_dbc:.1f}" if h.above_noise else f"({h.level_dbc:.1f})"


def steps_summary(steps, title: str = "") -> str:
    """A stepped-tone run as a table: a row a step, the units in the
    headers, the decimal points in line."""
    from benchkit.report.screen import Column, level_column, table_text

    rs = [s.result for s in steps.steps]
    level_unit, levels = level_column([(r.fundamental_dbfs, r.fundamental_vrms, r.power_w) for r in rs])
    power_unit, powers = in_one_unit([r.power_w for r in rs], "W")
    thdn_unit, thdn_pct = in_one_unit([r.thdn_pct for r in rs], "%")
    parts = [shown_parts(r.thdn_db, ((r.uncertainty or {}).get("standard") or {}).get("thdn_db")) for r in rs]
    rows = []
    for s, level, power, pct, (thdn, big) in zip(steps.steps, levels, powers, thdn_pct, parts):
        by_order = {h.order: h for h in s.result.harmonics}
        mark = "" if s.result.valid else "NOT VALID (clipped capture)" if s.result.clipped else "NOT VALID (see the warnings)"
        rows.append([f"{s.drive_dbfs:.2f}", level, power, pct, thdn, big or "-",
                     _harmonic_cell(by_order.get(2)), _harmonic_cell(by_order.get(3)), mark])
    columns = [Column("drive (dBFS)"), Column(f"level ({level_unit})"), Column(f"power ({power_unit})"),
               Column(f"THD+N ({thdn_unit})"), Column("THD+N (dB)"), Column("U (dB)"), Column("H2 (dBc)"),
               Column("H3 (dBc)"), Column("", "left")]
    lines = [title] if title else []
    lines += [table_text(columns, rows), "  (U: the expanded uncertainty, k = 2; in brackets: not over the noise)"]
    seen = set()
    for w in list(steps.warnings) + [w for s in steps.steps for w in s.result.warnings]:
        if w not in seen:
            seen.add(w)
            lines.append(f"  warning      {w}")
    return "\n".join(lines)


def write_harmonics_csv(result: ToneResult, path: Path) -> Path:
    """One row per harmonic (the fundamental first, as order 1)."""
    scale = result.volts_per_fs
    header = ["order", "freq_hz", "level_dbc", "level_dbfs", "phase_deg", "method"]
    if scale is not None:
        header.append("level_vrms")
    with path.open("w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(header)
        fund = [1, f"{result.fundamental_hz:.6f}", "0.000", f"{result.fundamental_dbfs:.3f}", "0.000", "fit"]
        if scale is not None:
            fund.append(f"{result.fundamental_vrms:.6g}")
        w.writerow(fund)
        for h in result.harmonics:
            row = [h.order, f"{h.freq_hz:.6f}", f"{h.level_dbc:.3f}", f"{h.level_dbfs:.3f}", f"{h.phase_deg:.3f}", h.method]
            if scale is not None:
                row.append(f"{h.to_dict(scale)['level_vrms']:.6g}")
            w.writerow(row)
    return path


def write_spectrum_csv(result: ToneResult, path: Path) -> Path:
    """The windowed spectrum: frequency and the level of a sine at each bin."""
    tr = result.traces
    if tr is None:
        raise ValueError("the result was analysed without traces")
    with path.open("w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(["freq_hz", "level_dbfs"])
        w.writerows(zip(np.char.mod("%.4f", tr.freq_hz), np.char.mod("%.3f", tr.spectrum_dbfs)))
    return path


def _steps_row(drive: float, r) -> list:
    by_order = {h.order: h.level_dbc for h in r.harmonics}
    return [
        f"{drive:.2f}",
        f"{r.fundamental_hz:.4f}",
        f"{r.fundamental_dbfs:.3f}",
        "" if r.fundamental_vrms is None else f"{r.fundamental_vrms:.5g}",
        "" if r.power_w is None else f"{r.power_w:.5g}",
        f"{r.thd_pct:.5g}",
        f"{r.thd_db:.3f}",
        f"{r.thdn_pct:.5g}",
        f"{r.thdn_db:.3f}",
        f"{by_order.get(2, float('nan')):.2f}",
        f"{by_order.get(3, float('nan')):.2f}",
        f"{r.noise_dbfs:.2f}",
        str(r.valid).lower(),
    ]


STEPS_HEADER = [
    "drive_dbfs", "fundamental_hz", "fundamental_dbfs", "level_vrms", "power_w", "thd_pct", "thd_db",
    "thdn_pct", "thdn_db", "h2_dbc", "h3_dbc", "noise_dbfs", "valid",
]


def write_steps_csv(steps, path: Path) -> Path:
    """One row per step of a stepped-tone run."""
    with path.open("w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(STEPS_HEADER)
        for s in steps.steps:
            w.writerow(_steps_row(s.drive_dbfs, s.result))
    return path


def spectrum_figure(result: ToneResult, title: str) -> Figure:
    """Spectrum on a log frequency axis, the band shaded, the harmonics
    marked with order and level, the conditions in a caption."""
    tr = result.traces
    if tr is None:
        raise ValueError("the result was analysed without traces")
    fig = Figure(figsize=(10, 5.6))
    ax = fig.add_subplot(1, 1, 1)
    lo_f = max(tr.freq_hz[1], min(10.0, result.fundamental_hz / 2))
    sel = tr.freq_hz >= lo_f
    ax.axvspan(max(result.bandwidth_hz[0], lo_f), result.bandwidth_hz[1], color=BAND, zorder=0, label="measurement band")
    lo, hi = result.bandwidth_hz
    band = tr.spectrum_dbfs[(tr.freq_hz >= max(lo, lo_f)) & (tr.freq_hz <= hi)]
    floor = float(np.median(band if band.size else tr.spectrum_dbfs[sel]))
    bottom = max(floor - 25.0, -260.0)
    ax.plot(tr.freq_hz[sel], floored(tr.spectrum_dbfs[sel], bottom), color=TRACE, lw=0.8, zorder=2)
    ax.plot([result.fundamental_hz], [result.fundamental_dbfs], "o", ms=6, mfc="none", mec=MARK, zorder=3)
    fundamental = ax.annotate(
        f"{result.fundamental_hz:.2f} Hz\n{result.fundamental_dbfs:.2f} dBFS",
        (result.fundamental_hz, result.fundamental_dbfs),
        textcoords="offset points", xytext=(8, -4), fontsize=8, color=MARK, va="top",
    )
    heard = [h for h in result.harmonics[:LABELLED_HARMONICS] if h.level_dbfs >= floor + 10.0]  # clear of the noise
    for h in heard:
        ax.plot([h.freq_hz], [h.level_dbfs], "v", ms=5, color=MARK, zorder=3)
    ax.set_xscale("log")
    ax.set_xlim(lo_f, tr.freq_hz[-1])
    ax.xaxis.set_major_formatter(FuncFormatter(hz_label))
    ax.set_ylim(bottom, max(5.0, result.fundamental_dbfs + 10.0))
    ax.set_xlabel("frequency (Hz)")
    ax.set_ylabel("level of a sine (dBFS)")
    volts = volts_axis(ax, result.volts_per_fs)
    ax.grid(True, which="both", color="#e6e6e6", lw=0.5)
    ax.set_title(title, loc="left", fontsize=10)
    fig.text(0.01, 0.01, conditions_line(result), fontsize=7.5, color="#333333", ha="left", va="bottom", wrap=True)
    fig.subplots_adjust(left=0.08, right=0.92 if volts else 0.98, top=0.92, bottom=0.16)
    # each harmonic's label where it collides with no other (and not with the fundamental's)
    labels_apart(ax, [(h.freq_hz, h.level_dbfs, f"H{h.order}\n{h.level_dbc:.1f} dBc") for h in heard],
                 placed=[fundamental.get_window_extent(renderer_of(fig))], fontsize=7, color=MARK,
                 bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "none", "alpha": 0.85})
    return fig


def spectrum_png(result: ToneResult, path: Path, title: str) -> Path:
    """:func:`spectrum_figure`, written to ``path``."""
    return save_png(spectrum_figure(result, title), path)


def residual_figure(result: ToneResult, title: str) -> Figure:
    """The notched residual over two periods, with the fundamental drawn
    faintly on its own axis for phase."""
    tr = result.traces
    if tr is None:
        raise ValueError("the result was analysed without traces")
    fig = Figure(figsize=(10, 5.0))
    ax = fig.add_subplot(1, 1, 1)
    scale, unit = 1.0, "FS"
    if result.volts_per_fs is not None:
        scale, unit = result.volts_per_fs * 1000.0, "mV"
    t_ms = tr.time_s * 1000.0
    ax2 = ax.twinx()
    ax2.plot(t_ms, tr.fundamental_fs * scale, color=FAINT, lw=1.0, alpha=0.6)
    ax2.set_ylabel(f"fundamental ({unit}), faint", color=FAINT)
    ax2.tick_params(axis="y", colors=FAINT)
    ax.plot(t_ms, tr.residual_fs * scale, color=TRACE, lw=1.1, zorder=3)
    ax.set_zorder(ax2.get_zorder() + 1)
    ax.patch.set_visible(False)
    ax.axhline(0.0, color="#cccccc", lw=0.6)
    ax.set_xlim(t_ms[0], t_ms[-1])
    ax.set_xlabel("time from a rising zero crossing of the fundamental (ms)")
    ax.set_ylabel(f"residual, band-limited ({unit})")
    ax.grid(True, color="#eeeeee", lw=0.5)
    lo, hi = result.bandwidth_hz
    ax.set_title(f"{title}: residual without the fundamental ({lo:g} Hz to {hi:g} Hz)", loc="left", fontsize=10)
    fig.text(0.01, 0.01, conditions_line(result), fontsize=7.5, color="#333333", ha="left", va="bottom", wrap=True)
    fig.subplots_adjust(left=0.09, right=0.91, top=0.91, bottom=0.17)
    return fig


def residual_png(result: ToneResult, path: Path, title: str) -> Path:
    """:func:`residual_figure`, written to ``path``."""
    return save_png(residual_figure(result, title), path)


def tone_reports(result, doc, path: Path, channel: int, out: Path) -> list[Path]:
    report_folder(out)
    stem = stem_of(path, channel)
    title = f"{title_of(path)}, channel {channel}"
    return [
        tables.write_json(doc, out / f"{stem}.result.json"),
        write_harmonics_csv(result, out / f"{stem}.harmonics.csv"),
        write_spectrum_csv(result, out / f"{stem}.spectrum.csv"),
        spectrum_png(result, out / f"{stem}.spectrum.png", title),
        residual_png(result, out / f"{stem}.residual.png", title),
    ]


def steps_reports(steps, path: Path, channel: int, out: Path) -> list[Path]:
    report_folder(out)
    stem = stem_of(path, channel)
    written = [
        tables.write_json(steps.to_dict(), out / f"{stem}.result.json"),
        write_steps_csv(steps, out / f"{stem}.steps.csv"),
        overlays.distortion_png([steps.to_dict()], ["THD+N"], out / f"{stem}.thdn.png", f"{title_of(path)}: THD+N",
                                caption=conditions_line(steps.steps[0].result)),
    ]
    for s in steps.steps:
        tag = f"{stem}-drive{s.drive_dbfs:+.0f}dBFS"
        title = f"{title_of(path)}, drive {s.drive_dbfs:g} dBFS"
        written += [
            spectrum_png(s.result, out / f"{tag}.spectrum.png", title),
            residual_png(s.result, out / f"{tag}.residual.png", title),
            write_harmonics_csv(s.result, out / f"{tag}.harmonics.csv"),
        ]
    return written


def spectra_figure(results, labels, title: str, warnings=()) -> Figure:
    """The spectra of one step of each run (tone results with traces) on
    one log-frequency axis, the later runs drawn over the first."""
    fig = Figure(figsize=(10, 5.6))
    ax = fig.add_subplot(1, 1, 1)
    top = max(r.fundamental_dbfs for r in results)
    lo_f = max(results[0].traces.freq_hz[1], min(10.0, results[0].fundamental_hz / 2))
    floors = []
    for r in results:
        tr = r.traces
        band = tr.spectrum_dbfs[(tr.freq_hz >= r.bandwidth_hz[0]) & (tr.freq_hz <= r.bandwidth_hz[1])]
        floors.append(float(np.median(band)) if band.size else -200.0)
    bottom = max(min(floors) - 25.0, -260.0)
    for i, (label, r) in enumerate(zip(labels, results)):
        tr = r.traces
        sel = tr.freq_hz >= lo_f
        ax.plot(tr.freq_hz[sel], floored(tr.spectrum_dbfs[sel], bottom), lw=0.7, color=colour(i), alpha=0.85,
                label=f"{label}: THD+N {r.thdn_db:.1f} dB")
        shown = r.harmonics[:9]
        ax.plot([h.freq_hz for h in shown], [h.level_dbfs for h in shown], "o", ms=5, mfc="none", mec=colour(i))
    ax.set_xscale("log")
    ax.xaxis.set_major_formatter(FuncFormatter(hz_label))
    ax.set_xlim(lo_f, results[0].traces.freq_hz[-1])
    ax.set_ylim(bottom, max(5.0, top + 10.0))
    ax.set_xlabel("frequency (Hz)")
    ax.set_ylabel("level of a sine (dBFS)")
    volts_axis(ax, shared_scale(r.volts_per_fs for r in results))
    return finish_overlay(fig, ax, title, warnings, "", "upper right", 0.08)


def spectra_png(results, labels, path: Path, title: str, warnings=()) -> Path:
    """:func:`spectra_figure`, written to ``path``."""
    return save_png(spectra_figure(results, labels, title, warnings=warnings), path)
