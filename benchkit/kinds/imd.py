"""IMD: a pair of tones at each level (the modulation or the difference
method), the intermodulation products and their sum."""

from __future__ import annotations

from pathlib import Path

from benchkit.analysis.imd import imd_figures
from benchkit.kinds import Analysed, Kind, Offline, run_capture


def reanalyse(folder: Path, record: dict, say) -> tuple[dict, list[Path]]:
    from benchkit.imd_runs import analyze_imd_steps
    from benchkit.report import files

    p = record.get("params") or {}
    rec = run_capture(folder, int(p.get("channel") or 1), say)
    result = analyze_imd_steps(rec, load_ohms=p.get("load_ohms"), spectrum=True)
    return result.to_dict(), files.imd_reports(result, rec.path, rec.channel, folder)


def overlay(comparison, docs: list[dict], entries, out: Path, title: str) -> list[Path]:
    from benchkit.report import overlays

    return [overlays.imd_png(docs, comparison.labels, out / "overlay.png", title, comparison.warnings)]


def recognises(rec) -> bool:
    from benchkit.imd_runs import is_imd

    return is_imd(rec)


def analyse(rec, o: Offline) -> Analysed:
    """A two-tone capture: benchkit's own (its sidecar lists the steps), or
    (``--imd METHOD[:F1:F2]``) one made elsewhere, analysed whole."""
    from benchkit import units
    from benchkit.analysis.imd import analyze_imd
    from benchkit.imd_runs import ImdStep, ImdSteps, analyze_imd_steps, is_imd, twin_tone
    from benchkit.report import files, summary

    if is_imd(rec) and o.imd_method is None:
        result = analyze_imd_steps(rec, o.volts_per_fs, o.load_ohms, spectrum=o.out is not None)
    else:
        method, _sep, tones = o.imd_method.partition(":")
        twin = twin_tone(method, *(units.parse_tones(tones) if tones else (None, None)))
        scale, source = o.scale(rec)
        r = analyze_imd(rec.samples, rec.sample_rate_hz, twin.method, twin.f1_hz, twin.f2_hz, scale, source,
                        o.load_ohms, spectrum=o.out is not None)
        result = ImdSteps(str(rec.path), rec.channel, twin, (ImdStep(None, r),), rec.warnings)
    doc = result.to_dict()
    return Analysed(doc, summary.imd_summary(doc, f"{rec.path} channel {rec.channel}: intermodulation"),
                    o.reports(lambda out: files.imd_reports(result, Path(rec.path), rec.channel, out)))


KIND = Kind("imd", reanalyse, figures=imd_figures, overlay=overlay, recognises=recognises,
            chosen=lambda o: o.imd_method is not None, analyse=analyse, rank=20)
