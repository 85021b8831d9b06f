"""Watch: one steady tone analysed again and again while the stage is
adjusted, its readings logged."""

from __future__ import annotations

from pathlib import Path

from benchkit.analysis.readings import watch_figures
from benchkit.kinds import Kind, series_from_csv


def reanalyse(folder: Path, record: dict, say) -> tuple[dict, list[Path]]:
    from benchkit.jsonfile import load_json
    from benchkit.report.tables import write_json
    from benchkit.watch import summarise

    p = record.get("params") or {}
    old = {}
    try:
        old = load_json(folder / "watch.json").get("conditions") or {}
    except (OSError, ValueError):
        pass  # a watch killed before it wrote its summary
    doc = summarise(folder / "readings.csv", {"frequency_hz": p.get("frequency_hz"), "level_dbfs": p.get("level_dbfs"),
                                              "ended": "reanalysed", "device": record.get("device"),
                                              "conditions": old or {"bandwidth_hz": p.get("bandwidth_hz")}})
    return doc, [write_json(doc, folder / "watch.json"), folder / "readings.csv"]


def overlay(comparison, docs: list[dict], entries, out: Path, title: str) -> list[Path]:
    """THD+N against time, each run's readings."""
    from benchkit.report import overlays

    series = [series_from_csv(e.folder, "readings.csv", "t_s", "thdn_db") for e in entries]
    return [overlays.lines_png(series, comparison.labels, out / "overlay.png", f"{title}: THD+N while watched",
                               comparison.warnings, "time (s)", "THD+N (dB)", False)]


KIND = Kind("watch", reanalyse, figures=watch_figures, overlay=overlay)
