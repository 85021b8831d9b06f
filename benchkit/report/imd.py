"""What people read of intermodulation: the text summary, the table, the
report files, and the IMD against level plot (with a step's spectrum)."""

from __future__ import annotations

import csv
import math
from pathlib import Path

import numpy as np
from matplotlib.figure import Figure
from matplotlib.ticker import FuncFormatter

from benchkit import units
from benchkit.analysis.uncertainty import lookup, shown_parts
from benchkit.errors import read_warnings
from benchkit.report import tables
from benchkit.report.files import report_folder, stem_of, title_of
from benchkit.report.overlays import percent_axes, colour, finish_overlay
from benchkit.report.plots import floored, hz_label, labels_apart, save_png, volts_axis
from benchkit.report.screen import Column, level_column, table_text
from benchkit.units import in_one_unit, level_view


def _order_cell(order: dict | None) -> str:
    """An order's level; "partial" marks one missing a product, "-" one not measured."""
    if not order:
        return "-"
    return f"{order['db']:.1f}" + (" partial" if order.get("partial") else "")


def _equal_peak_sine(step: dict) -> tuple[float, float | None, float | None]:
    """The level of a sine whose peak is a two-tone step's composite peak
    (the tones' amplitudes summed): its dBFS, volts RMS and watts into
    the load where known (a level for :func:`level_column`)."""
    dbfs = float(units.dbfs_from_peak(units.ratio_from_db(step["f1_dbfs"]) + units.ratio_from_db(step["f2_dbfs"])))
    vrms = None if step.get("peak_v") is None else units.vrms_from_vpk(step["peak_v"])
    return dbfs, vrms, step.get("equivalent_power_w")


def imd_summary(d: dict, title: str = "") -> str:
    """An intermodulation result (its document): a line a step, then the
    strongest products of the top valid step."""
    lines = [title] if title else []
    f1, f2 = d["tones_hz"]
    ref = "re f2" if d["method"] == "modulation" else "re f1 + f2"
    lines.append(f"  method       {d['method']}: {f1:g} Hz + {f2:g} Hz at {d['tone_ratio']:g}:1; products {ref}")
    steps = d["steps"]
    volts = all(s.get("peak_v") is not None for s in steps)
    # the composite's peak is a peak (volts peak, or dBFS: a sine whose peak reaches FS is 0 dBFS)
    peak_unit, peaks = in_one_unit([s["peak_v"] if volts else units.dbfs_from_peak(max(s["peak_fs"], 1e-12)) for s in steps],
                                   "Vpk" if volts else "dBFS")
    pct_unit, pcts = in_one_unit([s["imd_pct"] for s in steps], "%")
    # levels in a unit chosen (--levels-in): a column of its own, said to be the sine of the composite's peak
    # (the level the plot's equivalent sine power is of), beside the peak, never in place of it
    sine_unit, sines = level_column([_equal_peak_sine(s) for s in steps]) if level_view().unit else (None, [None] * len(steps))
    rows = []
    for i, (s, peak, sine, pct) in enumerate(zip(steps, peaks, sines, pcts)):
        o = s.get("orders") or {}
        mark = "" if s["valid"] else "NOT VALID (clipped capture)" if s["clipped"] else "NOT VALID (see the warnings)"
        imd, big = shown_parts(s["imd_db"], lookup(d, "steps.imd_db", i))
        rows.append(["-" if s["drive_dbfs"] is None else f"{s['drive_dbfs']:.2f}", peak, *([sine] if sine_unit else []),
                     pct, imd, big or "-", _order_cell(o.get("2")), _order_cell(o.get("3")), mark])
    lines.append(table_text([Column("drive (dBFS)"), Column(f"peak at stage ({peak_unit})"),
                             *([Column(f"sine of that peak ({sine_unit})")] if sine_unit else []),
                             Column(f"IMD ({pct_unit})"), Column("IMD (dB)"), Column("U (dB)"), Column("order 2 (dB)"),
                             Column("order 3 (dB)"), Column("", "left")], rows))
    if sine_unit:
        lines.append("  (sine of that peak: the level of a sine whose peak is the two tones' summed peak)")
    valid = [s for s in d["steps"] if s["valid"]]
    if valid:
        top = max(valid, key=lambda s: s["drive_dbfs"] or 0.0)
        shown = sorted((p for p in top["products"] if not p["at_floor"]), key=lambda p: -p["level_db"])[:6]
        if shown:
            at = "" if top["drive_dbfs"] is None else f"at {top['drive_dbfs']:g} dBFS: "
            lines.append(f"  products     {at}"
                         + "; ".join(f"{p['label']} ({p['frequency_hz']:.0f} Hz) {p['level_db']:.1f} dB" for p in shown))
    seen = set()
    for w in read_warnings([*(d.get("warnings") or ()), *(w for s in d["steps"] for w in s.get("warnings") or ())]):
        if w not in seen:
            seen.add(w)
            lines.append(f"  warning      {w}")
    return "\n".join(lines)


def write_imd_csv(result, path: Path) -> Path:
    """A row per product of each step of a two-tone run (the tones first,
    as orders 1), with the step's figures on its tones' rows."""
    with path.open("w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(["drive_dbfs", "label", "order", "freq_hz", "amplitude_fs", "vrms", "level_db", "at_floor",
                    "imd_pct", "order2_pct", "order3_pct", "valid"])
        for s in result.steps:
            r = s.result
            vpf = r.volts_per_fs

            def vrms(a):
                return "" if vpf is None else f"{a * vpf / math.sqrt(2):.6g}"

            drive = "" if s.drive_dbfs is None else f"{s.drive_dbfs:.3f}"
            figures = [f"{r.imd_pct:.5g}"] + ["" if r.orders.get(k) is None else f"{100 * r.orders[k]:.5g}" for k in (2, 3)]
            for label, f, a in (("f1", r.f1_hz, r.a1_fs), ("f2", r.f2_hz, r.a2_fs)):
                w.writerow([drive, label, 1, f"{f:.4f}", f"{a:.6e}", vrms(a),
                            f"{units.db_from_ratio(a / r.reference_fs):.2f}", "false", *figures, r.valid])
            for p in r.products:
                w.writerow([drive, p.label, p.order, f"{p.frequency_hz:.4f}", f"{p.amplitude_fs:.6e}",
                            vrms(p.amplitude_fs), f"{p.level_db:.2f}", str(p.at_floor).lower(), *figures, r.valid])
    return path


def imd_reports(result, path: Path, channel: int, out: Path) -> list[Path]:
    """STEM.imd.json, .csv and .png: the IMD against level, and the top
    valid step's spectrum with its products when the analysis kept it."""
    report_folder(out)
    stem = stem_of(path, channel)
    doc = result.to_dict()
    top = result.top() or result.steps[-1]
    spectrum = None
    if top.result.spectrum is not None:
        spectrum = (*top.result.spectrum, doc["steps"][result.steps.index(top)])
    return [
        tables.write_json(doc, out / f"{stem}.imd.json"),
        write_imd_csv(result, out / f"{stem}.imd.csv"),
        imd_png([doc], [path.name], out / f"{stem}.imd.png", title_of(path), spectrum=spectrum),
    ]


def _drive(step: dict) -> float:
    """A two-tone step's drive, or for a capture made elsewhere the
    composite's peak as recorded, dBFS."""
    if step.get("drive_dbfs") is not None:
        return step["drive_dbfs"]
    return float(units.dbfs_from_peak(units.ratio_from_db(step["f1_dbfs"]) + units.ratio_from_db(step["f2_dbfs"])))


def imd_figure(docs, labels, title: str, warnings=(), spectrum=None) -> Figure:
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
        ax.plot(xs, [s["imd_pct"] for s in run], "-o", ms=3.5, lw=1.2, color=colour(i), label=f"{label}: total")
        if i == 0 and len(docs) == 1:
            for order, style in (("2", "--"), ("3", ":")):
                ys = [((s.get("orders") or {}).get(order) or {}).get("pct") for s in run]
                if any(ys):
                    ax.plot(xs, ys, style, lw=1.0, color=colour(i), label=f"order {order}")
        bad = [(x, s["imd_pct"]) for x, s in zip(xs, run) if s.get("valid") is False]
        if bad:
            ax.plot(*zip(*bad), "x", ms=8, color="#b00020")
    percent_axes(ax, have_power, "equivalent sine power of the composite peak (W)", "drive, composite peak (dBFS)",
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
        bottom = max(float(np.median(level[sel])) - 30.0, -220.0)
        axs.plot(f[sel], floored(level[sel], bottom), lw=0.7, color=colour(0))
        shown = [p for p in step.get("products") or [] if not p.get("at_floor") and lo <= p["frequency_hz"] <= hi]
        db = [units.dbfs_from_peak(max(p["amplitude_fs"], 1e-15)) for p in shown]
        axs.plot([p["frequency_hz"] for p in shown], db, "v", ms=5, color="#c2571a")
        axs.set_xlim(max(lo, 0.0), hi)
        axs.set_ylim(bottom, 5.0)
        products = [(p["frequency_hz"], y, f"{p['label']}\n{p['level_db']:.1f} dB")
                    for p, y in sorted(zip(shown, db), key=lambda q: -q[1])[:8]]
        axs.xaxis.set_major_formatter(FuncFormatter(hz_label))
        axs.set_xlabel("frequency (Hz)")
        axs.set_ylabel("dBFS" if step["drive_dbfs"] is None else f"dBFS, drive {step['drive_dbfs']:g} dBFS")
        volts_axis(axs, step.get("volts_per_fs"), "level")
        axs.grid(True, which="both", color="#e6e6e6", lw=0.5)
        fig.subplots_adjust(hspace=0.32)
    finish_overlay(fig, ax, f"{title}: intermodulation", warnings, "", "upper left", 0.09)
    if spectrum is not None:  # the products' labels once the layout is set, where they collide with nothing
        labels_apart(axs, products, fontsize=7, color="#c2571a")
    return fig


def imd_png(docs, labels, path: Path, title: str, warnings=(), spectrum=None) -> Path:
    """:func:`imd_figure`, written to ``path``."""
    return save_png(imd_figure(docs, labels, title, warnings=warnings, spectrum=spectrum), path)
