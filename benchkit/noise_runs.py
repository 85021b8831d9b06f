"""Noise runs: the output silent, the stage's input terminated, the
stage's output recorded, stored, then analysed from disk.

No marker is played (a terminated input would not pass it back): the
recording is kept as it came, and the first SETTLE_S of it (the stream
and the stage settling) is left out of the analysis.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from benchkit.analysis.noise import NoiseResult, analyze_noise
from benchkit.analysis.tone import DEFAULT_BAND_HZ
from benchkit.errors import BenchkitError
from benchkit.recordings import Recording, read_capture
from benchkit.signals import Segment, Stimulus

#: Left out at the start of a noise capture, seconds.
SETTLE_S = 0.5


def silence(rate: float, seconds: float, n_out: int, out_channel: int = 1) -> Stimulus:
    """``seconds`` of silence on every output, after SETTLE_S more."""
    if seconds < 0.5:
        raise BenchkitError("a noise measurement needs at least 0.5 s (--length)")
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
    return analyze_noise(x, rec.sample_rate_hz, bandwidth_hz, scale, source, reference_vrms, reference, traces)


def noise_run(backend, folder: Path, seconds: float, channel: int = 1, bandwidth_hz=DEFAULT_BAND_HZ,
              reference_vrms: float | None = None, reference: str | None = None, note: str = "",
              calibration=None, calibration_file: str | None = None) -> NoiseResult:
    """Record ``seconds`` of the stage's output with nothing played, store
    the capture and its sidecar, then analyse the stored capture."""
    from benchkit.record import Recorder

    stim = silence(backend.sample_rate_hz, seconds, backend.n_outputs, getattr(backend, "drive_output", 1))
    recorder = Recorder(backend, folder, channel, note, calibration, calibration_file)
    raw = backend.play_record(stim, recorder.partial("capture"))
    # no marker in silence: the recording is kept as it came, its planned sidecar with the stream's events
    side = {**recorder.plan(stim), "events": list(raw.events)}
    path = recorder.store("capture", raw.samples[: stim.n_samples], side)
    return analyze_noise_capture(read_capture(path, channel), bandwidth_hz, None, reference_vrms, reference, traces=True)
