"""PNG plots of a tone analysis: spectrum and residual.

Uses matplotlib's object interface with the Agg canvas: no pyplot, no
global state, no display needed.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.ticker import FuncFormatter

from benchkit.units import quantity
from benchkit.analysis.tone import ToneResult
from benchkit.report.summary import conditions_line

_TRACE = "#1f3b57"
_BAND = "#dfe9f3"
_MARK = "#c2571a"
_FAINT = "#9aa5b1"
_LABELLED_HARMONICS = 9


def _hz(v, _pos=None) -> str:
    return f"{v / 1000:g}k" if v >= 1000 else f"{v:g}"


def _save(fig: Figure, path: Path) -> Path:
    FigureCanvasAgg(fig)
    fig.savefig(path, dpi=110)
    return path


def spectrum_png(result: ToneResult, path: Path, title: str) -> Path:
    """Spectrum on a log frequency axis, the band shaded, the harmonics
    marked with order and level, the conditions in a caption."""
    tr = result.traces
    if tr is None:
        raise ValueError("the result was analysed without traces")
    fig = Figure(figsize=(10, 5.6))
    ax = fig.add_subplot(1, 1, 1)
    lo_f = max(tr.freq_hz[1], min(10.0, result.fundamental_hz / 2))
    sel = tr.freq_hz >= lo_f
    ax.axvspan(max(result.bandwidth_hz[0], lo_f), result.bandwidth_hz[1], color=_BAND, zorder=0, label="measurement band")
    ax.plot(tr.freq_hz[sel], tr.spectrum_dbfs[sel], color=_TRACE, lw=0.8, zorder=2)
    lo, hi = result.bandwidth_hz
    band = tr.spectrum_dbfs[(tr.freq_hz >= max(lo, lo_f)) & (tr.freq_hz <= hi)]
    floor = float(np.median(band if band.size else tr.spectrum_dbfs[sel]))
    ax.plot([result.fundamental_hz], [result.fundamental_dbfs], "o", ms=6, mfc="none", mec=_MARK, zorder=3)
    ax.annotate(
        f"{result.fundamental_hz:.2f} Hz\n{result.fundamental_dbfs:.2f} dBFS",
        (result.fundamental_hz, result.fundamental_dbfs),
        textcoords="offset points", xytext=(8, -4), fontsize=8, color=_MARK, va="top",
    )
    for i, h in enumerate(result.harmonics[:_LABELLED_HARMONICS]):
        if h.level_dbfs < floor + 10.0:  # not clear of the noise: leave unlabelled
            continue
        ax.plot([h.freq_hz], [h.level_dbfs], "v", ms=5, color=_MARK, zorder=3)
        ax.annotate(  # alternate heights so neighbours on a log axis do not collide
            f"H{h.order}\n{h.level_dbc:.1f} dBc", (h.freq_hz, h.level_dbfs),
            textcoords="offset points", xytext=(0, 6 + 22 * (i % 2)), ha="center", fontsize=7, color=_MARK,
        )
    ax.set_xscale("log")
    ax.set_xlim(lo_f, tr.freq_hz[-1])
    ax.xaxis.set_major_formatter(FuncFormatter(_hz))
    ax.set_ylim(max(floor - 25.0, -260.0), max(5.0, result.fundamental_dbfs + 10.0))
    ax.set_xlabel("frequency (Hz)")
    ax.set_ylabel("level of a sine (dBFS)")
    ax.grid(True, which="both", color="#e6e6e6", lw=0.5)
    ax.set_title(title, loc="left", fontsize=10)
    fig.text(0.01, 0.01, conditions_line(result), fontsize=7.5, color="#333333", ha="left", va="bottom", wrap=True)
    fig.subplots_adjust(left=0.08, right=0.98, top=0.92, bottom=0.16)
    return _save(fig, path)


def residual_png(result: ToneResult, path: Path, title: str) -> Path:
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
    ax2.plot(t_ms, tr.fundamental_fs * scale, color=_FAINT, lw=1.0, alpha=0.6)
    ax2.set_ylabel(f"fundamental ({unit}), faint", color=_FAINT)
    ax2.tick_params(axis="y", colors=_FAINT)
    ax.plot(t_ms, tr.residual_fs * scale, color=_TRACE, lw=1.1, zorder=3)
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
    return _save(fig, path)


def _log_hz_axis(ax) -> None:
    ax.set_xscale("log")
    ax.xaxis.set_major_formatter(FuncFormatter(_hz))
    ax.grid(True, which="both", color="#eeeeee", lw=0.5)


def _response_caption(r) -> str:
    sweep = r.info.get("sweep")
    how = (f"synchronized sweep {sweep['f1_hz']:g} to {sweep['f2_hz']:g} Hz, {quantity(sweep['duration_s'], 's', 3)}, "
           f"{sweep['level_dbfs']:.1f} dBFS" if sweep else f"stepped sines, {r.freq_hz.size} frequencies")
    return f"{how}; referred by {r.scale_source}; magnitude in {r.mag_units}"


def response_png(result, path: Path, title: str, smooth_fraction: int | None = None) -> Path:
    """Magnitude over a phase panel, log frequency, the -3 dB corners
    marked; smoothing (1/N octave) changes the plot only."""
    from benchkit.analysis import response as resp

    f = result.freq_hz
    fig = Figure(figsize=(10, 6.4))
    ax, axp = fig.add_subplot(2, 1, 1), fig.add_subplot(2, 1, 2)
    mag = resp.smooth(f, result.mag_db, smooth_fraction) if smooth_fraction else result.mag_db
    ax.plot(f, mag, color=_TRACE, lw=1.2)
    ref = result.ref_db
    low, high = result.corners_3db
    for x in (low, high):
        if x is not None:
            ax.axvline(x, color=_MARK, lw=0.8, ls="--")
            ax.annotate(f"-3 dB {_hz(round(x, 2 if x < 100 else 0))} Hz", (x, ref - 3), textcoords="offset points",
                        xytext=(5, -12), fontsize=8, color=_MARK)
    ax.axhline(ref - 3, color=_FAINT, lw=0.6, ls=":")
    span = max(6.0, float(np.nanmax(mag) - np.nanmin(mag)) + 2.0)
    ax.set_ylim(min(ref - 6, float(np.nanmin(mag)) - 1), max(ref + 3, float(np.nanmax(mag)) + 1) if span < 60 else ref + 6)
    ax.set_ylabel(result.mag_units.replace("dB re the level at", "dB re"))
    smooth_note = f", 1/{smooth_fraction}-octave smoothing for display" if smooth_fraction else ""
    ax.set_title(f"{title}: magnitude{smooth_note}", loc="left", fontsize=10)
    axp.plot(f, result.phase_deg, color=_TRACE, lw=1.0)
    axp.set_ylabel("phase (deg)")
    axp.set_xlabel("frequency (Hz)")
    for a in (ax, axp):
        _log_hz_axis(a)
    fig.text(0.01, 0.01, _response_caption(result), fontsize=7.5, color="#333333", ha="left", va="bottom")
    fig.subplots_adjust(left=0.09, right=0.97, top=0.94, bottom=0.11, hspace=0.28)
    return _save(fig, path)


def distortion_png(result, path: Path, title: str) -> Path:
    """THD (and THD+N for stepped sines), H2 and H3 against the
    fundamental's frequency, in dB re the fundamental."""
    fig = Figure(figsize=(10, 5.2))
    ax = fig.add_subplot(1, 1, 1)
    f = result.freq_hz
    ax.plot(f, result.thd_db, color=_TRACE, lw=1.4, label="THD")
    if result.thdn_db is not None:
        ax.plot(f, result.thdn_db, color=_FAINT, lw=1.2, ls="--", label="THD+N")
    for c, colour in zip(result.harmonics[:2], (_MARK, "#4b8a3e")):
        ax.plot(c.freq_hz, c.level_dbc, color=colour, lw=0.9, label=f"H{c.order}")
    _log_hz_axis(ax)
    ax.set_xlabel("fundamental frequency (Hz)")
    ax.set_ylabel("dB re the fundamental")
    ax.legend(loc="upper left", fontsize=8, frameon=False)
    ax.set_title(f"{title}: distortion against frequency", loc="left", fontsize=10)
    fig.text(0.01, 0.01, _response_caption(result), fontsize=7.5, color="#333333", ha="left", va="bottom")
    fig.subplots_adjust(left=0.09, right=0.97, top=0.92, bottom=0.15)
    return _save(fig, path)


def power_png(result, path: Path, title: str) -> Path:
    """THD+N (and THD) against output power, log-log, the limits and their
    crossings marked, the clipping onset and the expected ceiling shown;
    beside it THD+N against the output level in Vrms."""
    fig = Figure(figsize=(12, 5.4))
    ax, axv = fig.add_subplot(1, 2, 1), fig.add_subplot(1, 2, 2)
    p = [s.power_w for s in result.steps]
    v = [s.vrms for s in result.steps]
    thdn = [s.thdn_pct for s in result.steps]
    thd = [s.thd_pct for s in result.steps]
    plain = FuncFormatter(lambda x, _pos: f"{x:g}")
    for a, xs, xlabel in ((ax, p, "output power (W)"), (axv, v, "output level (Vrms)")):
        a.plot(xs, thdn, "-o", ms=3, lw=1.2, color=_TRACE, label="THD+N")
        a.plot(xs, thd, "-", lw=0.9, color=_FAINT, label="THD")
        a.set_xscale("log")
        a.set_yscale("log")
        for axis in (a.xaxis, a.yaxis):
            axis.set_major_formatter(plain)
        a.set_xlabel(xlabel)
        a.set_ylabel("percent")
        a.grid(True, which="both", color="#e6e6e6", lw=0.5)
    for lim, pt in result.limits:
        ax.axhline(lim, color=_FAINT, lw=0.6, ls=":")
        if pt is not None:
            ax.plot([pt.power_w], [lim], "s", ms=6, mfc="none", mec=_MARK)
            ax.annotate(f"{quantity(pt.power_w, 'W', 3)} at {lim:g} %", (pt.power_w, lim), textcoords="offset points",
                        xytext=(-8, 6), ha="right", fontsize=8, color=_MARK)
    if result.onset is not None:
        ax.axvline(result.onset.power_w, color=_MARK, lw=0.8, ls="--")
        ax.annotate(f"onset {quantity(result.onset.power_w, 'W', 3)}", (result.onset.power_w, min(thdn)), textcoords="offset points",
                    xytext=(4, 4), fontsize=8, color=_MARK)
    if result.expected:
        ax.axvline(result.expected["max_sine_w"], color="#4b8a3e", lw=0.8, ls="-.")
        ax.annotate(f"expected ceiling {quantity(result.expected['max_sine_w'], 'W', 3)}", (result.expected["max_sine_w"], max(thdn)),
                    textcoords="offset points", xytext=(-4, -12), ha="right", fontsize=8, color="#4b8a3e")
    ax.legend(loc="upper left", fontsize=8, frameon=False)
    ax.set_title(f"{title}: distortion against power", loc="left", fontsize=10)
    axv.set_title("against level", loc="left", fontsize=10)
    half = f"; clipping half: {result.half}" if result.half else ""
    fig.text(0.01, 0.01, f"{result.frequency_hz:g} Hz into {result.load_ohms:g} ohm; limits on "
             f"{'THD+N' if result.metric == 'thdn' else 'THD'}{half}", fontsize=7.5, color="#333333", ha="left", va="bottom")
    fig.subplots_adjust(left=0.07, right=0.98, top=0.92, bottom=0.14, wspace=0.22)
    return _save(fig, path)


def drift_view(result) -> dict:
    """What the drift plot shows: the unit (V for a midpoint of volts, mV
    for an offset), the limit band about the nominal value (not about 0),
    and the vertical range, scaled to the readings and the fit so that the
    warm-up shows, whatever the band."""
    v = np.asarray(result.v, float)
    shown = [v]
    if result.fit is not None:
        shown.append(result.fit.value_at(np.linspace(result.fit.start_s, result.t_s[-1], 50)))
    allv = np.concatenate(shown)
    volts = max(float(np.max(np.abs(allv))), abs(result.nominal_v)) >= 1.0
    unit, scale = ("V", 1.0) if volts else ("mV", 1e3)
    lo, hi = float(np.min(allv)), float(np.max(allv))
    pad = max(0.08 * (hi - lo), 1e-6 * max(abs(lo), abs(hi)), 1e-9)
    band = None
    if result.limit_v is not None:
        band = ((result.nominal_v - result.limit_v) * scale, (result.nominal_v + result.limit_v) * scale)
    return {"unit": unit, "scale": scale, "band": band, "ylim": ((lo - pad) * scale, (hi + pad) * scale)}


def drift_png(result, path: Path, title: str) -> Path:
    """Volts against time, the settling fit over it, the limit band about
    the nominal value and the sudden steps marked (:func:`drift_view`)."""
    view = drift_view(result)
    k, unit = view["scale"], view["unit"]
    fig = Figure(figsize=(10, 5.2))
    ax = fig.add_subplot(1, 1, 1)
    t, v = result.t_s, result.v * k
    minutes = t[-1] - t[0] > 600
    scale = 60.0 if minutes else 1.0
    ax.plot(t / scale, v, ".", ms=2.5, color=_TRACE, label="readings")
    if result.fit is not None:
        f = result.fit
        tt = np.linspace(f.start_s, t[-1], 400)
        ax.plot(tt / scale, f.value_at(tt) * k, color=_MARK, lw=1.2,
                label=f"first-order fit: {quantity(f.final_v, 'V', 5)}, tau {quantity(f.tau_s, 's', 3)}")
        if f.settle_s is not None and f.settle_s <= t[-1]:
            ax.axvline(f.settle_s / scale, color=_MARK, lw=0.7, ls="--")
    ax.set_ylim(*view["ylim"])
    if view["band"] is not None:
        b_lo, b_hi = view["band"]
        inside = b_lo <= view["ylim"][0] and view["ylim"][1] <= b_hi
        ax.axhspan(b_lo, b_hi, color=_BAND, zorder=0,
                   label=f"limit {quantity(result.nominal_v, 'V', 5)} +- {quantity(result.limit_v, 'V')}"
                   + (" (the whole view lies inside it)" if inside else ""))
    for e in result.events:
        ax.axvline(e["time_s"] / scale, color="#b00020", lw=0.8, ls=":")
    ax.set_xlabel("time (min)" if minutes else "time (s)")
    ax.set_ylabel(f"DC ({unit})")
    ax.ticklabel_format(axis="y", useOffset=False)
    ax.grid(True, color="#eeeeee", lw=0.5)
    ax.legend(loc="best", fontsize=8, frameon=False)
    verdict = f"; verdict: {result.verdict}" if result.verdict else ""
    ax.set_title(f"{title}: DC drift{verdict}", loc="left", fontsize=10)
    fig.subplots_adjust(left=0.09, right=0.97, top=0.92, bottom=0.11)
    return _save(fig, path)


def noise_png(result, path: Path, title: str) -> Path:
    """The noise spectrum (density, log frequency), the A-weighted density
    beside it, the band shaded and the hum lines marked with their levels."""
    from benchkit.analysis.weighting import a_weighting_power

    f, p = result.freq_hz[1:], result.psd_fs2_per_hz[1:]
    scale = result.volts_per_fs
    unit = "dB re 1 V/sqrt(Hz)" if scale else "dB re 1 FS/sqrt(Hz)"
    to_db = (lambda q: 10 * np.log10(np.maximum(q, 1e-300)) + (20 * np.log10(scale) if scale else 0.0))
    fig = Figure(figsize=(10, 5.6))
    ax = fig.add_subplot(1, 1, 1)
    lo, hi = result.bandwidth_hz
    ax.axvspan(max(lo, f[0]), hi, color=_BAND, zorder=0, label="measurement band")
    ax.plot(f, to_db(p), color=_TRACE, lw=0.8, label="noise density")
    ax.plot(f, to_db(p * a_weighting_power(f)), color=_FAINT, lw=0.8, label="A-weighted")
    for h in result.hum:
        k = int(np.argmin(np.abs(f - h.freq_hz)))
        ax.plot([f[k]], [to_db(p[k])], "v", ms=5, color=_MARK)
        ax.annotate(f"{h.freq_hz:g} Hz\n{h.level_dbfs:.1f} dBFS", (f[k], to_db(p[k])), textcoords="offset points",
                    xytext=(0, 6), ha="center", fontsize=7, color=_MARK)
    _log_hz_axis(ax)
    ax.set_xlim(max(f[0], 5.0), f[-1])
    in_band = to_db(p[(f >= lo) & (f <= hi)])
    ax.set_ylim(float(np.min(in_band)) - 30.0, float(np.max(in_band)) + 12.0)
    ax.set_xlabel("frequency (Hz)")
    ax.set_ylabel(unit)
    ax.grid(True, which="both", color="#e6e6e6", lw=0.5)
    ax.legend(loc="upper right", fontsize=8, frameon=False)
    d = result.to_dict()
    ax.set_title(f"{title}: noise {d['noise_dbfs']:.1f} dBFS, A-weighted {d['noise_a_dbfs']:.1f} dBFS", loc="left",
                 fontsize=10)
    fig.subplots_adjust(left=0.09, right=0.97, top=0.92, bottom=0.11)
    return _save(fig, path)


def zout_png(result, path: Path, title: str) -> Path:
    """|Zout| against frequency (log-log), its resistance beside it, and
    the damping factor on the right-hand axis."""
    pts = [p for p in result.points if p.zout_ohms > 0] or list(result.points)
    fig = Figure(figsize=(10, 5.6))
    ax = fig.add_subplot(1, 1, 1)
    f = np.array([p.frequency_hz for p in pts])
    ax.plot(f, [p.zout_ohms for p in pts], "-o", ms=4, color=_TRACE, lw=1.2, label="|Zout|")
    if result.method == "gain-ratio":
        ax.plot(f, [max(p.zout.real, 1e-6) for p in pts], "--", color=_FAINT, lw=1.0, label="resistance")
    bad = [p for p in pts if not p.valid]
    if bad:
        ax.plot([p.frequency_hz for p in bad], [p.zout_ohms for p in bad], "x", ms=8, color="#b00020")
    _log_hz_axis(ax)
    ax.set_yscale("log")
    ax.set_xlabel("frequency (Hz)")
    ax.set_ylabel("output impedance (ohm)")
    right = ax.twinx()
    right.set_yscale("log")
    lo, hi = ax.get_ylim()
    right.set_ylim(result.load_ohms / lo, result.load_ohms / hi)  # DF = R / |Z|: the same curve, read on the right
    right.set_ylabel(f"damping factor re {result.load_ohms:g} ohm")
    plain = FuncFormatter(lambda v, _pos: f"{v:g}")
    for a in (ax, right):
        a.yaxis.set_major_formatter(plain)
        a.yaxis.set_minor_formatter(plain)
    ax.grid(True, which="both", color="#e6e6e6", lw=0.5)
    ax.legend(loc="upper right", fontsize=8, frameon=False)
    ref = result.at()
    head = "" if ref is None or ref.damping_factor is None else (
        f": {quantity(ref.zout_ohms, 'ohm', 3)}, damping factor {ref.damping_factor:.3g} at {ref.frequency_hz:g} Hz")
    ax.set_title(f"{title}: output impedance{head}", loc="left", fontsize=10)
    fig.subplots_adjust(left=0.09, right=0.9, top=0.92, bottom=0.11)
    return _save(fig, path)


def crosstalk_png(result, path: Path, title: str) -> Path:
    """Crosstalk of each direction against frequency (dB, log frequency;
    a hollow mark where the leak did not stand over its noise), and the
    balance below."""
    fig = Figure(figsize=(10, 6.6))
    ax = fig.add_subplot(2, 1, 1)
    for side, colour, name in (("A", _TRACE, "A driven, into B"), ("B", _MARK, "B driven, into A")):
        leaks = result.direction(side)
        f = [x.frequency_hz for x in leaks]
        ax.plot(f, [x.crosstalk_db for x in leaks], "-", color=colour, lw=1.1, label=name)
        for x in leaks:
            ax.plot([x.frequency_hz], [x.crosstalk_db], "o", ms=5, color=colour,
                    mfc="none" if x.below_floor else colour)
    _log_hz_axis(ax)
    ax.set_ylabel("crosstalk (dB re the driven channel)")
    ax.grid(True, which="both", color="#e6e6e6", lw=0.5)
    ax.legend(loc="upper left", fontsize=8, frameon=False)
    d = result.to_dict()
    head = "" if d["crosstalk_db"] is None else f": {d['crosstalk_db']:.1f} dB at {quantity(d['reference_hz'], 'Hz', 4)}"
    ax.set_title(f"{title}: crosstalk{head}", loc="left", fontsize=10)
    axb = fig.add_subplot(2, 1, 2)
    bal = result.balance()
    if bal:
        ys = [b for _f, b in bal]
        axb.plot([f for f, _b in bal], ys, "-o", ms=4, color=_TRACE, lw=1.0)
        mid, half = (max(ys) + min(ys)) / 2, max(0.25, (max(ys) - min(ys)) * 0.6)
        axb.set_ylim(mid - half, mid + half)  # a tenth of a dB must not fill the panel
    axb.ticklabel_format(axis="y", useOffset=False)
    _log_hz_axis(axb)
    axb.set_ylabel("balance, B over A (dB)")
    axb.set_xlabel("frequency (Hz)")
    axb.grid(True, which="both", color="#e6e6e6", lw=0.5)
    fig.subplots_adjust(left=0.09, right=0.97, top=0.93, bottom=0.09, hspace=0.3)
    return _save(fig, path)
