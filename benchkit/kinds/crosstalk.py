"""Crosstalk: one channel of a stereo pair driven at a time, the leak into
the other at each frequency, and the channels' balance."""

from __future__ import annotations

from pathlib import Path

from benchkit.analysis.crosstalk import crosstalk_figures
from benchkit.kinds import Analysed, Kind, Offline, run_band, run_capture


def reanalyse(folder: Path, record: dict, say) -> tuple[dict, list[Path]]:
    from benchkit.crosstalk_runs import analyze_crosstalk_capture
    from benchkit.report import files

    p = record.get("params") or {}
    path = run_capture(folder, int(p.get("channel") or 1), say).path
    result = analyze_crosstalk_capture(path, run_band(p))
    return result.to_dict(), files.crosstalk_reports(result, path, folder)


def analyse(rec, o: Offline) -> Analysed:
    from benchkit.crosstalk_runs import analyze_crosstalk_capture
    from benchkit.report import files, summary

    path = Path(rec.path)
    result = analyze_crosstalk_capture(path, o.bandwidth_hz)
    doc = {**result.to_dict(), "file": str(path)}
    return Analysed(doc, summary.crosstalk_summary(doc, f"{path}: crosstalk"),
                    o.reports(lambda out: files.crosstalk_reports(result, path, out)))


KIND = Kind("crosstalk", reanalyse, figures=crosstalk_figures, recognises=lambda rec: bool(rec.sidecar.get("crosstalk")),
            analyse=analyse, rank=30)
