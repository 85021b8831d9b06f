"""What people read of a power-bandwidth run: the summary table, the CSV,
and the plot of the power at the rated distortion against frequency, which
a comparison's overlay shares (a line a run)."""

from __future__ import annotations

import csv
from pathlib import Path

from matplotlib.figure import Figure

from benchkit.errors import read_warnings
from benchkit.report import tables
from benchkit.report.files import report_folder, title_of
from benchkit.report.overlays import colour
from benchkit.report.plots import labels_apart, legend_clear, log_hz_axis, readable_log, save_png, BESIDE
from benchkit.report.logbook import level_scale
from benchkit.report.screen import Column, stored_level_column, table_text
from benchkit.units import in_one_unit, prefix_scale, quantity


def _metric(doc: dict) -> str:
    return f"{doc.get('limit_pct', 1):g} % {'THD+N' if doc.get('limit_metric', 'thdn') == 'thdn' else 'THD'}"


def bandwidth_summary(doc: dict, title: str = "") -> str:
    """A row a frequency (the power at the rated distortion, its level and
    its expanded uncertainty), then the -3 dB frequencies."""
    lines = [title] if title else []
    pts = doc.get("points") or []
    p_unit, powers = in_one_unit([p["power_w"] for p in pts], "W", 3)
    places = max((len(c) - c.index(".") - 1 for c in powers if "." in c), default=0)
    u_cells = ["-" if p.get("power_u_w") is None or p["power_w"] is None else
               f"{2 * p['power_u_w'] / prefix_scale(p_unit):.{places}f}" for p in pts]
    v_unit, volts = stored_level_column([p.get("vrms") for p in pts], "Vrms", level_scale(doc))
    rows = [[f"{p['frequency_hz']:g}", w, u, v, "" if p["reached"] else f"not reached ({p.get('stop_reason') or 'stopped'})"]
            for p, w, u, v in zip(pts, powers, u_cells, volts)]
    lines.append(table_text([Column("frequency (Hz)"), Column(f"power at {_metric(doc)} ({p_unit})"), Column(f"U ({p_unit})"),
                             Column(f"level ({v_unit})"), Column("", "left")], rows))
    lines.append("  (U: the expanded uncertainty, k = 2)")

    def corner(key):
        v, u = doc.get(key), doc.get(key.replace("_hz", "_u_hz"))
        if v is None:
            return "beyond the frequencies measured"
        return quantity(v, "Hz", 3) + ("" if u is None else f" +- {quantity(2 * u, 'Hz', 2)}")

    if doc.get("reference_power_w") is not None:
        lines.append(f"  -3 dB        low {corner('low_3db_hz')}, high {corner('high_3db_hz')} (re "
                     f"{quantity(doc['reference_power_w'], 'W', 3)} at {doc['reference_hz']:g} Hz)")
    for w in read_warnings(doc.get("warnings")):
        lines.append(f"  warning      {w}")
    return "\n".join(lines)


def write_bandwidth_csv(doc: dict, path: Path) -> Path:
    """A row a frequency: the power at the rated distortion, its standard
    uncertainty, the level, whether the limit was reached, the steps."""
    with path.open("w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(["frequency_hz", "power_w", "power_u_w", "vrms", "limit_pct", "reached", "steps", "stop_reason"])
        for p in doc.get("points") or []:
            w.writerow([f"{p['frequency_hz']:g}", "" if p["power_w"] is None else f"{p['power_w']:.6g}",
                        "" if p.get("power_u_w") is None else f"{p['power_u_w']:.3g}",
                        "" if p.get("vrms") is None else f"{p['vrms']:.6g}", f"{doc.get('limit_pct'):g}",
                        "yes" if p["reached"] else "no", p.get("steps", ""), p.get("stop_reason") or ""])
    return path


def bandwidth_figure(docs, labels, title: str, warnings=()) -> Figure:
    """The power at the rated distortion against frequency, log-log, a
    line a run; for one run its reference power, the -3 dB line and the
    frequencies where the power crosses it."""
    fig = Figure(figsize=(9, 5.4))
    ax = fig.add_subplot(1, 1, 1)
    for i, (label, doc) in enumerate(zip(labels, docs)):
        pts = [(p["frequency_hz"], p["power_w"]) for p in doc.get("points") or [] if p["power_w"] is not None]
        if pts:
            ax.plot(*zip(*pts), "-o", ms=4, lw=1.4, color=colour(i), label=label)
    marks = []
    if len(docs) == 1 and docs[0].get("reference_power_w"):
        d = docs[0]
        half = d["reference_power_w"] / 10 ** (d.get("drop_db", 3.0) / 10)
        ax.axhline(half, color="#888888", lw=0.8, ls="--", label=f"-3 dB re {d['reference_hz']:g} Hz")
        for key in ("low_3db_hz", "high_3db_hz"):
            if d.get(key) is not None:
                ax.plot([d[key]], [half], "D", ms=6, mfc="none", mec="#b00020")
                marks.append((d[key], half, f"-3 dB\n{quantity(d[key], 'Hz', 3)}"))
    log_hz_axis(ax)
    ax.set_yscale("log")
    readable_log(ax.yaxis)
    ax.set_xlabel("frequency (Hz)")
    ax.set_ylabel(f"power at {_metric(docs[0])} (W)")
    ax.grid(True, which="both", color="#e6e6e6", lw=0.5)
    ax.set_title(title, loc="left", fontsize=10)
    lo, hi = ax.get_ylim()
    ax.set_ylim(lo / 1.6, hi * 1.6)  # room for the labels
    if warnings:
        fig.text(0.01, 0.01, "  ".join(warnings), fontsize=8, color="#b00020", ha="left", va="bottom", wrap=True)
    fig.subplots_adjust(left=0.1, right=0.97, top=0.92, bottom=0.14)
    labels_apart(ax, marks, BESIDE, fontsize=8, color="#b00020")
    legend_clear(ax, fontsize=8, frameon=False)
    return fig


def bandwidth_png(docs, labels, path: Path, title: str, warnings=()) -> Path:
    """:func:`bandwidth_figure`, written to ``path``."""
    return save_png(bandwidth_figure(docs, labels, title, warnings), path)


def bandwidth_reports(doc: dict, folder: Path) -> list[Path]:
    """capture.power-bandwidth.json, .csv and .png in the run's folder."""
    report_folder(folder)
    path = folder / "capture.wav"
    return [tables.write_json(doc, folder / "capture.power-bandwidth.json"),
            write_bandwidth_csv(doc, folder / "capture.power-bandwidth.csv"),
            bandwidth_png([doc], ["power"], folder / "capture.power-bandwidth.png", f"{title_of(path)}: power bandwidth")]
