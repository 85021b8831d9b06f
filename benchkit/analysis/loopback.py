"""The interface alone, its output wired to its inputs: the best it can
measure. Pure figures from analysed tones and noise (no stream, no file):
benchkit.kinds.loopback records and reads the captures.

- the residual against level: each step's THD+N, THD, H2, H3 and the
  residual's own level, at the input level it was read at;
- the noise floor over the band, unweighted and A-weighted (IEC 61672-1);
- the response re 1 kHz of the measuring input and, with a second input
  on the same output (a Y lead), the two inputs' match in level and phase;
- the round trip found at each of several starts of the stream, and its
  spread;
- a long stream's faults: reported by the stream, or heard as gaps in the
  tone that no report explains.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field

import numpy as np

from benchkit import units
from benchkit.analysis.compare import Figure, finite

#: The response is referred to this frequency (or the one nearest it).
REF_HZ = 1000.0


@dataclass(frozen=True)
class LevelRow:
    """One step of the residual against level: ``level_dbfs`` at the input."""

    drive_dbfs: float
    level_dbfs: float
    thdn_db: float
    thd_db: float
    h2_dbc: float | None
    h3_dbc: float | None
    noise_dbfs: float
    residual_dbfs: float


@dataclass(frozen=True)
class ResponseRow:
    """One frequency of the response: the measuring input re its level at
    REF_HZ, the second input likewise, and the two against each other
    (level dB and phase degrees, the measuring input's less the second's);
    the measuring input's THD+N there (dB, at the response's level)."""

    frequency_hz: float
    gain_db: float
    other_db: float | None = None
    match_db: float | None = None
    phase_deg: float | None = None
    thdn_db: float | None = None


def level_rows(steps) -> tuple[LevelRow, ...]:
    """``steps``: (drive dBFS, analysed tone) pairs, in any order; rows in rising level."""
    rows = []
    for drive, r in steps:
        h = {k.order: k.level_dbc for k in r.harmonics}
        rows.append(LevelRow(float(drive), r.fundamental_dbfs, r.thdn_db, r.thd_db, h.get(2), h.get(3), r.noise_dbfs,
                             r.residual_dbfs))
    return tuple(sorted(rows, key=lambda row: row.level_dbfs))


def response_rows(first, second=None) -> tuple[ResponseRow, ...]:
    """``first`` (and ``second``): the analysed tone at each frequency of
    the measuring input (and of the second input, same frequencies, same
    captures); each input referred to itself at the frequency nearest
    REF_HZ."""
    freqs = np.array([r.fundamental_hz for r in first])
    ref = int(np.argmin(np.abs(np.log(freqs / REF_HZ))))
    rows = []
    for i, r in enumerate(first):
        gain = units.db_from_ratio(r.fundamental_fs / first[ref].fundamental_fs)
        if second is None:
            rows.append(ResponseRow(r.fundamental_hz, gain, thdn_db=r.thdn_db))
            continue
        o = second[i]
        phase = (r.fundamental_phase_deg - o.fundamental_phase_deg + 180.0) % 360.0 - 180.0
        rows.append(ResponseRow(r.fundamental_hz, gain, units.db_from_ratio(o.fundamental_fs / second[ref].fundamental_fs),
                                units.db_from_ratio(r.fundamental_fs / o.fundamental_fs), phase, r.thdn_db))
    return tuple(rows)


@dataclass(frozen=True)
class LoopbackResult:
    """What the interface alone measures at best (its floor), with the
    conditions: sample rate, band, the inputs compared, the scale."""

    sample_rate_hz: float
    bandwidth_hz: tuple[float, float] | None
    channel: int
    levels: tuple[LevelRow, ...]
    response: tuple[ResponseRow, ...]
    noise_dbfs: float
    noise_a_dbfs: float
    latencies_samples: tuple[int, ...]
    stream_s: float
    faults_reported: int
    gaps_heard_s: tuple[float, ...]
    other_channel: int | None = None
    volts_per_fs: float | None = None
    warnings: tuple = ()
    conditions: dict = field(default_factory=dict)
    calibration: dict | None = None

    @property
    def best_thdn_db(self) -> float:
        return min(row.thdn_db for row in self.levels)

    @property
    def latency_spread_samples(self) -> int:
        return max(self.latencies_samples) - min(self.latencies_samples)

    @property
    def worst_match_db(self) -> float | None:
        got = [abs(row.match_db) for row in self.response if row.match_db is not None]
        return max(got) if got else None

    @property
    def worst_phase_deg(self) -> float | None:
        got = [abs(row.phase_deg) for row in self.response if row.phase_deg is not None]
        return max(got) if got else None

    @property
    def flatness_db(self) -> tuple[float, float]:
        """The response's lowest and highest point re REF_HZ over the frequencies read."""
        gains = [row.gain_db for row in self.response]
        return min(gains), max(gains)

    def volts(self, dbfs: float) -> float | None:
        """A level in dBFS at the input as volts RMS, with a scale."""
        return None if self.volts_per_fs is None else units.rms_from_dbfs(dbfs) * self.volts_per_fs

    def flat_hz(self, frequency_hz: float, within_db: float) -> list[float] | None:
        """The span of the response's frequencies, around the one nearest
        ``frequency_hz``, over which its THD+N stays within ``within_db``
        of its reading there ([lo, hi] Hz; None: no THD+N read)."""
        rows = [row for row in self.response if row.thdn_db is not None and np.isfinite(row.thdn_db)]
        if not rows:
            return None
        rows.sort(key=lambda row: row.frequency_hz)
        k = min(range(len(rows)), key=lambda i: abs(np.log(rows[i].frequency_hz / frequency_hz)))
        lo = hi = k
        while lo > 0 and abs(rows[lo - 1].thdn_db - rows[k].thdn_db) <= within_db:
            lo -= 1
        while hi < len(rows) - 1 and abs(rows[hi + 1].thdn_db - rows[k].thdn_db) <= within_db:
            hi += 1
        return [float(f"{rows[lo].frequency_hz:.6g}"), float(f"{rows[hi].frequency_hz:.6g}")]

    def floor(self, source: str, measured: str) -> dict:
        """The interface's floor as a calibration profile keeps it: the
        residual THD+N against input level and the frequency it was read
        at, the span around it where the response's THD+N reads flat
        (:data:`benchkit.interface_floor.FLAT_DB`), the noise over the band."""
        from benchkit.interface_floor import FLAT_DB, TEST_FREQ_HZ

        f = float(self.conditions.get("frequency_hz") or TEST_FREQ_HZ)
        return {"levels_dbfs": [row.level_dbfs for row in self.levels], "thdn_db": [row.thdn_db for row in self.levels],
                "frequency_hz": f, "flat_hz": self.flat_hz(f, FLAT_DB),
                "noise_dbfs": self.noise_dbfs, "noise_a_dbfs": self.noise_a_dbfs,
                "bandwidth_hz": list(self.bandwidth_hz) if self.bandwidth_hz else None, "measured": measured,
                "source": source}

    def to_dict(self) -> dict:
        from benchkit.analysis.documents import Conditions, document
        from benchkit.analysis.spectrum import WINDOW_NAME

        rate = self.sample_rate_hz
        low, high = self.flatness_db
        more = dict(self.conditions)
        method = more.pop("method", "stepped tones, sine fit; silence for the noise (IEC 61672-1 A-weighting)")
        conditions = Conditions(rate, self.bandwidth_hz, WINDOW_NAME, method, 1,
                                None if self.volts_per_fs is None else "interface input", self.volts_per_fs,
                                more=more).calibrated(self.calibration)
        return document("loopback", {
            "sample_rate_hz": rate,
            "bandwidth_hz": list(self.bandwidth_hz) if self.bandwidth_hz else None, "channel": self.channel,
            "other_channel": self.other_channel, "volts_per_fs": self.volts_per_fs,
            "levels": [asdict(row) for row in self.levels], "best_thdn_db": self.best_thdn_db,
            "response": [asdict(row) for row in self.response], "response_low_db": low, "response_high_db": high,
            "worst_match_db": self.worst_match_db, "worst_phase_deg": self.worst_phase_deg,
            "noise_dbfs": self.noise_dbfs, "noise_a_dbfs": self.noise_a_dbfs,
            "noise_vrms": self.volts(self.noise_dbfs), "noise_a_vrms": self.volts(self.noise_a_dbfs),
            "latencies_samples": list(self.latencies_samples), "latency_ms": 1e3 * float(np.mean(self.latencies_samples)) / rate,
            "latency_spread_samples": self.latency_spread_samples,
            "latency_spread_ms": 1e3 * self.latency_spread_samples / rate,
            "stream_s": self.stream_s, "faults_reported": self.faults_reported, "gaps_heard_s": list(self.gaps_heard_s),
            "dropouts": self.faults_reported + len(self.gaps_heard_s),
            "valid": True, "warnings": list(self.warnings), "calibration": self.calibration,
        }, conditions)


def analyze_loopback(levels, response, *, noise, latencies_samples, stream_s: float, other=None,
                     faults_reported: int = 0, gaps_heard_s=(), channel: int = 1, other_channel: int | None = None,
                     volts_per_fs: float | None = None, conditions: dict | None = None,
                     calibration: dict | None = None) -> LoopbackResult:
    """The interface alone, its output wired to its input: its residual
    against level, its response and the match of two inputs, its noise
    floor, its round trip over several starts and a long stream's dropouts.

    Parameters
    ----------
    levels : sequence of (float, ToneResult)
        Each level step's drive (dBFS) and its analysed tone
        (:func:`benchkit.analyze_tone`), read at the measuring input.
    response : sequence of ToneResult
        The measuring input's tone at each frequency of the response, one
        level; referred to the one nearest 1 kHz.
    noise : NoiseResult
        The input with silence played (:func:`benchkit.analyze_noise`).
    latencies_samples : sequence of int
        The round trip each start of the stream found, samples.
    stream_s : float
        How long the stream checked for dropouts ran, seconds.
    other : sequence of ToneResult, optional
        The second input's tones at the same frequencies, from the same
        captures (a Y lead): the two inputs' level and phase against each
        other.
    faults_reported : int
        Faults (overflows, underflows) the stream reported in that time.
    gaps_heard_s : sequence of float
        Where gaps were heard in its tone that no report explains, seconds.
    channel, other_channel : int
        The inputs measured, numbered from 1.
    volts_per_fs : float, optional
        The interface input's volts peak per FS (no pad): adds volts.
    conditions, calibration : dict, optional
        Kept with the result.

    Returns
    -------
    LoopbackResult
        ``floor(source, measured)`` is what a calibration profile keeps;
        ``to_dict()`` the "loopback" document.

    References
    ----------
    THD+N is the residual over the fundamental (AES17), so a residual of
    noise alone falls 1 dB for each dB the level rises; the noise's
    A-weighting is IEC 61672-1's. Reading an interface's own floor in a
    loopback before measuring through it is common practice.

    Examples
    --------
    A loopback whose only fault is white noise 1e-5 FS RMS: at -40 dBFS the
    residual is the noise, so the THD+N is the noise floor less the level:

    >>> import numpy as np, benchkit
    >>> rng = np.random.default_rng(1)
    >>> t = np.arange(48000) / 48000
    >>> hiss = 1e-5 * rng.standard_normal(t.size)
    >>> levels = [(d, benchkit.analyze_tone(10 ** (d / 20) * np.sin(2 * np.pi * 997 * t) + hiss, 48000))
    ...           for d in (-40.0, -20.0)]
    >>> response = [benchkit.analyze_tone(0.3 * np.sin(2 * np.pi * f * t), 48000) for f in (100.0, 1000.0, 10000.0)]
    >>> r = benchkit.analyze_loopback(levels, response, noise=benchkit.analyze_noise(hiss, 48000),
    ...                               latencies_samples=(480, 480), stream_s=60.0)
    >>> bool(abs(r.levels[0].thdn_db - (r.noise_dbfs - r.levels[0].level_dbfs)) < 0.2)
    True
    >>> r.latency_spread_samples, round(r.flatness_db[1] - r.flatness_db[0], 3)
    (0, 0.0)
    """
    from benchkit.errors import BenchWarning, BenchkitError

    latencies = tuple(int(n) for n in latencies_samples)
    if not levels or not response or not latencies:
        raise BenchkitError("a self-test needs its level steps, its response and at least one start")
    warnings = []
    if faults_reported or len(gaps_heard_s):
        warnings.append(BenchWarning("dropout", f"the stream dropped out over {stream_s:g} s: {faults_reported} "
                                     f"fault(s) reported, {len(gaps_heard_s)} gap(s) heard in the tone"))
    spread = max(latencies) - min(latencies)
    if spread:
        warnings.append(BenchWarning("latency-moves", f"the round trip changed by {spread} samples over "
                                     f"{len(latencies)} starts: each capture is aligned by its own marker, but a "
                                     "reference input is needed for phase figures"))
    return LoopbackResult(
        sample_rate_hz=noise.sample_rate_hz, bandwidth_hz=tuple(noise.bandwidth_hz), channel=channel,
        levels=level_rows(levels), response=response_rows(list(response), None if other is None else list(other)),
        noise_dbfs=units.dbfs_from_rms(noise.rms_fs), noise_a_dbfs=units.dbfs_from_rms(noise.a_rms_fs),
        latencies_samples=latencies, stream_s=float(stream_s), faults_reported=int(faults_reported),
        gaps_heard_s=tuple(float(g) for g in gaps_heard_s), other_channel=other_channel, volts_per_fs=volts_per_fs,
        warnings=tuple(warnings), conditions=conditions or {}, calibration=calibration)


def loopback_figures(doc: dict) -> list[Figure]:
    """What compares between two self-tests: the best residual, the noise,
    the match of the inputs, the round trip's spread, the dropouts."""
    return [
        Figure("best_thdn_db", "lowest residual THD+N", finite(doc.get("best_thdn_db")), "dB", "lower", headline=True),
        Figure("noise_a_dbfs", "noise floor, A-weighted", finite(doc.get("noise_a_dbfs")), "dBFS", "lower", headline=True),
        Figure("noise_dbfs", "noise floor", finite(doc.get("noise_dbfs")), "dBFS", "lower"),
        Figure("worst_match_db", "inputs' largest level difference", finite(doc.get("worst_match_db")), "dB", "lower"),
        Figure("latency_spread_ms", "round trip's spread over starts", finite(doc.get("latency_spread_ms")), "ms", "lower"),
        Figure("dropouts", "dropouts", finite(doc.get("dropouts")), "", "lower", at=f"{doc.get('stream_s', 0):g} s",
               headline=True),
    ]
