"""Repeated takes of one measurement: their mean, and their scatter as a
type-A uncertainty (JCGM 100 4.2: u = s / sqrt(n)).

Pure: the takes' result documents in, one document of the same kind out,
so that everything that reads a result (its kind's figures, comparisons,
the logbook's headline figures, reports) reads the mean as it would one
take. Every measured number the takes share a place for is averaged (a
figure in dB averaged in dB: the takes lie close); a list whose length
differs between takes (an adaptive run's steps) and anything else not a
number is the first take's.

A flag holds for the mean when it holds for any take (clipped), or for
every take (valid); counts and indices are the first take's.

Each figure with an uncertainty gets u^2 = max(s^2 / n, u_A^2 / n) +
u_shared^2: the larger of the takes' scatter and their own type A (a few
takes' scatter can fall short by chance), over n; what the takes share
(the calibration chain) does not average down.
"""

from __future__ import annotations

import math

import numpy as np

from benchkit.analysis.uncertainty import block, mean_and_u

#: The key of the takes in the mean's document.
TAKES = "takes"


def _is_number(x) -> bool:
    return isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x)


#: Flags that hold for the mean only when they hold for every take; any other flag holds when it holds for any.
ALL_TAKES = frozenset({"valid", "comparable", "fits"})


def _mean(values: list, key: str = ""):
    first = values[0]
    if isinstance(first, dict):
        return {k: (_mean([v[k] for v in values], k) if all(isinstance(v, dict) and k in v for v in values)
                    else first[k]) for k in first}
    if isinstance(first, list):
        if all(isinstance(v, list) and len(v) == len(first) for v in values):
            return [_mean([v[i] for v in values], key) for i in range(len(first))]
        return first
    if all(isinstance(v, bool) for v in values):  # a take clipped, or was not valid: so is the mean
        return all(values) if key in ALL_TAKES else any(values)
    if all(_is_number(v) for v in values) and not any(isinstance(v, int) for v in values):
        return float(np.mean(values))
    return first  # counts and indices (a step's number), text: the first take's


def values_at(doc, path: str):
    """The value(s) of a dotted figure key in a document: through a list,
    one for each item (``"steps.harmonics.level_dbc"``: a list of lists)."""
    head, _, rest = path.partition(".")
    if isinstance(doc, list):
        return [values_at(item, path) for item in doc]
    if not isinstance(doc, dict) or head not in doc:
        return None
    return doc[head] if not rest else values_at(doc[head], rest)


def _combine(values: list, own: list, shared: list, n: int):
    """One figure's u (nested like the figure) from its n takes' values,
    their own u's and the shared parts (lists walked item by item)."""
    first = values[0]
    if isinstance(first, list):
        if not all(isinstance(v, list) and len(v) == len(first) for v in values + own):
            return None
        return [_combine([v[i] for v in values], [u[i] for u in own],
                         [s[i] if isinstance(s, list) and i < len(s) else 0.0 for s in shared], n)
                for i in range(len(first))]
    if not all(_is_number(v) for v in values) or not all(_is_number(u) for u in own):
        return None
    common = [s if _is_number(s) else 0.0 for s in shared]
    scatter = mean_and_u(values)[1] ** 2  # (s / sqrt n)^2
    own_a = float(np.mean([max(u * u - s * s, 0.0) for u, s in zip(own, common)])) / n
    return math.sqrt(max(scatter, own_a) + float(np.mean(np.square(common))))


def _scatter_leads(values: list, own: list, shared: list, n: int) -> bool:
    first = values[0]
    if isinstance(first, list):
        return any(_scatter_leads([v[i] for v in values], [u[i] for u in own],
                                  [s[i] if isinstance(s, list) and i < len(s) else 0.0 for s in shared], n)
                   for i in range(len(first)) if all(isinstance(v, list) and len(v) == len(first) for v in values + own))
    if not all(_is_number(v) for v in values) or not all(_is_number(u) for u in own):
        return False
    common = [s if _is_number(s) else 0.0 for s in shared]
    return float(np.var(values, ddof=1)) > float(np.mean([max(u * u - s * s, 0.0) for u, s in zip(own, common)]))


def mean_document(docs: list[dict], folders: list[str] | None = None) -> dict:
    """The mean of ``docs`` (two or more takes of one kind), with their
    scatter in its uncertainty block and the takes listed under ``takes``."""
    if len(docs) < 2:
        raise ValueError("a mean of takes needs at least two")
    n = len(docs)
    out = _mean([{k: v for k, v in d.items() if k != "uncertainty"} for d in docs])
    blocks = [d.get("uncertainty") or {} for d in docs]
    standard, shared, dominant = {}, {}, dict(blocks[0].get("dominant") or {})
    for key in (blocks[0].get("standard") or {}):
        values = [values_at(d, key) for d in docs]
        own = [(b.get("standard") or {}).get(key) for b in blocks]
        common = [(b.get("shared") or {}).get(key, 0.0) for b in blocks]
        if any(v is None for v in values) or any(u is None for u in own):
            continue
        u = _combine(values, own, common, n)
        if u is None:
            continue
        standard[key] = u
        if any(c for c in common if c):
            shared[key] = (blocks[0].get("shared") or {}).get(key)
        if _scatter_leads(values, own, common, n) and not isinstance(u, list):
            dominant[key] = "repeats"
    bounds = sorted({b for blk in blocks for b in blk.get("bounds") or ()})
    out["uncertainty"] = block(standard, dominant, bounds, shared)
    out[TAKES] = {"count": n, "folders": list(folders or [])}
    return out
