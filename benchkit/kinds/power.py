"""Power: stepped tones up to clipping, the power at each distortion limit,
the clipping onset, efficiency against the supply and the budget's ceiling.

A run: a stepped-level stimulus that chooses each next level as the
stream runs; and the power figures of a stepped capture on disk.

:class:`AdaptiveSteps` plays rising steps and, listening to what comes
back, asks a :class:`LevelPlanner` for the next level (climb, then
bisection round each limit). :func:`power_run` plays it through a backend,
writes the capture before analysing it, and keeps the completed steps of
an interrupted run. :func:`power_from_steps` analyses any stepped capture
that benchkit wrote, step by step with the tone core, in volts into the
stated load, then summarises it with
:func:`benchkit.analysis.power.analyze_power`; the top step's samples show
which half clips.
"""

from __future__ import annotations

import math
import threading
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

from benchkit import units
from benchkit.analysis.power import analyze_power, DEFAULT_LIMITS_PCT, JUMP_SLOPE, ONSET_DB, power_figures, PowerResult
from benchkit.budget import ClassABudget
from benchkit.capture import FAULT_ADVICE, HearsFaults, MAX_RETRIES as MAX_RETAKES
from benchkit.errors import BenchWarning, BenchkitError
from benchkit.kinds import Analysed, CAPTURE_WAV, Kind, Live, Measured, Offline, run_capture, RunParams
from benchkit.kinds.tone import analyze_steps, is_stepped, StepsResult
from benchkit.recordings import read_capture
from benchkit.units import quantity


def power_from_steps(steps: StepsResult, load_ohms: float, metric: str = "thdn", limits_pct=DEFAULT_LIMITS_PCT,
                     onset_db: float = ONSET_DB, supply_v: float | None = None, supply_a: float | None = None,
                     budget: ClassABudget | None = None, polarity_inverts: bool = False) -> PowerResult:
    """The power figures of an analysed stepped capture (``steps``, from
    :func:`benchkit.kinds.tone.analyze_steps` with the load)."""
    if len(steps.steps) < 2:
        raise BenchkitError("power at a set distortion needs at least two steps")
    if any(s.result.power_w is None for s in steps.steps):
        raise BenchkitError("power needs volts at the stage: give --calibration or --volts-per-fs, and --load")
    ordered = sorted(steps.steps, key=lambda s: s.drive_dbfs)
    warnings = list(steps.warnings)
    side = read_capture(steps.file, steps.channel).sidecar
    adaptive = bool((side.get("stimulus") or {}).get("adaptive"))
    if not adaptive and [s.drive_dbfs for s in ordered] != [s.drive_dbfs for s in steps.steps]:
        warnings.append(BenchWarning("reordered", "the steps did not rise in order: sorted by drive"))
    segs = sorted((side.get("stimulus") or {}).get("segments") or [], key=lambda s: float(s["level_dbfs"]))
    takes = {}

    def samples_of(i: int):
        if i >= len(segs):
            return None
        seg = segs[i]
        name = seg.get("file")
        if name not in takes:
            path = Path(steps.file) if name is None else Path(steps.file).parent / Path(str(name)).name
            takes[name] = read_capture(path, steps.channel).samples
        x = takes[name][int(seg["settled"]): int(seg["end"])]
        r = ordered[i].result
        x = -x if polarity_inverts else x
        return x, (-r.dc_fs if polarity_inverts else r.dc_fs)

    top = ordered[-1].result
    if max(s.result.thdn_pct for s in ordered) < max(limits_pct):
        warnings.append(BenchWarning("short-of-limit", f"the steps stop at {top.thdn_pct:.3g} % THD+N ({quantity(top.power_w, 'W', 3)}), short of the "
                        f"{max(limits_pct):g} % limit"))
    expected = budget.to_dict() if budget is not None else None
    info = {"file": steps.file, "channel": steps.channel, "device": steps.device,
            "calibration": steps.calibration}
    amps = [seg.get("supply_a") for seg in segs] if len(segs) == len(ordered) else None
    return analyze_power([(s.drive_dbfs, s.result) for s in ordered], load_ohms=load_ohms, metric=metric,
                         limits_pct=limits_pct, onset_db=onset_db, supply_v=supply_v, supply_a=supply_a,
                         samples_of=samples_of, expected=expected, info=info, warnings=tuple(warnings),
                         step_amps=amps)


#: Climbing: this step at first, a quarter of it once THD+N rises fast.
STEP_DB = 1.0
#: Bisection stops when each limit is bracketed this finely.
FINE_DB = 0.1


class LevelPlanner:
    """Chooses each next drive level of a stepped-level run from the
    results so far: ``step_db`` steps up, a quarter of that once THD+N
    rises faster than level^JUMP_SLOPE, and once the highest limit is passed, bisection until
    every limit lies between two steps at most ``fine_db`` apart.
    Levels are dBFS at the interface output; metric in percent."""

    def __init__(self, start_dbfs: float, max_dbfs: float, limits_pct=DEFAULT_LIMITS_PCT,
                 step_db: float = STEP_DB, fine_db: float = FINE_DB):
        if start_dbfs > max_dbfs:
            raise BenchkitError(f"the first step ({start_dbfs:g} dBFS) is above the highest allowed ({max_dbfs:g} dBFS)")
        self.start, self.max_dbfs = float(start_dbfs), float(max_dbfs)
        self.limits = sorted(float(x) for x in limits_pct)
        self.step_db, self.fine_db = step_db, fine_db
        self.done: list[tuple[float, float]] = []
        self.reason = ""

    def first(self) -> float:
        return self.start

    def next(self, level_dbfs: float, metric_pct: float) -> float | None:
        """Record a step; the next level, or None when the run is complete
        (``reason`` says why)."""
        self.done.append((float(level_dbfs), float(metric_pct)))
        pts = sorted(self.done)
        levels = [p[0] for p in pts]
        metric = [p[1] for p in pts]
        if max(metric) < self.limits[-1]:
            top = levels[-1]
            fast = len(pts) >= 2 and metric[-2] > 0 and (
                math.log(metric[-1] / metric[-2]) / math.log(10 ** ((levels[-1] - levels[-2]) / 20)) > JUMP_SLOPE)
            nxt = top + (self.step_db / 4 if fast else self.step_db)
            if nxt > self.max_dbfs + 1e-9:
                if top < self.max_dbfs - 1e-9:
                    return self.max_dbfs
                self.reason = f"the drive limit ({self.max_dbfs:g} dBFS) was reached before {self.limits[-1]:g} %"
                return None
            return nxt
        low = int(np.argmin(metric))
        for lim in self.limits:
            above = next((i for i in range(low, len(pts)) if metric[i] >= lim), None)
            if above is None or above == 0:
                continue
            lo, hi = levels[above - 1], levels[above]
            if hi - lo > self.fine_db + 1e-9:
                return round((lo + hi) / 2, 6)
        self.reason = f"every limit is bracketed within {self.fine_db:g} dB"
        return None


class _Growing:
    """A 1-D float buffer that grows by doubling: appending is amortised
    O(1), however long the run."""

    def __init__(self):
        self._buf = np.zeros(1 << 16)
        self.size = 0

    def append(self, x: np.ndarray) -> None:
        need = self.size + x.size
        if need > self._buf.size:
            grown = np.zeros(max(need, 2 * self._buf.size))
            grown[: self.size] = self._buf[: self.size]
            self._buf = grown
        self._buf[self.size: need] = x
        self.size = need

    def __getitem__(self, span: slice) -> np.ndarray:
        return self._buf[: self.size][span]


class AdaptiveSteps(HearsFaults):
    """A stepped-level stimulus that listens: each next level is chosen
    by a :class:`LevelPlanner` from the analysis of the step just
    recorded, while the stream runs (silence fills the wait).

    It offers what a backend plays (``render``, ``samples``, ``segments``,
    the marker) and what an interactive backend feeds (``listen`` with
    each recorded block, ``stop`` when the backend must end the run).
    Before each step it checks that the input's peak, scaled from the last
    step, keeps ``input_margin_db`` below full scale.
    """

    def __init__(self, planner: LevelPlanner, frequency_hz: float, rate: float, metric: str = "thdn",
                 in_channel: int = 1, ref_channel: int | None = None, out_channel: int = 1, n_out: int = 2,
                 lead_s: float = 0.05, step_s: float = 0.5, settle_s: float = 0.2, gap_s: float = 0.05,
                 input_margin_db: float = 3.0, max_s: float = 300.0, supply_meter=None, on_schedule=None, on_step=None):
        from benchkit import signals

        self._signals = signals
        self.planner, self.frequency_hz, self.sample_rate_hz, self.metric = planner, float(frequency_hz), float(rate), metric
        self.in_col, self.ref_col = in_channel - 1, (ref_channel or in_channel) - 1
        self.out_col, self.n_out = out_channel - 1, n_out
        self.step_s, self.settle_s, self.gap_s = step_s, settle_s, gap_s
        self.input_limit = 10 ** (-input_margin_db / 20)
        self.max_samples = int(max_s * rate)
        self.marker = signals.marker(rate)
        self.marker_start = int(lead_s * rate)
        head = np.concatenate([np.zeros(self.marker_start), self.marker, np.zeros(int(signals.AFTER_MARKER_S * rate))])
        self.head_n = head.size
        self._chunks: list[np.ndarray] = []
        self._rendered = 0
        self._queue: list[np.ndarray] = [head]
        self.segments: list = []
        self._input = _Growing()
        self._ref = _Growing()
        self.latency: int | None = None
        self.supply_meter = supply_meter
        #: supply current read half way through each step, by step index
        self.supply_a: dict[int, float] = {}
        self.finished = False
        self.stop_reason = ""
        #: steps (by index) a dropout spoiled, reported or heard: each is
        #: played again at its level, up to capture.MAX_RETRIES times
        self.spoiled: set[int] = set()
        self.spoiled_out = False  # a level spoiled in every take ended the run
        self._faults: list[tuple[int, int]] = []
        self._lock = threading.Lock()
        self.description = {"kind": "stepped-tones", "purpose": "power", "frequency_hz": self.frequency_hz,
                            "levels_dbfs": [], "step_s": step_s, "settle_s": settle_s, "out_channel": out_channel,
                            "adaptive": True}
        #: called with this stimulus after each step is scheduled (power_run
        #: keeps the planned sidecar on disk up to date with it)
        self.on_schedule = on_schedule
        #: called with each step's drive (dBFS), fundamental (FS peak) and
        #: THD+N or THD (%) once analysed, ``retake=True`` where a dropout
        #: spoiled it (a live display; on the stream's thread: keep it short)
        self.on_step = on_step or (lambda *_a, **_k: None)
        self._schedule(planner.first())

    # --- what a backend plays ----------------------------------------------
    @property
    def n_samples(self) -> int:
        return self._rendered if self.finished and not self._queue else self.max_samples

    @property
    def samples(self) -> np.ndarray:
        """What has been played so far (all of it, once the run is over)."""
        mono = np.concatenate(self._chunks) if self._chunks else np.zeros(0)
        out = np.zeros((mono.size, self.n_out))
        out[:, self.out_col] = mono
        return out

    @property
    def duration_s(self) -> float:
        return self._rendered / self.sample_rate_hz

    def render(self, start: int, frames: int) -> np.ndarray:
        """The next ``frames`` (fewer, none at all, once the run is over)."""
        with self._lock:
            parts, need = [], frames
            while need and self._queue:
                head = self._queue[0]
                take = head[:need]
                parts.append(take)
                need -= take.size
                if take.size == head.size:
                    self._queue.pop(0)
                else:
                    self._queue[0] = head[take.size:]
            if need and not self.finished:
                parts.append(np.zeros(need))  # waiting for the next decision
            mono = np.concatenate(parts) if parts else np.zeros(0)
            self._chunks.append(mono)
            self._rendered += mono.size
            if self._rendered > self.max_samples and not self.finished:
                self._finish("the run reached its longest allowed duration")
        out = np.zeros((mono.size, self.n_out))
        out[:, self.out_col] = mono
        return out

    # --- what a listening backend feeds --------------------------------------
    def listen(self, block: np.ndarray, pos: int) -> None:
        """Recorded frames ``block`` starting at raw frame ``pos``."""
        if self.finished:
            return
        self._input.append(block[:, self.in_col])
        self._ref.append(block[:, self.ref_col])
        if self.latency is None:
            self._find_latency()
            if self.latency is None:
                return
        seg = self.segments[-1]
        k = len(self.segments) - 1
        if self.supply_meter is not None and k not in self.supply_a and \
                self._input.size >= (seg.settled + seg.end) // 2 + self.latency:
            try:
                self.supply_a[k] = float(self.supply_meter.read())
            except BenchkitError as exc:
                self.stop(f"the supply meter stopped answering ({exc})")
                return
        if self._input.size < seg.end + self.latency:
            return
        self._decide(seg)

    def stop(self, reason: str) -> None:
        """End the run now, fading out whatever is playing."""
        with self._lock:
            self._finish(reason)

    # --- internals ---------------------------------------------------------------
    def _finish(self, reason: str) -> None:
        fade = int(0.02 * self.sample_rate_hz)
        rest = np.concatenate(self._queue) if self._queue else np.zeros(0)
        tail = rest[:fade] * np.linspace(1.0, 0.0, min(fade, rest.size)) if rest.size else rest
        self._queue = [tail] if tail.size else []
        self.finished = True
        self.stop_reason = self.stop_reason or reason

    def _find_latency(self) -> None:
        from benchkit.capture.align import find_marker

        if self._ref.size < self.head_n:
            return
        try:
            found = find_marker(self._ref[: self.head_n + min(self._ref.size - self.head_n, int(self.sample_rate_hz))],
                                self.marker)
        except BenchkitError:
            if self._ref.size > self.head_n + 2 * self.sample_rate_hz:
                self.stop("the alignment marker did not come back: check the wiring from the output to the input")
            return
        self.latency = found - self.marker_start

    def _decide(self, seg) -> None:
        from benchkit.analysis.tone import analyze_tone

        lat = self.latency
        lo, hi = seg.settled + lat, seg.end + lat
        x = self._input[lo:hi]
        r = analyze_tone(x, self.sample_rate_hz, fundamental_hz=self.frequency_hz, check_dropouts=True)
        if r.dropouts_s or any(a < hi and lo < b for a, b in list(self._faults)):
            # a dropout, reported by the stream or heard in the tone: the
            # figures are not the stage's, so this level is played again
            k = len(self.segments) - 1
            self.spoiled.add(k)
            self.on_step(seg.level_dbfs, r.fundamental_fs, math.nan, retake=True)
            takes = sum(1 for i in self.spoiled if self.segments[i].level_dbfs == seg.level_dbfs)
            if takes > MAX_RETAKES:
                self.spoiled_out = True
                self.stop(f"dropouts spoiled the {seg.level_dbfs:.2f} dBFS step in all {takes} takes: {FAULT_ADVICE}")
            else:
                self._schedule(seg.level_dbfs)
            return
        value = r.thdn_pct if self.metric == "thdn" else r.thd_pct
        self.on_step(seg.level_dbfs, r.fundamental_fs, value)
        nxt = self.planner.next(seg.level_dbfs, value)
        if nxt is None:
            self.stop(self.planner.reason)
            return
        # pre-flight for the next step: the input's peak, scaled from this one
        predicted = r.peak_fs * 10 ** ((nxt - seg.level_dbfs) / 20)
        if r.clipped or predicted > self.input_limit:
            self.stop(f"the next step ({nxt:.2f} dBFS) would reach {20 * math.log10(max(predicted, 1e-12)):.1f} dBFS "
                      "at the input, over its limit: use a larger pad")
            return
        self._schedule(nxt)

    def _schedule(self, level: float) -> None:
        s = self._signals
        s.check_level(level)
        rate = self.sample_rate_hz
        x = s.tone(self.frequency_hz, level, self.settle_s + self.step_s + 2 * s.FADE_S, rate)
        fade_n = int(round(s.FADE_S * rate))
        with self._lock:
            start = self._rendered + sum(q.size for q in self._queue)
            settled = start + fade_n + int(round(self.settle_s * rate))
            self.segments.append(s.Segment(start, start + x.size, settled, start + x.size - fade_n,
                                           self.frequency_hz, float(level), self.out_col + 1))
            self.description["levels_dbfs"].append(float(level))
            self._queue += [x, np.zeros(int(self.gap_s * rate))]
        if self.on_schedule is not None:
            self.on_schedule(self)


#: Rated-power conditions in the manner of 16 CFR Part 432 (432.2, 432.3):
#: precondition at 1/8 of the rated power for an hour, then the test.
PRECONDITION_S = 3600.0
PRECONDITION_FRACTION = 1.0 / 8.0


def precondition(backend, frequency_hz: float, rated_w: float, load_ohms: float, volts_per_drive_fs: float,
                 seconds: float = PRECONDITION_S, channels: int = 1, say=lambda _m: None) -> dict:
    """Play 1/8 of the rated power into the load for ``seconds`` (an hour
    unless shortened on purpose) before the rated-power test, and return
    the conditions for the report. ``volts_per_drive_fs`` is the stage's
    output peak per FS of drive (from the pre-flight)."""
    from benchkit.signals import check_level

    if rated_w <= 0 or seconds <= 0 or channels < 1:
        raise BenchkitError("preconditioning needs a positive rated power and time, and at least one channel")
    hold = getattr(backend, "hold_tone", None)
    if hold is None:
        raise BenchkitError(f"{backend.name} cannot hold a preconditioning tone")
    power_w = rated_w * PRECONDITION_FRACTION
    level = 20 * math.log10(math.sqrt(2 * power_w * load_ohms) / volts_per_drive_fs)
    check_level(level)
    say(f"preconditioning: {quantity(power_w, 'W', 3)} (1/8 of {rated_w:g} W) at {level:.1f} dBFS for {seconds:g} s")
    got = hold(frequency_hz, level, seconds)
    return {
        "manner_of": "16 CFR Part 432",
        "rated_power_w": rated_w,
        "preconditioning": {"power_w": power_w, "level_dbfs": level, "seconds": got["seconds"],
                            "frequency_hz": frequency_hz, "shortened": seconds < PRECONDITION_S},
        "channels_driven": f"1 of {channels}",
        "all_channels_driven": channels == 1,
    }


def rating_verdict(result: PowerResult, rated_w: float, conditions: dict | None) -> dict:
    """Whether the power at the first limit reaches the rated power, with
    what the test did not cover said plainly."""
    got = result.rated
    lim = result.limits[0][0]
    notes = [f"at {result.frequency_hz:g} Hz only: a rating holds over its whole stated band"]
    if conditions is None:
        notes.append("not preconditioned")
    elif conditions["preconditioning"]["shortened"]:
        notes.append(f"preconditioning shortened to {conditions['preconditioning']['seconds']:g} s")
    if conditions is not None and not conditions["all_channels_driven"]:
        notes.append(f"{conditions['channels_driven']} channels driven: not an all-channels-driven rating")
    return {**(conditions or {"rated_power_w": rated_w}), "limit_pct": lim,
            "measured_w": None if got is None else got.power_w,
            "meets": None if got is None else got.power_w >= rated_w, "notes": notes}


def plan_power(backend, profile, frequency_hz: float, channel: int, margin_db: float, rail_v, pad_rating_w, load_ohms,
               bridged: bool, budget, start_dbfs: float | None, say):
    """The pre-flight of a power run: a -40 dBFS probe step measures the
    stage's gain; the highest drive is the drive cap or where the input
    would come within ``margin_db`` of full scale, whichever is lower;
    the first step lies 40 dB below what the budget expects the stage to
    reach (or the highest drive), unless ``start_dbfs`` says. Returns the
    checked plan (:func:`benchkit.record.plan_run`), the first and the
    highest drive, dBFS, and the stage's volts peak per FS of drive (None
    without a scale)."""
    from benchkit import record

    gain_fs = record.probe_gain(backend, frequency_hz, -40.0, channel)
    top = min(backend.drive_cap_dbfs, -margin_db - units.db_from_ratio(gain_fs))
    say(f"pre-flight: a -40 dBFS step measured {units.db_from_ratio(gain_fs):+.1f} dB from output to input")
    plan = record.plan_run(backend, profile, [top], frequency_hz, channel, None, margin_db, rail_v, pad_rating_w,
                           load_ohms, bridged, say=say, gain_fs=gain_fs)
    expected = top
    scale = plan.stage_vpk[0] / 10 ** (top / 20) if plan.stage_vpk and plan.stage_vpk[0] else None
    if budget is not None and scale:
        expected = min(top, units.db_from_ratio(budget.peak_vpk / scale))
    return plan, start_dbfs if start_dbfs is not None else expected - 40.0, top, scale


def power_run(
    backend,
    folder: Path,
    frequency_hz: float,
    start_dbfs: float,
    max_dbfs: float,
    load_ohms: float,
    channel: int = 1,
    ref_channel: int | None = None,
    metric: str = "thdn",
    limits_pct=DEFAULT_LIMITS_PCT,
    onset_db: float = ONSET_DB,
    supply_v: float | None = None,
    supply_a: float | None = None,
    budget: ClassABudget | None = None,
    calibration=None,
    calibration_file: str | None = None,
    note: str = "",
    warnings: tuple[str, ...] = (),
    name: str = "capture",
    step_db: float = STEP_DB,
    fine_db: float = FINE_DB,
    step_s: float = 0.3,
    settle_s: float = 0.15,
    input_margin_db: float = 3.0,
    rated_w: float | None = None,
    conditions: dict | None = None,
    supply_meter=None,
    on_step=None,
) -> PowerResult:
    """A stepped-level run to the highest limit: one stream, each next
    level chosen from the step just recorded; the capture and its sidecar
    on disk before the analysis; an interrupted run keeps (and reports)
    its completed steps, with ``info["interrupted"]`` set. A
    ``supply_meter`` (reading amps) is read half way through every step;
    ``on_step`` hears each step analysed (:class:`AdaptiveSteps`)."""
    from benchkit import capture
    from benchkit.record import Recorder

    recorder = Recorder(backend, folder, channel, note, calibration, calibration_file)

    def journal(stim):
        # the steps so far, on disk before they play: a run killed outright
        # can be recovered from its partial recording (record.recover_capture)
        recorder.journal(stim, name)

    planner = LevelPlanner(start_dbfs, max_dbfs, limits_pct, step_db, fine_db)
    stim = AdaptiveSteps(planner, frequency_hz, backend.sample_rate_hz, metric, in_channel=channel,
                         ref_channel=ref_channel or backend.reference_input(), out_channel=getattr(backend, "drive_output", 1),
                         n_out=backend.n_outputs, lead_s=getattr(backend, "lead_s", 0.05), step_s=step_s,
                         settle_s=settle_s, input_margin_db=input_margin_db, supply_meter=supply_meter,
                         on_schedule=journal, on_step=on_step)
    partial = recorder.partial(name)
    interrupted = None
    try:
        cap = capture.run(backend, stim, partial)
    except BenchkitError as exc:
        if not getattr(exc, "partial", None) or stim.latency is None:
            raise
        interrupted = exc
        stim.stop(str(exc))
        cap = _salvage(partial, stim, backend)
    end = cap.samples.shape[0] if cap.stopped_at is None else cap.stopped_at
    done = [(i, s) for i, s in enumerate(stim.segments)
            if s.end <= end and i not in stim.spoiled and not cap.spoiled(s.settled, s.end)]
    dropped = len(stim.segments) - len(stim.spoiled) - len(done)
    side = recorder.sidecar(cap, stim)
    side["stimulus"]["segments"] = [{**s.to_dict(), **({"supply_a": stim.supply_a[i]} if i in stim.supply_a else {})}
                                    for i, s in done]
    done = [s for _i, s in done]
    side["stimulus"]["levels_dbfs"] = [s.level_dbfs for s in done]
    side["stop_reason"] = stim.stop_reason
    notes = list(warnings)
    if interrupted is not None:
        notes.append(BenchWarning("interrupted", f"interrupted ({interrupted}): the {len(done)} completed steps are reported"))
    elif dropped:
        notes.append(BenchWarning("interrupted", f"{dropped} step(s) were cut short ({stim.stop_reason}) and are left out"))
    if stim.spoiled:
        notes.append(BenchWarning("dropout", f"dropouts spoiled {units.count(len(stim.spoiled), 'take')}, left out"
                     + ("; the run stopped when one level was spoiled in every take" if stim.spoiled_out
                        else "; each level was played again and only clean takes are reported")))
    side["warnings"] = notes
    path = recorder.store(name, cap.samples, side)
    if len(done) < 2:
        raise BenchkitError(f"the run ended after {len(done)} step(s) ({stim.stop_reason or interrupted}): "
                            f"nothing to report (capture kept: {path})")
    steps = analyze_steps(read_capture(path, channel), load_ohms=load_ohms)
    result = power_from_steps(steps, load_ohms, metric, limits_pct, onset_db, supply_v, supply_a, budget)
    info = {**(result.info or {}), "stop_reason": stim.stop_reason, "interrupted": None if interrupted is None else str(interrupted),
            "device_lost": bool(getattr(interrupted, "device_lost", False)),
            "steps_played": len(stim.segments), "stimulus_s": stim.duration_s, "latency_samples": cap.latency_samples}
    if rated_w is not None:
        info["rating"] = rating_verdict(result, rated_w, conditions)
    return replace(result, info=info)


def _salvage(partial: Path, stim: AdaptiveSteps, backend):
    """The aligned capture of an interrupted run, from its partial raw
    recording and the latency the run found."""
    import soundfile as sf

    from benchkit.capture import Capture

    raw, _rate = sf.read(str(partial), always_2d=True, dtype="float64")
    aligned = raw[stim.latency:]
    return Capture(samples=aligned, sample_rate_hz=stim.sample_rate_hz, latency_samples=stim.latency,
                   inputs=backend.inputs(), device=backend.name, events=("interrupted",))


def _inverts(rec) -> bool:
    return bool((rec.sidecar.get("calibration") or {}).get("polarity_inverts"))


@dataclass(frozen=True)
class PowerParams(RunParams):
    """What a power run plays, into what, judged how, on what supply (run.json's ``params``)."""

    channel: int = 1
    ref_channel: int | None = None
    frequency_hz: float | None = None
    load_ohms: float | None = None
    metric: str = "thdn"
    limits_pct: tuple[float, ...] = DEFAULT_LIMITS_PCT
    onset_db: float = ONSET_DB
    supply_v: float | None = None
    supply_a: float | None = None
    rail_v: float | None = None
    bias_a: float | None = None
    vsat_v: float | None = None
    rated_w: float | None = None


def summary(result, title: str) -> str:
    from benchkit.report import power as report

    return report.power_summary(result, title)


def reports(result, folder: Path, channel: int = 1, **options) -> list[Path]:
    from benchkit.report import power as report

    return report.power_reports(result, folder / CAPTURE_WAV, channel, folder)


def reanalyse(folder: Path, record: dict, say) -> tuple[dict, list[Path]]:

    p = PowerParams.from_dict(record.get("params"))
    rec = run_capture(folder, int(p.channel or 1), say)
    load = float(p.load_ohms)
    budget = (ClassABudget(p.rail_v, p.bias_a, load, p.vsat_v or 1.0)
              if p.rail_v is not None and p.bias_a is not None else None)
    result = power_from_steps(analyze_steps(rec, load_ohms=load), load, p.metric, tuple(p.limits_pct or DEFAULT_LIMITS_PCT),
                              p.onset_db, p.supply_v, p.supply_a, budget, polarity_inverts=_inverts(rec))
    return result.to_dict(), reports(result, folder, rec.channel)


def overlay(comparison, docs: list[dict], entries, out: Path, title: str) -> list[Path]:
    """The distortion metric the limits apply to, against power."""
    from benchkit.report import overlays

    metric = docs[0].get("limit_metric", "thdn")
    name = "THD+N" if metric == "thdn" else "THD"
    return [overlays.distortion_png(docs, comparison.labels, out / "overlay.png", f"{title}: {name} against power",
                                    comparison.warnings, f"{metric}_pct", f"{name} (%)")]


def analyse(rec, o: Offline) -> Analysed:
    """A stepped capture benchkit wrote, as a power run (``--as power``)."""
    from benchkit.report import power as report

    if not is_stepped(rec):
        raise BenchkitError(f"{rec.path}: --as power needs a stepped capture that benchkit wrote (its sidecar lists the "
                            "steps)")
    steps = analyze_steps(rec, o.bandwidth_hz, o.load_ohms, o.volts_per_fs, o.out is not None, o.fundamental_hz,
                               o.averages)
    result = power_from_steps(steps, polarity_inverts=_inverts(rec), **o.power)
    text = report.power_summary(result, f"{rec.path} channel {rec.channel}: power into {o.load_ohms:g} ohm")
    return Analysed(result.to_dict(), text,
                    lambda out: report.power_reports(result, Path(rec.path), rec.channel, out))


# --- on the bench ----------------------------------------------------------------


def figure_options(o: dict) -> dict:
    """How power figures are read (the options of ``analyze --as power``
    and ``power``), checked: the limits, metric and onset, the supply and
    the stage's budget where --rail and --bias describe it."""
    if o["load"] is None:
        raise BenchkitError("--as power needs --load (ohms)")
    if o["supply_amps"] is not None and o["supply_volts"] is None:
        raise BenchkitError("--supply-amps needs --supply-volts")
    if o["bias"] is not None and o["rail"] is None:
        raise BenchkitError("--bias describes the stage with --rail: give both for the expected ceiling")
    # --rail alone is the pre-flight's; with --bias it describes the stage for the budget too
    budget = ClassABudget(o["rail"], o["bias"], o["load"], o["vsat"]) if o["bias"] is not None else None
    return dict(load_ohms=o["load"], metric=o["metric"], limits_pct=tuple(o["limit"]), onset_db=o["onset_db"],
                supply_v=o["supply_volts"], supply_a=o["supply_amps"], budget=budget)


def _opens(o: dict) -> dict:
    from benchkit.analysis.tone import DEFAULT_BAND_HZ

    figures = figure_options(o)
    if o["current_meter"] and o["supply_volts"] is None:
        raise BenchkitError("--current-meter needs --supply-volts (efficiency is P / (V I))")
    if o["precondition"] and o["rated_power"] is None:
        raise BenchkitError("--precondition needs --rated-power (it holds 1/8 of it)")
    if o["precondition_s"] is not None and not o["precondition"]:
        raise BenchkitError("--precondition-s goes with --precondition")
    return dict(ref=o["ref_channel"], load=o["load"], within=(("--freq", [o["freq"]], DEFAULT_BAND_HZ),),
                keep=dict(figures=figures))


def _prepare(s) -> dict:
    o, f = s.o, s.more["figures"]
    s.ref_channel = o["ref_channel"] if o["ref_channel"] is not None else s.backend.reference_input()
    s.plan, first, top, scale = plan_power(s.backend, s.profile, o["freq"], s.channel, o["margin"], o["rail"],
                                           o["pad_rating"], o["load"], o["btl"], f["budget"], o["start"], say=s.say)
    s.more.update(first=first, top=top, scale=scale)  # (the steps' drive is chosen as they go)
    for w in s.plan.warnings:
        s.say(f"warning: {w}")
    return dict(channel=s.channel, ref_channel=s.ref_channel, frequency_hz=o["freq"], load_ohms=o["load"],
                metric=f["metric"], limits_pct=list(f["limits_pct"]), onset_db=f["onset_db"], supply_v=f["supply_v"],
                supply_a=f["supply_a"], rail_v=o["rail"], bias_a=o["bias"], vsat_v=o["vsat"], rated_w=o["rated_power"])


def _measure(s, folder: Path) -> Measured:
    o, f = s.o, s.more["figures"]
    first, top, scale = s.more["first"], s.more["top"], s.more["scale"]
    conditions = None
    if o["precondition"]:
        if not scale:
            raise BenchkitError("--precondition needs volts at the stage: give --calibration or --volts-per-fs")
        conditions = precondition(s.backend, o["freq"], o["rated_power"], o["load"], scale,
                                  o["precondition_s"] or PRECONDITION_S, o["channels"], say=s.say)
    s.say(f"steps from {first:.1f} dBFS, at most {top:.1f} dBFS (the input's margin or the drive cap)")
    amps = None
    if o["current_meter"]:
        from benchkit.meters import ScpiMeter

        amps = ScpiMeter(o["current_meter"], quantity="amps")
        s.say(f"supply current: {amps.name}")
    import sys

    from benchkit.report.live import StepBoard

    board = StepBoard(f"power run: {o['freq']:g} Hz into {o['load']:g} ohm", f["limits_pct"], f["metric"],
                      s.stage_volts_per_fs, o["load"], s.say, live=sys.stderr.isatty())
    try:
        with board:
            result = power_run(s.backend, folder, o["freq"], first, top, o["load"], s.channel, s.ref_channel, f["metric"],
                               f["limits_pct"], f["onset_db"], f["supply_v"], f["supply_a"], f["budget"], s.profile,
                               s.calibration_file, step_db=o["step_db"], fine_db=o["fine_db"], warnings=s.warnings,
                               note=s.labels.get("note", ""), input_margin_db=o["margin"], rated_w=o["rated_power"],
                               conditions=conditions, supply_meter=amps, on_step=board.step)
    finally:
        if amps is not None:
            amps.close()
    info = result.info or {}
    title = (f"{o['freq']:g} Hz into {o['load']:g} ohm: {units.count(info.get('steps_played') or 0, 'step')}, "
             f"{info.get('stimulus_s', 0):.1f} s; stopped: {info.get('stop_reason')}")
    return Measured(result, title, status="interrupted" if info.get("interrupted") else "complete",
                    ended="device-lost" if info.get("device_lost") else "interrupted" if info.get("interrupted") else None)


#: the command's help
ABOUT = """Measure the power at set distortion limits: one stream of rising steps, each next level chosen from the last.

    Reports the power where THD+N (or THD) crosses each limit (1 %, 0.1 %
    and 10 % by default), interpolated on log axes between the bracketing
    steps, the clipping onset, which half clips first, and with the supply
    known the efficiency and idle dissipation; beside the expected ceiling
    when --rail and --bias describe the stage.

    Example: benchkit power --load 8 --rail 24 --bias 0.8 --supply-volts 24 --supply-amps 0.8

    Safety: this drives the stage into clipping at full power. Use a dummy
    load rated for the power (never a speaker), mind the heat sink and the
    load's temperature, and keep the pad rated for the highest output.
    Ctrl-C fades the output to silence and reports the completed steps.
    """

#: how it measures on a bench: the command's options (benchkit.options) and help
ON_BENCH = Live(
    _opens, _prepare, _measure,
    options="freq start step_db fine_db current_meter rated_power precondition precondition_s channels ref_channel json",
    groups=("live", "figures", "filing", "takes"),
    defaults=dict(load=...),
    helps=dict(load="Load resistance, ohms (a dummy load of the right rating)."),
    about=ABOUT,
    shows_itself=True,
)

KIND = Kind("power", reanalyse, PowerParams, summary, reports, figures=power_figures, overlay=overlay, chosen=lambda o: o.power is not None,
            analyse=analyse, live=ON_BENCH, rank=80)
