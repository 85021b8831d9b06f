"""Power: stepped tones up to clipping, the power at each distortion limit,
the clipping onset, efficiency against the supply and the budget's ceiling."""

from __future__ import annotations

from pathlib import Path

from benchkit.analysis.power import power_figures
from benchkit.kinds import Analysed, Kind, Offline, run_capture


def _inverts(rec) -> bool:
    return bool((rec.sidecar.get("calibration") or {}).get("polarity_inverts"))


def reanalyse(folder: Path, record: dict, say) -> tuple[dict, list[Path]]:
    from benchkit.budget import ClassABudget
    from benchkit.power_runs import power_from_steps
    from benchkit.report import files
    from benchkit.runs import analyze_steps

    p = record.get("params") or {}
    rec = run_capture(folder, int(p.get("channel") or 1), say)
    load = float(p["load_ohms"])
    budget = (ClassABudget(p["rail_v"], p["bias_a"], load, p.get("vsat_v") or 1.0)
              if p.get("rail_v") is not None and p.get("bias_a") is not None else None)
    result = power_from_steps(analyze_steps(rec, load_ohms=load), load, p.get("metric", "thdn"),
                              tuple(p.get("limits_pct") or (1.0, 0.1, 10.0)), p.get("onset_db", 6.0),
                              p.get("supply_v"), p.get("supply_a"), budget, polarity_inverts=_inverts(rec))
    return result.to_dict(), files.power_reports(result, rec.path, rec.channel, folder)


def overlay(comparison, docs: list[dict], entries, out: Path, title: str) -> list[Path]:
    """The distortion metric the limits apply to, against power."""
    from benchkit.report import overlays

    metric = docs[0].get("limit_metric", "thdn")
    name = "THD+N" if metric == "thdn" else "THD"
    return [overlays.distortion_png(docs, comparison.labels, out / "overlay.png", f"{title}: {name} against power",
                                    comparison.warnings, f"{metric}_pct", f"{name} (%)")]


def analyse(rec, o: Offline) -> Analysed:
    """A stepped capture benchkit wrote, as a power run (``--power``)."""
    from benchkit import runs
    from benchkit.errors import BenchkitError
    from benchkit.power_runs import power_from_steps
    from benchkit.report import files, summary

    if not runs.is_stepped(rec):
        raise BenchkitError(f"{rec.path}: --power needs a stepped capture that benchkit wrote (its sidecar lists the "
                            "steps)")
    steps = runs.analyze_steps(rec, o.bandwidth_hz, o.load_ohms, o.volts_per_fs, o.out is not None, o.fundamental_hz,
                               o.averages)
    result = power_from_steps(steps, polarity_inverts=_inverts(rec), **o.power)
    text = summary.power_summary(result, f"{rec.path} channel {rec.channel}: power into {o.load_ohms:g} ohm")
    return Analysed(result.to_dict(), text,
                    o.reports(lambda out: files.power_reports(result, Path(rec.path), rec.channel, out)))


KIND = Kind("power", reanalyse, figures=power_figures, overlay=overlay, chosen=lambda o: o.power is not None,
            analyse=analyse, rank=80)
