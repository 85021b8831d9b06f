"""Noise: the stage's output with its input terminated, unweighted and
A-weighted, the hum lines, and the SNR against a reference output."""

from __future__ import annotations

from pathlib import Path

from benchkit.analysis.noise import noise_figures
from benchkit.kinds import Analysed, Kind, Offline, run_band, run_capture, series_from_csv


def reanalyse(folder: Path, record: dict, say) -> tuple[dict, list[Path]]:
    from benchkit.noise_runs import analyze_noise_capture
    from benchkit.report import files

    p = record.get("params") or {}
    rec = run_capture(folder, int(p.get("channel") or 1), say)
    result = analyze_noise_capture(rec, run_band(p), None, p.get("reference_vrms"), p.get("reference"), traces=True)
    return result.to_dict(), files.noise_reports(result, rec.path, rec.channel, folder)


def overlay(comparison, docs: list[dict], entries, out: Path, title: str) -> list[Path]:
    """The noise density each run left in its CSV, in dB, against frequency."""
    import numpy as np

    from benchkit.report import overlays

    series = []
    for e in entries:
        f, psd = series_from_csv(e.folder, "capture.noise.csv", "freq_hz", "psd_fs2_per_hz")
        series.append((f, 10 * np.log10(np.maximum(psd, 1e-300))))
    return [overlays.lines_png(series, comparison.labels, out / "overlay.png", f"{title}: noise density",
                               comparison.warnings, "frequency (Hz)", "dB re 1 FS^2/Hz", True)]


def recognises(rec) -> bool:
    from benchkit.noise_runs import is_noise

    return is_noise(rec)


def analyse(rec, o: Offline) -> Analysed:
    """A noise capture benchkit wrote, or (``--noise``) one made elsewhere;
    the SNR against 1 W into ``--load``."""
    from benchkit import units
    from benchkit.noise_runs import analyze_noise_capture
    from benchkit.report import files, summary

    load = o.load_ohms
    ref = (units.vrms_from_watts(1.0, load), f"1 W into {load:g} ohm") if load is not None else (None, None)
    result = analyze_noise_capture(rec, o.bandwidth_hz, o.volts_per_fs, *ref, traces=o.out is not None)
    doc = {**result.to_dict(), "file": str(rec.path), "channel": rec.channel}
    return Analysed(doc, summary.noise_summary(doc, f"{rec.path} channel {rec.channel}: noise"),
                    o.reports(lambda out: files.noise_reports(result, Path(rec.path), rec.channel, out)))


KIND = Kind("noise", reanalyse, figures=noise_figures, overlay=overlay, recognises=recognises,
            chosen=lambda o: o.noise, analyse=analyse, rank=40)
