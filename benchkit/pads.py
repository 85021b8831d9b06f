"""Resistive attenuator pads between a stage's output and an interface input.

A pad is a divider: R1 in series from the stage, R2 across the interface
input, which is itself loaded by the input impedance Rin:

    Vout / Vin = (R2 || Rin) / (R1 + R2 || Rin)          (circuit theory)

The power in each resistor at a given output follows from P = V^2 / R.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from benchkit import units
from benchkit.errors import BenchkitError


def parallel(a: float, b: float) -> float:
    """Two resistances in parallel (infinite ones allowed)."""
    if math.isinf(a):
        return b
    if math.isinf(b):
        return a
    return a * b / (a + b)


@dataclass(frozen=True)
class Pad:
    """A two-resistor pad; ``r2_ohms`` may be infinite (series resistor only)."""

    r1_ohms: float
    r2_ohms: float

    def __post_init__(self):
        if not (self.r1_ohms >= 0 and self.r2_ohms > 0) or math.isnan(self.r1_ohms + self.r2_ohms):
            raise BenchkitError(f"pad resistors must be R1 >= 0 and R2 > 0 ohm, got {self.r1_ohms:g}:{self.r2_ohms:g}")

    def ratio(self, input_ohms: float = math.inf) -> float:
        """Vout/Vin with the pad loaded by the interface input."""
        shunt = parallel(self.r2_ohms, input_ohms)
        return shunt / (self.r1_ohms + shunt)

    def input_impedance(self, input_ohms: float = math.inf) -> float:
        """What the pad presents to the stage: R1 + R2 || Rin."""
        return self.r1_ohms + parallel(self.r2_ohms, input_ohms)

    def resistor_watts(self, vrms_in: float, input_ohms: float = math.inf) -> tuple[float, float]:
        """Average power in R1 and in R2 for a stage output of ``vrms_in``."""
        vout = vrms_in * self.ratio(input_ohms)
        p1 = (vrms_in - vout) ** 2 / self.r1_ohms if self.r1_ohms > 0 else 0.0
        p2 = vout**2 / self.r2_ohms if math.isfinite(self.r2_ohms) else 0.0
        return p1, p2

    def to_dict(self, input_ohms: float = math.inf) -> dict:
        return {"r1_ohms": self.r1_ohms, "r2_ohms": self.r2_ohms, "ratio": self.ratio(input_ohms)}


def parse_pad(text: str) -> Pad | None:
    """"R1:R2" in ohms (k and M suffixes allowed, e.g. "1.8k:200"), or "none"."""
    if text.strip().lower() == "none":
        return None
    parts = text.split(":")
    if len(parts) != 2:
        raise BenchkitError(f"cannot read pad {text!r}: expected R1:R2 in ohms (e.g. 1.8k:200) or 'none'")
    return Pad(units.parse_resistance(parts[0]), units.parse_resistance(parts[1]))


# --- preferred values (IEC 60063) --------------------------------------------

#: The E24 series; E24 (and so E12, every other value) departs from the
#: rounded geometric series at several places, so it is listed as published.
E24 = (1.0, 1.1, 1.2, 1.3, 1.5, 1.6, 1.8, 2.0, 2.2, 2.4, 2.7, 3.0,
       3.3, 3.6, 3.9, 4.3, 4.7, 5.1, 5.6, 6.2, 6.8, 7.5, 8.2, 9.1)
E12 = E24[::2]


def e_series(name: str) -> tuple[float, ...]:
    """One decade of a preferred-value series: E12, E24 or E96 (IEC 60063).
    E96 is the geometric series 10^(i/96) rounded to three figures."""
    key = name.upper()
    if key == "E12":
        return E12
    if key == "E24":
        return E24
    if key == "E96":
        return tuple(round(10 ** (i / 96), 2) for i in range(96))
    raise BenchkitError(f"unknown resistor series {name!r}: use E12, E24 or E96")


def values(series: str, lo_ohms: float = 10.0, hi_ohms: float = 1e6) -> list[float]:
    """Every value of a series between lo_ohms and hi_ohms."""
    out = []
    for decade in range(-1, 8):
        for v in e_series(series):
            r = round(v * 10**decade, 6)
            if lo_ohms <= r <= hi_ohms:
                out.append(r)
    return sorted(set(out))


#: Common resistor power ratings, W.
RATINGS_W = (0.125, 0.25, 0.5, 0.6, 1.0, 2.0, 3.0, 5.0, 10.0)


def suggested_rating(watts: float, factor: float = 2.0) -> float:
    """The smallest common rating of at least ``factor`` times the power."""
    for r in RATINGS_W:
        if r >= factor * watts:
            return r
    return math.ceil(factor * watts)


@dataclass(frozen=True)
class PadReport:
    """A pad judged against the worst case it will see."""

    pad: Pad
    ratio: float
    worst_stage_v: float  # volts peak (or DC) the stage can put across the pad
    input_peak_fs: float  # where that worst case lands at the input, FS
    max_safe_stage_vpk: float  # stage volts peak that just reach full scale
    r1_watts: float
    r2_watts: float
    r1_rating_w: float
    r2_rating_w: float
    noise_penalty_db: float  # the interface's floor, referred to the stage, rises by this
    fault_v: float | None = None  # a fault's whole rail on the stage's output, V (powers held at it)
    fault_peak_fs: float | None = None  # where that fault lands at the input, FS

    def to_dict(self) -> dict:
        return {
            "r1_ohms": self.pad.r1_ohms, "r2_ohms": self.pad.r2_ohms, "ratio": self.ratio,
            "worst_stage_v": self.worst_stage_v, "input_peak_fs": self.input_peak_fs,
            "max_safe_stage_vpk": self.max_safe_stage_vpk,
            "r1_watts": self.r1_watts, "r2_watts": self.r2_watts,
            "r1_rating_w": self.r1_rating_w, "r2_rating_w": self.r2_rating_w,
            "noise_penalty_db": self.noise_penalty_db, "fault_v": self.fault_v, "fault_peak_fs": self.fault_peak_fs,
        }


def judge(pad: Pad, worst_stage_v: float, input_fs_vpk: float, input_ohms: float,
          fault_v: float | None = None) -> PadReport:
    """Evaluate a pad: ratio loaded by the input, where the stage's highest
    normal swing ``worst_stage_v`` lands, where a fault's ``fault_v`` (its
    whole rail) lands, resistor powers with the larger of the two held as
    DC (a failed stage can put its rail there: V^2/R, circuit theory) and
    ratings of at least 2x."""
    ratio = pad.ratio(input_ohms)
    held = max(worst_stage_v, fault_v or 0.0)
    v_out = held * ratio
    p1 = (held - v_out) ** 2 / pad.r1_ohms if pad.r1_ohms > 0 else 0.0
    p2 = v_out**2 / pad.r2_ohms
    return PadReport(
        pad=pad, ratio=ratio, worst_stage_v=worst_stage_v, input_peak_fs=worst_stage_v * ratio / input_fs_vpk,
        max_safe_stage_vpk=input_fs_vpk / ratio, r1_watts=p1, r2_watts=p2,
        r1_rating_w=suggested_rating(p1), r2_rating_w=suggested_rating(p2),
        noise_penalty_db=-units.db_from_ratio(ratio), fault_v=fault_v,
        fault_peak_fs=None if fault_v is None else fault_v * ratio / input_fs_vpk,
    )


def design(
    worst_stage_v: float,
    input_fs_vpk: float,
    input_ohms: float,
    headroom_db: float = 6.0,
    series: str = "E24",
    shunt_range: tuple[float, float] = (100.0, 2200.0),
    count: int = 5,
    fault_v: float | None = None,
) -> list[PadReport]:
    """Pads from a preferred series whose loaded ratio puts the stage's
    highest normal swing ``worst_stage_v`` ``headroom_db`` below the
    input's full scale (or a little lower), the closest first; each judged
    with ``fault_v`` too (:func:`judge`).

    R2 is kept low (100 ohm to 2.2 k by default) so that the input's own
    impedance and its spread barely move the ratio, and the pad adds little
    noise.
    """
    if not (worst_stage_v > 0 and input_fs_vpk > 0 and input_ohms > 0):
        raise BenchkitError("the stage voltage, the input full scale and its impedance must be positive")
    target = input_fs_vpk * 10 ** (-headroom_db / 20) / worst_stage_v
    if target >= 1.0:
        return [judge(Pad(0.0, math.inf), worst_stage_v, input_fs_vpk, input_ohms, fault_v)]
    found = []
    r1s = values(series, 10.0, 10e6)
    for r2 in values(series, *shunt_range):
        shunt = parallel(r2, input_ohms)
        exact_r1 = shunt * (1 / target - 1)
        # the nearest value at or above the exact R1 keeps the ratio at or below target
        r1 = next((v for v in r1s if v >= exact_r1 * (1 - 1e-9)), None)
        if r1 is None:
            continue
        found.append(judge(Pad(r1, r2), worst_stage_v, input_fs_vpk, input_ohms, fault_v))
    found.sort(key=lambda rep: (abs(units.db_from_ratio(rep.ratio / target)), rep.pad.r2_ohms))
    return found[:count]


def pads_for(o: dict) -> tuple[float, list[PadReport]]:
    """``benchkit pad`` with its options by key (benchkit.options): the
    stage's normal swing, volts peak (the larger of --stage-vpk and the
    rail's, the pre-flight's rule: docs/safety.md), and the pads designed
    for it, or the one judged (--check R1 --check R2)."""
    from benchkit.preflight import normal_swing_vpk

    if o["check"] and len(o["check"]) != 2:
        raise BenchkitError("--check takes two resistances: --check R1 --check R2")
    if o["stage_vpk"] is None and o["rail"] is None:
        raise BenchkitError("give --stage-vpk (the stage's highest output, V peak) or --rail (its supply, V)")
    swings = (o["stage_vpk"], None if o["rail"] is None else normal_swing_vpk(o["rail"], o["btl"]))
    normal = max(v for v in swings if v is not None)
    if o["check"]:
        return normal, [judge(Pad(*o["check"]), normal, o["input_fs"], o["input_ohms"], o["rail"])]
    return normal, design(normal, o["input_fs"], o["input_ohms"], o["headroom"], o["series"], fault_v=o["rail"])
