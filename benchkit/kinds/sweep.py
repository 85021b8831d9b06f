"""Sweep: the frequency response (a synchronized sweep or stepped sines),
magnitude and phase, the corners, and the harmonics against frequency."""

from __future__ import annotations

from pathlib import Path

from benchkit.analysis.response import response_figures
from benchkit.kinds import Analysed, Kind, Offline, run_band, run_capture


def reanalyse(folder: Path, record: dict, say) -> tuple[dict, list[Path]]:
    from benchkit.analysis.response import REFERENCE_HZ
    from benchkit.report import files
    from benchkit.responses import analyze_response

    p = record.get("params") or {}
    rec = run_capture(folder, int(p.get("channel") or 1), say)
    result = analyze_response(rec, p.get("ref_channel"), reference_hz=p.get("ref_freq_hz") or REFERENCE_HZ,
                              load_ohms=p.get("load_ohms"), bandwidth_hz=run_band(p))
    return result.to_dict(), files.response_reports(result, rec.path, rec.channel, folder, p.get("smooth"))


def overlay(comparison, docs: list[dict], entries, out: Path, title: str) -> list[Path]:
    from benchkit.report import overlays

    return [overlays.responses_png(docs, comparison.labels, out / "overlay.png", title, comparison.warnings)]


def recognises(rec) -> bool:
    from benchkit.responses import is_response

    return is_response(rec)


def analyse(rec, o: Offline) -> Analysed:
    """A sweep or stepped sines benchkit played, or (``--sweep``) a
    synchronized sweep made elsewhere."""
    from benchkit.analysis.sweep import SyncSweep
    from benchkit.report import files, summary
    from benchkit.responses import analyze_response

    spec = None if o.sweep is None else SyncSweep.design(*o.sweep, rec.sample_rate_hz, faded=False)
    ref_channel = o.ref_channel
    if ref_channel is None and o.sweep is None:
        ref_channel = rec.sidecar.get("reference_channel")
    result = analyze_response(rec, ref_channel, spec, o.ref_freq_hz, o.load_ohms, o.bandwidth_hz)
    text = summary.response_summary(result, f"{rec.path} channel {rec.channel}: {result.method} response")
    return Analysed(result.to_dict(), text,
                    o.reports(lambda out: files.response_reports(result, Path(rec.path), rec.channel, out, o.smooth)))


KIND = Kind("sweep", reanalyse, figures=response_figures, overlay=overlay, recognises=recognises,
            chosen=lambda o: o.sweep is not None, analyse=analyse, rank=50, result_kinds=("response",))
