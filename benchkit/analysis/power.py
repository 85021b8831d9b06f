"""Output power at a set distortion, the clipping onset and which half
clips, from the steps of a stepped-level run.

Pure functions on the per-step figures (output Vrms, power, THD+N or THD
in percent) and, for the clipping half, on the samples of one step.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from benchkit.analysis.compare import Figure, finite
from benchkit.analysis.documents import Conditions, document
from benchkit.analysis.uncertainty import DB_PER_REL, Budget, Collector, rectangular, rss, stacked

#: Limits reported by default, percent: the first is the headline figure.
DEFAULT_LIMITS_PCT = (1.0, 0.1, 10.0)
#: How far THD+N must rise over its low-level trend to call clipping, dB
#: (6 dB: twice the trend; curvature alone grows steeply near a limit).
ONSET_DB = 6.0
#: THD+N rising faster than level^JUMP_SLOPE between two steps: a limit hit.
JUMP_SLOPE = 3.0
#: Peaks of the two halves within this fraction of each other: symmetric.
SYMMETRY_TOL = 0.03


@dataclass(frozen=True)
class LimitPoint:
    """Where the metric crosses a limit, interpolated on log axes between
    the two bracketing steps (indices into the steps as given)."""

    limit_pct: float
    power_w: float
    vrms: float
    below: int
    above: int

    def to_dict(self) -> dict:
        return {"limit_pct": self.limit_pct, "power_w": self.power_w, "vrms": self.vrms,
                "bracketing_steps": [self.below, self.above]}


def limit_budget(power_w, metric_pct, point: LimitPoint, power_rel, metric_rel, chain_rel: float) -> Budget:
    """The relative budget of the power at a limit (JCGM 100 5.1.2 on the
    log-log interpolation): "noise", the bracketing steps' own (their
    powers' and metrics' type-A uncertainties through the interpolation's
    sensitivities); "interpolation", how far a curve through a third step
    lands from the straight line (rectangular, at most the bracket's
    width); the chain's (calibration, pad, load: shared by every step,
    it moves the point with them)."""
    p, m = np.log(np.asarray(power_w, float)), np.log(np.asarray(metric_pct, float))
    i, j, y = point.below, point.above, math.log(point.limit_pct)
    a, b, c, d = p[i], p[j], m[i], m[j]
    t = (y - c) / (d - c)
    up, um = np.nan_to_num(np.asarray(power_rel, float)), np.nan_to_num(np.asarray(metric_rel, float))
    noise = rss((1 - t) * up[i], t * up[j], (b - a) * (y - d) / (d - c) ** 2 * um[i],
                (b - a) * (y - c) / (d - c) ** 2 * um[j])
    ok = np.isfinite(m) & np.isfinite(p)
    third = (j + 1 if j + 1 < m.size and ok[j + 1] and m[j + 1] > d
             else (i - 1 if i >= 1 and ok[i - 1] and m[i - 1] < c else None))
    curve = 0.0
    if third is not None:
        ks = sorted((i, j, third))
        quad = np.polyfit(m[ks], p[ks], 2)
        curve = min(abs(float(np.polyval(quad, y)) - (a + t * (b - a))), abs(b - a))
    return Budget.of(noise=noise, interpolation=rectangular(curve), chain=chain_rel)


def _log_cross(x0, x1, y0, y1, y):
    """x where log y crosses between (x0, y0) and (x1, y1), in log x."""
    t = (math.log(y) - math.log(y0)) / (math.log(y1) - math.log(y0))
    return math.exp(math.log(x0) + t * (math.log(x1) - math.log(x0)))


def power_at_limit(vrms, power_w, metric_pct, limit_pct: float) -> LimitPoint | None:
    """The first rise through ``limit_pct`` above the metric's minimum (at
    the lowest levels noise can lie above a small limit); None when the
    steps never reach it."""
    v, p, m = (np.asarray(a, float) for a in (vrms, power_w, metric_pct))
    start = int(np.nanargmin(m))
    for i in range(start, m.size - 1):
        if m[i] < limit_pct <= m[i + 1]:
            pw = _log_cross(p[i], p[i + 1], m[i], m[i + 1], limit_pct)
            return LimitPoint(limit_pct, pw, _log_cross(v[i], v[i + 1], m[i], m[i + 1], limit_pct), i, i + 1)
    return None


@dataclass(frozen=True)
class Onset:
    """The clipping onset: where THD+N departs from its low-level trend."""

    power_w: float
    vrms: float
    departure_db: float
    step: int  # the first step past it

    def to_dict(self) -> dict:
        return {"power_w": self.power_w, "vrms": self.vrms, "departure_db": self.departure_db,
                "first_step_past": self.step}


def low_level_trend(vrms, thdn_pct, fit_below_vrms: float):
    """THD+N against level as noise and smooth curvature would have it:
    thdn^2 = (a / V)^2 + (b V)^2 + (c V^2)^2 (noise of fixed volts, second
    and third harmonics growing as V and V^2), fitted without negative
    terms to the steps at or below ``fit_below_vrms``. Returns a function
    of V, or None with fewer than three such steps."""
    v, m = np.asarray(vrms, float), np.asarray(thdn_pct, float)
    sel = v <= fit_below_vrms
    if sel.sum() < 3:
        return None
    import scipy.optimize  # here: the CLI reads this module's defaults at start-up

    vs = v[sel]
    cols = np.stack([vs**-2.0, vs**2.0, vs**4.0], axis=1)
    # weight each step by its own size so that every level counts alike
    w = 1.0 / m[sel] ** 2
    coef, _ = scipy.optimize.nnls(cols * w[:, None], m[sel] ** 2 * w)
    return lambda x: np.sqrt(coef[0] * np.asarray(x, float) ** -2.0 + coef[1] * np.asarray(x, float) ** 2.0
                             + coef[2] * np.asarray(x, float) ** 4.0)


def clipping_onset(vrms, power_w, thdn_pct, departure_db: float = ONSET_DB,
                   fit_margin_db: float = 6.0) -> Onset | None:
    """Where THD+N first rises ``departure_db`` over its low-level trend.

    The trend is fitted to the steps before the first jump (THD+N rising
    faster than the cube of the level, which no smooth curvature does:
    the stage has hit a limit), leaving out the step before it; without a
    jump, to the steps ``fit_margin_db`` below the top. The crossing is
    interpolated in log level between the bracketing steps.
    """
    v, p, m = (np.asarray(a, float) for a in (vrms, power_w, thdn_pct))
    start = int(np.nanargmin(m))
    slope = np.diff(np.log(m)) / np.diff(np.log(v))
    jumps = [i + 1 for i in range(start, v.size - 1) if slope[i] > JUMP_SLOPE]
    limit = v[jumps[0] - 2] if jumps and jumps[0] >= 2 else v[-1] * 10 ** (-fit_margin_db / 20)
    trend = low_level_trend(v, m, limit)
    if trend is None:
        return None
    excess = 20 * np.log10(m / trend(v))
    for i in range(max(1, start), v.size):
        if excess[i] >= departure_db:
            if excess[i - 1] >= departure_db:
                return Onset(float(p[i - 1]), float(v[i - 1]), departure_db, i - 1)
            # interpolate the excess (in dB) linearly in log level
            t = (departure_db - excess[i - 1]) / (excess[i] - excess[i - 1])
            vo = math.exp(math.log(v[i - 1]) + t * (math.log(v[i]) - math.log(v[i - 1])))
            return Onset(float(p[i - 1] * (vo / v[i - 1]) ** 2), float(vo), departure_db, i)
    return None


def clipping_half(samples: np.ndarray, dc: float = 0.0, tol: float = SYMMETRY_TOL) -> str:
    """Which half of a clipped sine is flattened: "positive", "negative" or
    "symmetric", from its peaks about the DC level (the lower peak is the
    clipped half)."""
    x = np.asarray(samples, float) - dc
    pos, neg = float(np.max(x)), float(-np.min(x))
    if pos <= 0 or neg <= 0:
        return "symmetric"
    ratio = pos / neg
    if ratio < 1 - tol:
        return "positive"
    if ratio > 1 / (1 - tol):
        return "negative"
    return "symmetric"


@dataclass(frozen=True)
class PowerStep:
    """One step of a stepped-level run, as the power report shows it."""

    drive_dbfs: float
    vrms: float
    power_w: float
    thd_pct: float
    thdn_pct: float
    harmonics_dbc: dict
    noise_vrms: float | None
    valid: bool
    #: the supply current a meter read during the step, A
    supply_a: float | None = None
    #: the step's tone analysis's uncertainty block (benchkit.analysis.uncertainty)
    uncertainty: dict | None = None

    def rel(self, key: str, part: str = "standard") -> float:
        """A figure's relative standard uncertainty from the step's block (NaN: none)."""
        u = ((self.uncertainty or {}).get(part) or {}).get(key)
        value = {"power_w": self.power_w, "thdn_db": 1.0, "thd_db": 1.0}[key]
        if not isinstance(u, (int, float)) or not value:
            return math.nan if part == "standard" else 0.0
        return u / value / (DB_PER_REL if key.endswith("_db") else 1.0)

    def efficiency_pct(self, supply_v: float | None, supply_a: float | None) -> float | None:
        """Output power over supply power, with this step's own current when metered."""
        amps = self.supply_a if self.supply_a is not None else supply_a
        return None if not supply_v or not amps else 100.0 * self.power_w / (supply_v * amps)

    def to_dict(self, supply_v: float | None = None, supply_a: float | None = None) -> dict:
        d = {"drive_dbfs": self.drive_dbfs, "vrms": self.vrms, "power_w": self.power_w, "thd_pct": self.thd_pct,
             "thdn_pct": self.thdn_pct, **{f"h{k}_dbc": v for k, v in self.harmonics_dbc.items()},
             "noise_vrms": self.noise_vrms, "valid": self.valid}
        if self.supply_a is not None:
            d["supply_a"] = self.supply_a
        eff = self.efficiency_pct(supply_v, supply_a)
        if eff is not None:
            d["efficiency_pct"] = eff
        return d


@dataclass(frozen=True)
class PowerResult:
    """Power at the set limits, clipping onset and half, efficiency."""

    frequency_hz: float
    load_ohms: float
    metric: str  # "thdn" or "thd"
    steps: tuple[PowerStep, ...]
    limits: tuple[tuple[float, LimitPoint | None], ...]
    onset: Onset | None
    half: str | None
    supply_v: float | None = None
    supply_a: float | None = None
    expected: dict | None = None
    warnings: tuple[str, ...] = ()
    info: dict | None = None
    #: what the steps were measured under (the first step's)
    measured_under: Conditions | None = None

    @property
    def supply_w(self) -> float | None:
        return None if self.supply_v is None or self.supply_a is None else self.supply_v * self.supply_a

    @property
    def rated(self) -> LimitPoint | None:
        """The point at the first (headline) limit."""
        return self.limits[0][1] if self.limits else None

    @property
    def efficiency_pct(self) -> float | None:
        """At the first limit: with the current metered at the step above
        it, else the stated supply current."""
        rated = self.rated
        if rated is None or not self.supply_v:
            return None
        amps = self.steps[rated.above].supply_a or self.supply_a
        return None if not amps else 100.0 * rated.power_w / (self.supply_v * amps)

    def uncertainty(self) -> dict:
        """The uncertainty block: each step's figures (``steps.KEY``, from
        its tone analysis) and the power at each limit (``limits.power_w``,
        :func:`limit_budget`; None where the steps never reached it)."""
        names = {"fundamental_vrms": "vrms", "power_w": "power_w", "thd_pct": "thd_pct", "thdn_pct": "thdn_pct",
                 "noise_vrms": "noise_vrms"}
        blocks = [{part: {names[k]: v for k, v in ((s.uncertainty or {}).get(part) or {}).items() if k in names}
                   for part in ("standard", "shared", "dominant")} for s in self.steps]
        out = Collector()
        steps = stacked("steps", blocks)
        for part in ("standard", "shared", "dominant"):
            getattr(out, part).update(steps.get(part) or {})
        metric = "thdn_db" if self.metric == "thdn" else "thd_db"
        power = [s.power_w for s in self.steps]
        m = [s.thdn_pct if self.metric == "thdn" else s.thd_pct for s in self.steps]
        p_rel = [math.sqrt(max(s.rel("power_w") ** 2 - s.rel("power_w", "shared") ** 2, 0.0)) for s in self.steps]
        m_rel = [s.rel(metric) for s in self.steps]
        budgets = []
        for _lim, pt in self.limits:
            if pt is None or any(math.isnan(p_rel[k]) or math.isnan(m_rel[k]) for k in (pt.below, pt.above)):
                budgets.append(None)
                continue
            shared = 0.5 * (self.steps[pt.below].rel("power_w", "shared") + self.steps[pt.above].rel("power_w", "shared"))
            budgets.append(limit_budget(power, m, pt, p_rel, m_rel, shared))
        out.put_list("limits.power_w", budgets, [0.0 if pt is None else pt.power_w for _l, pt in self.limits],
                     bounds=False)
        named = [None if b is None else (b.dominant if len(b.parts) > 1 else None) for b in budgets]
        if any(named):
            out.dominant["limits.power_w"] = named
        if budgets and budgets[0] is not None and self.efficiency_pct is not None:
            out.put("efficiency_pct", budgets[0], self.efficiency_pct)  # the supply's volts and amps as stated
        onset = self.onset
        if onset is not None and 0 < onset.step < len(self.steps) and not math.isnan(p_rel[onset.step]):
            # interpolated between two steps by a trend: the bracket's half-width in log power, rectangular
            i = onset.step
            gap = 0.5 * abs(math.log(self.steps[i].power_w / self.steps[i - 1].power_w))
            out.put("clipping_onset_w", Budget.of(noise=p_rel[i], interpolation=rectangular(gap),
                                                  chain=self.steps[i].rel("power_w", "shared")), onset.power_w)
        return out.block()

    def to_dict(self) -> dict:
        sw = self.supply_w
        d = {
            **(self.info or {}),
            "load_ohms": self.load_ohms,
            "frequency_hz": self.frequency_hz,
            "limit_metric": self.metric,
            "power_at_limit_w": {f"{lim:g}": None if pt is None else pt.power_w for lim, pt in self.limits},
            "limits": [{"limit_pct": lim, **({} if pt is None else pt.to_dict())} for lim, pt in self.limits],
            "clipping_onset_w": None if self.onset is None else self.onset.power_w,
            "clipping_onset": None if self.onset is None else self.onset.to_dict(),
            "clipping_half": self.half,
            "supply": None if sw is None else {"volts": self.supply_v, "amps": self.supply_a, "watts": sw},
            "efficiency_pct": self.efficiency_pct,
            "idle_dissipation_w": sw,
            "expected": self.expected,
            "steps": [s.to_dict(self.supply_v, self.supply_a) for s in self.steps],
            "warnings": list(self.warnings),
            "uncertainty": self.uncertainty(),
        }
        under = self.measured_under or Conditions(load_ohms=self.load_ohms)
        return document("power", d, under.calibrated((self.info or {}).get("calibration")))


def analyze_power(steps, *, load_ohms: float, metric: str = "thdn", limits_pct=DEFAULT_LIMITS_PCT,
                  onset_db: float = ONSET_DB, supply_v: float | None = None, supply_a: float | None = None,
                  samples_of=None, expected: dict | None = None, info: dict | None = None,
                  warnings: tuple[str, ...] = (), step_amps=None) -> PowerResult:
    """The power figures of a stepped-level run: the power at each
    distortion limit, the clipping onset, which half clips, efficiency.

    Parameters
    ----------
    steps : list of (float, ToneResult)
        (drive dBFS, the step's analysis in volts into ``load_ohms``), in
        rising order.
    load_ohms : float
        The load.
    metric : {"thdn", "thd"}
        What the limits are read on.
    limits_pct : sequence of float
        The distortion limits, %; the first is the headline (``rated``).
    onset_db : float
        The clipping onset: where THD+N has risen this far over its trend
        at low level.
    supply_v, supply_a : float, optional
        The supply's voltage and current, for the efficiency.
    samples_of : callable, optional
        ``samples_of(i)`` gives step i's samples and its DC, or None: the
        top step's show which half clips.
    expected : dict, optional
        What a budget predicted, kept with the result.
    info : dict, optional
        Kept with the result (the run's settings).
    warnings : tuple of BenchWarning
        The run's warnings, kept with the result's.
    step_amps : sequence of float, optional
        Each step's metered supply current.

    Returns
    -------
    PowerResult
        ``limits`` ((limit %, LimitPoint or None) each), ``rated`` (the
        first), ``onset``, ``half``.

    References
    ----------
    P = Vrms^2 / R (circuit theory); the power at a limit interpolated
    between the steps either side of it (log power against log
    distortion; common practice).

    Examples
    --------
    A stage clipping hard at 10 V peak into 8 ohm: the clipping onset lies
    at the sine whose peaks just reach 10 V, (10 / sqrt 2)^2 / 8 = 6.25 W,
    to the 0.25 V steps; the 1 % point a little above it:

    >>> import numpy as np, benchkit
    >>> t = np.arange(48000) / 48000
    >>> steps = []
    >>> for vpk in np.arange(8.0, 12.01, 0.25):
    ...     out = np.clip(vpk * np.sin(2 * np.pi * 1000 * t), -10.0, 10.0)
    ...     r = benchkit.analyze_tone(out / 20.0, 48000, volts_per_fs=20.0, load_ohms=8.0)
    ...     steps.append((20 * np.log10(vpk / 20), r))
    >>> p = benchkit.analyze_power(steps, load_ohms=8.0)
    >>> round(p.onset.power_w, 1), round(p.rated.power_w, 1)
    (6.3, 6.6)
    """
    if metric not in ("thdn", "thd"):
        raise ValueError("metric is 'thdn' or 'thd'")
    rows = []
    amps = list(step_amps) if step_amps is not None else [None] * len(steps)
    for (drive, r), a in zip(steps, amps):
        if r.power_w is None:
            raise ValueError("every step needs volts and a load")
        rows.append(PowerStep(drive, r.fundamental_vrms, r.power_w, r.thd_pct, r.thdn_pct,
                              {h.order: h.level_dbc for h in r.harmonics if 2 <= h.order <= 5},
                              r.noise_vrms, r.valid, a, r.uncertainty))
    v = [s.vrms for s in rows]
    p = [s.power_w for s in rows]
    m = [s.thdn_pct if metric == "thdn" else s.thd_pct for s in rows]
    points = tuple((float(lim), power_at_limit(v, p, m, lim)) for lim in limits_pct)
    onset = clipping_onset(v, p, [s.thdn_pct for s in rows], onset_db) if len(rows) >= 4 else None
    half = None
    if samples_of is not None and rows:
        # the top step, the most clipped, shows which half goes first
        got = samples_of(len(rows) - 1)
        if got is not None:
            half = clipping_half(*got)
    freq = float(steps[0][1].fundamental_hz) if steps else 0.0
    return PowerResult(freq, load_ohms, metric, tuple(rows), points, onset, half, supply_v, supply_a, expected,
                       tuple(warnings), info, steps[0][1].conditions() if steps else None)


def power_figures(doc: dict) -> list[Figure]:
    out = []
    metric = "THD+N" if doc.get("limit_metric", "thdn") == "thdn" else "THD"
    for i, lim in enumerate(doc.get("limits") or []):
        pct = finite(lim.get("limit_pct"))
        if pct is None:
            continue
        # the first limit is the rated point: the headline, under a fixed name
        out.append(Figure("power_w" if i == 0 else f"power_w@{pct:g}%", f"power at {pct:g} % {metric}",
                          finite(lim.get("power_w")), "W", "higher", at=f"{pct:g} % {metric}",
                          headline=i == 0).of(doc, "limits.power_w", i))
    out.append(Figure("clipping_onset_w", "clipping onset", finite(doc.get("clipping_onset_w")), "W", "higher",
                      headline=True).of(doc, "clipping_onset_w"))
    if finite(doc.get("efficiency_pct")) is not None:
        out.append(Figure("efficiency_pct", "efficiency at the first limit", finite(doc["efficiency_pct"]), "%",
                          "higher").of(doc, "efficiency_pct"))
    if finite(doc.get("idle_dissipation_w")) is not None:
        out.append(Figure("idle_dissipation_w", "idle dissipation", finite(doc["idle_dissipation_w"]), "W", None))
    expected = doc.get("expected") or {}
    if finite(expected.get("max_sine_w")) is not None:
        out.append(Figure("expected_w", "budget's ceiling", finite(expected["max_sine_w"]), "W", None))
    return out
