"""A stage's expected ceilings from its design numbers (``benchkit budget``).

Single-ended class A with a constant-current pull-up and a
capacitor-coupled load (textbook class-A analysis, REFERENCES.md), the
output node resting at mid-supply:

- the positive swing ends where the pull-up's I_bias all goes into the
  load (the device cuts off), I_bias x R_load, or where the node meets the
  rail less the pull-up's own saturation voltage, V_rail / 2 - V_sat,
  whichever comes first;
- the negative swing is rail-limited: the node falls to the saturation
  voltage above ground, so V- = V_rail / 2 - V_sat (the device sinks the
  load's current as well as the bias);
- the largest clean sine has the smaller of the two as its peak, and
  P = Vpk^2 / (2 R) (circuit theory);
- the supply draws V_rail x I_bias all the time: at idle all of it is heat,
  and the efficiency P / (V I) is at most 25 % (at I R = V/2, V_sat = 0).

A base-emitter-referenced current limiter senses the current in R_s and
limits at V_BE / R_s, V_BE about 0.65 V (common practice); R_s dissipates
V_BE x I.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from benchkit.errors import BenchkitError

#: Base-emitter threshold of a limiter transistor, V (common practice: 0.6-0.7 V).
VBE_V = 0.65


@dataclass(frozen=True)
class ClassABudget:
    """The ceilings of a single-ended class-A stage."""

    rail_v: float
    bias_a: float
    load_ohms: float
    vsat_v: float = 1.0

    def __post_init__(self):
        if self.rail_v <= 0 or self.bias_a <= 0 or self.load_ohms <= 0 or self.vsat_v < 0:
            raise BenchkitError("the budget needs a positive rail, bias and load, and a saturation voltage >= 0")
        if self.vsat_v >= self.rail_v / 2:
            raise BenchkitError("the saturation voltage must be below half the rail")

    @property
    def current_limited_vpk(self) -> float:
        return self.bias_a * self.load_ohms

    @property
    def rail_limited_vpk(self) -> float:
        return self.rail_v / 2 - self.vsat_v

    @property
    def positive_vpk(self) -> float:
        """The positive swing: the current limit or the rail, whichever is lower."""
        return min(self.current_limited_vpk, self.rail_limited_vpk)

    @property
    def negative_vpk(self) -> float:
        """The negative swing: the rail."""
        return self.rail_limited_vpk

    @property
    def limiting_half(self) -> str:
        """Which half of the swing clips first: "positive" (the current
        limit comes before the rail) or "symmetric" (both halves reach the
        rails)."""
        a, b = self.positive_vpk, self.negative_vpk
        return "symmetric" if math.isclose(a, b, rel_tol=0.01) else "positive"

    @property
    def peak_vpk(self) -> float:
        """The largest clean sine's peak: the positive swing, never above the negative."""
        return self.positive_vpk

    @property
    def max_sine_w(self) -> float:
        """P = Vpk^2 / (2 R) at the smaller limit."""
        return self.peak_vpk**2 / (2 * self.load_ohms)

    @property
    def supply_w(self) -> float:
        """V I, drawn at idle and at full power alike; all heat at idle."""
        return self.rail_v * self.bias_a

    @property
    def idle_dissipation_w(self) -> float:
        return self.supply_w

    @property
    def max_efficiency_pct(self) -> float:
        return 100.0 * self.max_sine_w / self.supply_w

    def bias_for(self, power_w: float) -> float:
        """The bias whose current limit just passes a sine of ``power_w``:
        I = sqrt(2 P R) / R."""
        if power_w <= 0:
            raise BenchkitError("the target power must be positive")
        return math.sqrt(2 * power_w * self.load_ohms) / self.load_ohms

    def rail_for(self, power_w: float) -> float:
        """The rail whose negative limit just passes it: 2 (Vpk + V_sat)."""
        return 2 * (math.sqrt(2 * power_w * self.load_ohms) + self.vsat_v)

    def to_dict(self, target_power_w: float | None = None, limit_a: float | None = None, vbe_v: float = VBE_V) -> dict:
        d = {
            "kind": "budget",
            "schema_version": 1,
            "topology": "se-class-a",
            "rail_v": self.rail_v,
            "bias_a": self.bias_a,
            "load_ohms": self.load_ohms,
            "vsat_v": self.vsat_v,
            "current_limited_vpk": self.current_limited_vpk,
            "rail_limited_vpk": self.rail_limited_vpk,
            "positive_swing_vpk": self.positive_vpk,
            "negative_swing_vpk": self.negative_vpk,
            "limiting_half": self.limiting_half,
            "max_sine_w": self.max_sine_w,
            "supply_w": self.supply_w,
            "idle_dissipation_w": self.idle_dissipation_w,
            "max_efficiency_pct": self.max_efficiency_pct,
        }
        if target_power_w is not None:
            d["target"] = {"power_w": target_power_w, "bias_a": self.bias_for(target_power_w),
                           "rail_v": self.rail_for(target_power_w)}
        if limit_a is not None:
            d["current_limiter"] = sense_resistor(limit_a, vbe_v)
        return d


def sense_resistor(limit_a: float, vbe_v: float = VBE_V) -> dict:
    """R_s = V_BE / I for a limiter at ``limit_a``, and its dissipation V_BE x I."""
    if limit_a <= 0 or vbe_v <= 0:
        raise BenchkitError("the limit current and V_BE must be positive")
    return {"limit_a": limit_a, "vbe_v": vbe_v, "sense_ohms": vbe_v / limit_a, "sense_w": vbe_v * limit_a}
