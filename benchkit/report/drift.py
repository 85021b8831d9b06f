"""What people read of a drift log: the text summary, the table, the plot,
the report files, and the overlay of compared logs."""

from __future__ import annotations

import csv
from pathlib import Path

import numpy as np
from matplotlib.figure import Figure

from benchkit.report import tables
from benchkit.report.files import report_folder, title_of
from benchkit.report.overlays import colour, finish_overlay
from benchkit.report.plots import BAND, MARK, save_png, TRACE
from benchkit.units import quantity


def drift_summary(r, title: str = "") -> str:
    """The figures of a drift log."""
    d = r.to_dict()
    lines = [title] if title else []
    lines += [
        f"  readings     {d['samples']} over {d['duration_s']:.1f} s",
        f"  now          {d['last_v'] * 1e3:.3f} mV (min {d['min_v'] * 1e3:.3f}, max {d['max_v'] * 1e3:.3f}, "
        f"peak to peak {d['pp_v'] * 1e3:.3f} mV)",
    ]
    if d["rate_mv_per_min"] is not None:
        lines.append(f"  drift rate   {d['rate_mv_per_min']:+.4f} mV/min over the last {d['rate_window_s']:g} s")
    f = r.fit
    if f is not None:
        settle = "" if f.settle_s is None else (
            f"; within {quantity(f.band_v, 'V')} from {quantity(f.settle_s, 's', 3)} (+-{quantity(f.settle_sd_s, 's', 2)})")
        lines.append(f"  settling     towards {quantity(f.final_v, 'V', 5)} (+-{quantity(f.final_sd_v, 'V', 2)}), "
                     f"tau {quantity(f.tau_s, 's', 3)} (+-{quantity(f.tau_sd_s, 's', 2)}){settle}")
    for e in r.events:
        lines.append(f"  step         at {e['time_s']:.1f} s: {e['step_v'] * 1e3:+.3f} mV")
    if r.verdict:
        about = f" about {r.nominal_v:g} V" if r.nominal_v else ""
        lines.append(f"  verdict      {r.verdict} (limit +-{r.limit_v * 1e3:g} mV{about})")
    lines += [f"  warning      {w}" for w in r.warnings]
    return "\n".join(lines)


def write_drift_csv(result, path: Path) -> Path:
    """The readings beside the settling fit: time, volts, fitted volts and
    the residual (empty before the fit's start or without a fit)."""
    fit = result.fit
    with path.open("w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(["time_s", "volts", "fit_v", "residual_v"])
        for t, v in zip(result.t_s, result.v):
            if fit is not None and t >= fit.start_s:
                f = float(fit.value_at(t))
                w.writerow([f"{t:.3f}", f"{v:.9g}", f"{f:.9g}", f"{v - f:.3e}"])
            else:
                w.writerow([f"{t:.3f}", f"{v:.9g}", "", ""])
    return path


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


def drift_figure(result, title: str) -> Figure:
    """Volts against time, the settling fit over it, the limit band about
    the nominal value and the sudden steps marked (:func:`drift_view`)."""
    view = drift_view(result)
    k, unit = view["scale"], view["unit"]
    fig = Figure(figsize=(10, 5.2))
    ax = fig.add_subplot(1, 1, 1)
    t, v = result.t_s, result.v * k
    minutes = t[-1] - t[0] > 600
    scale = 60.0 if minutes else 1.0
    ax.plot(t / scale, v, ".", ms=2.5, color=TRACE, label="readings")
    if result.fit is not None:
        f = result.fit
        tt = np.linspace(f.start_s, t[-1], 400)
        ax.plot(tt / scale, f.value_at(tt) * k, color=MARK, lw=1.2,
                label=f"first-order fit: {quantity(f.final_v, 'V', 5)}, tau {quantity(f.tau_s, 's', 3)}")
        if f.settle_s is not None and f.settle_s <= t[-1]:
            ax.axvline(f.settle_s / scale, color=MARK, lw=0.7, ls="--")
    ax.set_ylim(*view["ylim"])
    if view["band"] is not None:
        b_lo, b_hi = view["band"]
        inside = b_lo <= view["ylim"][0] and view["ylim"][1] <= b_hi
        ax.axhspan(b_lo, b_hi, color=BAND, zorder=0,
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
    return fig


def drift_png(result, path: Path, title: str) -> Path:
    """:func:`drift_figure`, written to ``path``."""
    return save_png(drift_figure(result, title), path)


def drift_reports(result, log: Path, out: Path) -> list[Path]:
    report_folder(out)
    return [
        tables.write_json(result.to_dict(), out / f"{log.stem}.drift.json"),
        write_drift_csv(result, out / f"{log.stem}.drift.csv"),
        drift_png(result, out / f"{log.stem}.drift.png", title_of(log)),
    ]


def drifts_figure(series, labels, title: str, warnings) -> Figure:
    fig = Figure(figsize=(10, 5.2))
    ax = fig.add_subplot(1, 1, 1)
    longest = max((t[-1] - t[0] for t, _v in series if len(t)), default=0.0)
    scale = 60.0 if longest > 600 else 1.0
    for i, (label, (t, v)) in enumerate(zip(labels, series)):
        ax.plot((np.asarray(t) - t[0]) / scale, np.asarray(v) * 1e3, ".-", ms=2, lw=0.6, color=colour(i), label=label)
    ax.set_xlabel("time from the first reading (min)" if scale > 1 else "time from the first reading (s)")
    ax.set_ylabel("DC (mV)")
    return finish_overlay(fig, ax, title, warnings, "", "best", 0.09)


def drifts_png(series, labels, path: Path, title: str, warnings) -> Path:
    """:func:`drifts_figure`, written to ``path``."""
    return save_png(drifts_figure(series, labels, title, warnings), path)
