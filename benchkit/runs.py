"""Measurement runs: stimulus -> capture -> on disk -> analysis.

A run plays its stimulus through a backend, writes the raw capture and its
sidecar to the run folder *before* analysing anything, then analyses the
stored capture. Analysing a stored stepped-tone capture again (offline, or
after a crash) goes through the same :func:`analyze_steps`.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path

from benchkit import capture
from benchkit.analysis.tone import DEFAULT_BAND_HZ, SCHEMA_VERSION, ToneResult, analyze_tone
from benchkit.errors import BenchkitError
from benchkit.recordings import Recording, read_capture, write_capture
from benchkit.signals import stepped_tones


@dataclass(frozen=True)
class StepResult:
    """One step of a stepped-tone run: the drive and the analysis."""

    drive_dbfs: float
    result: ToneResult

    def to_dict(self) -> dict:
        return {"drive_dbfs": self.drive_dbfs, **self.result.to_dict()}


@dataclass(frozen=True)
class StepsResult:
    """Every step of a stepped-tone capture."""

    file: str
    channel: int
    frequency_hz: float
    steps: tuple[StepResult, ...]
    warnings: tuple[str, ...] = ()

    def to_dict(self) -> dict:
        return {
            "kind": "tone-steps",
            "schema_version": SCHEMA_VERSION,
            "file": self.file,
            "channel": self.channel,
            "frequency_hz": self.frequency_hz,
            "warnings": list(self.warnings),
            "steps": [s.to_dict() for s in self.steps],
        }


def is_stepped(rec: Recording) -> bool:
    stim = rec.sidecar.get("stimulus") or {}
    return isinstance(stim, dict) and stim.get("kind") == "stepped-tones" and bool(stim.get("segments"))


def analyze_steps(
    rec: Recording,
    bandwidth_hz: tuple[float, float] | None = DEFAULT_BAND_HZ,
    load_ohms: float | None = None,
    volts_per_fs: float | None = None,
    traces: bool = False,
    fundamental_hz: float | None = None,
    averages: int = 1,
) -> StepsResult:
    """Analyse each settled step of a stepped-tone capture on disk (at the
    frequency each step played, unless ``fundamental_hz`` says otherwise)."""
    stim = rec.sidecar["stimulus"]
    scale, source = (volts_per_fs, "given") if volts_per_fs is not None else rec.channel_scale()
    steps = []
    for seg in stim["segments"]:
        try:
            lo, hi = int(seg["settled"]), int(seg["end"])
            drive = float(seg["level_dbfs"])
        except (KeyError, TypeError, ValueError) as exc:
            raise BenchkitError(f"{rec.path}: the sidecar's step list is damaged") from exc
        if not 0 <= lo < hi <= rec.samples.size:
            raise BenchkitError(f"{rec.path}: a step lies outside the capture (samples {lo} to {hi})")
        result = analyze_tone(
            rec.samples[lo:hi],
            rec.sample_rate_hz,
            fundamental_hz=fundamental_hz if fundamental_hz is not None else float(seg["frequency_hz"]),
            bandwidth_hz=bandwidth_hz,
            averages=averages,
            volts_per_fs=scale,
            scale_source=source,
            load_ohms=load_ohms,
            traces=traces,
        )
        steps.append(StepResult(drive, result))
    return StepsResult(str(rec.path), rec.channel, float(stim.get("frequency_hz", 0.0)), tuple(steps), rec.warnings)


def tone_run(
    backend: capture.Backend,
    folder: Path,
    frequency_hz: float,
    levels_dbfs: list[float],
    name: str = "capture",
    channel: int = 1,
    load_ohms: float | None = None,
    bandwidth_hz: tuple[float, float] | None = DEFAULT_BAND_HZ,
    note: str = "",
    traces: bool = False,
) -> StepsResult:
    """Play stepped tones, store the capture, analyse every step.

    Returns the analysis; the capture and its sidecar are at
    ``folder / f"{name}.wav"`` and ``.json`` whatever happens in analysis.
    """
    stim = stepped_tones(frequency_hz, levels_dbfs, backend.sample_rate_hz, n_out=backend.n_outputs)
    cap = capture.run(backend, stim)
    sidecar = {
        "created": datetime.now(timezone.utc).isoformat(timespec="seconds"),
        "sample_rate_hz": cap.sample_rate_hz,
        "device": cap.device,
        "scale_source": cap.input(channel).scale_source,
        "channels": [ch.to_dict() for ch in cap.inputs],
        "stimulus": {**stim.description, "segments": [s.to_dict() for s in stim.segments]},
        "latency_samples": cap.latency_samples,
        "events": list(cap.events),
        "note": note,
    }
    describe = getattr(backend, "describe", None)
    if describe is not None:
        sidecar["bench"] = describe()
    path = write_capture(folder / f"{name}.wav", cap.samples, cap.sample_rate_hz, sidecar)
    return analyze_steps(read_capture(path, channel), bandwidth_hz, load_ohms, traces=traces)


@dataclass(frozen=True)
class StepDelta:
    """One drive level measured in two runs."""

    drive_dbfs: float
    before: ToneResult
    after: ToneResult

    @property
    def thdn_change_db(self) -> float:
        """Negative is better (less distortion and noise)."""
        return self.after.thdn_db - self.before.thdn_db


def compare_steps(before: StepsResult, after: StepsResult) -> tuple[StepDelta, ...]:
    """Pair the steps of two stepped-tone runs by drive level.

    Raises
    ------
    BenchkitError
        When the runs share no drive level, or were made at different
        frequencies or bandwidths (not comparable).
    """
    if abs(before.frequency_hz - after.frequency_hz) > 1e-6:
        raise BenchkitError(
            f"the runs are not comparable: {before.frequency_hz:g} Hz against {after.frequency_hz:g} Hz"
        )
    by_drive = {round(s.drive_dbfs, 3): s for s in after.steps}
    pairs = []
    for s in before.steps:
        other = by_drive.get(round(s.drive_dbfs, 3))
        if other is None:
            continue
        if s.result.bandwidth_hz != other.result.bandwidth_hz:
            raise BenchkitError("the runs are not comparable: they were analysed over different bands")
        pairs.append(StepDelta(s.drive_dbfs, s.result, other.result))
    if not pairs:
        raise BenchkitError("the runs share no drive level to compare")
    return tuple(pairs)
