"""Overlay plots of a comparison: the same curve of each run on one axis,
from the stored result documents (matplotlib Agg canvas, no pyplot)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
from matplotlib.figure import Figure
from matplotlib.ticker import FuncFormatter

from benchkit import units
from benchkit.report.plots import _hz, _log_hz_axis, _save

#: one colour a run, in run order (the first is the baseline)
COLOURS = ("#1f3b57", "#c2571a", "#4b8a3e", "#7a4b8a", "#8a6d1f", "#2a7f8a")
_PLAIN = FuncFormatter(lambda v, _pos: f"{v:g}")


def _colour(i: int) -> str:
    return COLOURS[i % len(COLOURS)]


def _finish(fig, ax, path: Path, title: str, warnings, caption: str, legend: str, left: float) -> Path:
    """Grid, legend, title, a caption (the conditions, or in red the
    warnings that the runs do not compare like for like), saved."""
    ax.grid(True, which="both", color="#e6e6e6", lw=0.5)
    ax.legend(loc=legend, fontsize=8, frameon=False)
    ax.set_title(title, loc="left", fontsize=10)
    if warnings:
        fig.text(0.01, 0.01, "  ".join(warnings), fontsize=8, color="#b00020", ha="left", va="bottom", wrap=True)
    elif caption:
        fig.text(0.01, 0.01, caption, fontsize=7.5, color="#333333", ha="left", va="bottom", wrap=True)
    fig.subplots_adjust(left=left, right=0.97, top=0.92, bottom=0.15)
    return _save(fig, path)


def _percent_axes(ax, log_x: bool, x_log_label: str, x_label: str, ylabel: str) -> None:
    """A distortion figure in % on a log axis against power (log) or a level in dB."""
    if log_x:
        ax.set_xscale("log")
        ax.xaxis.set_major_formatter(_PLAIN)
        ax.xaxis.set_minor_formatter(_PLAIN)
    ax.set_xlabel(x_log_label if log_x else x_label)
    ax.set_yscale("log")
    ax.yaxis.set_major_formatter(_PLAIN)
    ax.yaxis.set_minor_formatter(_PLAIN)
    ax.set_ylabel(ylabel)


def distortion_png(docs, labels, path: Path, title: str, warnings=(), key: str = "thdn_pct",
                   ylabel: str = "THD+N (%)", caption: str = "") -> Path:
    """THD+N (or ``key``) against output power, log-log, for the steps of
    one or more stepped results; against the fundamental's dBFS when a
    step has no power. Invalid steps are crossed."""
    fig = Figure(figsize=(9, 5.6))
    ax = fig.add_subplot(1, 1, 1)
    steps = [[s for s in d.get("steps") or [] if s.get(key) is not None] for d in docs]
    have_power = all(s.get("power_w") for run in steps for s in run)
    for i, (label, run) in enumerate(zip(labels, steps)):
        xs = [s["power_w"] if have_power else s["fundamental_dbfs"] for s in run]
        ys = [s[key] for s in run]
        ax.plot(xs, ys, "-o", ms=3.5, lw=1.2, color=_colour(i), label=label)
        bad = [(x, y) for x, y, s in zip(xs, ys, run) if s.get("valid") is False]
        if bad:
            ax.plot(*zip(*bad), "x", ms=8, color="#b00020")
    _percent_axes(ax, have_power, "output power (W)", "fundamental (dBFS)", ylabel)
    return _finish(fig, ax, path, title, warnings, caption, "upper left", 0.1)


def responses_png(docs, labels, path: Path, title: str, warnings) -> Path:
    fig = Figure(figsize=(10, 6.4))
    ax, axp = fig.add_subplot(2, 1, 1), fig.add_subplot(2, 1, 2)
    for i, (label, d) in enumerate(zip(labels, docs)):
        r = d.get("response") or {}
        f = np.asarray(r.get("freq_hz") or [], float)
        ax.plot(f, np.asarray(r.get("mag_db") or [], float), lw=1.1, color=_colour(i), label=label)
        axp.plot(f, np.asarray(r.get("phase_deg") or [], float), lw=0.9, color=_colour(i))
    ax.set_ylabel(str(docs[0].get("mag_units", "dB")).replace("dB re the level at", "dB re"))
    axp.set_ylabel("phase (deg)")
    axp.set_xlabel("frequency (Hz)")
    for a in (ax, axp):
        _log_hz_axis(a)
        a.grid(True, which="both", color="#e6e6e6", lw=0.5)
    fig.subplots_adjust(hspace=0.28)
    return _finish(fig, ax, path, f"{title}: magnitude and phase", warnings, "", "lower center", 0.09)


def drifts_png(series, labels, path: Path, title: str, warnings) -> Path:
    fig = Figure(figsize=(10, 5.2))
    ax = fig.add_subplot(1, 1, 1)
    longest = max((t[-1] - t[0] for t, _v in series if len(t)), default=0.0)
    scale = 60.0 if longest > 600 else 1.0
    for i, (label, (t, v)) in enumerate(zip(labels, series)):
        ax.plot((np.asarray(t) - t[0]) / scale, np.asarray(v) * 1e3, ".-", ms=2, lw=0.6, color=_colour(i), label=label)
    ax.set_xlabel("time from the first reading (min)" if scale > 1 else "time from the first reading (s)")
    ax.set_ylabel("DC (mV)")
    return _finish(fig, ax, path, title, warnings, "", "best", 0.09)


def lines_png(series, labels, path: Path, title: str, warnings, xlabel: str, ylabel: str, log_x: bool) -> Path:
    fig = Figure(figsize=(10, 5.2))
    ax = fig.add_subplot(1, 1, 1)
    for i, (label, (x, y)) in enumerate(zip(labels, series)):
        ax.plot(x, y, lw=0.8, color=_colour(i), label=label)
    if log_x:
        _log_hz_axis(ax)
    ax.set_xlabel(xlabel)
    ax.set_ylabel(ylabel)
    return _finish(fig, ax, path, title, warnings, "", "best", 0.09)


def _drive(step: dict) -> float:
    """A two-tone step's drive, or for a capture made elsewhere the
    composite's peak as recorded, dBFS."""
    if step.get("drive_dbfs") is not None:
        return step["drive_dbfs"]
    return float(units.dbfs_from_peak(units.ratio_from_db(step["f1_dbfs"]) + units.ratio_from_db(step["f2_dbfs"])))


def imd_png(docs, labels, path: Path, title: str, warnings=(), spectrum=None) -> Path:
    """IMD (the total, and order 2 and 3 of the first run) against the
    composite's equivalent sine power, or against the drive when a step has
    no power, for one or more two-tone results; invalid steps crossed.
    ``spectrum`` (freq_hz, level_dbfs, step document) adds a panel below
    with that step's spectrum and its products marked."""
    fig = Figure(figsize=(10, 7.4 if spectrum is not None else 5.6))
    ax = fig.add_subplot(2, 1, 1) if spectrum is not None else fig.add_subplot(1, 1, 1)
    runs = [[s for s in d.get("steps") or [] if s.get("imd_pct")] for d in docs]
    have_power = all(s.get("equivalent_power_w") for run in runs for s in run)
    for i, (label, run) in enumerate(zip(labels, runs)):
        xs = [s["equivalent_power_w"] if have_power else _drive(s) for s in run]
        ax.plot(xs, [s["imd_pct"] for s in run], "-o", ms=3.5, lw=1.2, color=_colour(i), label=f"{label}: total")
        if i == 0 and len(docs) == 1:
            for order, style in (("2", "--"), ("3", ":")):
                ys = [((s.get("orders") or {}).get(order) or {}).get("pct") for s in run]
                if any(ys):
                    ax.plot(xs, ys, style, lw=1.0, color=_colour(i), label=f"order {order}")
        bad = [(x, s["imd_pct"]) for x, s in zip(xs, run) if s.get("valid") is False]
        if bad:
            ax.plot(*zip(*bad), "x", ms=8, color="#b00020")
    _percent_axes(ax, have_power, "equivalent sine power of the composite peak (W)", "drive, composite peak (dBFS)",
                  f"IMD, {docs[0].get('method', '')} method (%)")
    if spectrum is not None:
        f, level, step = spectrum
        axs = fig.add_subplot(2, 1, 2)
        f1, f2 = step["f1_hz"], step["f2_hz"]
        # linear, around what the method looks at: f2's sidebands, or the
        # band from the difference product up past the upper third-order one
        lo, hi = (f2 - 5.5 * f1, f2 + 5.5 * f1) if step.get("method", docs[0].get("method")) == "modulation" else (
            0.0, min(f[-1], 2 * f2 - f1 + 2 * (f2 - f1)))
        sel = (f >= max(lo, 10.0)) & (f <= hi)
        axs.plot(f[sel], level[sel], lw=0.7, color=_colour(0))
        shown = [p for p in step.get("products") or [] if not p.get("at_floor") and lo <= p["frequency_hz"] <= hi]
        db = [units.dbfs_from_peak(max(p["amplitude_fs"], 1e-15)) for p in shown]
        axs.plot([p["frequency_hz"] for p in shown], db, "v", ms=5, color="#c2571a")
        for k, (p, y) in enumerate(sorted(zip(shown, db), key=lambda q: -q[1])[:8]):
            axs.annotate(f"{p['label']}\n{p['level_db']:.1f} dB", (p["frequency_hz"], y), textcoords="offset points",
                         xytext=(0, 8 + 14 * (k % 2)), ha="center", fontsize=7, color="#c2571a")
        axs.set_xlim(max(lo, 0.0), hi)
        axs.set_ylim(max(float(np.median(level[sel])) - 30.0, -220.0), 5.0)
        axs.xaxis.set_major_formatter(FuncFormatter(_hz))
        axs.set_xlabel("frequency (Hz)")
        axs.set_ylabel("dBFS" if step["drive_dbfs"] is None else f"dBFS, drive {step['drive_dbfs']:g} dBFS")
        axs.grid(True, which="both", color="#e6e6e6", lw=0.5)
        fig.subplots_adjust(hspace=0.32)
    return _finish(fig, ax, path, f"{title}: intermodulation", warnings, "", "upper left", 0.09)


def spectra_png(results, labels, path: Path, title: str, warnings=()) -> Path:
    """The spectra of one step of each run (tone results with traces) on
    one log-frequency axis, the later runs drawn over the first."""
    fig = Figure(figsize=(10, 5.6))
    ax = fig.add_subplot(1, 1, 1)
    top = max(r.fundamental_dbfs for r in results)
    lo_f = max(results[0].traces.freq_hz[1], min(10.0, results[0].fundamental_hz / 2))
    floors = []
    for i, (label, r) in enumerate(zip(labels, results)):
        tr = r.traces
        sel = tr.freq_hz >= lo_f
        ax.plot(tr.freq_hz[sel], tr.spectrum_dbfs[sel], lw=0.7, color=_colour(i), alpha=0.85,
                label=f"{label}: THD+N {r.thdn_db:.1f} dB")
        shown = r.harmonics[:9]
        ax.plot([h.freq_hz for h in shown], [h.level_dbfs for h in shown], "o", ms=5, mfc="none", mec=_colour(i))
        band = tr.spectrum_dbfs[(tr.freq_hz >= r.bandwidth_hz[0]) & (tr.freq_hz <= r.bandwidth_hz[1])]
        floors.append(float(np.median(band)) if band.size else -200.0)
    ax.set_xscale("log")
    ax.xaxis.set_major_formatter(FuncFormatter(_hz))
    ax.set_xlim(lo_f, results[0].traces.freq_hz[-1])
    ax.set_ylim(max(min(floors) - 25.0, -260.0), max(5.0, top + 10.0))
    ax.set_xlabel("frequency (Hz)")
    ax.set_ylabel("level of a sine (dBFS)")
    return _finish(fig, ax, path, title, warnings, "", "upper right", 0.08)
