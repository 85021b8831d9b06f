"""Capture: play a stimulus, record the inputs, hand back an aligned capture.

Every backend implements :class:`Backend`; :func:`run` plays a stimulus
through one and aligns what came back by finding the stimulus' marker in the
recording (the reported latency is never trusted). Backends: the virtual
bench (``virtual``, the default) and, later, sound cards through PortAudio.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import Protocol

import numpy as np

from benchkit.errors import BenchkitError
from benchkit.signals import Stimulus

#: An input sample at or beyond this fraction of full scale stops a run
#: from stepping up (the converter is at its limit).
CLIP_STOP_FS = 0.999

#: The device every command uses unless told otherwise.
DEFAULT_DEVICE = "virtual"
DEVICE_ENV = "BENCHKIT_DEVICE"
#: A file that gets a line each time a backend starts to play (tests read
#: it as evidence that a refused command played nothing).
STREAM_LOG_ENV = "BENCHKIT_STREAM_LOG"


def count_stream(device: str, what: str) -> None:
    """Note that ``device`` starts to play ``what``, in the file named by
    BENCHKIT_STREAM_LOG (if set): one line a stream, appended."""
    path = os.environ.get(STREAM_LOG_ENV)
    if path:
        with open(path, "a", encoding="utf-8") as f:
            f.write(f"{os.getpid()} {device} {what}\n")


@dataclass(frozen=True)
class InputChannel:
    """One interface input: its number (from 1), what is wired to it, and
    its scale in volts peak at the measured point per FS when known."""

    number: int
    role: str
    volts_per_fs: float | None = None
    scale_source: str = "none"

    def to_dict(self) -> dict:
        return {"number": self.number, "role": self.role, "volts_per_fs": self.volts_per_fs}


@dataclass(frozen=True)
class RawRecording:
    """What a backend recorded: (n, inputs) in FS, longer than the stimulus
    by at least the round trip, plus what happened on the way:
    ``fault_frames`` are the first frames of blocks of ``fault_block``
    frames during which the stream reported an overflow or underflow."""

    samples: np.ndarray
    events: tuple[str, ...] = ()
    fault_frames: tuple[int, ...] = ()
    fault_block: int = 0
    #: raw frame where the run stopped early because the input clipped
    stopped_at: int | None = None


@dataclass(frozen=True)
class Capture:
    """An aligned capture: sample k of ``samples`` answers sample k of the
    stimulus. ``latency_samples`` is the round trip found in the recording."""

    samples: np.ndarray
    sample_rate_hz: float
    latency_samples: int
    inputs: tuple[InputChannel, ...]
    device: str
    events: tuple[str, ...] = field(default_factory=tuple)
    #: frame spans [start, stop) of the aligned capture hit by stream faults
    faults: tuple[tuple[int, int], ...] = field(default_factory=tuple)
    #: aligned frame where the run stopped stepping up (the input clipped)
    stopped_at: int | None = None

    def spoiled(self, start: int, stop: int) -> bool:
        """Whether a stream fault touched samples start..stop."""
        return any(a < stop and start < b for a, b in self.faults)

    def channel(self, number: int) -> np.ndarray:
        if not 1 <= number <= self.samples.shape[1]:
            raise BenchkitError(f"input channel {number} does not exist (1 to {self.samples.shape[1]})")
        return self.samples[:, number - 1]

    def input(self, number: int) -> InputChannel:
        return self.inputs[number - 1]


@dataclass(frozen=True)
class Capabilities:
    """What a backend can do besides playing and recording: commands ask
    these, never a backend's name."""

    #: its stage, pad and load are simulated: it knows the volts at its
    #: output and inputs without a profile, and wires itself (nothing to
    #: wire, short or switch by hand: no prompt)
    simulated: bool = False
    #: it connects and disconnects the stage's load itself (``connect_load``)
    switchable_load: bool = False
    #: a stereo stage's fixed wiring, ((input A, input B), (output A,
    #: output B)), or None where the user says which channels
    stereo_channels: tuple[tuple[int, int], tuple[int, int]] | None = None


class Backend(Protocol):
    """What every capture backend provides."""

    name: str
    #: what it can do besides playing and recording
    capabilities: Capabilities
    #: the highest drive it may be given, dBFS
    drive_cap_dbfs: float
    sample_rate_hz: float
    n_outputs: int
    #: volts peak at the driven output per FS, when known
    output_vpk_per_fs: float | None
    #: the most an input takes without damage, volts peak, when stated
    input_max_vpk: float | None

    def inputs(self) -> tuple[InputChannel, ...]:
        """The inputs, with their roles and known scales."""

    def reference_input(self) -> int | None:
        """The input wired straight to the driven output, if any."""

    def pad_input_ohms(self) -> float | None:
        """What the pad and the input present to the stage's output, when
        known."""

    #: the output the stimulus drives, from 1
    drive_output: int
    #: silence wanted before the marker, seconds
    lead_s: float

    def play_record(self, stimulus: Stimulus, partial: Path | None = None) -> RawRecording:
        """Play the stimulus and record every input, at least
        ``stimulus.n_samples`` plus the round trip, streaming the raw
        recording to ``partial`` as it arrives. Must leave the outputs
        silent on every exit path.

        A stimulus with a ``listen(block, frame)`` method decides as it
        plays (benchkit.kinds.power.AdaptiveSteps): the backend feeds it
        every recorded block, off the audio thread; its ``n_samples`` is an
        upper bound until ``render`` returns fewer frames than asked, which
        ends it; ``stop(reason)`` ends it from the backend's side."""


def resolve_device(device: str | None) -> str:
    """The device a command uses: the option, else BENCHKIT_DEVICE, else
    the virtual bench (safety by default)."""
    if device:
        return device
    return os.environ.get(DEVICE_ENV, "").strip() or DEFAULT_DEVICE


class HearsFaults:
    """For a stimulus that listens while it plays: the stream's reported
    faults, as spans of raw frames in ``_faults`` (the stimulus starts
    that list), to mark what they touched."""

    _faults: list[tuple[int, int]]

    def fault(self, pos: int, frames: int) -> None:
        """The stream reported an over- or underflow in the callback for
        raw frames [pos, pos + frames): the samples lost lie next to them.
        Called on the audio thread (a list append, nothing more)."""
        self._faults.append((pos - frames, pos + frames))


#: Takes of a stimulus that a stream fault spoiled: played again this many times.
MAX_RETRIES = 2
#: What to do about stream faults, for the messages that report them.
FAULT_ADVICE = "close other programs, or use a larger --blocksize"


def run_clean(backend: Backend, stimulus: Stimulus, partial: Path | None = None, on_spoiled=None) -> Capture:
    """:func:`run`, played again while a stream fault (an overflow or
    underflow: a busy computer) touches the analysed span of a segment, up
    to ``MAX_RETRIES`` more times. ``on_spoiled(capture, take)`` sees each
    spoiled take (to keep it on disk). A run the input's clipping stopped
    is returned as it is; faults in every take are an error."""
    for take in range(1, MAX_RETRIES + 2):
        cap = run(backend, stimulus, partial)
        if cap.stopped_at is not None or not any(cap.spoiled(s.settled, s.end) for s in stimulus.segments):
            return cap
        if on_spoiled is not None:
            on_spoiled(cap, take)
    raise BenchkitError(f"stream faults (overflows or underflows) spoiled all {MAX_RETRIES + 1} takes: {FAULT_ADVICE}")


def run(backend: Backend, stimulus: Stimulus, partial: Path | None = None) -> Capture:
    """Play ``stimulus`` through ``backend`` and return the aligned capture;
    the raw recording goes to ``partial`` as it arrives."""
    from benchkit.capture.align import find_marker

    if abs(backend.sample_rate_hz - stimulus.sample_rate_hz) > 1e-6:
        raise BenchkitError(
            f"stimulus at {stimulus.sample_rate_hz:g} Hz cannot play on a device running at {backend.sample_rate_hz:g} Hz"
        )
    raw = backend.play_record(stimulus, partial)
    ref = backend.reference_input()
    # the stimulus keeps silence between its marker and its first step: look
    # for the marker there, where nothing else can resemble it
    first = stimulus.segments[0].start if stimulus.segments else stimulus.n_samples
    search = raw.samples[: first + stimulus.marker.size, (ref or 1) - 1]
    found = find_marker(search, stimulus.marker)
    latency = found - stimulus.marker_start
    short = latency + stimulus.n_samples - raw.samples.shape[0]
    if latency < 0 or (short > 0 and raw.stopped_at is None):
        raise BenchkitError(f"the capture could not be aligned: marker found {latency} samples off the stimulus")
    aligned = np.zeros((stimulus.n_samples, raw.samples.shape[1]))
    got = raw.samples[latency : latency + stimulus.n_samples]
    aligned[: got.shape[0]] = got
    return Capture(
        samples=aligned,
        sample_rate_hz=stimulus.sample_rate_hz,
        latency_samples=int(latency),
        inputs=backend.inputs(),
        device=backend.name,
        events=raw.events,
        faults=tuple((f - latency, f - latency + raw.fault_block) for f in raw.fault_frames),
        stopped_at=None if raw.stopped_at is None else raw.stopped_at - latency,
    )
