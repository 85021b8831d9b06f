"""The interface's own floor, and the figures of a result that lie near it.

A calibration profile keeps what the interface measures alone, output
looped to input: its ``interface_floor`` (a self-test's curve of residual
THD+N against input level, and its noise floor) or, from before that, the
one point of ``loopback_floor`` that ``benchkit calibrate`` measures. Every
capture's sidecar keeps the profile's ``calibration`` block, and every
result made from it keeps that block; :func:`mark` reads the floor from it
and marks each figure of the result that lies within :data:`MARGIN_DB` of
the floor: a figure there may be the interface's rather than the stage's.

Only like is compared with like: THD+N at the level it was measured at,
dBFS at the measuring input (the floor's levels are dBFS at the
interface's input, a result's ``fundamental_dbfs`` is too), and noise in
dBFS at the input against the floor's noise, unweighted with unweighted
and A-weighted with A-weighted.

The floor's THD+N is measured at one frequency (997 Hz: the self-test's
level steps, the calibration's loopback), so THD+N is judged against it
only where the result's fundamental lies in the floor's *judged range*
(:meth:`Floor.judged_hz`): where the self-test's response steps (one
level, 20 Hz to 20 kHz) read a THD+N within :data:`FLAT_DB` of their
reading nearest the floor's frequency, the contiguous span around it
(``flat_hz``, stored with the floor); a floor that states no such span
(the calibration's one loopback point, a floor stored before the span
was) is taken to hold within :data:`SPAN_OCTAVES` octave either side of
its frequency. A THD+N at a fundamental outside that range is not judged
(no margin, no mark) and counted in the floor's ``not_judged``; a result
that states no frequency is judged. Noise is judged at every frequency:
the floor's noise is over the whole band, as a result's is. The line
that states the floor (:func:`summary_line`) states the range and the
count not judged.

Pure: documents in, documents out; no I/O, no printing.
"""

from __future__ import annotations

import copy
import math
from dataclasses import dataclass

import numpy as np

from benchkit import units
from benchkit.errors import BenchWarning

#: A figure closer than this to the interface's floor is marked, dB. Within
#: 6 dB the interface's own share of the power is at least a quarter
#: (10^(-6/10) = 0.25; common practice, from memory: a measuring set should
#: sit some 6 to 10 dB under what it measures).
MARGIN_DB = 6.0

#: Where the floor states no frequency: the self-test's and the
#: calibration's loopback tone (benchkit.kinds.loopback.FREQ_HZ,
#: benchkit.calibrate.CAL_FREQ_HZ), Hz.
TEST_FREQ_HZ = 997.0

#: A floor without a measured flat span is trusted this many octaves
#: either side of its frequency (a judgement, not a published figure: an
#: interface's residual is mostly its noise, flat over the band, and within
#: an octave the harmonics a 20 kHz band keeps change little).
SPAN_OCTAVES = 1.0

#: The self-test's THD+N across its response steps counts as flat while
#: it stays within this of its reading nearest the floor's frequency, dB
#: (half the marking margin: a floor off by this still marks a figure
#: within 3 dB of it).
FLAT_DB = 3.0

#: The warning a result gets when any of its figures is marked.
CODE = "near-interface-floor"

#: Kinds whose figures are the interface's own (its self-test): never marked.
NOT_MARKED = frozenset({"loopback"})

#: Parts of a document that hold no measured figure of the stage (the
#: calibration's own floor, uncertainties, conditions, a harmonic's level,
#: the marks themselves).
_SKIPPED = frozenset({"calibration", "uncertainty", "conditions", "interface_floor", "harmonics", "takes",
                      "interface_floor_margin_db", "near_interface_floor"})


@dataclass(frozen=True)
class Floor:
    """The interface's floor as a result uses it.

    Attributes
    ----------
    levels_dbfs, thdn_db
        Its residual THD+N (dB re the fundamental) at each input level
        (dBFS at the interface's input), the levels ascending; empty when
        it has no THD+N.
    noise_dbfs, noise_a_dbfs
        Its noise over the band, unweighted and A-weighted, dBFS at the
        input (None: not measured).
    bandwidth_hz
        The band it was measured over ([lo, hi] Hz; None: not stated).
    measured, source
        When it was measured and what by (a self-test run, the calibration).
    field
        The profile's field it came from: "interface_floor" or "loopback_floor".
    frequency_hz
        The frequency its THD+N was measured at (None: not stated,
        :data:`TEST_FREQ_HZ` taken).
    flat_hz
        The span around it where its self-test's THD+N read flat within
        :data:`FLAT_DB` ([lo, hi] Hz; None: not measured).
    """

    levels_dbfs: tuple[float, ...] = ()
    thdn_db: tuple[float, ...] = ()
    noise_dbfs: float | None = None
    noise_a_dbfs: float | None = None
    bandwidth_hz: list | None = None
    measured: str | None = None
    source: str = ""
    field: str = "interface_floor"
    frequency_hz: float | None = None
    flat_hz: list | None = None

    @property
    def tested_hz(self) -> float:
        """The frequency its THD+N was measured at (the self-test's when not stated)."""
        return self.frequency_hz or TEST_FREQ_HZ

    def judged_hz(self) -> tuple[float, float]:
        """The fundamentals whose THD+N is judged against this floor, Hz:
        its ``flat_hz``, else :data:`SPAN_OCTAVES` either side of its
        frequency."""
        if self.flat_hz is not None:
            return float(self.flat_hz[0]), float(self.flat_hz[1])
        return self.tested_hz / 2.0**SPAN_OCTAVES, self.tested_hz * 2.0**SPAN_OCTAVES

    def judges(self, fundamental_hz: float | None) -> bool:
        """Whether a THD+N at this fundamental is judged against the floor
        (its judged range, to 1 %; a fundamental not stated is judged)."""
        if fundamental_hz is None:
            return True
        lo, hi = self.judged_hz()
        return lo * 0.99 <= fundamental_hz <= hi * 1.01

    def rule(self) -> str:
        """Where its THD+N is judged, in words."""
        lo, hi = self.judged_hz()
        why = (f"where its self-test's THD+N read flat within {FLAT_DB:g} dB" if self.flat_hz is not None
               else f"{SPAN_OCTAVES:g} octave either side of {self.tested_hz:g} Hz, assumed")
        where = f"{lo:.4g} Hz" if f"{lo:.4g}" == f"{hi:.4g}" else f"{lo:.4g}-{hi:.4g} Hz"
        return f"THD+N judged only at {where} ({why}), noise at every frequency"

    def thdn_db_at(self, level_dbfs: float) -> float | None:
        """The floor's THD+N at an input level, dB (None: it has none).

        Between its levels, interpolated linearly in dB over dBFS. Below its
        lowest level L0, extrapolated as a residual of constant absolute
        level: THD+N(L) = THD+N(L0) + (L0 - L). This is an assumption: an
        interface's residual at low levels is its noise, which does not
        fall with the signal, so the ratio rises 1 dB for each dB the level
        falls (a ratio's identity: a fixed numerator over a denominator
        falling by x dB rises by x dB). Above its highest level, held at
        the last value (no guess at how its distortion grows). The one
        point of a ``loopback_floor`` takes the constant-residual rule on
        both sides of its point, as the calibration's interface-limited
        check always has.

        Parameters
        ----------
        level_dbfs : float
            The fundamental's level at the input, dBFS (AES17).

        Returns
        -------
        float or None
            The floor's THD+N at that level, dB.
        """
        lv, th = self.levels_dbfs, self.thdn_db
        if not lv:
            return None
        if level_dbfs < lv[0] or self.field == "loopback_floor":
            return th[0] + (lv[0] - level_dbfs)
        if level_dbfs >= lv[-1]:
            return th[-1]
        return float(np.interp(level_dbfs, lv, th))

    def to_dict(self) -> dict:
        """The floor as a result document states it."""
        return {"from": self.field, "source": self.source, "measured": self.measured,
                "levels_dbfs": list(self.levels_dbfs), "thdn_db": list(self.thdn_db), "noise_dbfs": self.noise_dbfs,
                "noise_a_dbfs": self.noise_a_dbfs, "bandwidth_hz": self.bandwidth_hz, "margin_db": MARGIN_DB,
                "frequency_hz": self.tested_hz, "flat_hz": self.flat_hz,
                "judged_hz": [round(v, 3) for v in self.judged_hz()]}

    def text(self) -> str:
        """The floor in words: its lowest THD+N and where, its noise."""
        parts = []
        if self.thdn_db:
            k = int(np.argmin(self.thdn_db))
            parts.append(f"THD+N {self.thdn_db[k]:.1f} dB at {self.levels_dbfs[k]:.0f} dBFS, "
                         f"{self.tested_hz:g} Hz")
        if self.noise_dbfs is not None:
            parts.append(f"noise {self.noise_dbfs:.1f} dBFS")
        if self.noise_a_dbfs is not None:
            parts.append(f"{self.noise_a_dbfs:.1f} dBFS A-weighted")
        return ", ".join(parts)


def _number(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)


def problem(floor: dict) -> str | None:
    """What is wrong with a profile's ``interface_floor`` (None: nothing,
    or it is empty): the THD+N curve's levels ascending, as many THD+N
    values as levels, every figure a finite number or null."""
    if not floor:
        return None
    levels, thdn = floor.get("levels_dbfs", []), floor.get("thdn_db", [])
    if not isinstance(levels, list) or not isinstance(thdn, list) or len(levels) != len(thdn):
        return "levels_dbfs and thdn_db must be lists of the same length"
    if not all(_number(v) for v in levels + thdn):
        return "levels_dbfs and thdn_db must hold numbers"
    if any(b <= a for a, b in zip(levels, levels[1:])):
        return "levels_dbfs must rise from one level to the next"
    for key in ("noise_dbfs", "noise_a_dbfs"):
        if floor.get(key) is not None and not _number(floor[key]):
            return f"{key} must be a number or null"
    band = floor.get("bandwidth_hz")
    if band is not None and not (isinstance(band, list) and len(band) == 2 and all(_number(v) for v in band)):
        return "bandwidth_hz must be [lo, hi] in Hz"
    flat = floor.get("flat_hz")
    if flat is not None and not (isinstance(flat, list) and len(flat) == 2 and all(_number(v) and v > 0 for v in flat)
                                 and flat[0] <= flat[1]):
        return "flat_hz must be [lo, hi] in Hz"
    f = floor.get("frequency_hz")
    if f is not None and not (_number(f) and f > 0):
        return "frequency_hz must be a frequency in Hz or null"
    return None


def floor_of(calibration: dict | None) -> Floor | None:
    """The floor a calibration block (a profile's, a sidecar's, a result's)
    holds: its ``interface_floor``, else its ``loopback_floor``; None when
    it holds neither (or one that :func:`problem` refuses)."""
    cal = calibration if isinstance(calibration, dict) else {}
    got = cal.get("interface_floor")
    if isinstance(got, dict) and got and problem(got) is None:
        floor = Floor(tuple(got.get("levels_dbfs", [])), tuple(got.get("thdn_db", [])), got.get("noise_dbfs"),
                      got.get("noise_a_dbfs"), got.get("bandwidth_hz"), got.get("measured"),
                      str(got.get("source") or "interface self-test"), frequency_hz=got.get("frequency_hz"),
                      flat_hz=got.get("flat_hz"))
        return floor if floor.thdn_db or floor.noise_dbfs is not None or floor.noise_a_dbfs is not None else None
    old = cal.get("loopback_floor")
    if not isinstance(old, dict) or not old:
        return None
    point = _number(old.get("thdn_db")) and _number(old.get("level_dbfs"))
    noise = old.get("noise_dbfs") if _number(old.get("noise_dbfs")) else None
    if not point and noise is None:
        return None
    where = cal.get("file")
    return Floor((old["level_dbfs"],) if point else (), (old["thdn_db"],) if point else (), noise, None,
                 old.get("bandwidth_hz"), cal.get("created") or None,
                 "the calibration's loopback" + (f" ({where})" if where else ""), "loopback_floor",
                 old["frequency_hz"] if _number(old.get("frequency_hz")) and old["frequency_hz"] > 0 else None)


def _margins(node: dict, floor: Floor, scale: float | None, hz: float | None) -> tuple[dict[str, float], int]:
    """Each figure of one node comparable with the floor, and its margin
    over it (figure less floor, dB); and how many of its THD+N figures
    were not judged, their fundamental ``hz`` outside the floor's judged
    range."""
    got, skipped = {}, 0
    thdn, level = node.get("thdn_db"), node.get("fundamental_dbfs")
    key = at = None
    if _number(thdn) and _number(level):
        key, at, value = "thdn_db", floor.thdn_db_at(level), thdn
    elif _number(node.get("thdn_pct")) and _number(node.get("vrms")) and scale and node["thdn_pct"] > 0:
        # a power step: its level at the input from its volts and the run's scale (volts peak per FS)
        key, at = "thdn_pct", floor.thdn_db_at(units.dbfs_from_rms(node["vrms"] / scale))
        value = units.db_from_ratio(node["thdn_pct"] / 100.0)
    if at is not None and not floor.judges(hz):
        skipped += 1
    elif at is not None:
        got[key] = value - at
    for key, ref in (("noise_dbfs", floor.noise_dbfs), ("noise_a_dbfs", floor.noise_a_dbfs)):
        if _number(node.get(key)) and ref is not None:
            got[key] = node[key] - ref
    return got, skipped


def _same_band(band, floor: Floor) -> bool:
    """Whether a figure's band is the floor's (to 1 %): noise and THD+N over another band are another figure."""
    if band is None or floor.bandwidth_hz is None:
        return True
    try:
        return all(abs(float(a) - float(b)) <= 0.01 * max(abs(float(b)), 1.0) for a, b in zip(band, floor.bandwidth_hz))
    except (TypeError, ValueError):
        return False


#: What :func:`mark` writes into a node (taken out again before it marks, so that marking twice marks once).
_MARKS = ("interface_floor_margin_db", "near_interface_floor")


def _walk(node, floor: Floor, scale: float | None, band=None, hz: float | None = None) -> tuple[int, int]:
    """Mark every node under ``node`` in place (its old marks replaced);
    how many figures were marked, and how many THD+N figures were not
    judged for their frequency."""
    if isinstance(node, list):
        counts = [_walk(item, floor, scale, band, hz) for item in node]
        return sum(c[0] for c in counts), sum(c[1] for c in counts)
    if not isinstance(node, dict):
        return 0, 0
    for key in _MARKS:
        node.pop(key, None)
    cond = node.get("conditions")
    if isinstance(cond, dict) and _number(cond.get("volts_per_fs")) and cond["volts_per_fs"] > 0:
        scale = cond["volts_per_fs"]
    for where in (cond if isinstance(cond, dict) else {}, node):
        if isinstance(where.get("bandwidth_hz"), (list, tuple)) and len(where["bandwidth_hz"]) == 2:
            band = where["bandwidth_hz"]
    for key in ("fundamental_hz", "frequency_hz"):  # a node's own frequency, else the one it lies under
        if _number(node.get(key)) and node[key] > 0:
            hz = float(node[key])
            break
    marked = 0
    margins, skipped = _margins(node, floor, scale, hz) if _same_band(band, floor) else ({}, 0)
    if margins:
        near = [k for k, m in margins.items() if m < MARGIN_DB]
        node["interface_floor_margin_db"] = {k: round(m, 2) for k, m in margins.items()}
        if near:
            node["near_interface_floor"] = near
        marked += len(near)
    for key, value in list(node.items()):
        if key not in _SKIPPED and isinstance(value, (dict, list)):
            m, k = _walk(value, floor, scale, band, hz)
            marked, skipped = marked + m, skipped + k
    return marked, skipped


def mark(doc: dict, calibration: dict | None = None) -> dict:
    """A result document with its figures near the interface's floor marked.

    The floor is the document's own ``calibration`` block's
    (:func:`floor_of`), else that of ``calibration`` (the sidecar's of its
    capture, for a kind whose result keeps none). Every node (a step, a
    grid's cell, a noise result, a single tone ...) that holds ``thdn_db``
    with its ``fundamental_dbfs`` (a power step: ``thdn_pct`` with its
    ``vrms`` and the run's volts per FS), ``noise_dbfs`` or
    ``noise_a_dbfs`` gets ``interface_floor_margin_db`` (each figure less
    the floor there, dB) and, where a margin is under :data:`MARGIN_DB`,
    ``near_interface_floor`` (those figures' keys). A THD+N is judged
    only at a fundamental (the node's ``fundamental_hz`` or
    ``frequency_hz``, else the one of the node it lies under) within the
    floor's judged range (:meth:`Floor.judged_hz`; the module's note);
    noise at every frequency. The document gets ``interface_floor`` (the
    floor as used, its source, its judged range, ``marked``: how many
    figures, ``not_judged``: how many THD+N figures lay outside the
    range) and, when any is marked, one warning of code
    ``near-interface-floor``.

    Marking is idempotent: a document marked before has its old marks and
    its old warning of that code replaced, so ``mark(mark(d)) == mark(d)``.

    Parameters
    ----------
    doc : dict
        A result document of any kind (left as it is: a copy is marked).
    calibration : dict, optional
        The calibration block to read the floor from when ``doc`` has none.

    Returns
    -------
    dict
        The marked copy; ``doc`` itself when there is no floor or its kind
        is the interface's own self-test.

    References
    ----------
    The 6 dB margin: common practice, from memory (the interface's share
    of the power is a quarter at 6 dB). The extrapolation below the floor's
    lowest level: :meth:`Floor.thdn_db_at`.
    """
    if not isinstance(doc, dict) or doc.get("kind") in NOT_MARKED:
        return doc
    floor = floor_of(doc.get("calibration")) or floor_of(calibration)
    if floor is None:
        return doc
    out = copy.deepcopy(doc)
    marked, skipped = _walk(out, floor, None)
    out["interface_floor"] = {**floor.to_dict(), "marked": marked, "not_judged": skipped}
    if isinstance(out.get("warnings"), list):  # (a warning of this code is this function's own: made again below)
        out["warnings"] = [w for w in out["warnings"] if not (isinstance(w, dict) and w.get("code") == CODE)]
    if marked:
        one = marked == 1
        warning = BenchWarning(CODE, f"{units.count(marked, 'figure')} {'lies' if one else 'lie'} within {MARGIN_DB:g} "
                               f"dB of the interface's own floor ({floor.source}): {'it' if one else 'they'} may be "
                               "the interface's rather than the stage's")
        out["warnings"] = list(out.get("warnings") or []) + [warning.to_dict()]
    return out


def summary_line(doc: dict) -> str | None:
    """The floor a marked document used, in one line for its summary on
    screen (None: it used none): its figures, where its THD+N is judged
    (:meth:`Floor.rule`), how many figures are marked and how many THD+N
    figures were not judged for their frequency."""
    used = doc.get("interface_floor") if isinstance(doc, dict) else None
    if not isinstance(used, dict):
        return None
    flat = used.get("flat_hz")
    floor = Floor(tuple(used.get("levels_dbfs") or ()), tuple(used.get("thdn_db") or ()), used.get("noise_dbfs"),
                  used.get("noise_a_dbfs"), frequency_hz=used.get("frequency_hz"),
                  flat_hz=flat if isinstance(flat, list) and len(flat) == 2 else None)
    n = used.get("marked", 0)
    marks = (f"{units.count(n, 'figure')} within {MARGIN_DB:g} dB of it {'is' if n == 1 else 'are'} marked" if n
             else f"no figure lies within {MARGIN_DB:g} dB of it")
    skipped = used.get("not_judged") or 0
    if skipped:
        marks += f"; {units.count(skipped, 'THD+N figure')} at other frequencies not judged"
    rule = f"; {floor.rule()}" if floor.thdn_db else ""
    return f"interface floor ({used.get('source')}): {floor.text() or 'no figures'}{rule}; {marks}"
