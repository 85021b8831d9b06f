"""Drift: a DC voltage (the operating point) logged while the stage warms,
how far and how fast it moves, and when it settles."""

from __future__ import annotations

from pathlib import Path

from benchkit.analysis.drift import drift_figures
from benchkit.errors import BenchkitError
from benchkit.kinds import Analysed, Kind, Offline

LOG = "log.csv"


def reanalyse(folder: Path, record: dict, say) -> tuple[dict, list[Path]]:
    from benchkit.drift_runs import analyze_drift_csv
    from benchkit.report import files

    p = record.get("params") or {}
    log = folder / LOG
    if not log.exists():
        raise BenchkitError(f"{folder}: the drift run has no {LOG}: it stopped before its first reading")
    result = analyze_drift_csv(log, limit_v=p.get("limit_v"), band_v=p.get("band_v") or 1e-3,
                               window_s=p.get("window_s") or 60.0, nominal_v=p.get("nominal_v") or 0.0,
                               info={"source": record.get("device"), "ended": "reanalysed",
                                     "accelerated": p.get("accelerated")})
    return result.to_dict(), files.drift_reports(result, log, folder)


def overlay(comparison, docs: list[dict], entries, out: Path, title: str) -> list[Path]:
    """Each run's readings against time."""
    from benchkit.meters import read_drift_csv
    from benchkit.report import overlays

    series = [read_drift_csv(e.folder / LOG)[:2] for e in entries]
    return [overlays.drifts_png(series, comparison.labels, out / "overlay.png", f"{title}: DC drift",
                                comparison.warnings)]


def analyse(path: Path, o: Offline) -> Analysed:
    """A CSV log (benchkit's, or a logger's), its columns by name or number."""
    from benchkit.drift_runs import analyze_drift_csv
    from benchkit.report import files, summary

    j = o.judge or {}
    result = analyze_drift_csv(path, o.time_col, o.value_col, j.get("dc_limit"), j.get("settle_band"),
                               j.get("window", 60.0), nominal_v=j.get("nominal", 0.0))
    return Analysed(result.to_dict(), summary.drift_summary(result, f"{path}: drift"),
                    o.reports(lambda out: files.drift_reports(result, path, out)))


KIND = Kind("drift", reanalyse, figures=drift_figures, overlay=overlay, analyse=analyse, reads="csv")
