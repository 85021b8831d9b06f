"""What people read of crosstalk: the text summary, the table, the plot and
the report files."""

from __future__ import annotations

import csv
from pathlib import Path

from matplotlib.figure import Figure

from benchkit.errors import read_warnings
from benchkit.report.files import result_csv_png
from benchkit.report.plots import log_hz_axis, MARK, save_png, TRACE
from benchkit.report.screen import Column, table_text
from benchkit.units import quantity


def crosstalk_summary(d: dict, title: str = "") -> str:
    """A crosstalk result (its document): a line a frequency."""
    lines = [title] if title else []
    balance = {round(b["frequency_hz"], 3): b["balance_db"] for b in d["balance"]}

    def cell(x):
        return f"{'<' if x['below_floor'] else ''}{x['crosstalk_db']:.1f}"

    rows = []
    for a, b in zip(d["a_to_b"], d["b_to_a"]):
        bal = balance.get(round(a["frequency_hz"], 3))
        rows.append([f"{a['frequency_hz']:.5g}", cell(a), cell(b), "-" if bal is None else f"{bal:+.3f}"])
    lines.append(table_text([Column("frequency (Hz)"), Column("A into B (dB)"), Column("B into A (dB)"),
                             Column("balance B-A (dB)")], rows))
    if any(x["below_floor"] for x in (*d["a_to_b"], *d["b_to_a"])):
        lines.append("  (<: below the floor, an upper bound)")
    if d.get("crosstalk_db") is not None:
        lines.append(f"  at {quantity(d['reference_hz'], 'Hz', 4)}  crosstalk {d['crosstalk_db']:.1f} dB (the worse direction), "
                     f"separation {-d['crosstalk_db']:.1f} dB"
                     + ("" if d.get("balance_db") is None else f"; balance {d['balance_db']:+.3f} dB"))
    for w in read_warnings(d.get("warnings")):
        lines.append(f"  warning      {w}")
    return "\n".join(lines)


def write_crosstalk_csv(result, path: Path) -> Path:
    """A row a driven tone: which channel, its frequency, the crosstalk
    and separation, the levels, whether the leak stood over its noise; the
    balance at that frequency on the rows of channel A."""
    balance = dict(result.balance())
    with path.open("w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(["driven", "freq_hz", "crosstalk_db", "separation_db", "driven_dbfs", "leaked_dbfs", "floor_dbfs",
                    "below_floor", "balance_db", "valid"])
        for x in result.leaks:
            d = x.to_dict()
            b = balance.get(x.frequency_hz) if x.driven == "A" else None
            w.writerow([x.driven, f"{x.frequency_hz:.4f}", f"{x.crosstalk_db:.2f}", f"{-x.crosstalk_db:.2f}",
                        f"{d['driven_dbfs']:.2f}", f"{d['leaked_dbfs']:.2f}", f"{d['floor_dbfs']:.2f}",
                        str(x.below_floor).lower(), "" if b is None else f"{b:.3f}", x.valid])
    return path


def crosstalk_figure(result, title: str) -> Figure:
    """Crosstalk of each direction against frequency (dB, log frequency;
    a hollow mark where the leak did not stand over its noise), and the
    balance below."""
    fig = Figure(figsize=(10, 6.6))
    ax = fig.add_subplot(2, 1, 1)
    for side, colour, name in (("A", TRACE, "A driven, into B"), ("B", MARK, "B driven, into A")):
        leaks = result.direction(side)
        f = [x.frequency_hz for x in leaks]
        ax.plot(f, [x.crosstalk_db for x in leaks], "-", color=colour, lw=1.1, label=name)
        for x in leaks:
            ax.plot([x.frequency_hz], [x.crosstalk_db], "o", ms=5, color=colour,
                    mfc="none" if x.below_floor else colour)
    log_hz_axis(ax)
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
        axb.plot([f for f, _b in bal], ys, "-o", ms=4, color=TRACE, lw=1.0)
        mid, half = (max(ys) + min(ys)) / 2, max(0.25, (max(ys) - min(ys)) * 0.6)
        axb.set_ylim(mid - half, mid + half)  # a tenth of a dB must not fill the panel
    axb.ticklabel_format(axis="y", useOffset=False)
    log_hz_axis(axb)
    axb.set_ylabel("balance, B over A (dB)")
    axb.set_xlabel("frequency (Hz)")
    axb.grid(True, which="both", color="#e6e6e6", lw=0.5)
    fig.subplots_adjust(left=0.09, right=0.97, top=0.93, bottom=0.09, hspace=0.3)
    return fig


def crosstalk_png(result, path: Path, title: str) -> Path:
    """:func:`crosstalk_figure`, written to ``path``."""
    return save_png(crosstalk_figure(result, title), path)


def crosstalk_reports(result, path: Path, out: Path) -> list[Path]:
    return result_csv_png(result, path, 1, out, "crosstalk", write_crosstalk_csv, crosstalk_png)
