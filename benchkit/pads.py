"""Resistive attenuator pads between a stage's output and an interface input.

A pad is a divider: R1 in series from the stage, R2 across the interface
input, which is itself loaded by the input impedance Rin:

    Vout / Vin = (R2 || Rin) / (R1 + R2 || Rin)          (circuit theory)

The power in each resistor at a given output follows from P = V^2 / R.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

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

    def source_ohms(self, input_ohms: float = math.inf) -> float:
        """Impedance the stage sees looking into the loaded pad."""
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
    return Pad(_ohms(parts[0]), _ohms(parts[1]))


def _ohms(text: str) -> float:
    t = text.strip().lower().removesuffix("ohms").removesuffix("ohm").strip()
    scale = 1.0
    if t and t[-1] in "km":
        scale = 1e3 if t[-1] == "k" else 1e6
        t = t[:-1]
    try:
        return float(t) * scale
    except ValueError:
        raise BenchkitError(f"cannot read resistance {text!r}") from None
