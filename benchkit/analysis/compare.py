"""Comparing runs: the figures of stored results side by side, with deltas.

Pure: result documents (the JSON every run stores) in, a frozen
:class:`Comparison` out. Each kind of result names its comparable figures,
with a unit and a direction (which way is better) beside its analysis
(``analysis/NAME.py``); the same figures, a few of them marked headline,
index the logbook.

Runs compare only when their conditions match (frequency, load, band,
calibration, sample rate, scale): otherwise :func:`compare` refuses, or
with ``anyway=True`` reports every mismatch as a warning.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Callable

from benchkit.analysis.documents import document
from benchkit.errors import BenchWarning, BenchkitError

#: Below this a change is reported as the same: a tenth of a dB, or half a
#: percent of the value (repeatability of a bench measurement, common practice).
SAME_DB = 0.1
SAME_REL = 0.005


@dataclass(frozen=True)
class Figure:
    """One comparable figure of a result. ``better`` is "higher",
    "lower", "nearer" (to ``target``) or None (no direction: a condition
    or a level)."""

    name: str
    label: str
    value: float | None
    unit: str
    better: str | None = None
    target: float = 0.0
    at: str = ""
    headline: bool = False
    #: its standard uncertainty, and the part of it a run on the same chain shares (None: not known)
    u: float | None = None
    shared: float = 0.0
    #: the value is an upper bound (in the noise), not a reading
    bound: bool = False

    def to_dict(self) -> dict:
        return {"name": self.name, "value": self.value, "unit": self.unit, "at": self.at}

    def of(self, doc: dict, key: str, *index: int) -> "Figure":
        """This figure with its uncertainty from ``doc``'s block (the figure
        ``key``, item ``index`` of an array figure)."""
        from benchkit.analysis.uncertainty import lookup

        u = lookup(doc, key, *index)
        bound = u is None and key in ((doc.get("uncertainty") or {}).get("bounds") or ())
        return replace(self, u=u, shared=lookup(doc, key, *index, part="shared") or 0.0, bound=bound)


def finite(x) -> float | None:
    """A stored number as a float, None when it is missing, not a number or not finite."""
    return float(x) if isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x) else None


# --- conditions: what must match for runs to compare -------------------------------

#: A condition a version-1 result did not record (it matches anything).
NOT_RECORDED = "not recorded"


def conditions_of(doc: dict, record: dict | None = None) -> dict:
    """The conditions a comparison checks, from a result and its run record:
    the result's own ``conditions`` first; what it leaves out (a version-1
    result's, a drift log's) from its figures, its first step, then the
    run's record."""
    record = record or {}
    params = record.get("params") or {}
    steps = doc.get("steps") or []
    first = steps[0] if steps and isinstance(steps[0], dict) else {}
    under = doc.get("conditions") if isinstance(doc.get("conditions"), dict) else {}

    def known(*values):
        return next((v for v in values if v is not None), None)

    def recorded(value):
        # a version-1 result of some kinds kept no band or scale: unknown, which differs from nothing
        return NOT_RECORDED if value is None and doc.get("upgraded_from") == 1 else value

    cal = doc.get("calibration") or record.get("calibration") or {}
    load = known(under.get("load_ohms"), doc.get("load_ohms"), (first.get("conditions") or {}).get("load_ohms"),
                 params.get("load_ohms"))
    band = recorded(known(under.get("bandwidth_hz"), doc.get("bandwidth_hz", first.get("bandwidth_hz"))))
    return {
        "frequency_hz": finite(doc.get("frequency_hz")),
        "load_ohms": finite(load),
        "bandwidth_hz": list(band) if isinstance(band, (list, tuple)) else (band if band == NOT_RECORDED else None),
        "sample_rate_hz": known(finite(under.get("sample_rate_hz")), finite(first.get("sample_rate_hz")),
                                finite(params.get("sample_rate_hz"))),
        "calibration_hash": known(under.get("calibration_hash"), cal.get("hash")),
        "scale": recorded(known(under.get("scale_source"), doc.get("scale_source", first.get("scale_source")))),
        "metric": doc.get("limit_metric"),
        "mag_units": doc.get("mag_units"),
        "nominal_v": finite(doc.get("nominal_v")),
        "snr_reference_vrms": finite((doc.get("snr_reference") or {}).get("vrms")),
        "imd_method": doc.get("method") if doc.get("kind") == "imd" else None,
        "tones_hz": list(doc["tones_hz"]) if isinstance(doc.get("tones_hz"), list) else None,
    }


_WHAT = {
    "frequency_hz": "the tone's frequency",
    "load_ohms": "the load",
    "bandwidth_hz": "the measurement band",
    "sample_rate_hz": "the sample rate",
    "calibration_hash": "the calibration profile",
    "scale": "the voltage scale's source",
    "metric": "the distortion metric the limits apply to",
    "mag_units": "what the magnitude is referred to",
    "nominal_v": "the nominal value the drift is judged against",
    "snr_reference_vrms": "the output the SNR is referred to",
    "imd_method": "the intermodulation method",
    "tones_hz": "the pair of tones",
}


def mismatches(conditions: list[dict], labels: list[str]) -> list[str]:
    """One sentence for each condition that differs between the runs."""
    out = []
    for key, what in _WHAT.items():
        values = [c.get(key) for c in conditions]
        if all(v is None for v in values) or NOT_RECORDED in values:
            continue
        if key in ("frequency_hz", "load_ohms", "sample_rate_hz", "nominal_v", "snr_reference_vrms"):
            known = [v for v in values if v is not None]
            same = len(known) == len(values) and max(known) - min(known) <= 1e-6 * max(1.0, abs(max(known)))
        else:
            same = all(v == values[0] for v in values)
        if not same:
            shown = ", ".join(f"{lab}: {'none' if v is None else (f'{v:g}' if isinstance(v, float) else v)}"
                              for lab, v in zip(labels, values))
            out.append(f"{what} differs ({shown})")
    return out


# --- the comparison ------------------------------------------------------------------

#: The verdict on a change inside the expanded uncertainty of the difference.
WITHIN = "within uncertainty"
#: The verdict on a change between bounds, or a bound and a reading it does not clear.
IN_NOISE = "in the noise"


@dataclass(frozen=True)
class Delta:
    """One figure across the runs: values in run order, each change from
    the first run, its expanded uncertainty, and whether it is better,
    worse, within uncertainty or (uncertainty unknown) the same."""

    name: str
    label: str
    unit: str
    at: str
    values: tuple[float | None, ...]
    better: str | None
    target: float = 0.0
    headline: bool = False
    #: each run's standard uncertainty of it, and the part a run on the same chain shares
    us: tuple[float | None, ...] = ()
    shared: tuple[float, ...] = ()
    #: the runs share one chain (one calibration profile, or none): what they share cancels
    same_chain: bool = True
    #: each run's value is an upper bound (in the noise)
    bounds: tuple[bool, ...] = ()
    #: the coverage factor its verdicts use (:func:`coverage_for`)
    coverage: float = 2.0

    @property
    def changes(self) -> tuple[float | None, ...]:
        first = self.values[0]
        return tuple(None if v is None or first is None else v - first for v in self.values[1:])

    def change_u(self, k: int) -> float | None:
        """The expanded uncertainty of run k's change from the first (at the
        comparison's ``coverage``): both runs' own, less what they share
        when they share one chain (correlation +1 cancels it, JCGM 100
        5.2); None when either is unknown."""
        if len(self.us) <= k or self.us[0] is None or self.us[k] is None:
            return None
        var = self.us[0] ** 2 + self.us[k] ** 2
        if self.same_chain and len(self.shared) > k:
            # each run's own part, and what is left of the shared one: a relative error common to both
            # moves each value in proportion, so the difference keeps (s_k - s_0)
            s0, sk = self.shared[0], self.shared[k]
            var = (self.us[0] ** 2 - s0 * s0) + (self.us[k] ** 2 - sk * sk) + (sk - s0) ** 2
        return self.coverage * math.sqrt(max(var, 0.0))

    def verdict(self, k: int) -> str | None:
        """For run k (from 1): "better" or "worse" when the change exceeds
        its expanded uncertainty, else "within uncertainty"; with no
        uncertainty known, "same" under a bench's usual repeatability; None
        (no direction, or a value missing)."""
        a, b = self.values[0], self.values[k]
        if self.better is None or a is None or b is None:
            return None
        bound = [len(self.bounds) > i and self.bounds[i] for i in (0, k)]
        if any(bound):
            return self._bounded(a, b, bound, k)
        if self.better == "nearer":
            a, b = abs(a - self.target), abs(b - self.target)
        gain = (b - a) if self.better == "higher" else (a - b)
        big = self.change_u(k)
        if big is not None:
            if abs(gain) <= big:
                return WITHIN
        elif abs(gain) <= (SAME_DB if self.unit in ("dB", "dBc", "dBFS") else SAME_REL * max(abs(a), abs(b))):
            return "same"
        return "better" if gain > 0 else "worse"

    def _bounded(self, a: float, b: float, bound: list[bool], k: int) -> str:
        """A verdict where a value is an upper bound: the true value lies at
        or below it, so a reading clear above another run's bound (by its
        expanded uncertainty) is a real change; anything else is in the noise."""
        if all(bound) or self.better != "lower":
            return IN_NOISE
        read, u = (b, self.us[k]) if bound[0] else (a, self.us[0])
        if read - self.coverage * (u or 0.0) > (a if bound[0] else b):
            return "worse" if bound[0] else "better"
        return IN_NOISE

    def to_dict(self) -> dict:
        return {"name": self.name, "label": self.label, "unit": self.unit, "at": self.at,
                "values": list(self.values), "changes": list(self.changes), "better": self.better,
                "upper_bounds": list(self.bounds) or None,
                "standard_uncertainties": list(self.us) or None,
                "change_expanded_uncertainties": [self.change_u(k) for k in range(1, len(self.values))],
                "verdicts": [self.verdict(k) for k in range(1, len(self.values))]}


#: How sure a comparison is that a change it calls better or worse is not
#: noise, over all the figures it judges together: a phantom improvement
#: sends a builder after a change that did nothing, so one in a hundred.
VERDICT_LEVEL = 0.99


#: The degrees of freedom of a figure's type-A uncertainty: the noise
#: floor it is read from is itself an estimate (the median of 64 bins,
#: whose variance is 1/64 of its square: about 60, JCGM 100 G.4).
VERDICT_DOF = 60


def coverage_for(figures: int, level: float = VERDICT_LEVEL, dof: float = VERDICT_DOF) -> float:
    """The coverage factor that holds the chance of noise alone calling any
    of ``figures`` figures better or worse to 1 - ``level``: each figure's
    two-sided interval at 1 - (1 - level) / figures (Bonferroni), from
    Student's t with ``dof`` degrees of freedom (JCGM 100 G.3), and never
    under k = 2 (JCGM 100 6.3): 2.7 for one figure, 3.6 for sixteen, 4.0
    for fifty."""
    import scipy.stats

    return max(2.0, float(scipy.stats.t.ppf(1.0 - (1.0 - level) / (2.0 * max(figures, 1)), dof)))


@dataclass(frozen=True)
class Comparison:
    kind: str
    labels: tuple[str, ...]
    deltas: tuple[Delta, ...]
    conditions: tuple[dict, ...]
    warnings: tuple[str, ...] = ()
    comparable: bool = True

    def headline(self) -> tuple[Delta, ...]:
        return tuple(d for d in self.deltas if d.headline)

    @property
    def coverage(self) -> float:
        """The coverage factor of its changes' uncertainties (:func:`coverage_for`)."""
        return self.deltas[0].coverage if self.deltas else 2.0

    def judged(self) -> int:
        """How many figures it judges against their uncertainty."""
        return sum(1 for d in self.deltas if d.better is not None and d.us and all(u is not None for u in d.us))

    def to_dict(self) -> dict:
        return document("comparison", {"of": self.kind, "runs": list(self.labels), "comparable": self.comparable,
                                        "coverage_factor": self.coverage,
                                        "conditions": list(self.conditions),
                                        "deltas": [d.to_dict() for d in self.deltas], "warnings": list(self.warnings)})


def compare(docs: list[dict], labels: list[str], figures_of: Callable[[dict], list[Figure]] | None,
            records: list[dict] | None = None, anyway: bool = False) -> Comparison:
    """Compare the results of two or more runs of one kind, the first the
    baseline ("before"); ``figures_of`` is the kind's (its comparable
    figures of one result document; None for a kind whose runs do not
    compare).

    Raises
    ------
    BenchkitError
        When the runs are of different kinds, have no figure in common, or
        (unless ``anyway``) were measured under different conditions.
    """
    if len(docs) < 2:
        raise BenchkitError("a comparison needs at least two runs")
    kinds = {d.get("kind") for d in docs}
    if len(kinds) != 1:
        raise BenchkitError("the runs are not comparable: they hold different kinds of result ("
                            + ", ".join(f"{lab}: {d.get('kind')}" for lab, d in zip(labels, docs)) + ")")
    kind = kinds.pop()
    if figures_of is None:
        raise BenchkitError(f"results of kind {kind!r} have no figures to compare")
    records = records or [None] * len(docs)
    conditions = [conditions_of(d, r) for d, r in zip(docs, records)]
    problems = mismatches(conditions, labels)
    if problems and not anyway:
        raise BenchkitError("the runs are not comparable: " + "; ".join(problems)
                            + " (--anyway compares them, with that warning)")
    per_run = [{f.name: f for f in figures_of(d)} for d in docs]
    same_chain = len({c.get("calibration_hash") for c in conditions}) == 1
    names = [n for n in per_run[0] if all(n in fig for fig in per_run[1:])]
    deltas = []
    for n in names:
        f0 = per_run[0][n]
        values = tuple(fig[n].value for fig in per_run)
        if all(v is None for v in values):
            continue
        at = f0.at if all(fig[n].at == f0.at for fig in per_run) else " / ".join(fig[n].at for fig in per_run)
        deltas.append(Delta(n, f0.label, f0.unit, at, values, f0.better, f0.target, f0.headline,
                            tuple(fig[n].u for fig in per_run), tuple(fig[n].shared for fig in per_run), same_chain,
                            tuple(fig[n].bound for fig in per_run)))
    if not deltas:
        raise BenchkitError("the runs share no figure to compare (a stepped run pairs steps by drive level)")
    judged = sum(1 for d in deltas if d.better is not None and all(u is not None for u in d.us))
    k = coverage_for(judged * (len(docs) - 1))  # every figure of every run against the first
    deltas = [replace(d, coverage=k) for d in deltas]
    warnings = [BenchWarning("not-like-for-like", f"NOT LIKE FOR LIKE: {p}") for p in problems]
    return Comparison(kind, tuple(labels), tuple(deltas), tuple(conditions), tuple(warnings), not problems)
