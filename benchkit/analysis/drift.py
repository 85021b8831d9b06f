"""DC drift: offset, drift rate, a first-order settling fit, steps, verdict.

Pure functions on a log of (time s, volts). The settling model is the
first-order response of a stage warming towards equilibrium,

    v(t) = v_final + (v_start - v_final) exp(-(t - t_start) / tau),

fitted by least squares (scipy.optimize.curve_fit) with its covariance
giving the uncertainties. Sudden steps (a bias adjustment, a bumped probe)
are flagged as events and the fit uses the log after the last one.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

# scipy is imported in the functions that use it: it is slow to load, and the
# command line (which reads this module) starts without it
from benchkit.errors import BenchWarning
from benchkit.analysis.compare import Figure, finite
from benchkit.analysis.documents import Conditions, document
from benchkit.analysis.uncertainty import Budget, Collector

#: A jump between two readings this many times the readings' own noise
#: (robust: from the median absolute difference) is a step, not drift.
STEP_SIGMAS = 12.0
#: Nor is a jump of fewer counts than this of the readings' resolution.
STEP_COUNTS = 4
#: Readings needed for a fit.
MIN_FIT_POINTS = 8


@dataclass(frozen=True)
class SettlingFit:
    """First-order settling: final value, time constant, when it settles."""

    final_v: float
    final_sd_v: float
    tau_s: float
    tau_sd_s: float
    start_s: float
    start_v: float
    settle_s: float | None  # when |v - final| stays within the band (None: no band)
    settle_sd_s: float | None
    band_v: float | None
    rms_residual_v: float

    def value_at(self, t_s) -> np.ndarray:
        t = np.asarray(t_s, float)
        return self.final_v + (self.start_v - self.final_v) * np.exp(-(t - self.start_s) / self.tau_s)

    def to_dict(self) -> dict:
        return {"final_v": self.final_v, "final_sd_v": self.final_sd_v, "tau_s": self.tau_s, "tau_sd_s": self.tau_sd_s,
                "settle_s": self.settle_s, "settle_sd_s": self.settle_sd_s, "band_v": self.band_v,
                "start_s": self.start_s, "start_v": self.start_v, "rms_residual_v": self.rms_residual_v}


def fit_settling(t_s, v, band_v: float | None = None) -> SettlingFit | None:
    """Fit the first-order model; None when there are too few readings or
    the fit does not converge (no settling to see)."""
    import scipy.optimize
    t, y = np.asarray(t_s, float), np.asarray(v, float)
    if t.size < MIN_FIT_POINTS or np.ptp(t) <= 0:
        return None
    t0 = float(t[0])
    span = float(t[-1] - t0)

    def model(x, vf, dv, tau):
        return vf + dv * np.exp(-(x - t0) / tau)

    guess = (float(y[-1]), float(y[0] - y[-1]), max(span / 5, 1e-6))
    try:
        popt, pcov = scipy.optimize.curve_fit(model, t, y, p0=guess, maxfev=20000)
    except (RuntimeError, ValueError):
        return None
    vf, dv, tau = (float(x) for x in popt)
    if not (tau > 0 and math.isfinite(tau)) or not np.all(np.isfinite(pcov)):
        return None
    sd = np.sqrt(np.diag(pcov))
    resid = y - model(t, *popt)
    settle = settle_sd = None
    if band_v is not None and band_v > 0:
        if abs(dv) <= band_v:
            settle, settle_sd = t0, 0.0
        else:
            settle = t0 + tau * math.log(abs(dv) / band_v)
            # first-order propagation through tau and dv
            d_tau = math.log(abs(dv) / band_v)
            d_dv = tau / abs(dv)
            settle_sd = math.sqrt((d_tau * sd[2]) ** 2 + (d_dv * sd[1]) ** 2)
    return SettlingFit(vf, float(sd[0]), tau, float(sd[2]), t0, vf + dv, settle, settle_sd, band_v,
                       float(np.sqrt(np.mean(resid**2))))


def reading_resolution(v) -> float | None:
    """The step the readings are rounded to (a meter's or logger's last
    digit), when they are: the smallest difference between distinct
    readings, if (nearly) every difference is a whole number of it."""
    y = np.unique(np.asarray(v, float))
    if y.size < 3:
        return None
    gaps = np.diff(y)
    q = float(np.min(gaps))
    if q <= 1e-12 * max(1.0, float(np.max(np.abs(y)))):
        return None
    counts = gaps / q
    return q if float(np.median(np.abs(counts - np.round(counts)))) < 0.05 else None


def find_steps(t_s, v, sigmas: float = STEP_SIGMAS, resolution_v: float | None = None) -> list[dict]:
    """Sudden jumps between consecutive readings: a difference that stands
    out from its neighbours' (their median, so smooth drift of any speed
    is not a step) by more than ``sigmas`` times the robust spread of such
    departures, by more than STEP_COUNTS of the readings' resolution
    (``resolution_v``, else :func:`reading_resolution`: rounded readings
    with less noise than a count show a spread of 0, and every one-count
    change would be a step), and by more than a microvolt."""
    y = np.asarray(v, float)
    if y.size < 6:
        return []
    d = np.diff(y)
    pad = np.pad(d, 2, mode="edge")
    neighbours = np.median(np.stack([pad[0:-4], pad[1:-3], pad[3:-1], pad[4:]]), axis=0)
    r = d - neighbours
    noise = 1.4826 * float(np.median(np.abs(r - np.median(r))))
    q = resolution_v if resolution_v is not None else reading_resolution(y)
    limit = max(sigmas * noise, STEP_COUNTS * (q or 0.0), 1e-6)
    t = np.asarray(t_s, float)
    return [{"time_s": float(t[i + 1]), "step_v": float(d[i]), "from_v": float(y[i]), "to_v": float(y[i + 1])}
            for i in np.flatnonzero(np.abs(r) > limit)]


def drift_rate_v_per_s(t_s, v, window_s: float) -> float | None:
    """Slope of a straight line through the last ``window_s`` of readings."""
    t, y = np.asarray(t_s, float), np.asarray(v, float)
    sel = t >= t[-1] - window_s
    if sel.sum() < 2 or np.ptp(t[sel]) <= 0:
        return None
    return float(np.polyfit(t[sel], y[sel], 1)[0])


def drift_rate_u(t_s, v, window_s: float) -> float | None:
    """The standard uncertainty of :func:`drift_rate_v_per_s`: the slope's
    standard error, sqrt(sum r^2 / (n - 2) / sum (t - mean t)^2) (least
    squares, handbook formula; the residuals taken as independent)."""
    t, y = np.asarray(t_s, float), np.asarray(v, float)
    sel = t >= t[-1] - window_s
    if sel.sum() < 3 or np.ptp(t[sel]) <= 0:
        return None
    ts, ys = t[sel], y[sel]
    slope, icept = np.polyfit(ts, ys, 1)
    r = ys - (slope * ts + icept)
    return float(math.sqrt(float(r @ r) / (ts.size - 2) / float(np.sum((ts - ts.mean()) ** 2))))


@dataclass(frozen=True)
class DriftResult:
    """The figures of a drift log."""

    t_s: np.ndarray
    v: np.ndarray
    fit: SettlingFit | None
    events: tuple[dict, ...]
    rate_v_per_s: float | None
    window_s: float
    limit_v: float | None
    nominal_v: float = 0.0
    warnings: tuple[str, ...] = ()
    info: dict = field(default_factory=dict)

    @property
    def verdict(self) -> str | None:
        """Against the limit about the nominal value: "within", "over", or
        "settling" (inside now, heading out, or the reverse); None without
        a limit."""
        if self.limit_v is None:
            return None
        now_ok = abs(float(self.v[-1]) - self.nominal_v) <= self.limit_v
        end_ok = now_ok if self.fit is None else abs(self.fit.final_v - self.nominal_v) <= self.limit_v
        if now_ok and end_ok:
            return "within"
        if not now_ok and not end_ok:
            return "over"
        return "settling"

    def uncertainty(self) -> dict:
        """The uncertainty block: the settling fit's from its covariance, the
        rate's from the line's standard error (type A; the meter's own
        accuracy, shared by two logs on one meter, is not counted)."""
        out = Collector()
        if self.fit is not None:
            for key, u in (("fit.final_v", self.fit.final_sd_v), ("fit.tau_s", self.fit.tau_sd_s),
                           ("fit.settle_s", self.fit.settle_sd_s)):
                if u is not None and math.isfinite(u):
                    out.put(key, Budget.of(noise=u))
        rate_u = drift_rate_u(self.t_s, self.v, self.window_s) if self.v.size else None
        if rate_u is not None:
            out.put("rate_mv_per_min", Budget.of(noise=rate_u), 60e3)
        return out.block()

    def to_dict(self) -> dict:
        v = self.v
        return document("drift", {
            **self.info,
            "samples": int(v.size),
            "duration_s": float(self.t_s[-1] - self.t_s[0]) if v.size else 0.0,
            "last_v": float(v[-1]),
            "min_v": float(v.min()),
            "max_v": float(v.max()),
            "pp_v": float(np.ptp(v)),
            "rate_mv_per_min": None if self.rate_v_per_s is None else self.rate_v_per_s * 60e3,
            "rate_window_s": self.window_s,
            "fit": None if self.fit is None else self.fit.to_dict(),
            "events": list(self.events),
            "limit_v": self.limit_v,
            "nominal_v": self.nominal_v,
            "verdict": self.verdict,
            "warnings": list(self.warnings),
            "uncertainty": self.uncertainty(),
        }, Conditions(method="first-order settling fit by least squares; the rate a line over the last window",
                      more={"window_s": self.window_s}))


def analyze_drift(t_s, v, *, limit_v: float | None = None, band_v: float | None = None, window_s: float = 60.0,
                  info: dict | None = None, warnings: tuple[str, ...] = (), nominal_v: float = 0.0,
                  resolution_v: float | None = None) -> DriftResult:
    """The figures of a drift log: how a DC value settles as the stage warms.

    Parameters
    ----------
    t_s, v : array_like
        The readings' times (s) and values (V), in time order.
    limit_v : float, optional
        The verdict holds the value within this of ``nominal_v``.
    band_v : float, optional
        Settled means staying within this of the final value (default a
        tenth of the limit, else 1 mV).
    window_s : float
        The span over which the drift rate is read.
    info : dict, optional
        Kept with the result (where the readings came from).
    warnings : tuple of BenchWarning
        Warnings of the readings (skipped rows ...), kept with the result's.
    nominal_v : float
        0 for an output offset; the design midpoint for a
        capacitor-coupled stage.
    resolution_v : float, optional
        The readings' resolution when known (else read from the data).

    Returns
    -------
    DriftResult
        The first-order fit (final value, time constant, when it settles,
        each with its standard deviation), sudden steps, the drift rate.

    References
    ----------
    First-order settling v(t) = final + (start - final) exp(-(t - t0) / tau)
    (circuit theory), fitted by nonlinear least squares with
    ``scipy.optimize.curve_fit``, its covariance giving the standard
    deviations.

    Examples
    --------
    50 mV settling with a 2 min time constant onto 10 mV enters a 5 mV band
    at 120 ln 10 s:

    >>> import numpy as np, benchkit
    >>> t = np.arange(0.0, 900.0, 1.0)
    >>> r = benchkit.analyze_drift(t, 0.010 + 0.050 * np.exp(-t / 120.0), limit_v=0.05)
    >>> round(r.fit.final_v, 6), round(r.fit.tau_s, 3), round(r.fit.settle_s, 2)
    (0.01, 120.0, 276.31)
    """
    t, y = np.asarray(t_s, float), np.asarray(v, float)
    if t.size == 0:
        raise ValueError("an empty drift log")
    events = find_steps(t, y, resolution_v=resolution_v)
    start = 0
    if events:
        start = int(np.searchsorted(t, events[-1]["time_s"]))
    band = band_v if band_v is not None else (limit_v / 10 if limit_v else 1e-3)
    fit = fit_settling(t[start:], y[start:], band)
    notes = list(warnings)
    if events:
        notes.append(BenchWarning("fit", f"{len(events)} sudden step(s) in the log: the fit uses the readings after the last one"))
    if fit is None and t.size >= MIN_FIT_POINTS:
        notes.append(BenchWarning("fit", "no first-order settling could be fitted (not settling, or too noisy)"))
    return DriftResult(t, y, fit, tuple(events), drift_rate_v_per_s(t, y, window_s), window_s, limit_v,
                       nominal_v, tuple(notes), dict(info or {}))


def drift_figures(doc: dict) -> list[Figure]:
    fit = doc.get("fit") or {}
    nominal = finite(doc.get("nominal_v")) or 0.0
    settled = finite(fit.get("final_v"))
    settled_fig = Figure("settled_v", "settled value" if settled is not None else "last value",
                         settled if settled is not None else finite(doc.get("last_v")), "V", "nearer", target=nominal,
                         at="settling fit" if settled is not None else "last reading", headline=True)
    return [
        settled_fig.of(doc, "fit.final_v") if settled is not None else settled_fig,
        Figure("pp_v", "peak to peak", finite(doc.get("pp_v")), "V", "lower"),
        Figure("rate_mv_per_min", "drift rate at the end", finite(doc.get("rate_mv_per_min")), "mV/min",
               "nearer").of(doc, "rate_mv_per_min"),
        Figure("tau_s", "settling time constant", finite(fit.get("tau_s")), "s", "lower").of(doc, "fit.tau_s"),
        Figure("settle_s", "time to settle", finite(fit.get("settle_s")), "s", "lower").of(doc, "fit.settle_s"),
    ]
