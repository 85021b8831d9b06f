"""Frequency response figures: corners, ripple, the coupling capacitor.

Pure functions on a measured response (log-spaced frequencies, magnitude
in dB, phase in degrees), whichever method measured it, and the
:class:`ResponseResult` both methods hand back (JSON kind "sweep").
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

# scipy is imported in the functions that use it: it is slow to load, and the
# command line (which reads this module) starts without it

from benchkit import units
from benchkit.analysis.documents import Conditions, document
from benchkit.analysis.spectrum import WINDOW_NAME
from benchkit.analysis.tone import DEFAULT_BAND_HZ, HARMONIC_OVER_FLOOR_DB
from benchkit.analysis.compare import Figure, finite
from benchkit.analysis.uncertainty import Budget, Collector, rel_from_db

#: The level the corners are referred to is read here unless told otherwise.
REFERENCE_HZ = 1000.0
#: How each method reads the response.
METHODS = {"sweep": "a synchronized log sweep deconvolved, its harmonics separated in time",
           "stepped": "stepped sines, each fitted by least squares (the tone analysis)"}
#: A low corner "fits a first-order high-pass" when the fit's RMS error
#: over the octave and a half either side of it is below this.
FIRST_ORDER_FIT_DB = 0.25


def level_at(freq_hz: np.ndarray, mag_db: np.ndarray, at_hz: float) -> float | None:
    """Magnitude at ``at_hz``, interpolated in log frequency; None outside."""
    f = np.asarray(freq_hz, float)
    if not f[0] <= at_hz <= f[-1]:
        return None
    return float(np.interp(math.log(at_hz), np.log(f), np.asarray(mag_db, float)))


def corners(freq_hz: np.ndarray, mag_db: np.ndarray, ref_db: float, drop_db: float,
            ref_hz: float = REFERENCE_HZ) -> tuple[float | None, float | None]:
    """The frequencies below and above ``ref_hz`` where the magnitude
    first falls ``drop_db`` under ``ref_db`` (log interpolation); None when
    it stays above within the measured range."""
    f = np.asarray(freq_hz, float)
    m = np.asarray(mag_db, float) - (ref_db - drop_db)  # negative: below the corner level
    i_ref = int(np.clip(np.searchsorted(f, ref_hz), 0, f.size - 1))

    def cross(i: int, j: int) -> float:
        t = m[i] / (m[i] - m[j])
        return float(math.exp(math.log(f[i]) + t * (math.log(f[j]) - math.log(f[i]))))

    low = high = None
    for i in range(i_ref, 0, -1):
        if m[i - 1] < 0 <= m[i]:
            low = cross(i, i - 1)
            break
    for i in range(i_ref, f.size - 1):
        if m[i + 1] < 0 <= m[i]:
            high = cross(i, i + 1)
            break
    return low, high


def ripple(freq_hz, mag_db, low_hz: float | None, high_hz: float | None,
           band_hz: tuple[float, float] | None = DEFAULT_BAND_HZ) -> float | None:
    """Peak-to-peak magnitude over the passband: between the -1 dB points
    (the measured range where one lies outside it), within the band."""
    f = np.asarray(freq_hz, float)
    lo = max(low_hz or f[0], band_hz[0] if band_hz else 0.0)
    hi = min(high_hz or f[-1], band_hz[1] if band_hz else math.inf)
    sel = (f >= lo) & (f <= hi)
    if sel.sum() < 2:
        return None
    m = np.asarray(mag_db, float)[sel]
    return float(m.max() - m.min())


@dataclass(frozen=True)
class CornerFit:
    """A first-order high-pass |H| = 1/sqrt(1 + (fc/f)^2) fitted to the low
    corner (circuit theory: a coupling capacitor into a resistive load)."""

    corner_hz: float
    rms_error_db: float
    fits: bool

    def to_dict(self) -> dict:
        return {"model": "first-order high-pass", "corner_hz": self.corner_hz,
                "rms_error_db": self.rms_error_db, "fits": self.fits}


def fit_first_order_highpass(freq_hz, mag_db, ref_db: float, near_hz: float) -> CornerFit | None:
    """Fit the high-pass over an octave and a half either side of the low
    -3 dB point ``near_hz`` (where the measured range allows)."""
    import scipy.optimize
    f = np.asarray(freq_hz, float)
    sel = (f >= near_hz / 2.8) & (f <= near_hz * 2.8)
    if sel.sum() < 5:
        return None
    fs, m = f[sel], np.asarray(mag_db, float)[sel] - ref_db

    def err(log_fc: float) -> np.ndarray:
        fc = math.exp(log_fc)
        return m + 10 * np.log10(1 + (fc / fs) ** 2)

    best = scipy.optimize.minimize_scalar(lambda v: float(np.sum(err(v) ** 2)),
                                          bounds=(math.log(near_hz / 3), math.log(near_hz * 3)), method="bounded")
    rms = float(np.sqrt(np.mean(err(best.x) ** 2)))
    return CornerFit(float(math.exp(best.x)), rms, rms < FIRST_ORDER_FIT_DB)


def coupling_capacitor_f(corner_hz: float, load_ohms: float) -> float:
    """C = 1 / (2 pi R f) (circuit theory), the stage's output impedance neglected."""
    return 1.0 / (2 * math.pi * load_ohms * corner_hz)


def group_delay_s(freq_hz, phase_deg) -> np.ndarray:
    """-d(phase)/d(omega) of the unwrapped phase."""
    ph = np.unwrap(np.radians(np.asarray(phase_deg, float)))
    return -np.gradient(ph, 2 * np.pi * np.asarray(freq_hz, float))


def smooth(freq_hz, mag_db, fraction: int) -> np.ndarray:
    """1/``fraction``-octave smoothing for display: the power average over
    a band of that width centred on each frequency. The raw data stay raw."""
    f = np.asarray(freq_hz, float)
    p = 10 ** (np.asarray(mag_db, float) / 10)
    half = 2 ** (0.5 / fraction)
    out = np.empty_like(p)
    for i, fi in enumerate(f):
        sel = (f >= fi / half) & (f <= fi * half)
        out[i] = p[sel].mean()
    return 10 * np.log10(out)


@dataclass(frozen=True)
class HarmonicCurve:
    """The k-th harmonic's level against the fundamental's frequency (NaN
    where it was not measured: k f outside the band)."""

    order: int
    freq_hz: np.ndarray
    level_dbc: np.ndarray
    #: what noise alone reads as at each frequency, dBc (None: not known)
    floor_dbc: np.ndarray | None = None

    @property
    def in_noise(self) -> np.ndarray:
        """Where the level does not stand over its noise floor by
        HARMONIC_OVER_FLOOR_DB (the tone analysis's test for one harmonic):
        noise may make up much of the reading there."""
        return in_noise(self.level_dbc, self.floor_dbc)

    def to_dict(self) -> dict:
        ok = np.isfinite(self.level_dbc)
        out = {"order": self.order, "freq_hz": self.freq_hz[ok].tolist(), "level_dbc": self.level_dbc[ok].tolist()}
        if self.floor_dbc is not None:
            out["floor_dbc"] = self.floor_dbc[ok].tolist()
        return out


def in_noise(level_db: np.ndarray, floor_db: np.ndarray | None) -> np.ndarray:
    """Where a level stands less than HARMONIC_OVER_FLOOR_DB over its noise
    floor (nowhere where the floor is not known)."""
    level = np.asarray(level_db, float)
    if floor_db is None:
        return np.zeros(level.shape, bool)
    floor = np.asarray(floor_db, float)
    return np.isfinite(level) & np.isfinite(floor) & (level < floor + HARMONIC_OVER_FLOOR_DB)


@dataclass(frozen=True)
class ResponseResult:
    """A measured frequency response with its derived figures.

    ``mag_db`` is in dB re ``units`` ("dB re 1 V/V" when both ends of the
    response are in volts, else "dB re the level at REF Hz"); ``thd_db``
    and ``thdn_db`` are per frequency (THD+N from the stepped method only).
    """

    method: str
    freq_hz: np.ndarray
    mag_db: np.ndarray
    phase_deg: np.ndarray
    harmonics: tuple[HarmonicCurve, ...]
    thd_db: np.ndarray
    thdn_db: np.ndarray | None
    scale_source: str
    mag_units: str
    reference_hz: float
    load_ohms: float | None = None
    band_hz: tuple[float, float] | None = DEFAULT_BAND_HZ
    warnings: tuple[str, ...] = ()
    info: dict = field(default_factory=dict)
    #: the magnitude's standard uncertainty at each frequency, dB (type A; None: not known)
    mag_u_db: np.ndarray | None = None

    @property
    def ref_db(self) -> float:
        v = level_at(self.freq_hz, self.mag_db, self.reference_hz)
        return float(np.max(self.mag_db)) if v is None else v

    @property
    def thd_floor_db(self) -> np.ndarray | None:
        """What noise alone reads as THD at each frequency, over the orders
        summed there (None where the harmonics' floors are not known)."""
        if not self.harmonics or any(c.floor_dbc is None for c in self.harmonics):
            return None
        return thd_db_from_harmonics(tuple(HarmonicCurve(c.order, c.freq_hz, np.where(np.isfinite(c.level_dbc), c.floor_dbc, np.nan))
                                           for c in self.harmonics), self.freq_hz.size)

    @property
    def thd_in_noise(self) -> np.ndarray:
        """Where THD does not stand over its noise floor (see HarmonicCurve.in_noise)."""
        return in_noise(self.thd_db, self.thd_floor_db)

    @property
    def corners_3db(self):
        return corners(self.freq_hz, self.mag_db, self.ref_db, 3.0, self.reference_hz)

    @property
    def corners_1db(self):
        return corners(self.freq_hz, self.mag_db, self.ref_db, 1.0, self.reference_hz)

    @property
    def corner_fit(self) -> CornerFit | None:
        low = self.corners_3db[0]
        return None if low is None else fit_first_order_highpass(self.freq_hz, self.mag_db, self.ref_db, low)

    @property
    def coupling_capacitor_f(self) -> float | None:
        fit = self.corner_fit
        if fit is None or not fit.fits or not self.load_ohms:
            return None
        return coupling_capacitor_f(fit.corner_hz, self.load_ohms)

    @property
    def ripple_db(self) -> float | None:
        lo, hi = self.corners_1db
        return ripple(self.freq_hz, self.mag_db, lo, hi, self.band_hz)

    def _u_at(self, f_hz: float | None) -> float | None:
        """The magnitude's u at a frequency (interpolated in log f), None outside."""
        if self.mag_u_db is None or f_hz is None or not self.freq_hz[0] <= f_hz <= self.freq_hz[-1]:
            return None
        return float(np.interp(math.log(f_hz), np.log(self.freq_hz), self.mag_u_db))

    def _corner_u(self, f_hz: float | None) -> float | None:
        """A corner's u, Hz: the magnitude's there and at the reference
        (the level it drops from), over the slope of the curve there
        (JCGM 100 5.1.2: the crossing's sensitivity to the level)."""
        u, u_ref = self._u_at(f_hz), self._u_at(self.reference_hz)
        if u is None or f_hz is None:
            return None
        slope = np.gradient(self.mag_db, self.freq_hz)
        s = abs(float(np.interp(f_hz, self.freq_hz, slope)))
        return math.hypot(u, u_ref or 0.0) / s if s > 0 else None

    def uncertainty(self) -> dict:
        """The uncertainty block: the magnitude's at each frequency, levels
        against the reference's, corners through the curve's slope, the
        ripple from its two extremes (type A, from the noise under the
        response; the corner fit and the capacitor take the -3 dB corner's
        relative u)."""
        out = Collector()
        if self.mag_u_db is None:
            return out.block()
        out.put_columns("response.mag_db", noise=self.mag_u_db)
        u_ref = self._u_at(self.reference_hz) or 0.0
        for key, f in (("level_20hz_db", 20.0), ("level_20khz_db", 20000.0)):
            u = self._u_at(f)
            if u is not None:
                out.put(key, Budget.of(noise=math.hypot(u, u_ref)))
        (low3, high3), (low1, high1) = self.corners_3db, self.corners_1db
        for key, f in (("low_3db_hz", low3), ("high_3db_hz", high3), ("low_1db_hz", low1), ("high_1db_hz", high1)):
            u = self._corner_u(f)
            if u is not None:
                out.put(key, Budget.of(noise=u))
        fit, low_u = self.corner_fit, self._corner_u(low3)
        if fit is not None and fit.fits and low_u is not None and low3:
            out.put("low_corner_fit.corner_hz", Budget.of(noise=low_u / low3), fit.corner_hz)
            if self.coupling_capacitor_f is not None:
                out.put("coupling_capacitor_uf", Budget.of(noise=low_u / low3), self.coupling_capacitor_f * 1e6)
        if self.ripple_db is not None:
            lo, hi = low1 or self.freq_hz[0], high1 or self.freq_hz[-1]
            sel = (self.freq_hz >= lo) & (self.freq_hz <= hi)
            if sel.any():
                m, u = self.mag_db[sel], self.mag_u_db[sel]
                out.put("ripple_db", Budget.of(noise=math.hypot(float(u[np.argmax(m)]), float(u[np.argmin(m)]))))
        return out.block()

    def to_dict(self) -> dict:
        low3, high3 = self.corners_3db
        low1, high1 = self.corners_1db
        fit = self.corner_fit
        cap = self.coupling_capacitor_f
        return document("sweep", {
            **self.info,
            "method": self.method,
            "scale_source": self.scale_source,
            "mag_units": self.mag_units,
            "reference_hz": self.reference_hz,
            "reference_level_db": self.ref_db,
            "response": {
                "freq_hz": self.freq_hz.tolist(),
                "mag_db": self.mag_db.tolist(),
                "phase_deg": self.phase_deg.tolist(),
                "group_delay_s": group_delay_s(self.freq_hz, self.phase_deg).tolist(),
            },
            "low_3db_hz": low3,
            "high_3db_hz": high3,
            "low_1db_hz": low1,
            "high_1db_hz": high1,
            "ripple_db": self.ripple_db,
            "level_20hz_db": level_at(self.freq_hz, self.mag_db, 20.0),
            "level_20khz_db": level_at(self.freq_hz, self.mag_db, 20000.0),
            "low_corner_fit": None if fit is None else fit.to_dict(),
            "load_ohms": self.load_ohms,
            "coupling_capacitor_uf": None if cap is None else cap * 1e6,
            "harmonic_responses": [h.to_dict() for h in self.harmonics],
            "distortion": {
                "freq_hz": self.freq_hz.tolist(),
                "thd_db": self.thd_db.tolist(),
                "thdn_db": None if self.thdn_db is None else self.thdn_db.tolist(),
                "thd_floor_db": None if self.thd_floor_db is None else self.thd_floor_db.tolist(),
                "thd_in_noise": self.thd_in_noise.tolist(),
            },
            "bandwidth_hz": None if self.band_hz is None else list(self.band_hz),
            "warnings": list(self.warnings),
            "uncertainty": self.uncertainty(),
        }, Conditions(self.info.get("sample_rate_hz"), self.band_hz, WINDOW_NAME if self.method == "stepped" else None,
                      METHODS.get(self.method, self.method), None, self.scale_source, None,
                      self.load_ohms).calibrated(self.info.get("calibration")))


def thd_db_from_harmonics(curves: tuple[HarmonicCurve, ...], n: int) -> np.ndarray:
    """THD per frequency from the harmonic curves, over the orders present
    at each frequency (NaN where none is)."""
    power = np.zeros(n)
    seen = np.zeros(n, bool)
    for c in curves:
        ok = np.isfinite(c.level_dbc)
        power[ok] += 10 ** (c.level_dbc[ok] / 10)
        seen |= ok
    out = np.full(n, np.nan)
    out[seen] = units.db_from_power_ratio(power[seen])
    return out


def response_figures(doc: dict) -> list[Figure]:
    fit = doc.get("low_corner_fit") or {}
    ref = finite(doc.get("reference_level_db")) or 0.0
    figures = [
        Figure("low_3db_hz", "-3 dB, low", finite(doc.get("low_3db_hz")), "Hz", "lower", headline=True),
        Figure("high_3db_hz", "-3 dB, high", finite(doc.get("high_3db_hz")), "Hz", "higher", headline=True),
        Figure("low_1db_hz", "-1 dB, low", finite(doc.get("low_1db_hz")), "Hz", "lower"),
        Figure("high_1db_hz", "-1 dB, high", finite(doc.get("high_1db_hz")), "Hz", "higher"),
        Figure("ripple_db", "ripple between the -1 dB points", finite(doc.get("ripple_db")), "dB", "lower"),
        Figure("level_20hz_db", "level at 20 Hz", finite(doc.get("level_20hz_db")), "dB", "nearer", target=ref),
        Figure("level_20khz_db", "level at 20 kHz", finite(doc.get("level_20khz_db")), "dB", "nearer", target=ref),
        Figure("corner_fit_hz", "first-order corner fit", finite(fit.get("corner_hz")) if fit.get("fits") else None,
               "Hz", "lower"),
        Figure("coupling_capacitor_uf", "coupling capacitor", finite(doc.get("coupling_capacitor_uf")), "uF", None),
    ]
    return [f.of(doc, "low_corner_fit.corner_hz" if f.name == "corner_fit_hz" else f.name) for f in figures]


def response_readings(doc: dict) -> list:
    """A response in V/V as output readings on a sixth-octave grid, for an
    output impedance from two logged runs (:mod:`benchkit.analysis.zout`)."""
    from benchkit.analysis.zout import Reading, phasor
    from benchkit.errors import BenchkitError

    if doc.get("mag_units") != "dB re 1 V/V":
        raise BenchkitError("a sweep gives the output impedance only as a gain in V/V: sweep with a reference "
                            "input and a calibrated (or virtual) scale")
    r = doc["response"]
    f, mag, ph = (np.asarray(r[k], float) for k in ("freq_hz", "mag_db", "phase_deg"))
    lo, hi = max(float(f[0]), 20.0), min(float(f[-1]), 20000.0)
    grid = lo * 2.0 ** (np.arange(0, math.log2(hi / lo) + 1e-9, 1.0 / 6.0))
    gm = np.interp(grid, f, mag)
    gp = np.interp(grid, f, np.degrees(np.unwrap(np.radians(ph))))
    drive = (doc.get("sweep") or {}).get("level_dbfs")
    u = ((doc.get("uncertainty") or {}).get("standard") or {}).get("response.mag_db")
    known = isinstance(u, list) and len(u) == f.size and all(isinstance(e, (int, float)) for e in u)
    gu = np.interp(grid, f, np.asarray(u, float)) if known else np.full(grid.size, np.nan)
    return [Reading(float(x), phasor(float(units.ratio_from_db(m)), float(p)), drive, True, True,
                    rel_from_db(float(e)) if np.isfinite(e) else None) for x, m, p, e in zip(grid, gm, gp, gu)]
