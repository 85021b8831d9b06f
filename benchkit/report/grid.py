"""What people read of a grid run (distortion across frequency and level):
the summary table, the CSV of every cell, and the plot, which a
comparison's overlay shares (a colour a run, a line style a level)."""

from __future__ import annotations

import csv
import math
from pathlib import Path

import numpy as np
from matplotlib.figure import Figure
from matplotlib.lines import Line2D

from benchkit.analysis.grid import cells_of, level_name
from benchkit.errors import read_warnings
from benchkit.report import tables
from benchkit.report.files import report_folder, stem_of, title_of
from benchkit.report.overlays import colour
from benchkit.report.plots import legend_clear, log_hz_axis, save_png
from benchkit.report.screen import Column, table_text

#: a level's line style (the lowest first), as many as a grid usually has
STYLES = ("-", "--", ":", "-.")


def _level_of(doc: dict):
    return cells_of(doc), (lambda drive: level_name(doc, drive))


def grid_summary(doc: dict, title: str = "") -> str:
    """A row a frequency, THD+N (dB) at each level; marks where THD is only
    a bound or a cell is not valid; the warnings."""
    by_level, name = _level_of(doc)
    lines = [title] if title else []
    lines += [f"  level {k + 1}      {name(drive)}" for k, drive in enumerate(by_level)]
    freqs = sorted({s["frequency_hz"] for cells in by_level.values() for s in cells})
    at = {(drive, s["frequency_hz"]): s for drive, cells in by_level.items() for s in cells}
    rows = []
    for f in freqs:
        row = [f"{f:.5g}"]
        for drive in by_level:
            s = at.get((drive, f))
            row.append("-" if s is None or s.get("thdn_db") is None else
                       f"{s['thdn_db']:.1f}" + ("" if s.get("valid", True) else " NOT VALID"))
        rows.append(row)
    lines.append(table_text([Column("frequency (Hz)"), *(Column(f"THD+N (dB), level {k + 1}") for k in range(len(by_level)))],
                            rows))
    worst = [(drive, max((s for s in cells if s.get("thdn_db") is not None), key=lambda s: s["thdn_db"], default=None))
             for drive, cells in by_level.items()]
    for k, (drive, s) in enumerate(worst):
        if s is not None:
            lines.append(f"  worst        level {k + 1}: THD+N {s['thdn_db']:.1f} dB ({s['thdn_pct']:.3g} %) at "
                         f"{s['frequency_hz']:.5g} Hz")
    buried = sum(bool(s.get("thd_in_noise")) for cells in by_level.values() for s in cells)
    if buried:
        lines.append(f"  in the noise THD is only a bound in {buried} of {len(at)} cells (no harmonic over the noise)")
    seen = set()
    for w in read_warnings([*(doc.get("warnings") or ()), *(w for s in doc.get("steps") or [] for w in s.get("warnings") or ())]):
        if str(w) not in seen:
            seen.add(str(w))
            lines.append(f"  warning      {w}")
    return "\n".join(lines)


def _harmonic(s: dict, order: int) -> float | None:
    return next((h["level_dbc"] for h in s.get("harmonics") or [] if h["order"] == order), None)


def write_grid_csv(doc: dict, path: Path) -> Path:
    """A row a cell: its frequency and drive, the output level and power,
    THD+N, THD (and whether it is only a bound), H2 and H3 with their
    state (measured, in the noise, above band), whether it is valid."""
    def cell(v, fmt="{:.6g}"):
        return "" if v is None or (isinstance(v, float) and not math.isfinite(v)) else fmt.format(v)

    with path.open("w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(["frequency_hz", "drive_dbfs", "level_vrms", "power_w", "thdn_pct", "thdn_db", "thd_pct", "thd_db",
                    "thd_in_noise", "h2_dbc", "h2_state", "h3_dbc", "h3_state", "valid"])
        for s in doc.get("steps") or []:
            w.writerow([cell(s["frequency_hz"]), cell(s["drive_dbfs"]), cell(s.get("fundamental_vrms")),
                        cell(s.get("power_w")), cell(s.get("thdn_pct")), cell(s.get("thdn_db"), "{:.3f}"),
                        cell(s.get("thd_pct")), cell(s.get("thd_db"), "{:.3f}"), "yes" if s.get("thd_in_noise") else "no",
                        cell(_harmonic(s, 2), "{:.2f}"), s.get("h2_state", ""), cell(_harmonic(s, 3), "{:.2f}"),
                        s.get("h3_state", ""), "yes" if s.get("valid", True) else "no"])
    return path


def grid_figure(docs, labels, title: str, warnings=()) -> Figure:
    """THD+N (lines) and THD (squares) above, H2 and H3 below, against
    frequency: one run draws a colour a level; several, a colour a run and
    a line style a level. A hollow marker is in the noise (THD only a
    bound, a harmonic not over the noise); THD is not drawn where every
    harmonic lies above the band."""
    fig = Figure(figsize=(10, 7.6))
    top = fig.add_subplot(2, 1, 1)
    low = fig.add_subplot(2, 1, 2, sharex=top)
    names = []
    for i, (label, doc) in enumerate(zip(labels, docs)):
        by_level, name = _level_of(doc)
        for k, (drive, cells) in enumerate(by_level.items()):
            style, c = ("-", colour(k)) if len(docs) == 1 else (STYLES[k % len(STYLES)], colour(i))
            f = np.array([s["frequency_hz"] for s in cells])
            thdn = np.array([np.nan if s.get("thdn_db") is None else s["thdn_db"] for s in cells])
            thd = np.array([np.nan if s.get("thd_db") is None or not s.get("thd_defined", True) else s["thd_db"]
                            for s in cells])
            bound = np.array([bool(s.get("thd_in_noise")) for s in cells])
            top.plot(f, thdn, ls=style, color=c, lw=1.3)
            top.plot(f[~bound], thd[~bound], ls="none", color=c, marker="s", ms=3.5)
            top.plot(f[bound], thd[bound], ls="none", color=c, marker="s", ms=3.5, mfc="none")
            for order, mark, ls in ((2, "^", style), (3, "v", ":" if len(docs) == 1 else style)):
                h = np.array([np.nan if _harmonic(s, order) is None else _harmonic(s, order) for s in cells])
                heard = np.array([s.get(f"h{order}_state") == "measured" for s in cells])
                low.plot(f, h, ls=ls, color=c, lw=0.9, alpha=0.8)
                low.plot(f[heard], h[heard], ls="none", color=c, marker=mark, ms=4)
                low.plot(f[~heard], h[~heard], ls="none", color=c, marker=mark, ms=4, mfc="none")
            names.append(Line2D([], [], ls=style, color=c, label=(f"{label}: " if len(docs) > 1 else "") + name(drive)))
    for ax in (top, low):
        log_hz_axis(ax)
        ax.grid(True, which="both", color="#e6e6e6", lw=0.5)
    top.set_ylabel("THD+N (lines), THD (squares), dB")
    low.set_ylabel("H2 (up), H3 (down), dBc")
    low.set_xlabel("frequency (Hz)")
    top.set_title(title, loc="left", fontsize=10)
    caption = "  ".join(warnings) if warnings else "hollow markers: in the noise (THD only a bound, a harmonic not over the noise)"
    fig.text(0.01, 0.01, caption, fontsize=7.5, color="#b00020" if warnings else "#333333", ha="left", va="bottom", wrap=True)
    fig.subplots_adjust(left=0.09, right=0.97, top=0.94, bottom=0.1, hspace=0.25)
    for line in names:
        top.add_line(line)
    low.add_line(Line2D([], [], ls="none", marker="^", color="#555555", label="H2"))
    low.add_line(Line2D([], [], ls="none", marker="v", color="#555555", label="H3"))
    legend_clear(top, fontsize=8, frameon=False)
    legend_clear(low, fontsize=8, frameon=False)
    return fig


def grid_png(docs, labels, path: Path, title: str, warnings=()) -> Path:
    """:func:`grid_figure`, written to ``path``."""
    return save_png(grid_figure(docs, labels, title, warnings), path)


def grid_reports(doc: dict, path: Path, channel: int, out: Path) -> list[Path]:
    """STEM.grid.json, .csv and .png: the result, every cell, the plot."""
    report_folder(out)
    stem = stem_of(path, channel)
    return [tables.write_json(doc, out / f"{stem}.grid.json"), write_grid_csv(doc, out / f"{stem}.grid.csv"),
            grid_png([doc], [path.name], out / f"{stem}.grid.png", f"{title_of(path)}: distortion across frequency")]
