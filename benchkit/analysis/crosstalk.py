"""Crosstalk and channel balance of a stereo stage.

One channel is driven with a tone, the other has no signal but its load;
what reaches the undriven channel's output at the tone's frequency, over
the driven channel's output, is the crosstalk (in dB, negative: the
lower, the better separated; its inverse is the separation; common
practice, as IEC 60268-3 describes crosstalk: from memory). The leak is
read at the exact frequency the driven channel's fit found, off the
windowed spectrum (:func:`benchkit.analysis.spectrum.read_components`),
so it is measured below the broadband noise; where it does not stand
FLOOR_MARGIN_DB over the noise of its bins it is marked as an upper
bound. Channel balance is the difference of the two channels' outputs
when each is driven alike.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from benchkit import units
from benchkit.analysis import one_channel
from benchkit.analysis import spectrum as sp
from benchkit.analysis.tone import DEFAULT_BAND_HZ, analyze_tone
from benchkit.analysis.compare import Figure, finite
from benchkit.analysis.documents import Conditions, document
from benchkit.analysis.uncertainty import DB_PER_REL, Budget, Collector
from benchkit.errors import BenchkitError
from benchkit.units import quantity


#: A leak under this over its bins' noise is an upper bound (noise alone
#: passes it in one bin of 20000: an exponential's tail, e^-10).
FLOOR_MARGIN_DB = 10.0
#: Bins either side of the tone over which the leak's noise is taken.
FLOOR_SPAN_BINS = 200


@dataclass(frozen=True)
class Leak:
    """What one driven tone put into the other channel."""

    frequency_hz: float
    driven: str  # "A" or "B"
    driven_fs: float
    leaked_fs: float
    floor_fs: float
    ratio: float  # leaked over driven, in volts where both scales are known
    valid: bool
    driven_vrms: float | None = None
    #: the leak's and the driven tone's relative standard uncertainties (type A: the noise under each read)
    leaked_rel: float = 0.0
    driven_rel: float = 0.0

    @property
    def budget(self) -> Budget | None:
        """The crosstalk's budget in dB (None: a bound, in the noise)."""
        return None if self.below_floor else Budget.of(noise=DB_PER_REL * math.hypot(self.leaked_rel, self.driven_rel))

    @property
    def crosstalk_db(self) -> float:
        return float(units.db_from_ratio(max(self.ratio, 1e-15)))

    @property
    def below_floor(self) -> bool:
        return self.leaked_fs < self.floor_fs * units.ratio_from_db(FLOOR_MARGIN_DB)

    def to_dict(self) -> dict:
        return {"frequency_hz": self.frequency_hz, "driven": self.driven, "crosstalk_db": self.crosstalk_db,
                "separation_db": -self.crosstalk_db, "driven_dbfs": units.dbfs_from_peak(self.driven_fs),
                "leaked_dbfs": units.dbfs_from_peak(max(self.leaked_fs, 1e-15)),
                "floor_dbfs": units.dbfs_from_peak(max(self.floor_fs, 1e-15)), "below_floor": self.below_floor,
                "driven_vrms": self.driven_vrms, "valid": self.valid}


def analyze_crosstalk(samples, sample_rate: float, *, frequency_hz: float, driven_channel: int = 1,
                      other_channel: int = 2, driven_scale: float | None = None, other_scale: float | None = None,
                      bandwidth_hz=DEFAULT_BAND_HZ) -> Leak:
    """What a tone driven into one channel of a stereo stage leaks into the
    other.

    Parameters
    ----------
    samples : array_like
        Frames x channels, in FS: the driven channel and the other one.
    sample_rate : float
        In Hz.
    frequency_hz : float
        The driven tone (found within 2 % or 5 bins).
    driven_channel, other_channel : int
        The two channels of ``samples``, from 1.
    driven_scale, other_scale : float, optional
        Each channel's volts peak per FS: with both, the ratio is in volts
        (pads and input gains that differ cancel), else in FS.
    bandwidth_hz : (lo, hi)
        The band of the driven tone's analysis.

    Returns
    -------
    Leak
        ``crosstalk_db`` (the leak over the driven tone), ``below_floor``
        (the leak lies within 10 dB of the noise around it: a bound).

    References
    ----------
    Crosstalk as the undriven channel's output at the driven frequency
    over the driven channel's, in dB (common practice).

    Examples
    --------
    A thousandth of channel 1's tone in channel 2 is -60 dB:

    >>> import numpy as np, benchkit
    >>> t = np.arange(48000) / 48000
    >>> a = 0.5 * np.sin(2 * np.pi * 1000 * t)
    >>> x = benchkit.analyze_crosstalk(np.stack([a, a / 1000], axis=1), 48000, frequency_hz=1000.0)
    >>> round(x.crosstalk_db, 2)
    -60.0
    """
    if driven_channel == other_channel:
        raise BenchkitError("the driven channel and the other one must differ")
    return leak(one_channel(samples, driven_channel, "analyze_crosstalk"),
                one_channel(samples, other_channel, "analyze_crosstalk"), sample_rate, frequency_hz,
                driven_scale, other_scale, bandwidth_hz, "A" if driven_channel < other_channel else "B")


def leak(driven, other, sample_rate: float, frequency_hz: float, driven_scale: float | None = None,
         other_scale: float | None = None, bandwidth_hz=DEFAULT_BAND_HZ, driven_name: str = "A") -> Leak:
    """The tone near ``frequency_hz`` in ``driven`` and what of it is in
    ``other`` (two channels of one record), with the noise floor of the
    bins around it. The ratio is in volts when both scales are given (in
    volts peak per FS), else in FS."""
    r = analyze_tone(np.asarray(driven, float), sample_rate, fundamental_hz=frequency_hz, bandwidth_hz=bandwidth_hz,
                     volts_per_fs=driven_scale)
    y = np.asarray(other, float)
    y = y - float(np.mean(y))
    n = y.size
    spec = sp.windowed_rfft(y)
    nu = r.fundamental_hz * n / sample_rate
    amp = float(abs(sp.read_components(spec, n, np.array([nu]))[0]))
    k = int(round(nu))
    lo, hi = max(1, k - FLOOR_SPAN_BINS), min(spec.size - 1, k + FLOOR_SPAN_BINS)
    around = sp.power(spec[lo:hi])
    guard = sp.MAIN_LOBE_BINS + 2
    around = np.concatenate([around[: max(0, k - guard - lo)], around[k + guard + 1 - lo:]])
    floor = math.sqrt(float(np.median(around)) / math.log(2.0)) * sp.sine_amplitude_scale(n) if around.size else 0.0
    scale = (other_scale / driven_scale) if driven_scale and other_scale else 1.0
    # the read's noise: the floor's (raw) bin power times what the read makes of it, u(A) = sqrt(E|e|^2 / 2)
    u_leak = floor / sp.sine_amplitude_scale(n) * math.sqrt(float(sp.read_noise_gain(n, np.array([nu]), spec.size)[0]) / 2)
    return Leak(r.fundamental_hz, driven_name, r.fundamental_fs, amp, floor, amp * scale / r.fundamental_fs, r.valid,
                r.fundamental_vrms, u_leak / amp if amp > 0 else 0.0,
                r.level_rel_u)


@dataclass(frozen=True)
class CrosstalkResult:
    """Both directions of a stereo stage's crosstalk, and its balance."""

    leaks: tuple[Leak, ...]
    scaled: bool  # ratios in volts (both inputs' scales known) or in FS
    warnings: tuple[str, ...] = ()
    sample_rate_hz: float | None = None
    bandwidth_hz: tuple[float, float] | None = None
    #: what each output drove, ohms (as the run was told)
    load_ohms: float | None = None
    #: the calibration profile its capture's sidecar names (file, hash ...), none without one
    calibration: dict | None = None

    def direction(self, driven: str) -> list[Leak]:
        return [x for x in self.leaks if x.driven == driven]

    def balance_pairs(self) -> list[tuple[Leak, Leak]]:
        """The (A, B) leaks at each frequency where both were driven, both valid."""
        out = []
        for a in self.direction("A"):
            b = next((x for x in self.direction("B") if abs(x.frequency_hz / a.frequency_hz - 1) < 0.005), None)
            if b is not None and a.valid and b.valid:
                out.append((a, b))
        return out

    def balance(self) -> list[tuple[float, float]]:
        """(frequency, B over A in dB) where both were driven: their
        outputs, each at its own input's scale."""
        out = []
        for a, b in self.balance_pairs():
            va, vb = (a.driven_vrms, b.driven_vrms) if self.scaled else (a.driven_fs, b.driven_fs)
            out.append((a.frequency_hz, float(units.db_from_ratio(vb / va))))
        return out

    def near(self, frequency_hz: float = 1000.0) -> list[Leak]:
        """Each direction's valid leak nearest ``frequency_hz``."""
        out = []
        for side in ("A", "B"):
            got = [x for x in self.direction(side) if x.valid]
            if got:
                out.append(min(got, key=lambda x: abs(math.log(x.frequency_hz / frequency_hz))))
        return out

    def uncertainty(self) -> dict:
        """The uncertainty block: each leak's (the two reads' type A; a
        leak in the noise is a bound), each balance's (the two driven
        levels'; the inputs' scales are taken as known), the headline ones
        under the top-level keys."""
        out = Collector()
        for key, side in (("a_to_b", "A"), ("b_to_a", "B")):
            out.put_list(f"{key}.crosstalk_db", [x.budget for x in self.direction(side)])
        near = self.near()
        worst = max(near, key=lambda x: x.crosstalk_db) if near else None
        if worst is not None:
            if worst.budget is None:
                out.bound("crosstalk_db")
            else:
                out.put("crosstalk_db", worst.budget)
        pairs = self.balance_pairs()
        out.put_list("balance.balance_db", [Budget.of(noise=DB_PER_REL * math.hypot(a.driven_rel, b.driven_rel))
                                            for a, b in pairs], bounds=False)
        if pairs:
            a, b = min(pairs, key=lambda ab: abs(math.log(ab[0].frequency_hz / 1000.0)))
            out.put("balance_db", Budget.of(noise=DB_PER_REL * math.hypot(a.driven_rel, b.driven_rel)))
        return out.block()

    def to_dict(self) -> dict:
        near = self.near()
        worst = max(near, key=lambda x: x.crosstalk_db) if near else None
        balance = self.balance()
        at1k = min(balance, key=lambda fb: abs(math.log(fb[0] / 1000.0))) if balance else None
        return document("crosstalk", {
            "scaled": self.scaled,
            "sample_rate_hz": self.sample_rate_hz,
            "bandwidth_hz": list(self.bandwidth_hz) if self.bandwidth_hz else None,
            "reference_hz": None if worst is None else worst.frequency_hz,
            "crosstalk_db": None if worst is None else worst.crosstalk_db,
            "balance_db": None if at1k is None else at1k[1],
            "a_to_b": [x.to_dict() for x in self.direction("A")],
            "b_to_a": [x.to_dict() for x in self.direction("B")],
            "balance": [{"frequency_hz": f, "balance_db": b} for f, b in balance],
            "load_ohms": self.load_ohms,
            "warnings": list(self.warnings),
            "uncertainty": self.uncertainty(),
        }, Conditions(self.sample_rate_hz, self.bandwidth_hz, sp.WINDOW_NAME,
                      "the driven tone fitted; the leak read at its frequency by least squares", 1,
                      "both inputs' scales" if self.scaled else "none", None, self.load_ohms,
                      more={"floor_margin_db": FLOOR_MARGIN_DB}).calibrated(self.calibration))


def crosstalk_figures(doc: dict) -> list[Figure]:
    at = f"{quantity(doc['reference_hz'], 'Hz', 4)}" if finite(doc.get("reference_hz")) is not None else ""
    out = [Figure("crosstalk_db", "crosstalk, the worse direction", finite(doc.get("crosstalk_db")), "dB", "lower", at=at,
                  headline=True).of(doc, "crosstalk_db"),
           Figure("balance_db", "channel balance", finite(doc.get("balance_db")), "dB", "nearer", at=at,
                  headline=True).of(doc, "balance_db")]
    for key, name in (("a_to_b", "A into B"), ("b_to_a", "B into A")):
        for i, x in enumerate(doc.get(key) or []):
            f = finite(x.get("frequency_hz"))
            if f is not None:
                out.append(Figure(f"crosstalk_{key}_db@{f:.4g}Hz", f"crosstalk {name}", finite(x.get("crosstalk_db")),
                                  "dB", "lower", at=f"{quantity(f, 'Hz', 4)}").of(doc, f"{key}.crosstalk_db", i))
    return out
