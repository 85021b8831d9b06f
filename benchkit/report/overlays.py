"""Overlay plots of a comparison: the same curve of each run on one axis,
from the stored result documents (matplotlib Agg canvas, no pyplot)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
from matplotlib.figure import Figure
from matplotlib.ticker import FuncFormatter

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
    if have_power:
        ax.set_xscale("log")
        ax.xaxis.set_major_formatter(_PLAIN)
        ax.set_xlabel("output power (W)")
    else:
        ax.set_xlabel("fundamental (dBFS)")
    ax.set_yscale("log")
    ax.yaxis.set_major_formatter(_PLAIN)
    ax.yaxis.set_minor_formatter(_PLAIN)
    ax.set_ylabel(ylabel)
    return _finish(fig, ax, path, title, warnings, caption, "upper left", 0.1)


def _responses(docs, labels, path: Path, title: str, warnings) -> Path:
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


def _drifts(series, labels, path: Path, title: str, warnings) -> Path:
    fig = Figure(figsize=(10, 5.2))
    ax = fig.add_subplot(1, 1, 1)
    longest = max((t[-1] - t[0] for t, _v in series if len(t)), default=0.0)
    scale = 60.0 if longest > 600 else 1.0
    for i, (label, (t, v)) in enumerate(zip(labels, series)):
        ax.plot((np.asarray(t) - t[0]) / scale, np.asarray(v) * 1e3, ".-", ms=2, lw=0.6, color=_colour(i), label=label)
    ax.set_xlabel("time from the first reading (min)" if scale > 1 else "time from the first reading (s)")
    ax.set_ylabel("DC (mV)")
    return _finish(fig, ax, path, title, warnings, "", "best", 0.09)


def _lines(series, labels, path: Path, title: str, warnings, xlabel: str, ylabel: str, log_x: bool) -> Path:
    fig = Figure(figsize=(10, 5.2))
    ax = fig.add_subplot(1, 1, 1)
    for i, (label, (x, y)) in enumerate(zip(labels, series)):
        ax.plot(x, y, lw=0.8, color=_colour(i), label=label)
    if log_x:
        _log_hz_axis(ax)
    ax.set_xlabel(xlabel)
    ax.set_ylabel(ylabel)
    return _finish(fig, ax, path, title, warnings, "", "best", 0.09)


def curves_png(comparison, docs: list[dict], path: Path, title: str, series=None) -> Path | None:
    """The overlay of a comparison's kind: THD+N against power (tone and
    power runs), magnitude and phase (responses); from ``series`` (x, y
    arrays a run): volts against time (drift), noise density against
    frequency (noise), THD+N against time (watch)."""
    kind, labels, warnings = comparison.kind, comparison.labels, comparison.warnings
    if kind == "tone-steps":
        return distortion_png(docs, labels, path, f"{title}: THD+N", warnings)
    if kind == "power":
        metric = docs[0].get("limit_metric", "thdn")
        name = "THD+N" if metric == "thdn" else "THD"
        return distortion_png(docs, labels, path, f"{title}: {name} against power", warnings, f"{metric}_pct",
                              f"{name} (%)")
    if kind == "response":
        return _responses(docs, labels, path, title, warnings)
    if kind == "drift":
        return _drifts(series or [], labels, path, f"{title}: DC drift", warnings)
    if kind == "noise":
        return _lines(series, labels, path, f"{title}: noise density", warnings, "frequency (Hz)",
                      "dB re 1 FS^2/Hz", True)
    if kind == "watch":
        return _lines(series, labels, path, f"{title}: THD+N while watched", warnings, "time (s)", "THD+N (dB)", False)
    return None  # a single figure (gain): the delta table says it all


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
