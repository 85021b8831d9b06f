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
from dataclasses import dataclass
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

    def to_dict(self) -> dict:
        return {"name": self.name, "value": self.value, "unit": self.unit, "at": self.at}


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

@dataclass(frozen=True)
class Delta:
    """One figure across the runs: values in run order, each change from
    the first run, and whether it is better, worse or the same."""

    name: str
    label: str
    unit: str
    at: str
    values: tuple[float | None, ...]
    better: str | None
    target: float = 0.0
    headline: bool = False

    @property
    def changes(self) -> tuple[float | None, ...]:
        first = self.values[0]
        return tuple(None if v is None or first is None else v - first for v in self.values[1:])

    def verdict(self, k: int) -> str | None:
        """For run k (from 1): "better", "worse", "same", or None (no direction, or a value missing)."""
        a, b = self.values[0], self.values[k]
        if self.better is None or a is None or b is None:
            return None
        if self.better == "nearer":
            a, b = abs(a - self.target), abs(b - self.target)
        gain = (b - a) if self.better == "higher" else (a - b)
        same = SAME_DB if self.unit in ("dB", "dBc", "dBFS") else SAME_REL * max(abs(a), abs(b))
        if abs(gain) <= same:
            return "same"
        return "better" if gain > 0 else "worse"

    def to_dict(self) -> dict:
        return {"name": self.name, "label": self.label, "unit": self.unit, "at": self.at,
                "values": list(self.values), "changes": list(self.changes), "better": self.better,
                "verdicts": [self.verdict(k) for k in range(1, len(self.values))]}


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

    def to_dict(self) -> dict:
        return document("comparison", {"of": self.kind, "runs": list(self.labels), "comparable": self.comparable,
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
    names = [n for n in per_run[0] if all(n in fig for fig in per_run[1:])]
    deltas = []
    for n in names:
        f0 = per_run[0][n]
        values = tuple(fig[n].value for fig in per_run)
        if all(v is None for v in values):
            continue
        at = f0.at if all(fig[n].at == f0.at for fig in per_run) else " / ".join(fig[n].at for fig in per_run)
        deltas.append(Delta(n, f0.label, f0.unit, at, values, f0.better, f0.target, f0.headline))
    if not deltas:
        raise BenchkitError("the runs share no figure to compare (a stepped run pairs steps by drive level)")
    warnings = [BenchWarning("not-like-for-like", f"NOT LIKE FOR LIKE: {p}") for p in problems]
    return Comparison(kind, tuple(labels), tuple(deltas), tuple(conditions), tuple(warnings), not problems)
