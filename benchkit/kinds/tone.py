"""Tone: stepped tones at one frequency, THD, THD+N and the harmonics at
each level (offline, a single tone too)."""

from __future__ import annotations

from pathlib import Path

from benchkit.analysis.tone import step_figures
from benchkit.kinds import Analysed, Kind, Offline, run_band, run_capture


def reanalyse(folder: Path, record: dict, say) -> tuple[dict, list[Path]]:
    from benchkit.report import files
    from benchkit.runs import analyze_steps

    p = record.get("params") or {}
    rec = run_capture(folder, int(p.get("channel") or 1), say)
    steps = analyze_steps(rec, run_band(p), p.get("load_ohms"), traces=True)
    return steps.to_dict(), files.steps_reports(steps, rec.path, rec.channel, folder)


def overlay(comparison, docs: list[dict], entries, out: Path, title: str) -> list[Path]:
    """THD+N against power (or level), and the spectra of the highest drive
    level the runs share."""
    from benchkit.report import overlays

    return [overlays.distortion_png(docs, comparison.labels, out / "overlay.png", f"{title}: THD+N",
                                    comparison.warnings),
            *_spectra(entries, docs, comparison.labels, out, title, comparison.warnings)]


def _spectra(entries, docs, labels, folder: Path, title: str, warnings) -> list[Path]:
    from benchkit.recordings import read_capture
    from benchkit.report import overlays
    from benchkit.runs import analyze_steps

    shared = set.intersection(*({s["drive_dbfs"] for s in d.get("steps") or []} for d in docs))
    if not shared:
        return []
    drive = max(shared)
    results = []
    for entry, doc in zip(entries, docs):
        capture = Path(doc.get("file") or entry.folder / "capture.wav")
        if not capture.is_absolute() or not capture.exists():
            capture = entry.folder / capture.name
        if not capture.exists():
            return []
        steps = analyze_steps(read_capture(capture, int(doc.get("channel") or 1)),
                              tuple(doc["steps"][0].get("bandwidth_hz") or (20.0, 20000.0)), traces=True)
        results.append(next(s.result for s in steps.steps if s.drive_dbfs == drive))
    path = folder / "spectra.png"
    return [overlays.spectra_png(results, labels, path, f"{title}: spectra at drive {drive:g} dBFS", warnings)]


def recognises(rec) -> bool:
    from benchkit.runs import is_stepped

    return is_stepped(rec)


def analyse(rec, o: Offline) -> Analysed:
    """Each step of a stepped capture benchkit wrote; else the capture as
    one tone."""
    from dataclasses import replace

    from benchkit import runs, units
    from benchkit.analysis.tone import analyze_tone
    from benchkit.report import files, summary

    path, channel = Path(rec.path), rec.channel
    if runs.is_stepped(rec):
        steps = runs.analyze_steps(rec, o.bandwidth_hz, o.load_ohms, o.volts_per_fs, o.out is not None,
                                   o.fundamental_hz, o.averages)
        text = summary.steps_summary(steps, f"{path} channel {channel} ({units.count(len(steps.steps), 'step')})")
        return Analysed(steps.to_dict(), text, o.reports(lambda out: files.steps_reports(steps, path, channel, out)))
    scale, source = o.scale(rec)
    result = analyze_tone(rec.samples, rec.sample_rate_hz,
                          fundamental_hz=o.fundamental_hz if o.fundamental_hz is not None else rec.stimulus_frequency_hz,
                          bandwidth_hz=o.bandwidth_hz, averages=o.averages, volts_per_fs=scale, scale_source=source,
                          load_ohms=o.load_ohms, traces=o.out is not None)
    cal = rec.sidecar.get("calibration")
    note = runs.floor_warning(result, (cal or {}).get("loopback_floor"))
    if note:
        result = replace(result, warnings=result.warnings + (note,))
    d = result.to_dict()
    doc = {"kind": d.pop("kind"), "schema_version": d.pop("schema_version"), "file": str(path), "channel": channel, **d}
    doc["warnings"] = list(rec.warnings) + doc["warnings"]
    if cal:
        doc["calibration"] = cal
    return Analysed(doc, summary.tone_summary(result, str(path), channel),
                    o.reports(lambda out: files.tone_reports(result, doc, path, channel, out)))


KIND = Kind("tone", reanalyse, figures=step_figures, overlay=overlay, recognises=recognises, analyse=analyse,
            rank=90, result_kinds=("tone-steps",))
