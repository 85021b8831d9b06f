"""Uncertainty of a figure, by the GUM method (JCGM 100:2008).

Every figure benchkit reports carries its standard uncertainty, combined
from named contributions (a :class:`Budget`):

* type A, from the data: the least-squares covariance of a fitted
  amplitude (for a sine in white noise, the Cramer-Rao bound 2 sigma^2 / N,
  IEEE 1057 Annex; Kay, Fundamentals of Statistical Signal Processing I),
  the variance of a band-power estimate from its degrees of freedom, the
  scatter of repeated takes (s / sqrt(n), JCGM 100 4.2);
* type B, from the chain (:class:`Chain`): the calibration's voltmeter
  and repeatability, the pad's resistors (a stated tolerance +-a is a
  rectangular distribution, u = a / sqrt(3), JCGM 100 4.3.7), the
  interface's flatness at the frequency against the calibration's, the
  load resistor for watts.

Contributions are combined root-sum-square (uncorrelated inputs, JCGM 100
5.1.2; a product of powers in relative terms, 5.1.6). The expanded
uncertainty is U = k u with k = 2 (about 95 %, JCGM 100 6.2-6.3).

In a result document: ``"uncertainty": {"coverage_factor": 2, "standard":
{key: u}, "bounds": [key, ...], "dominant": {key: contribution}}``; a
figure in an array has an array of the same length (None where an item is
a bound), a nested one a dotted key (``"steps.thdn_db"``).

Pure: numbers in, numbers out.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np

#: The coverage factor of every expanded uncertainty benchkit prints.
COVERAGE = 2
#: dB per unit relative change of an amplitude (small changes): 20 / ln 10.
DB_PER_REL = 20.0 / math.log(10.0)
#: Contributions a comparison of two runs of one chain shares (correlation
#: +1: they cancel in the difference, JCGM 100 5.2).
SHARED = frozenset({"calibration", "pad", "flatness", "load", "chain"})


def rectangular(half_width: float) -> float:
    """The standard uncertainty of a value known only to lie within
    +-``half_width``: a / sqrt(3) (JCGM 100 4.3.7)."""
    return abs(half_width) / math.sqrt(3.0)


def rss(*u: float) -> float:
    """Root-sum-square of uncorrelated standard uncertainties."""
    return math.sqrt(sum(float(x) ** 2 for x in u))


def mean_and_u(values) -> tuple[float, float]:
    """The mean of repeated readings and its type-A standard uncertainty,
    s / sqrt(n) (JCGM 100 4.2; s with n - 1 degrees of freedom)."""
    v = np.asarray(values, dtype=float)
    if v.size < 2:
        raise ValueError("a type-A spread needs at least two readings")
    return float(np.mean(v)), float(np.std(v, ddof=1) / math.sqrt(v.size))


def db_from_rel(u_rel: float) -> float:
    """An amplitude's relative standard uncertainty in dB (8.686 x u_rel)."""
    return DB_PER_REL * u_rel


def rel_from_db(u_db: float) -> float:
    return u_db / DB_PER_REL


@dataclass(frozen=True)
class Budget:
    """One figure's standard uncertainty by named contribution, each in the
    figure's own unit: "noise" and "repeats" (type A); "calibration",
    "pad", "flatness", "load", "interpolation" (type B, or carried
    through)."""

    parts: tuple[tuple[str, float], ...] = ()

    @classmethod
    def of(cls, **parts: float | None) -> "Budget":
        """Named contributions; a zero one is left out, a non-finite one
        (not known) makes the whole budget not known (:attr:`known`)."""
        return cls(tuple((k, float(v)) for k, v in parts.items() if v is not None and not (v == 0)))

    @property
    def known(self) -> bool:
        return all(math.isfinite(v) for _, v in self.parts)

    @property
    def u(self) -> float:
        """The combined standard uncertainty (uncorrelated contributions)."""
        return rss(*(v for _, v in self.parts))

    @property
    def dominant(self) -> str | None:
        return max(self.parts, key=lambda p: p[1])[0] if self.parts else None

    def expanded(self, k: float = COVERAGE) -> float:
        return k * self.u

    def scaled(self, factor: float) -> "Budget":
        """Every contribution times ``factor`` (a change of unit, or a
        figure proportional to this one)."""
        return Budget(tuple((k, abs(factor) * v) for k, v in self.parts))

    def plus(self, other: "Budget") -> "Budget":
        """The budget of a sum of independent figures (or of a product, both
        in relative terms): like contributions combine root-sum-square."""
        out: dict[str, float] = {}
        for k, v in (*self.parts, *other.parts):
            out[k] = math.hypot(out.get(k, 0.0), v)
        return Budget(tuple(out.items()))

    def unshared(self) -> "Budget":
        """What two runs of the same chain do not share (:data:`SHARED` cancels)."""
        return Budget(tuple(p for p in self.parts if p[0] not in SHARED))


# --- the analysis window's band-power statistics -------------------------------------

@lru_cache(maxsize=8)
def bin_correlation(coeffs: tuple[float, ...]) -> float:
    """sum_d |rho(d)|^2 for a cosine-sum window: rho(d) is the correlation
    of white noise's DFT bins d apart under the window (the DFT of w^2 over
    its sum). The variance of a band power summed over M bins of one
    windowed periodogram is (sum_d |rho(d)|^2 / M) of its square (for
    white noise, and M well over the window's width); a rectangular window
    gives 1, Hann 35/18."""
    n = 256
    x = 2.0 * np.pi * np.arange(n) / n
    w = sum((-1) ** m * a * np.cos(m * x) for m, a in enumerate(coeffs))
    rho = np.fft.fft(w**2) / np.sum(w**2)
    return float(np.sum(np.abs(rho) ** 2))


def band_power_rel(bins: int, coeffs: tuple[float, ...], records: int = 1) -> float:
    """The relative standard uncertainty of a band power of white noise read
    from ``bins`` bins of one windowed periodogram, averaged over
    ``records`` independent ones: sqrt(2 / nu), nu its degrees of freedom."""
    if bins <= 0:
        return math.inf
    return math.sqrt(bin_correlation(tuple(coeffs)) / (bins * max(records, 1)))


def welch_power_rel(weights: np.ndarray, segments: int, overlap_rho: float, coeffs: tuple[float, ...]) -> float:
    """The relative standard uncertainty of a Welch band power sum_k q_k
    (``weights``: each bin's share, e.g. the PSD times a weighting, its
    expected values), from ``segments`` segments whose neighbours correlate
    by ``overlap_rho`` in power: var = c_w sum q^2 / (sum q)^2 / K_eff, with
    K_eff = K / (1 + 2 rho (K - 1) / K) (Welch 1967)."""
    q = np.asarray(weights, dtype=float)
    total = float(np.sum(q))
    if total <= 0 or segments < 1:
        return math.inf
    k_eff = segments / (1.0 + 2.0 * overlap_rho * (segments - 1) / segments)
    return math.sqrt(bin_correlation(tuple(coeffs)) * float(np.sum(q**2)) / total**2 / k_eff)


# --- the chain from the stage to the numbers (type B) ---------------------------------

#: A pad resistor's tolerance when the profile states none, % (metal film: common practice).
PAD_TOLERANCE_PCT = 1.0
#: A dummy load's tolerance when none is stated, % (wirewound power resistors: common practice).
LOAD_TOLERANCE_PCT = 5.0


def pad_ratio_rel(r1_ohms: float, r2_ohms: float, tolerance_pct: float, input_ohms: float | None = None) -> float:
    """The relative standard uncertainty of a divider's ratio (R1 + R2') / R2'
    (R2' = R2 parallel with the input), each resistor +-``tolerance_pct``
    rectangular (JCGM 100 5.1.2 and 4.3.7); the input's loading is a
    correction, its own uncertainty not counted."""
    u1 = r1_ohms * rectangular(tolerance_pct / 100.0)
    u2 = r2_ohms * rectangular(tolerance_pct / 100.0)
    rin = math.inf if input_ohms is None else input_ohms
    r2p = r2_ohms if math.isinf(rin) else r2_ohms * rin / (r2_ohms + rin)
    dr2p = 1.0 if math.isinf(rin) else (rin / (r2_ohms + rin)) ** 2  # dR2'/dR2
    k = (r1_ohms + r2p) / r2p
    dk_dr1, dk_dr2 = 1.0 / r2p, -r1_ohms / r2p**2 * dr2p
    return math.hypot(dk_dr1 * u1, dk_dr2 * u2) / k


@dataclass(frozen=True)
class Chain:
    """The chain's type-B contributions, relative standard uncertainties of
    the volts at the stage (and of the load for watts), as a capture's
    sidecar keeps them (``"chain"``).

    ``response`` is the interface's loopback response, [[Hz, dB]] re the
    calibration's frequency: the flatness at a frequency is its deviation
    there, uncorrected, a rectangular +-|g| (u = |g| / sqrt(3))."""

    calibration: float = 0.0
    pad: float = 0.0
    load: float = 0.0
    response: tuple = ()

    @classmethod
    def of_profile(cls, profile, load_tolerance_pct: float | None = None) -> "Chain":
        """From a calibration profile: its voltmeter (a stated accuracy,
        rectangular) and repeatability; its pad's resistors (the stated
        tolerance, else :data:`PAD_TOLERANCE_PCT`) or, measured in place,
        the repeatability of the two reads."""
        u = profile.uncertainty or {}
        volt = rectangular(float(u.get("voltmeter_pct") or 0.0) / 100.0)
        repeat = rel_from_db(float(u.get("repeatability_db") or 0.0))  # one read's scatter
        reads = max(int(u.get("repeatability_reads") or 1), 1)  # the input's scale is their mean
        pad, spec = 0.0, profile.pad
        if spec is not None and spec.measured:  # one read through the pad over the mean of the reads
            pad = repeat * math.sqrt(1.0 + 1.0 / reads)
        elif spec is not None and spec.r1_ohms is not None and spec.r2_ohms is not None:
            tol = getattr(spec, "tolerance_pct", None)
            pad = pad_ratio_rel(spec.r1_ohms, spec.r2_ohms, PAD_TOLERANCE_PCT if tol is None else tol, spec.input_ohms)
        return cls(math.hypot(volt, repeat / math.sqrt(reads)), pad, cls.load_rel(load_tolerance_pct),
                   tuple(tuple(p) for p in profile.loopback_response or ()))

    @staticmethod
    def load_rel(tolerance_pct: float | None) -> float:
        return rectangular((LOAD_TOLERANCE_PCT if tolerance_pct is None else tolerance_pct) / 100.0)

    @classmethod
    def from_dict(cls, d: dict | None) -> "Chain | None":
        if not isinstance(d, dict):
            return None
        num = (lambda v: float(v) if isinstance(v, (int, float)) and math.isfinite(v) and v >= 0 else 0.0)
        resp = tuple((float(f), float(g)) for f, g in (d.get("response") or ()) if math.isfinite(f) and math.isfinite(g))
        return cls(num(d.get("calibration_rel")), num(d.get("pad_rel")), num(d.get("load_rel")), resp)

    def to_dict(self) -> dict:
        return {"calibration_rel": self.calibration, "pad_rel": self.pad, "load_rel": self.load,
                "response": [list(p) for p in self.response]}

    def flatness_db(self, freq_hz: float | None, against_hz: float | None = None) -> float:
        """The standard uncertainty (dB) the interface's response leaves at
        ``freq_hz`` against the calibration's frequency, or against
        ``against_hz`` (a harmonic against its fundamental)."""
        if not self.response or freq_hz is None:
            return 0.0
        f = np.array([p[0] for p in self.response], dtype=float)
        g = np.array([p[1] for p in self.response], dtype=float)
        ok = f > 0
        if np.count_nonzero(ok) < 2:
            return 0.0
        f, g = f[ok], g[ok]
        order = np.argsort(f)

        def at(x):
            return float(np.interp(math.log10(x), np.log10(f[order]), g[order]))

        dev = at(freq_hz) - (0.0 if against_hz is None else at(against_hz))
        return rectangular(dev)

    def volts(self, freq_hz: float | None) -> Budget:
        """The relative budget of volts at the stage at ``freq_hz``."""
        return Budget.of(calibration=self.calibration, pad=self.pad,
                         flatness=rel_from_db(self.flatness_db(freq_hz)))

    def watts(self, freq_hz: float | None) -> Budget:
        """The relative budget of watts V^2 / R: twice the volts', and the load's."""
        return self.volts(freq_hz).scaled(2.0).plus(Budget.of(load=self.load))


# --- a result document's uncertainty block -------------------------------------------

class Collector:
    """Gathers a result's figures' budgets into its ``"uncertainty"`` block:
    ``standard`` (each figure's u), ``shared`` (the part of it two runs on
    one chain share: :data:`SHARED`, it cancels in their difference),
    ``dominant`` (the largest contribution's name) and ``bounds`` (figures
    that are upper bounds, with no uncertainty)."""

    def __init__(self):
        self.standard: dict = {}
        self.shared: dict = {}
        self.dominant: dict = {}
        self.bounds: list[str] = []

    def put(self, key: str, budget: Budget, scale: float = 1.0) -> None:
        """``key``'s budget, in the figure's unit after ``scale`` (left out
        when a contribution is not known, or the scale is not finite)."""
        if not budget.known or not math.isfinite(scale):
            return
        self.standard[key] = budget.u * abs(scale)
        common = rss(*(v for k, v in budget.parts if k in SHARED)) * abs(scale)
        if common > 0:
            self.shared[key] = common
        if len(budget.parts) > 1:
            self.dominant[key] = budget.dominant

    def put_list(self, key: str, budgets: list, scales=None, bounds: bool = True) -> None:
        """An array figure's budgets, each in its unit after its ``scales``
        (None: the item is a bound, or with ``bounds`` False has no value;
        a budget not known gives None too, not a bound)."""
        scales = [1.0] * len(budgets) if scales is None else [abs(s) for s in scales]
        is_bound = any(b is None for b in budgets)
        budgets = [None if b is None or not b.known or not math.isfinite(s) else b for b, s in zip(budgets, scales)]
        self.standard[key] = [None if b is None else b.u * s for b, s in zip(budgets, scales)]
        common = [None if b is None else rss(*(v for k, v in b.parts if k in SHARED)) * s
                  for b, s in zip(budgets, scales)]
        if any(common):
            self.shared[key] = common
        if bounds and is_bound:
            self.bound(key)

    def put_columns(self, key: str, present=None, **parts) -> None:
        """:meth:`put_list` with the budgets given as columns, one array a
        contribution (an item a row), for long arrays: an item not
        ``present`` is None and makes the figure a bound; one with a
        contribution not known is None."""
        cols = [np.asarray(v, dtype=float) for v in parts.values()]
        size = cols[0].size
        present = np.ones(size, dtype=bool) if present is None else np.asarray(present, dtype=bool)
        known = present.copy()
        for c in cols:
            known &= np.isfinite(c)
        ok = known.tolist()
        # (in the order given, as Budget.u sums them)
        self.standard[key] = [v if k else None for v, k in zip(np.sqrt(sum(c * c for c in cols)).tolist(), ok)]
        common = [c for name, c in zip(parts, cols) if name in SHARED]
        if common:
            shared = np.sqrt(sum(c * c for c in common))
            if np.any(shared[known] > 0):
                self.shared[key] = [v if k else None for v, k in zip(shared.tolist(), ok)]
        if not present.all():
            self.bound(key)

    def bound(self, *keys: str) -> None:
        self.bounds += [k for k in keys if k not in self.bounds]

    def block(self) -> dict:
        return block(self.standard, self.dominant, self.bounds, self.shared)


def block(standard: dict, dominant: dict | None = None, bounds=(), shared: dict | None = None) -> dict:
    """The ``"uncertainty"`` block of a result document."""
    out = {"coverage_factor": COVERAGE, "standard": standard}
    if shared:
        out["shared"] = shared
    if bounds:
        out["bounds"] = sorted(set(bounds))
    if dominant:
        out["dominant"] = dominant
    return out


def stacked(prefix: str, blocks: list[dict | None]) -> dict:
    """The uncertainty block of an array of results (``prefix``: the
    array's key, e.g. "steps"): each figure's u as an array of the same
    length (None where an item has none), its key ``prefix.key``."""
    def part(name: str) -> dict:
        keys = list(dict.fromkeys(k for b in blocks for k in ((b or {}).get(name) or {})))
        return {f"{prefix}.{k}": [((b or {}).get(name) or {}).get(k) for b in blocks] for k in keys}

    bounds = {f"{prefix}.{k}" for b in blocks for k in (b or {}).get("bounds") or ()}
    return block(part("standard"), part("dominant"), bounds, part("shared"))


def lookup(doc: dict, key: str, *index: int, part: str = "standard") -> float | None:
    """A figure's standard uncertainty from a result document's block
    (``index``: the item of an array figure, and of an array in it;
    ``part``: "shared" for the part of it a run on the same chain shares),
    None when it has none."""
    std = ((doc.get("uncertainty") or {}).get(part) or {}) if isinstance(doc, dict) else {}
    u = std.get(key)
    for i in index:
        u = u[i] if isinstance(u, list) and 0 <= i < len(u) else None
    return float(u) if isinstance(u, (int, float)) and not isinstance(u, bool) and math.isfinite(u) else None


def shown(value: float, u: float | None, digits: int = 2, k: float = COVERAGE) -> str:
    """``value +- U`` (expanded, k = 2), the value to the uncertainty's two
    significant digits, but never finer than ``digits`` + 1 decimals
    (``-6.021 +- <0.001``)."""
    text, big = shown_parts(value, u, digits, k)
    return text if big is None else f"{text} +- {big}"


def shown_parts(value: float, u: float | None, digits: int = 2, k: float = COVERAGE) -> tuple[str, str | None]:
    """:func:`shown` in two parts, the value and U (None without u), for a
    table's two columns."""
    if u is None or not math.isfinite(u) or u <= 0:
        return f"{value:.{digits}f}", None
    big = k * u
    decimals = max(0, min(digits + 1, 1 - int(math.floor(math.log10(big)))))
    if round(big, decimals) == 0:
        return f"{value:.{decimals}f}", f"<{10.0 ** -decimals:.{decimals}f}"
    return f"{value:.{decimals}f}", f"{big:.{decimals}f}"


def shown_quantity(value: float, u: float | None, unit: str, k: float = COVERAGE) -> str:
    """``1.414 Vrms +- 2.1 mVrms``: a quantity and its expanded uncertainty (k = 2)."""
    from benchkit.units import quantity

    if u is None or not math.isfinite(u) or u <= 0:
        return quantity(value, unit)
    return f"{quantity(value, unit)} +- {quantity(k * u, unit, 2)}"
