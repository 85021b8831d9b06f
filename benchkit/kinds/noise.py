"""Noise: the stage's output with its input terminated, unweighted and
A-weighted, the hum lines, and the SNR against a reference output.

A run: the output silent, the stage's input terminated, the stage's
output recorded, stored, then analysed from disk.

No marker is played (a terminated input would not pass it back): the
recording is kept as it came, and the first SETTLE_S of it (the stream
and the stage settling) is left out of the analysis.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

from benchkit.analysis.noise import analyze_noise, noise_figures, NoiseResult
from benchkit.analysis.tone import DEFAULT_BAND_HZ
from benchkit.errors import BenchkitError
from benchkit.kinds import Analysed, CAPTURE_WAV, Kind, Live, Measured, Offline, run_capture, RunParams, series_from_csv
from benchkit.recordings import read_capture, Recording
from benchkit.signals import Segment, Stimulus


#: Left out at the start of a noise capture, seconds.
SETTLE_S = 0.5


def silence(rate: float, seconds: float, n_out: int, out_channel: int = 1) -> Stimulus:
    """``seconds`` of silence on every output, after SETTLE_S more."""
    if seconds < 0.5:
        raise BenchkitError("a noise measurement needs at least 0.5 s (--duration)")
    n = int(round((seconds + SETTLE_S) * rate))
    seg = Segment(0, n, int(SETTLE_S * rate), n, 0.0, -400.0, out_channel)  # -400 dB: nothing (the floor of levels)
    return Stimulus(np.zeros((n, n_out)), rate, (seg,), np.zeros(0), 0,
                    {"kind": "silence", "purpose": "noise", "seconds": seconds, "settle_s": SETTLE_S})


def is_noise(rec: Recording) -> bool:
    return (rec.sidecar.get("stimulus") or {}).get("purpose") == "noise"


def analyze_noise_capture(rec: Recording, bandwidth_hz=DEFAULT_BAND_HZ, volts_per_fs: float | None = None,
                          reference_vrms: float | None = None, reference: str | None = None,
                          traces: bool = False) -> NoiseResult:
    """The noise of a capture on disk: past its settling time when the
    sidecar gives one (a benchkit noise capture), else all of it."""
    settle = float((rec.sidecar.get("stimulus") or {}).get("settle_s") or 0.0)
    scale, source = (volts_per_fs, "given") if volts_per_fs is not None else rec.channel_scale()
    x = rec.samples[int(settle * rec.sample_rate_hz):]
    result = analyze_noise(x, rec.sample_rate_hz, bandwidth_hz=bandwidth_hz, volts_per_fs=scale, scale_source=source,
                           reference_vrms=reference_vrms, reference=reference, traces=traces, chain=rec.chain())
    return replace(result, calibration=rec.sidecar.get("calibration"))


def noise_run(backend, folder: Path, seconds: float, channel: int = 1, bandwidth_hz=DEFAULT_BAND_HZ,
              reference_vrms: float | None = None, reference: str | None = None, note: str = "",
              calibration=None, calibration_file: str | None = None) -> NoiseResult:
    """Record ``seconds`` of the stage's output with nothing played, store
    the capture and its sidecar, then analyse the stored capture."""
    path = record_silence(backend, folder, seconds, channel, note, calibration, calibration_file)
    return analyze_noise_capture(read_capture(path, channel), bandwidth_hz, None, reference_vrms, reference, traces=True)


def record_silence(backend, folder: Path, seconds: float, channel: int = 1, note: str = "", calibration=None,
                   calibration_file: str | None = None, stem: str = "capture") -> Path:
    """``seconds`` of the input with silence played, stored (``STEM.wav``
    and its sidecar) as it came: no marker in silence to align by."""
    from benchkit.record import Recorder

    stim = silence(backend.sample_rate_hz, seconds, backend.n_outputs, getattr(backend, "drive_output", 1))
    recorder = Recorder(backend, folder, channel, note, calibration, calibration_file)
    raw = backend.play_record(stim, recorder.partial(stem))
    side = {**recorder.plan(stim), "events": list(raw.events)}  # the planned sidecar with the stream's events
    return recorder.store(stem, raw.samples[: stim.n_samples], side)


@dataclass(frozen=True)
class NoiseParams(RunParams):
    """What a noise run records and how it is analysed (run.json's ``params``)."""

    channel: int = 1
    bandwidth_hz: tuple[float, float] | None = (20.0, 20000.0)
    reference_vrms: float | None = None
    reference: str | None = None
    length_s: float | None = None


def summary(result: NoiseResult, title: str) -> str:
    from benchkit.report import noise as report

    return report.noise_summary(result.to_dict(), title)


def reports(result: NoiseResult, folder: Path, channel: int = 1, **options) -> list[Path]:
    from benchkit.report import noise as report

    return report.noise_reports(result, folder / CAPTURE_WAV, channel, folder)


def reanalyse(folder: Path, record: dict, say) -> tuple[dict, list[Path]]:
    p = NoiseParams.from_dict(record.get("params"))
    rec = run_capture(folder, int(p.channel or 1), say)
    result = analyze_noise_capture(rec, p.band(), None, p.reference_vrms, p.reference, traces=True)
    return result.to_dict(), reports(result, folder, rec.channel)


def overlay(comparison, docs: list[dict], entries, out: Path, title: str) -> list[Path]:
    """The noise density each run left in its CSV, in dB against frequency:
    in volts when every run has a scale (as each run's own plot), else in FS."""
    from benchkit.report import overlays
    from benchkit.report.noise import density_db

    scales = [d.get("volts_per_fs") for d in docs]
    scaled = all(isinstance(s, (int, float)) and s > 0 for s in scales)
    series, unit = [], ""
    for e, scale in zip(entries, scales):
        f, psd = series_from_csv(e.folder, "capture.noise.csv", "freq_hz", "psd_fs2_per_hz")
        db, unit = density_db(psd, scale if scaled else None)
        series.append((f, db))
    return [overlays.lines_png(series, comparison.labels, out / "overlay.png", f"{title}: noise density",
                               comparison.warnings, "frequency (Hz)", unit, True)]


def recognises(rec) -> bool:

    return is_noise(rec)


def analyse(rec, o: Offline) -> Analysed:
    """A noise capture benchkit wrote, or (``--as noise``) one made elsewhere;
    the SNR against 1 W into ``--load``."""
    from benchkit import units
    from benchkit.report import noise as report

    load = o.load_ohms
    ref = (units.vrms_from_watts(1.0, load), f"1 W into {load:g} ohm") if load is not None else (None, None)
    result = analyze_noise_capture(rec, o.bandwidth_hz, o.volts_per_fs, *ref, traces=o.out is not None)
    doc = {**result.to_dict(), "file": str(rec.path), "channel": rec.channel}
    return Analysed(doc, report.noise_summary(doc, f"{rec.path} channel {rec.channel}: noise"),
                    lambda out: report.noise_reports(result, Path(rec.path), rec.channel, out))


# --- on the bench ----------------------------------------------------------------

#: the longest noise record, seconds (it is held in memory to be analysed)
LONGEST_S = 600.0


def _opens(o: dict) -> dict:
    from benchkit.bench import at_most, given_band

    at_most(o, "duration", LONGEST_S, "a noise record")
    return dict(load=o["load"], within=(("--bandwidth", given_band(o["bandwidth"])),))


def _reference(o: dict) -> tuple[float | None, str | None]:
    """The output the SNR is referred to, Vrms, and how it was given."""
    if o["ref_vrms"] is not None:
        return o["ref_vrms"], f"{o['ref_vrms']:g} Vrms"
    if o["load"] is not None:
        from benchkit.units import vrms_from_watts

        return vrms_from_watts(o["ref_power"], o["load"]), f"{o['ref_power']:g} W into {o['load']:g} ohm"
    return None, None


def _prepare(s) -> dict:
    if not s.backend.capabilities.simulated and not s.o["yes"]:
        s.ask("short or terminate the stage's input, then press Enter")
    vrms, reference = _reference(s.o)
    return dict(channel=s.channel, bandwidth_hz=s.band or DEFAULT_BAND_HZ,
                reference_vrms=vrms, reference=reference, length_s=s.o["duration"])


def _measure(s, folder: Path) -> Measured:
    o = s.o
    result = noise_run(s.backend, folder, o["duration"], s.channel, s.band or DEFAULT_BAND_HZ,
                       *_reference(o), s.labels.get("note", ""), s.profile, s.calibration_file)
    return Measured(result, f"noise of {s.backend.name} input {s.channel}, {o['duration']:g} s")


#: the command's help
ABOUT = """Measure the stage's output noise with its input terminated: unweighted and A-weighted, SNR, hum lines.

    Nothing is played. Short the stage's input, or terminate it in the
    source impedance it is specified with, before the run; the noise is
    integrated over the band as it stands and A-weighted (IEC 61672-1),
    in uV and dBV with a scale, and the SNR referred to --ref-power into
    --load (or --ref-vrms). Hum at 50 or 60 Hz and its harmonics is
    listed with its levels.

    Example: benchkit noise --duration 10 --load 8 --ref-power 1 --tag bias=1.2A

    Safety: terminate the input with the stage switched off; mind the hot
    parts of a class-A stage while you do.
    """

#: how it measures on a bench: the command's options (benchkit.options) and help
ON_BENCH = Live(
    _opens, _prepare, _measure,
    options="load ref_power ref_vrms bandwidth yes json",
    defaults=dict(duration=5.0),
    helps=dict(duration="Seconds of noise to record (after half a second of settling), at most 600.", load="Load resistance, ohms: the SNR is referred to --ref-power into it."),
    about=ABOUT,
)

KIND = Kind("noise", reanalyse, NoiseParams, summary, reports, figures=noise_figures, overlay=overlay, recognises=recognises,
            chosen=lambda o: o.noise, analyse=analyse, live=ON_BENCH, rank=40)
