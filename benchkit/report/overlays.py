"""Overlay plots of a comparison: the same curve of each run on one axis,
from the stored result documents (matplotlib Agg canvas, no pyplot): what
the overlays of several kinds share (a kind's own in ``report/NAME.py``)."""

from __future__ import annotations

from pathlib import Path

from matplotlib.figure import Figure

from benchkit.report.plots import LEGEND_PLACES, legend_clear, log_hz_axis, readable_log, save_png

#: one colour a run, in run order (the first is the baseline)
COLOURS = ("#1f3b57", "#c2571a", "#4b8a3e", "#7a4b8a", "#8a6d1f", "#2a7f8a")


def colour(i: int) -> str:
    return COLOURS[i % len(COLOURS)]


def finish_overlay(fig, ax, title: str, warnings, caption: str, legend: str, left: float) -> Figure:
    """Grid, legend, title, a caption (the conditions, or in red the
    warnings that the runs do not compare like for like); room at the
    right for a second axis (volts) where there is one."""
    ax.grid(True, which="both", color="#e6e6e6", lw=0.5)
    ax.set_title(title, loc="left", fontsize=10)
    if warnings:
        fig.text(0.01, 0.01, "  ".join(warnings), fontsize=8, color="#b00020", ha="left", va="bottom", wrap=True)
    elif caption:
        fig.text(0.01, 0.01, caption, fontsize=7.5, color="#333333", ha="left", va="bottom", wrap=True)
    fig.subplots_adjust(left=left, right=0.91 if any(a.child_axes for a in fig.axes) else 0.97, top=0.92, bottom=0.15)
    legend_clear(ax, (legend, *(p for p in LEGEND_PLACES if p != legend)), fontsize=8, frameon=False)
    return fig


def percent_axes(ax, log_x: bool, x_log_label: str, x_label: str, ylabel: str) -> None:
    """A distortion figure in % on a log axis against power (log) or a level in dB."""
    if log_x:
        ax.set_xscale("log")
        readable_log(ax.xaxis)
    ax.set_xlabel(x_log_label if log_x else x_label)
    ax.set_yscale("log")
    readable_log(ax.yaxis)
    ax.set_ylabel(ylabel)


def distortion_figure(docs, labels, title: str, warnings=(), key: str = "thdn_pct",
                   ylabel: str = "THD+N (%)", caption: str = "") -> Figure:
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
        ax.plot(xs, ys, "-o", ms=3.5, lw=1.2, color=colour(i), label=label)
        bad = [(x, y) for x, y, s in zip(xs, ys, run) if s.get("valid") is False]
        if bad:
            ax.plot(*zip(*bad), "x", ms=8, color="#b00020")
    percent_axes(ax, have_power, "output power (W)", "fundamental (dBFS)", ylabel)
    return finish_overlay(fig, ax, title, warnings, caption, "upper left", 0.1)


def distortion_png(docs, labels, path: Path, title: str, warnings=(), key: str = "thdn_pct",
                   ylabel: str = "THD+N (%)", caption: str = "") -> Path:
    """:func:`distortion_figure`, written to ``path``."""
    return save_png(distortion_figure(docs, labels, title, warnings=warnings, key=key, ylabel=ylabel, caption=caption), path)


def lines_figure(series, labels, title: str, warnings, xlabel: str, ylabel: str, log_x: bool) -> Figure:
    fig = Figure(figsize=(10, 5.2))
    ax = fig.add_subplot(1, 1, 1)
    for i, (label, (x, y)) in enumerate(zip(labels, series)):
        ax.plot(x, y, lw=0.8, color=colour(i), label=label)
    if log_x:
        log_hz_axis(ax)
    ax.set_xlabel(xlabel)
    ax.set_ylabel(ylabel)
    return finish_overlay(fig, ax, title, warnings, "", "upper right", 0.09)


def lines_png(series, labels, path: Path, title: str, warnings, xlabel: str, ylabel: str, log_x: bool) -> Path:
    """:func:`lines_figure`, written to ``path``."""
    return save_png(lines_figure(series, labels, title, warnings, xlabel, ylabel, log_x), path)
