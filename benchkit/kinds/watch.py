"""Watch: one steady tone analysed again and again while the stage is
adjusted, its readings logged.

:class:`SteadyTone` is a stimulus that listens (the protocol of
:mod:`benchkit.capture`): it plays a tone that ramps in from silence and
holds until stopped, and every ``update_s`` it analyses the latest
``block_s`` of the measuring input with :func:`analyze_tone`, handing a
:class:`Reading` to its listener. The backend keeps only the last few
seconds of the recording in memory (``keep_s``), so a watch can run for
hours; the virtual bench paces itself to the clock (``realtime``).

:class:`Watch` runs the stream in a worker thread and hands the readings
to the caller's thread, which shows them; :class:`Tracker` keeps each
figure's minimum, maximum and recent trend.
"""

from __future__ import annotations

import csv
import math
import queue
import threading
import time
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np

from benchkit import units
from benchkit.analysis.documents import Conditions, document
from benchkit.analysis.spectrum import WINDOW_NAME
from benchkit.analysis.readings import FIGURES, Reading, SpectrumAverage, watch_figures
from benchkit.analysis.tone import analyze_tone, DEFAULT_BAND_HZ
from benchkit.analysis.uncertainty import Budget, Collector
from benchkit.capture import FAULT_ADVICE, HearsFaults
from benchkit.errors import BenchWarning, BenchkitError
from benchkit.kinds import Kind, RunParams, series_from_csv


#: A reading this often (10 a second).
UPDATE_S = 0.1
#: Each reading analyses the latest block: at least this long, and at
#: least PERIODS periods of the tone (the harmonics stay resolved); blocks
#: longer than UPDATE_S overlap (at 20 Hz a reading analyses the last
#: second, moved on by a tenth each time).
MIN_BLOCK_S, PERIODS = 0.25, 20
#: The tone ramps in from silence over this long (no step at switch-on).
RAMP_S = 0.5
#: The first reading waits this long more than the ramp and a block: the
#: round trip of the stream (the ramp comes back late by it; a USB
#: interface's is some tens of ms, common practice).
ROUND_TRIP_S = 0.1
#: A fundamental this far under the strongest seen since the ramp: the tone is lost.
LOST_DB = 20.0
def block_seconds(frequency_hz: float) -> float:
    """The analysis block for a tone: MIN_BLOCK_S, or PERIODS periods if longer."""
    return max(MIN_BLOCK_S, PERIODS / frequency_hz)


class SteadyTone(HearsFaults):
    """A tone that ramps in and holds until stopped, analysed as it plays.

    ``on_reading(reading)`` is called from the backend's listening thread.
    ``dc()`` (optional) gives the latest DC reading of a meter, volts;
    ``dc_scale`` (a DC-coupled measuring input's volts per FS) reads the
    DC from the analysed block itself. ``spectrum`` (a
    :class:`SpectrumAverage`, optional) takes each block's spectrum for a
    live spectrum view. ``started_at`` is the clock (``time.monotonic``)
    when the first frames were asked for: a reading at ``t_s`` shows audio
    recorded by ``started_at + t_s``.
    """

    realtime = True
    keep_s = 5.0

    def __init__(self, frequency_hz: float, level_dbfs: float, rate: float, on_reading, in_channel: int = 1,
                 out_channel: int = 1, n_out: int = 2, volts_per_fs: float | None = None,
                 load_ohms: float | None = None, bandwidth_hz=DEFAULT_BAND_HZ, max_s: float = 24 * 3600.0,
                 update_s: float = UPDATE_S, dc=None, dc_scale: float | None = None,
                 spectrum: SpectrumAverage | None = None):
        from benchkit import signals

        signals.check_level(level_dbfs)
        self.frequency_hz, self.level_dbfs, self.sample_rate_hz = float(frequency_hz), float(level_dbfs), float(rate)
        self.amplitude = 10 ** (level_dbfs / 20)
        self.on_reading, self.dc, self.dc_scale, self.spectrum = on_reading, dc, dc_scale, spectrum
        self.started_at: float | None = None
        self.in_col, self.out_col, self.n_out = in_channel - 1, out_channel - 1, n_out
        self.volts_per_fs, self.load_ohms, self.bandwidth_hz = volts_per_fs, load_ohms, bandwidth_hz
        self.block_n = int(round(block_seconds(frequency_hz) * rate))
        self.update_n = int(round(update_s * rate))
        self.ramp_n = int(RAMP_S * rate)
        self.first_n = int((RAMP_S + ROUND_TRIP_S) * rate) + self.block_n  # the ramp come back, then a block
        self.max_samples = int(max_s * rate)
        self._buf = np.zeros(self.block_n)
        self._filled = 0
        self._since = 0
        self._heard = 0
        self._rendered = 0
        self._fade_from: int | None = None
        self._fade_n = int(0.02 * rate)
        self._faults: list[tuple[int, int]] = []
        self._loudest = -math.inf
        self.finished = False
        self.stop_reason = ""
        self._lock = threading.Lock()
        self.description = {"kind": "steady-tone", "frequency_hz": self.frequency_hz, "level_dbfs": self.level_dbfs,
                            "ramp_s": RAMP_S, "block_s": self.block_n / rate, "update_s": self.update_n / rate,
                            "out_channel": out_channel}

    def conditions(self) -> dict:
        """What every reading was measured under."""
        return Conditions(self.sample_rate_hz, self.bandwidth_hz, WINDOW_NAME, "the tone analysis of the latest block",
                          1, None, self.volts_per_fs, self.load_ohms, more=dict(self.description)).to_dict()

    # --- what a backend plays ----------------------------------------------
    @property
    def n_samples(self) -> int:
        return self._rendered if self.finished else self.max_samples

    @property
    def samples(self) -> np.ndarray:
        return np.zeros((0, self.n_out))  # nothing is kept: it may play for hours

    def render(self, start: int, frames: int) -> np.ndarray:
        """The next ``frames``: the ramp, the tone; after a stop, a 20 ms fade and then nothing."""
        if self.started_at is None:
            self.started_at = time.monotonic()
        with self._lock:
            if self._fade_from is not None:
                left = self._fade_from + self._fade_n - start
                frames = max(0, min(frames, left))
                if frames == 0:
                    self.finished = True
            n = np.arange(start, start + frames)
            x = self.amplitude * np.sin(2 * np.pi * self.frequency_hz * n / self.sample_rate_hz)
            x *= np.clip(n / self.ramp_n, 0.0, 1.0) ** 2  # the ramp in
            if self._fade_from is not None:
                x *= np.clip(1.0 - (n - self._fade_from) / self._fade_n, 0.0, 1.0)
            self._rendered = start + frames
            if self._rendered >= self.max_samples and self._fade_from is None:
                self._stop("the longest allowed watch ended", start + frames)
        out = np.zeros((frames, self.n_out))
        out[:, self.out_col] = x
        return out

    def stop(self, reason: str) -> None:
        """Fade out now and end (thread-safe)."""
        with self._lock:
            self._stop(reason, self._rendered)

    def _stop(self, reason: str, at: int) -> None:
        if self._fade_from is None:
            self._fade_from = at
            self.stop_reason = reason

    # --- what a listening backend feeds --------------------------------------
    def listen(self, block: np.ndarray, pos: int) -> None:
        """Recorded frames ``block`` from raw frame ``pos``: a reading once
        a block is full, every ``update_n`` frames, after the ramp."""
        x = block[:, self.in_col]
        self._heard = pos + x.size
        if x.size >= self.block_n:
            self._buf = x[-self.block_n:].copy()
        else:
            self._buf = np.concatenate([self._buf[x.size:], x])
        self._filled = min(self.block_n, self._filled + x.size)
        self._since += x.size
        ready = self._filled == self.block_n and self._heard > self.first_n
        if ready and self._since >= self.update_n and self._fade_from is None:
            self._since = self._since - self.update_n if self._since < 2 * self.update_n else 0
            start = self._heard - self.block_n
            disturbed = any(a < self._heard and b > start for a, b in self._faults)
            self.on_reading(self.analyse(self._buf, self._heard / self.sample_rate_hz, disturbed))

    @property
    def heard_s(self) -> float:
        """Seconds of the measuring input heard so far."""
        return self._heard / self.sample_rate_hz

    def analyse(self, x: np.ndarray, t_s: float, disturbed: bool = False) -> Reading:
        dc = self.dc() if self.dc is not None else None
        clipped = bool(np.max(np.abs(x)) >= 0.999)
        try:
            r = analyze_tone(x, self.sample_rate_hz, fundamental_hz=self.frequency_hz, bandwidth_hz=self.bandwidth_hz,
                             volts_per_fs=self.volts_per_fs, load_ohms=self.load_ohms, traces=self.spectrum is not None)
        except BenchkitError:
            return Reading(t_s, None, None, None, None, None, None, None, None, dc, clipped, True, disturbed)
        if self.spectrum is not None and not disturbed:
            self.spectrum.add(r.traces.freq_hz, r.traces.spectrum_dbfs)
        if dc is None and self.dc_scale is not None:
            dc = r.dc_fs * self.dc_scale
        self._loudest = max(self._loudest, r.fundamental_dbfs)
        lost = r.fundamental_dbfs < self._loudest - LOST_DB or abs(r.fundamental_hz / self.frequency_hz - 1) > 0.01
        h = {k.order: k.level_dbc for k in r.harmonics}
        return Reading(t_s, r.fundamental_dbfs, r.fundamental_vrms, r.power_w, r.thdn_db, r.thd_db, h.get(2), h.get(3),
                       r.noise_dbfs, dc, clipped or r.clipped, lost, disturbed, r.residual_dbfs,
                       None if r.fundamental_vrms is None else r.fundamental_vrms * units.ratio_from_db(r.thdn_db))


class Watch:
    """A watch in progress: the stream in a worker thread, the readings in a
    queue for the caller's thread. ``readings()`` yields them until the
    stream ends; :meth:`stop` fades the tone out and ends it."""

    def __init__(self, backend, tone: SteadyTone, partial: Path | None = None):
        self.backend, self.tone, self.partial = backend, tone, partial
        self._q: queue.Queue = queue.Queue()
        self.error: BaseException | None = None
        self.raw = None
        tone.on_reading = self._q.put
        self._thread = threading.Thread(target=self._run, name="benchkit-watch", daemon=True)

    def _run(self) -> None:
        try:
            self.raw = self.backend.play_record(self.tone, self.partial)
        except BaseException as exc:  # noqa: BLE001 - handed to the caller's thread
            self.error = exc
        finally:
            self._q.put(None)

    def start(self) -> "Watch":
        self._thread.start()
        return self

    def readings(self, poll_s: float = 0.05):
        """Readings as they come; None now and then (every ``poll_s``) so the
        caller can look at its keys and clock; ends with the stream."""
        while True:
            try:
                item = self._q.get(timeout=poll_s)
            except queue.Empty:
                yield None
                continue
            if item is None:
                return
            yield item

    def stop(self, reason: str) -> None:
        self.tone.stop(reason)
        abort = getattr(self.backend, "request_abort", None)
        if reason.startswith("interrupted") and abort is not None:
            abort()  # the emergency fade as well

    def join(self, timeout: float = 10.0) -> None:
        if self._thread.ident is not None:  # (a watch that never started has nothing to wait for)
            self._thread.join(timeout)


# --- the readings on disk -------------------------------------------------------

COLUMNS = ("t_s",) + tuple(key for key, _l, _u in FIGURES) + ("clipped", "tone_lost", "disturbed")


class ReadingsLog:
    """readings.csv, a row a reading, flushed as each comes (a killed
    watch keeps every reading it showed)."""

    def __init__(self, path: Path):
        self.path = path
        self._fh = open(path, "w", newline="", encoding="utf-8")
        self._w = csv.writer(self._fh)
        self._w.writerow(COLUMNS)
        self._fh.flush()

    def add(self, r: Reading) -> None:
        d = asdict(r)
        self._w.writerow(["" if d[c] is None else (str(d[c]).lower() if isinstance(d[c], bool) else f"{d[c]:.7g}")
                          for c in COLUMNS])
        self._fh.flush()

    def close(self) -> None:
        self._fh.close()


#: The last reading's uncertainty is the scatter of this many last readings
#: (where an adjustment ended, the stage steady).
LAST_READINGS = 10


def summarise(path: Path, info: dict | None = None) -> dict:
    """The result of a recorded watch, from its readings.csv: for each
    figure the first, last, minimum and maximum; how many readings, how
    long, and how many were clipped, had lost the tone or spanned a
    dropout of the stream (those are left out of the figures)."""
    try:
        with path.open(encoding="utf-8", newline="") as fh:
            rows = list(csv.DictReader(fh))
    except OSError as exc:
        raise BenchkitError(f"cannot read {path}: {exc.strerror or exc}") from None
    if not rows:
        raise BenchkitError(f"{path}: no readings")
    figures = {}
    disturbed = sum(r.get("disturbed") == "true" for r in rows)
    spread = Collector()
    for key, label, unit in FIGURES:
        vals = [float(r[key]) for r in rows if r.get(key) not in (None, "") and r.get("disturbed") != "true"]
        if vals:
            figures[key] = {"label": label, "unit": unit, "first": vals[0], "last": vals[-1], "min": min(vals),
                            "max": max(vals)}
            scatter = float(np.std(vals[-LAST_READINGS:], ddof=1)) if len(vals) >= 3 else 0.0
            if scatter > 0:  # one reading's type A: the scatter of the last few (JCGM 100 4.2); none: not known
                spread.put(f"figures.{key}.last", Budget.of(repeats=scatter))
    t = [float(r["t_s"]) for r in rows]
    clipped = sum(r["clipped"] == "true" for r in rows)
    lost = sum(r["tone_lost"] == "true" for r in rows)
    warnings = []
    if clipped:
        warnings.append(BenchWarning("input-clipped", f"{clipped} reading(s) clipped the input"))
    if lost:
        warnings.append(BenchWarning("not-valid", f"{lost} reading(s) had lost the tone"))
    if disturbed:
        warnings.append(BenchWarning("dropout", f"{disturbed} reading(s) spanned a dropout of the audio stream and were left out of the "
                        f"figures ({FAULT_ADVICE})"))
    return document("watch", {**(info or {}), "readings": len(rows), "first_s": t[0], "last_s": t[-1],
                              "rate_per_s": (len(rows) - 1) / (t[-1] - t[0]) if t[-1] > t[0] else None,
                              "figures": figures, "valid": not clipped, "warnings": warnings, "file": str(path),
                              "uncertainty": spread.block()})


def check_dc_source(source, resource, backend, profile) -> None:
    """What a DC source needs (a watch's; a drift log's meter), refused before anything plays."""
    if source == "input" and (profile is None or not profile.dc_coupled or not profile.dc_volts_per_fs):
        raise BenchkitError("--dc-source input needs a --calibration that says the input is DC coupled")
    if source == "virtual" and not backend.capabilities.simulated:
        raise BenchkitError("--dc-source virtual reads the virtual stage: use it with --device virtual")
    if source == "meter" and not resource:
        raise BenchkitError("--dc-source meter needs --meter (the meter's VISA address)")


def dc_reader(source, resource, backend, profile):
    """The DC a watch shows: a meter read in its own thread (the latest
    value), the measuring input's own DC, or the virtual stage's midpoint."""

    from benchkit import meters

    if source is None:
        return None, None, None
    if source == "input":
        return None, profile.dc_volts_per_fs, None
    if source == "virtual":
        meter = meters.VirtualMidpoint(backend.stage, accelerated=1.0)  # the stage warms in real time
    else:
        meter = meters.ScpiMeter(resource)
    latest = {"v": None}
    stop = threading.Event()

    def poll():
        last = time.monotonic()
        while not stop.is_set():
            try:
                latest["v"] = meter.read()
            except BenchkitError:
                latest["v"] = None
                return
            stop.wait(0.25)
            if hasattr(meter, "advance"):  # a model's clock follows the wall's
                now = time.monotonic()
                meter.advance(now - last)
                last = now

    threading.Thread(target=poll, name="benchkit-dc", daemon=True).start()

    class _Closing:
        def close(self):
            stop.set()
            meter.close()

    return (lambda: latest["v"]), None, _Closing()


#: The averaging counts of the spectrum view the a key steps through.
AVERAGING = (1, 4, 16, 64)
#: How far + and - turn the virtual stage's bias, A.
BIAS_STEP_A = 0.05


class BiasKnob:
    """The virtual stage's bias, turned from the keyboard (+ and -) while
    a watch runs: the screwdriver moment with no hardware. Each turn is
    kept (``turns``: when, in seconds of the tone, and the bias set)."""

    def __init__(self, backend):
        stage = getattr(backend, "stage", None) if backend.capabilities.simulated else None
        self.stage = stage if stage is not None and "bias" in stage.params else None
        self.turns: list[dict] = []

    def turn(self, steps: int, t_s: float) -> str | None:
        """Turn it ``steps`` steps (negative: down); None, or why it would not turn."""
        try:
            bias = self.stage.turn("bias", round(self.stage.params["bias"] + steps * BIAS_STEP_A, 6))
        except BenchkitError as exc:
            return str(exc)
        self.turns.append({"t_s": round(t_s, 3), "bias_a": bias})
        return None

    def note(self) -> str:
        return (f"virtual stage: bias {self.stage.params['bias']:.2f} A "
                f"(+ and - turn it by {1000 * BIAS_STEP_A:g} mA)")


@dataclass(frozen=True)
class WatchEnd:
    """How a watch ended: what stopped it, whether Ctrl-C did, whether the
    input clipped."""

    how: str
    interrupted: bool
    clipped: bool


def watch_session(backend, tone, run, record_audio: bool, duration, mode: str, say) -> WatchEnd:
    """Show the readings until q, Ctrl-C, ``duration`` or the stream's end,
    the tone fading out on every path: one line a reading on stdout in
    ``mode`` "json" or "plain", a live table and spectrum in "live" (keys:
    h holds, r resets, s spectrum, a averaging, + - the virtual bias, q
    stops). Files the readings (and with ``record_audio`` the
    raw audio) in ``run``, if any."""
    import sys

    from benchkit.analysis.readings import Tracker
    from benchkit.kinds import headline_figures
    from benchkit.report import live as show
    from benchkit.report.tables import dumps_line

    log = ReadingsLog(run.folder / "readings.csv") if run is not None else None
    partial = run.folder / "audio.partial.wav" if run is not None and record_audio else None
    tracker = Tracker()
    knob = BiasKnob(backend) if mode == "live" and sys.stdin.isatty() else None
    knob = knob if knob is not None and knob.stage is not None else None
    spectrum = tone.spectrum = SpectrumAverage(AVERAGING[1]) if mode == "live" else None
    watch = Watch(backend, tone, partial)
    display, keys, spectrum_shown, why = None, None, True, None
    title = f"{tone.frequency_hz:g} Hz at {tone.level_dbfs:g} dBFS on {backend.name}"

    def screen():
        notes = tuple(n for n in (knob.note() if knob is not None else None, why) if n)
        keys_text = show.keys_text(show.BIAS_KEYS if knob is not None else ())
        return show.screen(tracker, title, spectrum if spectrum_shown else None, tone.frequency_hz, tone.bandwidth_hz,
                           keys_text, notes)

    started, ended_by, interrupted = time.monotonic(), None, False
    try:
        if mode == "live":  # the screen and the keys first: the tone starts once they stand (and stops if they fail)
            from rich.console import Console
            from rich.live import Live

            display = Live(screen(), console=Console(), auto_refresh=False, transient=False)
            display.start()
            keys = show.Keys() if sys.stdin.isatty() else None
        watch.start()
        for reading in watch.readings():
            try:
                if reading is not None:
                    tracker.add(reading)
                    if log is not None:
                        log.add(reading)
                    if mode == "json":
                        print(dumps_line(reading.to_dict()), flush=True)
                    elif mode == "plain":
                        print(show.plain_line(reading), flush=True)
                key = keys.read() if keys is not None else None
                if key == "h":
                    tracker.toggle_hold()
                elif key == "r":
                    tracker.reset()
                    spectrum.reset()
                elif key == "s":
                    spectrum_shown = not spectrum_shown
                elif key == "a":
                    spectrum.set_count(AVERAGING[(AVERAGING.index(spectrum.count) + 1) % len(AVERAGING)]
                                       if spectrum.count in AVERAGING else AVERAGING[0])
                elif key in ("+", "=", "-") and knob is not None:
                    why = knob.turn(-1 if key == "-" else 1, tone.heard_s)
                elif key == "q" and ended_by is None:
                    ended_by = "stopped (q)"
                    watch.stop(ended_by)
                if display is not None and (reading is not None or key is not None):
                    display.update(screen(), refresh=True)
                if duration is not None and ended_by is None and time.monotonic() - started >= duration:
                    ended_by = "the duration ran out"
                    watch.stop(ended_by)
            except KeyboardInterrupt:
                if ended_by is None:
                    ended_by, interrupted = "interrupted (Ctrl-C)", True
                    watch.stop(ended_by)
            except BrokenPipeError:  # whoever read stdout has gone (| head)
                if ended_by is None:
                    ended_by = "stdout was closed"
                    watch.stop(ended_by)
                mode = "quiet"
    except KeyboardInterrupt:
        ended_by, interrupted = "interrupted (Ctrl-C)", True
        watch.stop(ended_by)
    finally:
        watch.stop(ended_by or "ended")
        watch.join()
        if display is not None:
            display.stop()
        if keys is not None:
            keys.close()
        if log is not None:
            log.close()
    if watch.error is not None:
        raise watch.error
    stopped = tone.stop_reason if ended_by is None else ended_by
    clipped = "clipped" in (tone.stop_reason or "") or (watch.raw is not None and watch.raw.stopped_at is not None)
    if clipped:
        say("benchkit: stopped early: the input clipped (the tone faded out): lower the level or use a larger pad")
    dropped = f", {tracker.disturbed} across a dropout of the stream (left out)" if tracker.disturbed else ""
    say(f"watch ended: {stopped}; {units.count(tracker.count, 'reading')}{dropped}; the output faded to silence")
    for line in show.summary_lines(tracker):
        say(line)
    if run is not None and not tracker.count:
        # nothing to summarise (the input clipped as the tone came in, or the watch was stopped at once)
        run.fail(f"the watch ended before its first reading: {stopped}")
        say(f"run {run.id}: no reading to keep (filed as failed): {run.folder}")
        return WatchEnd(stopped, interrupted, clipped)
    if run is not None:
        written = [log.path]
        if partial is not None and partial.exists():
            from benchkit.recordings import write_capture_sidecar

            audio = partial.with_name("audio.wav")  # its sidecar: audio.json
            partial.rename(audio)
            write_capture_sidecar(audio, {"sample_rate_hz": backend.sample_rate_hz, "device": backend.name,
                                          "stimulus": tone.description, "channels": [c.to_dict() for c in backend.inputs()],
                                          "note": "raw, unaligned recording of a watch"})
            written.append(audio)
        turned = {"bias_turns": knob.turns} if knob is not None and knob.turns else {}
        doc = summarise(log.path, {"frequency_hz": tone.frequency_hz, "level_dbfs": tone.level_dbfs,
                                   "ended": stopped, "device": backend.name, "conditions": tone.conditions(), **turned})
        from benchkit.report import tables

        written.insert(0, tables.write_json(doc, run.folder / "watch.json"))
        run.complete(doc, written, written[0], figures=headline_figures(doc))
        say(f"run {run.id}: {run.folder}")
    return WatchEnd(stopped, interrupted, clipped)


def watch(o: dict, mode: str, say) -> WatchEnd:
    """A watch on the bench its options describe (by key, benchkit.options):
    the device opened and checked, the pre-flight, the DC source, the
    readings shown in ``mode`` ("live", "plain" or "json"), filed in the
    logbook with --record."""
    import contextlib

    from benchkit.bench import Bench, bench_logbook, live_setup, opens_tones, check_within, preflight, start_run

    if o["record_audio"] and not o["record"]:
        raise BenchkitError("--record-audio goes with --record")
    opening = opens_tones(o, [o["freq"]])
    check_within(o["rate"], opening.pop("within"))
    with bench_logbook(o) if o["record"] else contextlib.nullcontext((None, {})) as (book, labels):
        s = Bench(o, say, lambda _text: None, labels)
        s.backend, s.profile = backend, profile = live_setup(o, say, **opening)
        check_dc_source(o["dc_source"], o["meter"], backend, profile)
        preflight(s, [o["level"]], o["freq"], o["load"])
        scale = profile.stage_volts_per_fs if profile is not None else backend.inputs()[s.channel - 1].volts_per_fs
        dc, dc_scale, meter = dc_reader(o["dc_source"], o["meter"], backend, profile)
        try:
            band = s.band
            tone = SteadyTone(o["freq"], s.drive[0], backend.sample_rate_hz, None, s.channel,
                              getattr(backend, "drive_output", 1), backend.n_outputs, scale, o["load"], band, dc=dc,
                              dc_scale=dc_scale)
            params = dict(channel=s.channel, frequency_hz=o["freq"], level_dbfs=s.drive[0], load_ohms=o["load"],
                          bandwidth_hz=band)
            run = start_run(book, labels, "watch", backend, profile, o["calibration"], params, say) if o["record"] else None
            with run if run is not None else contextlib.nullcontext():
                return watch_session(backend, tone, run, o["record_audio"], o["duration"], mode, say)
        finally:
            if meter is not None:
                meter.close()


@dataclass(frozen=True)
class WatchParams(RunParams):
    """The tone a watch plays and how it is read (run.json's ``params``)."""

    channel: int = 1
    frequency_hz: float | None = None
    level_dbfs: float | None = None
    load_ohms: float | None = None
    bandwidth_hz: tuple[float, float] | None = None


def reanalyse(folder: Path, record: dict, say) -> tuple[dict, list[Path]]:
    from benchkit.jsonfile import load_json
    from benchkit.report.tables import write_json

    p = WatchParams.from_dict(record.get("params"))
    old = {}
    try:
        old = load_json(folder / "watch.json").get("conditions") or {}
    except (OSError, ValueError):
        pass  # a watch killed before it wrote its summary
    doc = summarise(folder / "readings.csv", {"frequency_hz": p.frequency_hz, "level_dbfs": p.level_dbfs,
                                              "ended": "reanalysed", "device": record.get("device"),
                                              "conditions": old or Conditions(bandwidth_hz=p.band()).to_dict()})
    return doc, [write_json(doc, folder / "watch.json"), folder / "readings.csv"]


def overlay(comparison, docs: list[dict], entries, out: Path, title: str) -> list[Path]:
    """THD+N against time, each run's readings."""
    from benchkit.report import overlays

    series = [series_from_csv(e.folder, "readings.csv", "t_s", "thdn_db") for e in entries]
    return [overlays.lines_png(series, comparison.labels, out / "overlay.png", f"{title}: THD+N while watched",
                               comparison.warnings, "time (s)", "THD+N (dB)", False)]


KIND = Kind("watch", reanalyse, WatchParams, figures=watch_figures, overlay=overlay)
