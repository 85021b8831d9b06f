"""Stimulus generation: pure functions returning arrays plus a description.

A :class:`Stimulus` is what a capture backend plays: samples in FS for
every output channel, an alignment marker at the start, and the list of
segments (one per step) with the span of each that is settled and fit to
analyse. Every tone starts and ends with a raised-cosine fade, and every
stimulus ends in silence, so nothing is ever left playing.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from benchkit import units
from benchkit.errors import BenchkitError

#: Raised-cosine fade at each end of a tone.
FADE_S = 0.01
#: Marker: a short logarithmic chirp that the capture layer finds to align.
MARKER_S = 0.04
MARKER_BAND_HZ = (500.0, 8000.0)
MARKER_DBFS = -26.0
#: Silence before the marker, after it, and at the end of a stimulus.
LEAD_S = 0.05
AFTER_MARKER_S = 0.25
TAIL_S = 0.1
#: Highest level any stimulus may reach (a tone whose peaks touch full
#: scale would clip a real converter's reconstruction filter).
MAX_DBFS = -0.5


@dataclass(frozen=True)
class Segment:
    """One step of a stimulus, in samples from the stimulus start.

    ``start``/``stop`` span the whole tone with its fades; ``settled`` is
    where the analysis may begin (after the fade-in and the settle time) and
    ``end`` where it must stop (before the fade-out).
    """

    start: int
    stop: int
    settled: int
    end: int
    frequency_hz: float
    level_dbfs: float
    channel: int

    def to_dict(self) -> dict:
        return {
            "start": self.start,
            "stop": self.stop,
            "settled": self.settled,
            "end": self.end,
            "frequency_hz": self.frequency_hz,
            "level_dbfs": self.level_dbfs,
            "channel": self.channel,
        }


@dataclass(frozen=True)
class Stimulus:
    """What a backend plays: ``samples`` is (n, output channels) in FS."""

    samples: np.ndarray
    sample_rate_hz: float
    segments: tuple[Segment, ...]
    marker: np.ndarray
    marker_start: int
    description: dict = field(default_factory=dict)

    @property
    def n_samples(self) -> int:
        return int(self.samples.shape[0])

    def render(self, start: int, frames: int) -> np.ndarray:
        """Samples ``start`` to ``start + frames`` (fewer at the end), as
        a stream's callback asks for them. A stimulus that decides its next
        step while the stream runs provides the same method and computes
        the block instead of slicing it."""
        return self.samples[start : start + frames]

    @property
    def duration_s(self) -> float:
        return self.n_samples / self.sample_rate_hz


def fade(n: int, rate: float, fade_s: float = FADE_S) -> np.ndarray:
    """Gain envelope of length n: raised-cosine ramps in and out."""
    k = min(int(round(fade_s * rate)), n // 2)
    env = np.ones(n)
    if k > 0:
        ramp = 0.5 - 0.5 * np.cos(np.pi * (np.arange(k) + 0.5) / k)
        env[:k] = ramp
        env[n - k :] = ramp[::-1]
    return env


def tone(frequency_hz: float, level_dbfs: float, seconds: float, rate: float, phase: float = 0.0) -> np.ndarray:
    """A faded sine of the given level (dBFS, AES17: peak = 10^(dBFS/20))."""
    n = int(round(seconds * rate))
    t = np.arange(n) / rate
    return units.ratio_from_db(level_dbfs) * np.sin(2 * np.pi * frequency_hz * t + phase) * fade(n, rate)


@dataclass(frozen=True)
class TwinTone:
    """Two tones played together for an intermodulation test
    (:mod:`benchkit.analysis.imd`): f1 and f2 in Hz, with f1's amplitude
    ``ratio`` times f2's. A step's level is the composite's peak: the two
    amplitudes sum to 10^(dBFS/20), so the converter, the stage and the
    pre-flight see the peak of a single tone at that level (common
    practice for two-tone levels)."""

    method: str
    f1_hz: float
    f2_hz: float
    ratio: float

    def __post_init__(self):
        if not (0 < self.f1_hz < self.f2_hz) or not self.ratio > 0:
            raise BenchkitError(f"two tones need 0 < f1 < f2 and a positive ratio, got {self.f1_hz:g} Hz, "
                                f"{self.f2_hz:g} Hz, {self.ratio:g}:1")

    def amplitudes(self, level_dbfs: float) -> tuple[float, float]:
        """Peak amplitudes of f1 and f2 (FS) at a composite level."""
        total = float(units.ratio_from_db(level_dbfs))
        return total * self.ratio / (1.0 + self.ratio), total / (1.0 + self.ratio)

    def waveform(self, level_dbfs: float, seconds: float, rate: float) -> np.ndarray:
        """The faded pair, sine phase each, composite peak at the level."""
        n = int(round(seconds * rate))
        t = np.arange(n) / rate
        a1, a2 = self.amplitudes(level_dbfs)
        return (a1 * np.sin(2 * np.pi * self.f1_hz * t) + a2 * np.sin(2 * np.pi * self.f2_hz * t)) * fade(n, rate)

    def to_dict(self) -> dict:
        return {"method": self.method, "f1_hz": self.f1_hz, "f2_hz": self.f2_hz, "ratio": self.ratio}


def marker(rate: float) -> np.ndarray:
    """The alignment marker: a Hann-windowed logarithmic chirp."""
    n = int(round(MARKER_S * rate))
    f1, f2 = MARKER_BAND_HZ
    t = np.arange(n) / rate
    k = math.log(f2 / f1) / MARKER_S
    chirp = np.sin(2 * np.pi * f1 * (np.exp(k * t) - 1.0) / k)
    return units.ratio_from_db(MARKER_DBFS) * chirp * np.hanning(n)


#: Below this no converter resolves a tone (24 bits end near -144 dBFS).
MIN_DBFS = -140.0


def check_level(level_dbfs: float) -> None:
    """Refuse a drive level the output cannot take, or cannot make."""
    if not math.isfinite(level_dbfs):
        raise BenchkitError(f"drive level {level_dbfs:g} dBFS is not a level")
    if level_dbfs > MAX_DBFS:
        raise BenchkitError(f"drive level {level_dbfs:g} dBFS is above the {MAX_DBFS:g} dBFS the output allows")
    if level_dbfs < MIN_DBFS:
        raise BenchkitError(f"drive level {level_dbfs:g} dBFS is below the {MIN_DBFS:g} dBFS any output resolves")


def _per_step(value, n: int, what: str) -> list[float]:
    values = [float(v) for v in value] if isinstance(value, (list, tuple)) else [float(value)] * n
    if len(values) != n:
        raise BenchkitError(f"give one of the {what}, or one per step")
    return values


def stepped_tones(
    frequency_hz: float | list[float],
    levels_dbfs: list[float],
    rate: float,
    step_s: float | list[float] = 1.0,
    settle_s: float | list[float] = 0.3,
    gap_s: float = 0.05,
    out_channel: int | list[int] = 1,
    n_out: int = 2,
    lead_s: float = LEAD_S,
    twin: TwinTone | None = None,
    marker_out: int | None = None,
) -> Stimulus:
    """Tones of one frequency at several levels, one after another (or,
    with ``twin``, the pair of an intermodulation test at each level).

    Parameters
    ----------
    frequency_hz : float or list of float
        One frequency for every step, or one per step.
    levels_dbfs : list of float
        Drive level of each step at the interface output, dBFS.
    rate : float
        Sample rate, Hz.
    step_s : float or list of float
        Analysed length of each step, after the settle time (one for all,
        or one per step).
    settle_s : float or list of float
        Time after the fade-in before analysis starts (coupling capacitors
        and the stage settle).
    gap_s : float
        Silence between steps.
    out_channel : int or list of int
        The output the tones play on (from 1), or one per step.
    marker_out : int, optional
        The output the alignment marker plays on (default: the first
        step's); a retake of some steps keeps the run's.
    n_out : int
        How many outputs there are.
    lead_s : float
        Silence before the marker (a real stream wants time to settle).
    twin : TwinTone, optional
        Play this pair at each level instead (``frequency_hz`` is then
        f2, the segments' frequency; the stimulus kind is
        "stepped-twin-tones").
    """
    if twin is not None:
        frequency_hz = twin.f2_hz
    if not levels_dbfs:
        raise BenchkitError("at least one level is needed")
    freqs = [float(f) for f in frequency_hz] if isinstance(frequency_hz, (list, tuple)) else [float(frequency_hz)] * len(levels_dbfs)
    if len(freqs) != len(levels_dbfs):
        raise BenchkitError("give one frequency, or one per level")
    steps = _per_step(step_s, len(freqs), "step lengths")
    settles = _per_step(settle_s, len(freqs), "settle times")
    for f in freqs:
        if not (0 < f < rate / 2):
            raise BenchkitError(f"tone frequency {f:g} Hz must lie between 0 and half the sample rate")
    chans = [int(c) for c in (out_channel if isinstance(out_channel, (list, tuple)) else [out_channel] * len(freqs))]
    if len(chans) != len(freqs):
        raise BenchkitError("give one output channel, or one per step")
    for c in chans + ([marker_out] if marker_out is not None else []):
        if not 1 <= c <= n_out:
            raise BenchkitError(f"output channel {c} does not exist (1 to {n_out})")
    for lvl in levels_dbfs:
        check_level(lvl)
    mk = marker(rate)
    lead = int(lead_s * rate)
    pos = lead + mk.size + int(AFTER_MARKER_S * rate)
    fade_n = int(round(FADE_S * rate))
    segments, tones = [], []
    for f, lvl, step, settle, c in zip(freqs, levels_dbfs, steps, settles, chans):
        x = (twin.waveform(lvl, settle + step + 2 * FADE_S, rate) if twin is not None
             else tone(f, lvl, settle + step + 2 * FADE_S, rate))
        settled = pos + fade_n + int(round(settle * rate))
        segments.append(Segment(pos, pos + x.size, settled, pos + x.size - fade_n, f, float(lvl), c))
        tones.append(x)
        pos += x.size + int(gap_s * rate)
    out = np.zeros((pos + int(TAIL_S * rate), n_out))
    # the marker on the first step's output (its loopback is the reference)
    out[lead : lead + mk.size, (marker_out or chans[0]) - 1] = mk
    for seg, x in zip(segments, tones):
        out[seg.start : seg.stop, seg.channel - 1] = x
    marker_start = lead
    extra = {} if twin is None else {"twin": twin.to_dict()}
    return Stimulus(
        samples=out,
        sample_rate_hz=float(rate),
        segments=tuple(segments),
        marker=mk,
        marker_start=marker_start,
        description={
            "kind": "stepped-tones" if twin is None else "stepped-twin-tones",
            **extra,
            "frequency_hz": freqs[0] if len(set(freqs)) == 1 else freqs,
            "levels_dbfs": [float(v) for v in levels_dbfs],
            "step_s": steps[0] if len(set(steps)) == 1 else steps,
            "settle_s": settles[0] if len(set(settles)) == 1 else settles,
            "out_channel": chans[0] if len(set(chans)) == 1 else chans,
        },
    )


def sweep_stimulus(sweep, level_dbfs: float, out_channel: int = 1, n_out: int = 2, lead_s: float = LEAD_S,
                   tail_s: float = 0.5) -> Stimulus:
    """A synchronized sweep (:class:`benchkit.analysis.sweep.SyncSweep`,
    faded) at ``level_dbfs`` peak, after the marker, then ``tail_s`` of
    silence for the stage's response to die away. Its one segment spans
    the sweep; the half second of silence before it shows any steady hum."""
    check_level(level_dbfs)
    if not 1 <= out_channel <= n_out:
        raise BenchkitError(f"output channel {out_channel} does not exist (1 to {n_out})")
    rate = sweep.rate
    mk = marker(rate)
    x = units.ratio_from_db(level_dbfs) * sweep.samples()
    lead = np.zeros(int(lead_s * rate))
    head = np.concatenate([lead, mk, np.zeros(int(0.5 * rate))])
    mono = np.concatenate([head, x, np.zeros(int(tail_s * rate))])
    out = np.zeros((mono.size, n_out))
    out[:, out_channel - 1] = mono
    start = head.size
    seg = Segment(start, start + x.size, start, start + x.size, sweep.f1_hz, float(level_dbfs), out_channel)
    return Stimulus(
        samples=out,
        sample_rate_hz=float(rate),
        segments=(seg,),
        marker=mk,
        marker_start=lead.size,
        description={"kind": "sweep", **sweep.to_dict(), "level_dbfs": float(level_dbfs), "out_channel": out_channel},
    )
