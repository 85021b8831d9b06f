"""Gain: the stage's voltage gain and phase at one tone, over a reference
input or the calibrated drive."""

from __future__ import annotations

from pathlib import Path

from benchkit.analysis.gain import gain_figures
from benchkit.kinds import Analysed, Kind, Offline, run_band, run_capture


def reanalyse(folder: Path, record: dict, say) -> tuple[dict, list[Path]]:
    from benchkit.gain_runs import analyze_gain
    from benchkit.report.tables import write_json

    p = record.get("params") or {}
    channel = int(p.get("channel") or 1)
    path = run_capture(folder, channel, say).path
    result = analyze_gain(path, channel, p.get("ref_channel"), run_band(p), p.get("load_ohms"))
    return result.to_dict(), [write_json(result.to_dict(), folder / f"{path.stem}.gain.json")]


def analyse(rec, o: Offline) -> Analysed:
    """A tone capture benchkit wrote (``--gain``)."""
    from benchkit.gain_runs import analyze_gain
    from benchkit.report import summary

    path = Path(rec.path)
    doc = {**analyze_gain(path, rec.channel, o.ref_channel, o.bandwidth_hz, o.load_ohms).to_dict(), "file": str(path)}
    return Analysed(doc, summary.gain_summary(doc, f"{path} channel {rec.channel}: gain"))


KIND = Kind("gain", reanalyse, figures=gain_figures, chosen=lambda o: o.gain, analyse=analyse, rank=10)
