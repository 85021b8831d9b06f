"""The one record protocol every measurement uses: the planned sidecar on
disk before anything plays, the raw recording streamed beside it, the
aligned capture and its sidecar (with the calibration the run used) written
before any analysis, a take spoiled by a stream fault played again, and a
killed run's partial recording recovered.

A :class:`Recorder` is one run's way of recording: its backend and folder,
the input it measures, its note, its calibration profile and the fields
its kind adds to every sidecar. :func:`record_steps` is stepped tones (or
pairs of tones) through it, with retries; the sweep, power and noise
kinds call the recorder's steps around their own capture. Before a run
plays, :func:`plan_run` is its pre-flight: the stage's gain taken as given
or probed with one low step, and the run refused if it would overload the
interface's input or the pad.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

from benchkit import capture, units
from benchkit.analysis.tone import analyze_tone
from benchkit.errors import BenchWarning, BenchkitError, NoToneError
from benchkit.jsonfile import load_json
from benchkit.recordings import write_capture, write_capture_sidecar
from benchkit.signals import stepped_tones


@dataclass(frozen=True)
class Recorder:
    """How one run records: ``backend`` into ``folder``, measuring input
    ``channel``, with its ``note``, the calibration profile it used (and
    its file) and ``extra``, fields its kind adds to every sidecar."""

    backend: Any
    folder: Path
    channel: int = 1
    note: str = ""
    calibration: Any = None
    calibration_file: str | None = None
    extra: dict = field(default_factory=dict)

    def _complete(self, side: dict) -> dict:
        side.update(self.extra)
        if self.calibration is not None:
            apply_calibration(side, self.calibration, self.calibration_file, self.channel)
        return side

    def plan(self, stim) -> dict:
        """The sidecar of a capture about to be made (:func:`planned_sidecar`)."""
        return self._complete(planned_sidecar(stim, self.channel, self.backend, self.note))

    def journal(self, stim, stem: str) -> Path:
        """The planned sidecar beside ``STEM.partial.wav``, before it plays."""
        return write_planned(self.folder, stem, self.plan(stim))

    def partial(self, stem: str) -> Path:
        """Where the raw recording of ``stem`` streams while it plays."""
        return self.folder / f"{stem}.partial.wav"

    def sidecar(self, cap, stim) -> dict:
        """The sidecar of a capture made (:func:`capture_sidecar`)."""
        return self._complete(capture_sidecar(cap, stim, self.channel, self.backend, self.note))

    def store(self, stem: str, samples, side: dict) -> Path:
        """``STEM.wav`` and its sidecar on disk; the partial recording and
        its planned sidecar, now redundant, removed."""
        path = write_capture(self.folder / f"{stem}.wav", samples, self.backend.sample_rate_hz, side)
        self.partial(stem).unlink(missing_ok=True)
        (self.folder / f"{stem}.partial.json").unlink(missing_ok=True)
        return path


#: Clock offset between output and input worth a warning, ppm.
CLOCK_WARN_PPM = 20.0


def planned_sidecar(stim, channel: int, backend, note: str) -> dict:
    """The sidecar of a capture about to be made: when, what device, the
    inputs and their scales, the stimulus with its segments, the note,
    and the bench's own account. Written beside the partial recording
    before anything plays (``NAME.partial.json``), it lets
    :func:`recover_capture` align what a killed run left."""
    side = {
        "created": datetime.now(timezone.utc).isoformat(timespec="seconds"),
        "sample_rate_hz": stim.sample_rate_hz,
        "device": backend.name,
        "scale_source": backend.inputs()[channel - 1].scale_source,
        "channels": [ch.to_dict() for ch in backend.inputs()],
        "stimulus": {**stim.description, "segments": [s.to_dict() for s in stim.segments]},
        "marker_start": stim.marker_start,
        "n_samples": stim.n_samples,
        "aligned_on": backend.reference_input() or 1,
        "output_vpk_per_fs": backend.output_vpk_per_fs,
        "note": note,
    }
    describe = getattr(backend, "describe", None)
    if describe is not None:
        side["bench"] = describe()
    return side


def capture_sidecar(cap, stim, channel: int, backend, note: str) -> dict:
    """The sidecar every run writes beside its capture: the planned one
    with the latency found and the stream's events."""
    side = planned_sidecar(stim, channel, backend, note)
    side.update(device=cap.device, scale_source=cap.input(channel).scale_source,
                channels=[ch.to_dict() for ch in cap.inputs], latency_samples=cap.latency_samples,
                events=list(cap.events))
    return side


def write_planned(folder: Path, stem: str, side: dict) -> Path:
    """The planned sidecar beside the partial recording, before it plays."""
    folder.mkdir(parents=True, exist_ok=True)
    return write_capture_sidecar(folder / f"{stem}.partial.wav", side)


def recover_capture(folder: Path, stem: str = "capture") -> Path:
    """Turn what a killed run left (``STEM.partial.wav``, streamed raw,
    and its planned sidecar) into an aligned capture ``STEM.wav`` with its
    sidecar, keeping the steps recorded whole. The partial recording stays.

    Raises
    ------
    BenchkitError
        When there is nothing to recover, or the marker is not in it.
    """
    import soundfile as sf

    from benchkit.capture.align import find_marker
    from benchkit.recordings import repair_wav
    from benchkit.signals import marker

    partial, planned = folder / f"{stem}.partial.wav", folder / f"{stem}.partial.json"
    if not partial.exists() or not planned.exists():
        raise BenchkitError(f"{folder}: no partial capture to recover ({partial.name} with {planned.name})")
    try:
        side = load_json(planned)
        rate, start, n = float(side["sample_rate_hz"]), int(side["marker_start"]), int(side["n_samples"])
        segments = list(side["stimulus"]["segments"])
        on = int(side.get("aligned_on") or 1)
    except (OSError, ValueError, KeyError, TypeError) as exc:
        raise BenchkitError(f"{planned}: the planned sidecar is damaged ({exc})") from None
    frames = repair_wav(partial)
    raw, _rate = sf.read(str(partial), always_2d=True, dtype="float64")
    mk = marker(rate)
    first = int(segments[0]["start"]) if segments else n
    if frames < first + mk.size:
        raise BenchkitError(f"{partial}: the run was killed before its first step ({frames} frames): nothing to recover")
    latency = find_marker(raw[: first + mk.size, on - 1], mk) - start
    if latency < 0:
        raise BenchkitError(f"{partial}: the capture could not be aligned (marker {latency} samples early)")
    aligned = raw[latency : latency + n]
    kept = [seg for seg in segments if int(seg["end"]) <= aligned.shape[0]]
    if not kept:
        raise BenchkitError(f"{partial}: the run was cut off before its first step (or its sweep) was recorded "
                            "whole: nothing to analyse")
    side["stimulus"]["segments"] = kept
    side["latency_samples"] = int(latency)
    side["events"] = ["recovered"]
    side.setdefault("warnings", []).append(
        BenchWarning("interrupted", f"recovered from a run that was cut off: {len(kept)} of {len(segments)} steps were recorded whole"))
    return write_capture(folder / f"{stem}.wav", aligned, rate, side)


def apply_calibration(side: dict, profile, path: str | None, channel: int) -> None:
    """Record the profile a run used, and take its scale for the stage."""
    side["scale_source"] = "profile"
    for ch in side["channels"]:
        if ch["number"] == channel:
            ch["volts_per_fs"] = profile.stage_volts_per_fs
    side["calibration"] = {
        "file": path,
        "hash": profile.digest(),
        "interface": profile.interface,
        "created": profile.created,
        "loopback_floor": profile.loopback_floor,
        "uncertainty_db": profile.uncertainty.get("total_db"),
        "dc_coupled": profile.dc_coupled,
        "output_vpk_per_fs": profile.output_vpk_per_fs,
        "input_vpk_per_fs": profile.input_vpk_per_fs,
        "loopback_response": profile.loopback_response,
        "ac_corner_hz": profile.ac_corner_hz,
        "chain": profile.chain().to_dict(),
    }
    if profile.interface_floor:  # (a profile without one leaves the block as it was before it existed)
        side["calibration"]["interface_floor"] = profile.interface_floor


def clock_offset_ppm(cap, stim) -> float | None:
    """How fast the input clock runs against the output's, ppm, from the
    reference input: the first step's tone as recorded there against the
    frequency played."""
    ref = next((ch.number for ch in cap.inputs if ch.role.startswith("reference")), None)
    if ref is None or not stim.segments:
        return None
    seg = stim.segments[0]
    try:
        got = analyze_tone(cap.channel(ref)[seg.settled : seg.end], cap.sample_rate_hz, fundamental_hz=seg.frequency_hz)
    except BenchkitError:
        return None
    # an input clock running fast sees the tone low
    return (seg.frequency_hz / got.fundamental_hz - 1.0) * 1e6


#: A step whose every take a stream fault spoiled.
SPOILED = BenchWarning("dropout", "a stream fault spoiled this step")


def step_fault(cap: capture.Capture, seg, channel: int, tone: bool = True) -> str | None:
    """Why a step of a capture cannot be measured as played, or None:
    "reported" when the stream reported a fault (overflow, underflow)
    inside its analysed span, "heard" when its tone (``tone``: one sine)
    on input ``channel`` shows a gap or click the stream did not report
    (an audio server's late client drops blocks without a word)."""
    if cap.spoiled(seg.settled, seg.end):
        return "reported"
    if not tone or cap.stopped_at is not None and seg.end > cap.stopped_at:
        return None
    try:
        heard = analyze_tone(cap.channel(channel)[seg.settled : seg.end], cap.sample_rate_hz,
                             fundamental_hz=seg.frequency_hz, bandwidth_hz=None, check_dropouts=True).dropouts_s
    except BenchkitError:
        return None  # nothing to judge by (no tone): the analysis will say so
    return "heard" if heard else None


def record_steps(
    backend: capture.Backend,
    folder: Path,
    frequency_hz: float,
    levels_dbfs: list[float],
    name: str = "capture",
    channel: int = 1,
    note: str = "",
    calibration=None,
    calibration_file: str | None = None,
    warnings: tuple[str, ...] = (),
    step_s: float = 1.0,
    settle_s: float = 0.3,
    twin=None,
    out_channels: list[int] | None = None,
    extra: dict | None = None,
    listen: list[int] | None = None,
) -> Path:
    """Play stepped tones (or, with ``twin``, a
    :class:`benchkit.signals.TwinTone` pair at each level) and store the
    capture with its sidecar; returns its path (``step_s`` is analysed
    after ``settle_s`` of settling, each step). ``frequency_hz`` is one
    frequency or one a step; ``out_channels`` the output of each step
    (default: the backend's drive output), ``listen`` the input its tone
    comes back on (default: ``channel``); ``extra`` joins the sidecar
    (the planned one too, so a recovered capture keeps it).

    The raw recording streams to ``NAME.partial.wav`` while it plays (kept
    if the run breaks off); the aligned capture and its sidecar go to
    ``NAME.wav`` and ``NAME.json`` before any analysis. A step that a
    stream fault (overflow, underflow) touched, or whose tone shows a gap
    (:func:`step_fault`), is played again, up to ``capture.MAX_RETRIES``
    times, into ``NAME.retryK.wav``; the sidecar points each step at the
    capture that holds its good take.
    """
    lead = getattr(backend, "lead_s", 0.05)
    n = len(levels_dbfs)
    freqs = list(frequency_hz) if isinstance(frequency_hz, (list, tuple)) else [frequency_hz] * n
    outs = list(out_channels) if out_channels is not None else [getattr(backend, "drive_output", 1)] * n
    ears = list(listen) if listen is not None else [channel] * n

    recorder = Recorder(backend, folder, channel, note, calibration, calibration_file, extra or {})

    def each(value, which):
        """A value given one a step, for the steps ``which`` (one for all stays as it is)."""
        return [value[i] for i in which] if isinstance(value, (list, tuple)) else value

    def play(which, stem):
        stim = stepped_tones([freqs[i] for i in which], [levels_dbfs[i] for i in which], backend.sample_rate_hz,
                             step_s=each(step_s, which), settle_s=each(settle_s, which), out_channel=[outs[i] for i in which],
                             n_out=backend.n_outputs, lead_s=lead, twin=twin, marker_out=outs[0])
        recorder.journal(stim, stem)
        cap = capture.run(backend, stim, recorder.partial(stem))
        side = recorder.sidecar(cap, stim)
        # (a pair of tones is no single tone to time the clocks by)
        side["clock_offset_ppm"] = clock_offset_ppm(cap, stim) if twin is None else None
        return stim, cap, side, recorder.store(stem, cap.samples, side)

    stim, cap, side, path = play(range(n), name)
    segments = side["stimulus"]["segments"]
    stop_note = None
    if cap.stopped_at is not None:
        # the steps finished before the input clipped are measured; the one
        # it clipped in and those after it are not
        kept = [i for i, seg in enumerate(stim.segments) if seg.end <= cap.stopped_at]
        at = cap.stopped_at / cap.sample_rate_hz
        clipping = next((seg for seg in stim.segments if seg.end > cap.stopped_at), None)
        where = f" during the {clipping.level_dbfs:g} dBFS step" if clipping is not None else ""
        if not kept:
            raise BenchkitError(f"the input clipped at {at:.2f} s{where}, before any step was measured: "
                                "lower the drive or use a larger pad")
        segments[:] = [segments[i] for i in kept]
        stop_note = BenchWarning("input-clipped", f"the input clipped at {at:.2f} s{where}: the run stopped stepping up; "
                                 f"{len(stim.segments) - len(kept)} step(s) were not measured")
    tones = twin is None
    verdicts = {i: step_fault(cap, seg, ears[i], tones) for i, seg in enumerate(stim.segments[: len(segments)])}
    pending = [i for i, v in verdicts.items() if v]
    for attempt in range(1, capture.MAX_RETRIES + 1):
        if not pending:
            break
        r_stim, r_cap, _side, r_path = play(pending, f"{name}.retry{attempt}")
        still = []
        for i, seg in zip(pending, r_stim.segments):
            verdicts[i] = step_fault(r_cap, seg, ears[i], tones)
            if verdicts[i]:
                still.append(i)
            else:
                segments[i] = {**seg.to_dict(), "file": r_path.name}
        pending = still
    warnings = list(warnings) + ([stop_note] if stop_note else [])
    side["stopped_early"] = stop_note
    reported = [i for i in pending if verdicts[i] == "reported"]
    heard = [i for i in pending if verdicts[i] == "heard"]
    if reported:
        warnings.append(BenchWarning("dropout", f"steps {', '.join(str(i + 1) for i in reported)} were spoiled by stream faults in every take"))
        for i in reported:
            segments[i] = {**segments[i], "spoiled": True}
    if heard:
        # the same gap in every take is more likely the stage's than the stream's
        warnings.append(BenchWarning("dropout", f"steps {', '.join(str(i + 1) for i in heard)} showed gaps or clicks in every take: "
                        "is the stage bursting into oscillation?"))
    if side["clock_offset_ppm"] is not None and abs(side["clock_offset_ppm"]) > CLOCK_WARN_PPM:
        warnings.append(BenchWarning("clock-offset", f"the input clock runs {side['clock_offset_ppm']:+.1f} ppm against the output: separate clocks?"))
    side["warnings"] = warnings
    write_capture_sidecar(path, side)
    return path


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

    virtual = backend.capabilities.simulated  # (it knows its pad and input)
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
    note = BenchWarning("gain-over-given", f"the stage's gain measured {measured:.3g} V/V at a {probe:g} dBFS step, "
                        f"{over_db:.1f} dB over the {gain:g} V/V given: the pre-flight took the measured gain")
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
