"""What people read of output impedance: the text summary, the table, the
plot and the report files."""

from __future__ import annotations

import csv
from pathlib import Path

import numpy as np
from matplotlib.figure import Figure

from benchkit.errors import read_warnings
from benchkit.report import tables
from benchkit.report.files import report_folder, title_of
from benchkit.report.plots import FAINT, log_hz_axis, readable_log, save_png, TRACE
from benchkit.report.screen import Column, table_text
from benchkit.units import in_one_unit, quantity


def zout_summary(d: dict, title: str = "") -> str:
    """An output impedance result (its document): a line a frequency."""
    lines = [title] if title else []
    open_load = "open" if d["open_load_ohms"] is None else f"{quantity(d['open_load_ohms'], 'ohm', 4)} (pad and input)"
    lines.append(f"  loads        {d['load_ohms']:g} ohm against {open_load}; {d['method']}")
    pts = d["points"]
    z_unit, zs = in_one_unit([p["zout_ohms"] for p in pts], "ohm")
    r_unit, rs = in_one_unit([p["resistance_ohms"] for p in pts], "ohm")
    x_unit, xs = in_one_unit([p["reactance_ohms"] for p in pts], "ohm")
    rows = [[f"{p['frequency_hz']:.5g}", z, r, x, "-" if p["damping_factor"] is None else f"{p['damping_factor']:.1f}",
             "" if p["valid"] else "NOT VALID"] for p, z, r, x in zip(pts, zs, rs, xs)]
    lines.append(table_text([Column("frequency (Hz)"), Column(f"|Zout| ({z_unit})"), Column(f"R ({r_unit})"),
                             Column(f"X ({x_unit})"), Column("damping factor"), Column("", "left")], rows))
    if d.get("zout_ohms") is not None:
        df = "-" if d["damping_factor"] is None else f"{d['damping_factor']:.3g}"
        lines.append(f"  at {d['reference_hz']:g} Hz  Zout {quantity(d['zout_ohms'], 'ohm', 4)}, damping factor {df} re "
                     f"{d['load_ohms']:g} ohm")
    for w in read_warnings(d.get("warnings")):
        lines.append(f"  warning      {w}")
    return "\n".join(lines)


def write_zout_csv(result, path: Path) -> Path:
    """A row a frequency: the open-over-loaded ratio, the output impedance
    (magnitude, resistance, reactance) and the damping factor."""
    with path.open("w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(["freq_hz", "ratio", "ratio_phase_deg", "zout_ohms", "resistance_ohms", "reactance_ohms",
                    "damping_factor", "valid"])
        for p in result.points:
            d = p.to_dict()
            w.writerow([f"{p.frequency_hz:.4f}", f"{d['ratio']:.7f}", f"{d['ratio_phase_deg']:.4f}",
                        f"{p.zout_ohms:.6g}", f"{p.zout.real:.6g}", f"{p.zout.imag:.6g}",
                        "" if p.damping_factor is None else f"{p.damping_factor:.4g}", p.valid])
    return path


def zout_figure(result, title: str) -> Figure:
    """|Zout| against frequency (log-log), its resistance beside it, and
    the damping factor on the right-hand axis."""
    pts = [p for p in result.points if p.zout_ohms > 0] or list(result.points)
    fig = Figure(figsize=(10, 5.6))
    ax = fig.add_subplot(1, 1, 1)
    f = np.array([p.frequency_hz for p in pts])
    ax.plot(f, [p.zout_ohms for p in pts], "-o", ms=4, color=TRACE, lw=1.2, label="|Zout|")
    if result.method == "gain-ratio":
        ax.plot(f, [max(p.zout.real, 1e-6) for p in pts], "--", color=FAINT, lw=1.0, label="resistance")
    bad = [p for p in pts if not p.valid]
    if bad:
        ax.plot([p.frequency_hz for p in bad], [p.zout_ohms for p in bad], "x", ms=8, color="#b00020")
    log_hz_axis(ax)
    ax.set_yscale("log")
    ax.set_xlabel("frequency (Hz)")
    ax.set_ylabel("output impedance (ohm)")
    right = ax.twinx()
    right.set_yscale("log")
    lo, hi = ax.get_ylim()
    right.set_ylim(result.load_ohms / lo, result.load_ohms / hi)  # DF = R / |Z|: the same curve, read on the right
    right.set_ylabel(f"damping factor re {result.load_ohms:g} ohm")
    readable_log(ax.yaxis, right.yaxis)
    ax.grid(True, which="both", color="#e6e6e6", lw=0.5)
    ax.legend(loc="upper right", fontsize=8, frameon=False)
    ref = result.at()
    head = "" if ref is None or ref.damping_factor is None else (
        f": {quantity(ref.zout_ohms, 'ohm', 3)}, damping factor {ref.damping_factor:.3g} at {ref.frequency_hz:g} Hz")
    ax.set_title(f"{title}: output impedance{head}", loc="left", fontsize=10)
    fig.subplots_adjust(left=0.09, right=0.9, top=0.92, bottom=0.11)
    return fig


def zout_png(result, path: Path, title: str) -> Path:
    """:func:`zout_figure`, written to ``path``."""
    return save_png(zout_figure(result, title), path)


def zout_reports(result, folder: Path, out: Path, name: str = "zout") -> list[Path]:
    """NAME.json, .csv and .png of an output impedance result."""
    report_folder(out)
    return [
        tables.write_json(result.to_dict(), out / f"{name}.json"),
        write_zout_csv(result, out / f"{name}.csv"),
        zout_png(result, out / f"{name}.png", title_of(folder / f"{name}.png")),
    ]
