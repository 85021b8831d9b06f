"""What people read of a power run: the text summary, the steps table, the
THD+N against power plot and the report files."""

from __future__ import annotations

import csv
from pathlib import Path

from matplotlib.figure import Figure

from benchkit.report.files import result_csv_png
from benchkit.report.plots import BESIDE, FAINT, labels_apart, legend_clear, MARK, readable_log, save_png, TRACE
from benchkit.report.summary import first_half
from benchkit.analysis.uncertainty import shown_quantity
from benchkit.units import level_view, quantity


def _also(vrms: float | None) -> str:
    """A level in volts RMS also in the unit levels are shown in (dBV,
    dBu, dBr), after the volts; nothing when that is volts or watts."""
    text = level_view().also(vrms, "Vrms")
    return f", {text}" if text else ""


def power_summary(r, title: str = "") -> str:
    """Power at the limits, onset, clipping half, efficiency; measured
    beside expected when the stage is described."""
    metric = "THD+N" if r.metric == "thdn" else "THD"
    lines = [title] if title else []
    block = r.uncertainty()
    u = block.get("standard") or {}
    named = block.get("dominant") or {}
    for i, (lim, pt) in enumerate(r.limits):
        if pt is None:
            lines.append(f"  at {lim:g} % {metric}".ljust(22) + "not reached")
        else:
            s0, s1 = r.steps[pt.below], r.steps[pt.above]
            ui = (u.get("limits.power_w") or [None] * len(r.limits))[i]
            lead = (named.get("limits.power_w") or [None] * len(r.limits))[i]
            lines.append(f"  at {lim:g} % {metric}".ljust(22) + f"{shown_quantity(pt.power_w, ui, 'W')} "
                         f"({quantity(pt.vrms, 'Vrms', 4)}{_also(pt.vrms)}{f'; the {lead} dominates' if lead else ''}), "
                         f"between the {s0.drive_dbfs:.2f} and {s1.drive_dbfs:.2f} dBFS steps")
    if r.onset is not None:
        lines.append(f"  clipping onset       {shown_quantity(r.onset.power_w, u.get('clipping_onset_w'), 'W')} "
                     f"({quantity(r.onset.vrms, 'Vrms', 4)}{_also(r.onset.vrms)}, THD+N {r.onset.departure_db:g} dB over its low-level trend)")
    if u:
        lines.append("  (+- is the expanded uncertainty, k = 2)")
    if r.half:
        lines.append(f"  clipping half        {r.half}")
    eff = r.efficiency_pct
    at = "" if eff is None else f", efficiency {eff:.1f} % at {r.limits[0][0]:g} %"
    if r.supply_w:
        lines.append(f"  supply               {quantity(r.supply_w, 'W', 3)} ({r.supply_v:g} V x {r.supply_a:g} A; all heat at idle){at}")
    elif r.supply_v and any(s.supply_a is not None for s in r.steps):
        metered = [s.supply_a for s in r.steps if s.supply_a is not None]
        lines.append(f"  supply               {r.supply_v:g} V, {quantity(min(metered), 'A', 4)} to {quantity(max(metered), 'A', 4)} metered{at}")
    if r.expected:
        e = r.expected
        got = r.onset.power_w if r.onset is not None else None
        lines.append(f"  expected ceiling     {quantity(e['max_sine_w'], 'W')} ({first_half(e['limiting_half'])} first: "
                     f"+{quantity(e['positive_swing_vpk'], 'V', 3)} / -{quantity(e['negative_swing_vpk'], 'V', 3)} peak)"
                     + ("" if got is None else f"; measured onset {100 * got / e['max_sine_w']:.0f} % of it"))
    rating = (r.info or {}).get("rating")
    if rating:
        pre = rating.get("preconditioning")
        if pre:
            lines.append(f"  preconditioned       {quantity(pre['power_w'], 'W', 3)} for {pre['seconds']:g} s ({rating['manner_of']} manner)")
        verdict = {True: "reaches", False: "falls short of", None: "cannot be judged against"}[rating["meets"]]
        lines.append(f"  rating               {verdict} {rating['rated_power_w']:g} W at {rating['limit_pct']:g} %: "
                     + "; ".join(rating["notes"]))
    lines += [f"  warning              {w}" for w in r.warnings]
    return "\n".join(lines)


def write_power_csv(result, path: Path) -> Path:
    """One row per step of a power run, with the supply current a meter
    read and the efficiency when the supply is known."""
    header = ["drive_dbfs", "vrms", "power_w", "thd_pct", "thdn_pct", "h2_dbc", "h3_dbc", "h4_dbc", "h5_dbc",
              "noise_vrms", "supply_a", "efficiency_pct", "valid"]
    with path.open("w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(header)
        for s in result.steps:
            h = [s.harmonics_dbc.get(k) for k in (2, 3, 4, 5)]
            w.writerow([f"{s.drive_dbfs:.3f}", f"{s.vrms:.6g}", f"{s.power_w:.6g}", f"{s.thd_pct:.5g}",
                        f"{s.thdn_pct:.5g}"] + ["" if x is None else f"{x:.2f}" for x in h]
                       + ["" if s.noise_vrms is None else f"{s.noise_vrms:.4g}",
                          "" if s.supply_a is None else f"{s.supply_a:.5g}",
                          "" if (e := s.efficiency_pct(result.supply_v, result.supply_a)) is None else f"{e:.3f}",
                          s.valid])
    return path


def power_figure(result, title: str) -> Figure:
    """THD+N (and THD) against output power, log-log, the limits and their
    crossings marked, the clipping onset and the expected ceiling shown;
    beside it THD+N against the output level in Vrms."""
    fig = Figure(figsize=(12, 5.4))
    ax, axv = fig.add_subplot(1, 2, 1), fig.add_subplot(1, 2, 2)
    p = [s.power_w for s in result.steps]
    v = [s.vrms for s in result.steps]
    thdn = [s.thdn_pct for s in result.steps]
    thd = [s.thd_pct for s in result.steps]
    for a, xs, xlabel in ((ax, p, "output power (W)"), (axv, v, "output level (Vrms)")):
        a.plot(xs, thdn, "-o", ms=3, lw=1.2, color=TRACE, label="THD+N")
        a.plot(xs, thd, "-", lw=0.9, color=FAINT, label="THD")
        a.set_xscale("log")
        a.set_yscale("log")
        readable_log(a.xaxis, a.yaxis)
        a.set_xlabel(xlabel)
        a.set_ylabel("percent")
        a.grid(True, which="both", color="#e6e6e6", lw=0.5)
        # room above the top point (it sat on the frame) for the labels there
        a.set_ylim(top=2.5 * max(max(thdn), max(thd)))
    # and right of it for the limits' labels: left of a crossing the onset's and the ceiling's lines run
    ax.set_xlim(right=2.5 * max(p))
    labels = []
    for lim, pt in result.limits:
        ax.axhline(lim, color=FAINT, lw=0.6, ls=":")
        if pt is not None:
            ax.plot([pt.power_w], [lim], "s", ms=6, mfc="none", mec=MARK)
            labels.append((pt.power_w, lim, f"{quantity(pt.power_w, 'W', 3)} at {lim:g} %", MARK))
    if result.onset is not None:
        ax.axvline(result.onset.power_w, color=MARK, lw=0.8, ls="--")
    if result.expected:
        ax.axvline(result.expected["max_sine_w"], color="#4b8a3e", lw=0.8, ls="-.")
    ax.set_title(f"{title}: distortion against power", loc="left", fontsize=10)
    axv.set_title("against level", loc="left", fontsize=10)
    half = f"; clipping half: {result.half}" if result.half else ""
    fig.text(0.01, 0.01, f"{result.frequency_hz:g} Hz into {result.load_ohms:g} ohm; limits on "
             f"{'THD+N' if result.metric == 'thdn' else 'THD'}{half}", fontsize=7.5, color="#333333", ha="left", va="bottom")
    fig.subplots_adjust(left=0.07, right=0.98, top=0.92, bottom=0.14, wspace=0.22)
    # every label beside its point where no curve, line or other label runs through it: the limits' at
    # their crossings, the onset's and the ceiling's along their lines (from the foot up)
    placed = []
    for x, y, text, shade in labels:
        labels_apart(ax, [(x, y, text)], BESIDE, placed, fontsize=8, color=shade)
    along = ([(result.onset.power_w, f"onset {quantity(result.onset.power_w, 'W', 3)}", MARK)]
             if result.onset is not None else [])
    if result.expected:
        ceiling = result.expected["max_sine_w"]
        along.append((ceiling, f"expected ceiling {quantity(ceiling, 'W', 3)}", "#4b8a3e"))
    y0, y1 = ax.get_ylim()
    for x, text, shade in along:
        for height in (0.02, 0.2, 0.4, 0.6, 0.8):  # the first clear height, as a fraction of the log axis
            if labels_apart(ax, [(x, y0 * (y1 / y0) ** height, text)], ((4, 0, "left"), (-4, 0, "right")), placed,
                            fontsize=8, color=shade):
                break
    legend_clear(ax, fontsize=8, frameon=False)
    return fig


def power_png(result, path: Path, title: str) -> Path:
    """:func:`power_figure`, written to ``path``."""
    return save_png(power_figure(result, title), path)


def power_reports(result, path: Path, channel: int, out: Path) -> list[Path]:
    return result_csv_png(result, path, channel, out, "power", write_power_csv, power_png)
