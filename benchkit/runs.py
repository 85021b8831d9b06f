"""Measurement runs: stimulus -> capture -> on disk -> analysis.

A run plays its stimulus through a backend, writes the raw capture and its
sidecar to the run folder *before* analysing anything, then analyses the
stored capture. Analysing a stored stepped-tone capture again (offline, or
after a crash) goes through the same :func:`analyze_steps`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from pathlib import Path

from benchkit import capture, units
from benchkit.analysis.tone import DEFAULT_BAND_HZ, SCHEMA_VERSION, ToneResult, analyze_tone
from benchkit.errors import BenchkitError, NoToneError
from benchkit.record import record_steps
from benchkit.recordings import Recording, Takes, read_capture
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
    device: str | None = None
    latency_samples: int | None = None
    clock_offset_ppm: float | None = None
    calibration: dict | None = None

    def to_dict(self) -> dict:
        return {
            "kind": "tone-steps",
            "schema_version": SCHEMA_VERSION,
            "file": self.file,
            "channel": self.channel,
            "frequency_hz": self.frequency_hz,
            "device": self.device,
            "latency_samples": self.latency_samples,
            "clock_offset_ppm": self.clock_offset_ppm,
            "calibration": self.calibration,
            "warnings": list(self.warnings),
            "steps": [s.to_dict() for s in self.steps],
        }


def _first_frequency(value) -> float:
    if isinstance(value, (list, tuple)):
        value = value[0] if value else 0.0
    return float(value or 0.0)


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
    takes = Takes(rec)
    steps = []
    for seg in stim["segments"]:
        x = takes.step(seg)
        try:
            drive = float(seg["level_dbfs"])
        except (KeyError, TypeError, ValueError) as exc:
            raise BenchkitError(f"{rec.path}: the sidecar's step list is damaged") from exc
        result = analyze_tone(
            x,
            rec.sample_rate_hz,
            fundamental_hz=fundamental_hz if fundamental_hz is not None else float(seg["frequency_hz"]),
            bandwidth_hz=bandwidth_hz,
            averages=averages,
            volts_per_fs=scale,
            scale_source=source,
            load_ohms=load_ohms,
            traces=traces,
            check_dropouts=True,
        )
        if seg.get("spoiled"):
            result = replace(result, valid=False, warnings=result.warnings + ("a stream fault spoiled this step",))
        cal = rec.sidecar.get("calibration") or {}
        notes = [floor_warning(result, cal.get("loopback_floor")), dc_warning(result, cal.get("dc_coupled"))]
        if any(notes):
            result = replace(result, warnings=result.warnings + tuple(n for n in notes if n))
        steps.append(StepResult(drive, result))
    side = rec.sidecar
    return StepsResult(
        str(rec.path), rec.channel, _first_frequency(stim.get("frequency_hz")), tuple(steps),
        rec.warnings + tuple(side.get("warnings") or ()),
        device=side.get("device"), latency_samples=side.get("latency_samples"),
        clock_offset_ppm=side.get("clock_offset_ppm"),
        calibration=side.get("calibration"),
    )


#: A step this close to the interface's own floor is limited by it.
FLOOR_MARGIN_DB = 3.0


def floor_warning(result: ToneResult, floor: dict | None) -> str | None:
    """A warning when a THD+N lies within FLOOR_MARGIN_DB of the loopback
    floor the calibration measured (the interface, not the stage)."""
    if not floor or "thdn_db" not in floor or "level_dbfs" not in floor:
        return None
    # the interface's residual is about constant in dBFS: refer it to this level
    limit = floor["thdn_db"] + floor["level_dbfs"] - result.fundamental_dbfs
    if result.thdn_db < limit + FLOOR_MARGIN_DB:
        return (f"THD+N {result.thdn_db:.1f} dB is within {FLOOR_MARGIN_DB:g} dB of the interface's own floor "
                f"({limit:.1f} dB at this level): limited by the interface, not the stage")
    return None


#: How far the stage's measured gain may exceed a given --gain, dB, before
#: the pre-flight takes the measured one (a probe step's own scatter is far smaller).
GIVEN_GAIN_TOLERANCE_DB = 1.0


def plan_run(backend, profile, drive, frequency_hz, channel, gain, margin_db, rail_v, pad_rating_w, load_ohms,
             bridged, say=lambda _m: None, gain_fs: float | None = None):
    """Pre-flight for a stepped-tone run: gather the scales (calibration, or
    the virtual bench's own), take the stage's gain as given (V/V, or
    ``gain_fs`` input FS per output FS) or measure it with a low-level
    probe step, and let :func:`benchkit.preflight.check`
    refuse the run before it plays if it would overload the input or the pad."""
    from benchkit import preflight

    virtual = backend.name == "virtual"
    pad_spec = profile.pad if profile is not None else None
    stage_vpf = profile.stage_volts_per_fs if profile is not None else backend.inputs()[channel - 1].volts_per_fs
    out_vpk = backend.output_vpk_per_fs
    if virtual:
        pad, ratio = backend.pad, backend.pad_ratio()
        in_vpk, input_ohms = backend.spec.input_vpk_per_fs, backend.spec.input_ohms
    else:
        pad = pad_spec.pad() if pad_spec is not None else None
        ratio = profile.pad_ratio if profile is not None else None
        in_vpk = profile.input_vpk_per_fs if profile is not None else None
        input_ohms = (pad_spec.input_ohms if pad_spec is not None else None) or math.inf
    if not virtual and stage_vpf is None and (load_ohms is not None or pad_rating_w is not None):
        raise BenchkitError("--load and --pad-rating need volts at the stage: give --calibration (or --volts-per-fs)")
    # the rail rule needs no gain: judged before any probe plays
    loaded = pad.ratio(input_ohms) if pad is not None else ratio
    rail_notes = () if rail_v is None or not in_vpk or loaded is None else preflight.rail_rule(
        rail_v, loaded, in_vpk, margin_db, getattr(backend, "input_max_vpk", None), bridged)

    def judge(g: float):
        plan = preflight.check(drive, g, stage_vpf, in_vpk, pad, ratio, input_ohms, pad_rating_w, load_ohms, bridged,
                               margin_db)
        return replace(plan, warnings=(*rail_notes, *plan.warnings))

    if gain_fs is not None:
        return judge(gain_fs)  # measured already
    probe = min(min(drive) - 10.0, -40.0)
    if gain is None:
        gain_fs = probe_gain(backend, frequency_hz, probe, channel)
        say(f"pre-flight: a {probe:g} dBFS step measured {units.db_from_ratio(gain_fs):+.1f} dB from output to input")
        return judge(gain_fs)
    if out_vpk is None or stage_vpf is None:
        raise BenchkitError("--gain needs the output and input scales: give --calibration")
    given_fs = gain * out_vpk / stage_vpf
    plan = judge(given_fs)  # refused here, the given gain already too high, before anything plays
    # a given gain is checked against the stage all the same: one low step (a wrong --gain must not
    # turn the pre-flight off); the plan rests on the higher of the two
    try:
        measured_fs = probe_gain(backend, frequency_hz, probe, channel)
    except NoToneError:
        return plan  # nothing came back over the noise: less than the given gain, whatever the stage is
    over_db = units.db_from_ratio(measured_fs / given_fs)
    if over_db <= GIVEN_GAIN_TOLERANCE_DB:
        return plan
    measured = measured_fs * stage_vpf / out_vpk
    try:
        plan = judge(measured_fs)
    except BenchkitError as exc:
        raise BenchkitError(f"the stage's gain measured {measured:.3g} V/V at a {probe:g} dBFS step, "
                            f"{over_db:.1f} dB over the {gain:g} V/V given: {exc}") from None
    note = (f"the stage's gain measured {measured:.3g} V/V at a {probe:g} dBFS step, {over_db:.1f} dB over the "
            f"{gain:g} V/V given: the pre-flight took the measured gain")
    return replace(plan, warnings=(*plan.warnings, note))


def probe_gain(backend, frequency_hz: float, level_dbfs: float, channel: int = 1) -> float:
    """Input FS per output FS through the stage, from one low-level step
    (nothing kept on disk: it plays before the run, as a check)."""
    stim = stepped_tones(frequency_hz, [level_dbfs], backend.sample_rate_hz, step_s=0.3, settle_s=0.3,
                         out_channel=getattr(backend, "drive_output", 1), n_out=backend.n_outputs,
                         lead_s=getattr(backend, "lead_s", 0.05))
    cap = capture.run_clean(backend, stim)
    seg = stim.segments[0]
    r = analyze_tone(cap.channel(channel)[seg.settled : seg.end], cap.sample_rate_hz, fundamental_hz=frequency_hz)
    if not r.valid:
        raise BenchkitError(f"even the {level_dbfs:g} dBFS probe step clipped the input: check the pad and the wiring")
    return r.fundamental_fs / 10 ** (level_dbfs / 20)


#: DC at a stage's output worth a warning, volts (common practice: keep a
#: speaker output within a few tens of mV; often quoted, under 50 mV).
DC_WARN_V = 0.05


def dc_warning(result: ToneResult, dc_coupled: bool | None) -> str | None:
    """A warning when a DC-coupled input shows DC at the stage's output."""
    if not dc_coupled or result.volts_per_fs is None:
        return None
    dc_v = result.dc_fs * result.volts_per_fs
    if abs(dc_v) > DC_WARN_V:
        return f"{dc_v * 1000:+.0f} mV of DC at the stage's output: check the offset before a speaker goes on it"
    return None


def tone_run(
    backend: capture.Backend,
    folder: Path,
    frequency_hz: float,
    levels_dbfs: list[float],
    load_ohms: float | None = None,
    bandwidth_hz: tuple[float, float] | None = DEFAULT_BAND_HZ,
    traces: bool = False,
    **record,
) -> StepsResult:
    """Play stepped tones, store the capture (:func:`record_steps`, which
    takes ``record``: name, channel, note, calibration, step lengths ...),
    then analyse every step of the stored capture."""
    path = record_steps(backend, folder, frequency_hz, levels_dbfs, **record)
    return analyze_steps(read_capture(path, record.get("channel", 1)), bandwidth_hz, load_ohms, traces=traces)


