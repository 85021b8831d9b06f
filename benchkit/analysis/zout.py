"""Output impedance and damping factor from an open and a loaded reading.

A stage's output is a Thevenin source: its open-circuit voltage behind an
output impedance Z. Across a load R the voltage is V_th R / (R + Z), so
from the output unloaded (V_open) and loaded (V_loaded) at the same drive

    Z = R (V_open / V_loaded - 1)

(circuit theory: the voltage divider). "Unloaded" on a bench still means
the pad and the interface's input across the output; when that impedance
R_p is known, the loaded reading is across R || R_p and

    Z = R_p R' (k - 1) / (R_p - k R'),  k = V_open / V_loaded,  R' = R || R_p,

which tends to the first as R_p grows. With the phases known (each
reading a complex gain against the stage's input on a reference channel)
k is complex and so is Z: its real part is the resistance, its imaginary
part the reactance (a coupling capacitor's at low frequencies). From
levels alone, |Z| is right only while Z is resistive. The damping factor
is R / |Z| (common practice: quoted against the nominal load, usually
8 ohm).
"""

from __future__ import annotations

import cmath
import math
from dataclasses import dataclass, field

from benchkit.units import quantity
from benchkit import units
from benchkit.errors import BenchWarning, BenchkitError
from benchkit.analysis.compare import Figure, finite
from benchkit.analysis.documents import Conditions, document
from benchkit.analysis.uncertainty import Budget, Collector


#: |k - 1| below this is under what two readings resolve (a tenth of a
#: percent of the load: amplitude repeatability of a bench reading, about
#: 0.01 dB, common practice, and the load's own tolerance).
RESOLUTION = 1e-3
#: Readings this far apart in frequency are not paired.
SAME_FREQUENCY = 0.005
#: A drive difference worth a warning, dB.
DRIVE_WARN_DB = 0.05


@dataclass(frozen=True)
class Reading:
    """The stage's output at one frequency: a gain against its input
    (complex when the phase is known, V/V) or a level (Vrms, real), at a
    drive (dBFS, when known)."""

    frequency_hz: float
    value: complex
    drive_dbfs: float | None = None
    valid: bool = True
    phase_known: bool = False
    #: its relative standard uncertainty (type A; None: not known)
    rel_u: float | None = None


def phasor(magnitude: float, phase_deg: float | None) -> complex:
    """A gain with its phase (degrees; None: the magnitude alone, real)."""
    return complex(magnitude) if phase_deg is None else cmath.rect(magnitude, math.radians(phase_deg))


@dataclass(frozen=True)
class ZoutPoint:
    frequency_hz: float
    ratio: complex  # k = open / loaded
    zout: complex  # ohms; real when the phases are not known
    load_ohms: float
    valid: bool
    drive_dbfs: float | None = None  # the unloaded reading's
    #: |Zout|'s standard uncertainty by contribution, ohms (benchkit.analysis.uncertainty.Budget)
    budget: Budget = field(default_factory=Budget)

    @property
    def zout_ohms(self) -> float:
        return abs(self.zout)

    @property
    def damping_factor(self) -> float | None:
        return None if self.zout_ohms == 0 else self.load_ohms / self.zout_ohms

    def to_dict(self) -> dict:
        return {"frequency_hz": self.frequency_hz, "ratio": abs(self.ratio),
                "ratio_db": units.db_from_ratio(abs(self.ratio)),
                "ratio_phase_deg": math.degrees(cmath.phase(self.ratio)), "zout_ohms": self.zout_ohms,
                "resistance_ohms": self.zout.real, "reactance_ohms": self.zout.imag,
                "damping_factor": self.damping_factor, "drive_dbfs": self.drive_dbfs, "valid": self.valid}


@dataclass(frozen=True)
class ZoutResult:
    load_ohms: float
    open_load_ohms: float | None
    method: str  # "gain-ratio" (complex) or "levels" (magnitudes)
    points: tuple[ZoutPoint, ...]
    warnings: tuple[str, ...] = ()
    #: the calibration profile its readings were made with (file, hash ...), none without one
    calibration: dict | None = None

    def at(self, frequency_hz: float = 1000.0) -> ZoutPoint | None:
        """The valid point nearest ``frequency_hz`` (on a log scale)."""
        valid = [p for p in self.points if p.valid]
        return min(valid, key=lambda p: abs(math.log(p.frequency_hz / frequency_hz))) if valid else None

    def uncertainty(self) -> dict:
        """The uncertainty block: each point's |Zout| (the two readings' type
        A through Zout = R (k - 1), and the load's tolerance: Zout scales
        with R) and its damping factor R / |Zout| (the readings' alone: R
        cancels), the reference point's under the top-level keys."""
        out = Collector()
        points = list(self.points)
        out.put_list("points.zout_ohms", [p.budget for p in points], bounds=False)
        damping = [Budget.of(noise=p.budget.unshared().u / p.zout_ohms) if p.zout_ohms and p.budget.known else None
                   for p in points]
        out.put_list("points.damping_factor", damping, [p.damping_factor or 0.0 for p in points], bounds=False)
        ref = self.at()
        if ref is not None:
            out.put("zout_ohms", ref.budget)
            if ref.zout_ohms and ref.budget.known:
                out.put("damping_factor", Budget.of(noise=ref.budget.unshared().u / ref.zout_ohms), ref.damping_factor)
        return out.block()

    def to_dict(self) -> dict:
        ref = self.at()
        return document("zout", {
            "load_ohms": self.load_ohms,
            "open_load_ohms": self.open_load_ohms, "method": self.method,
            "reference_hz": None if ref is None else ref.frequency_hz,
            "zout_ohms": None if ref is None else ref.zout_ohms,
            "damping_factor": None if ref is None else ref.damping_factor,
            "points": [p.to_dict() for p in self.points], "warnings": list(self.warnings),
            "uncertainty": self.uncertainty(),
        }, Conditions(method=self.method, load_ohms=self.load_ohms,
                      more={"open_load_ohms": self.open_load_ohms}).calibrated(self.calibration))


def analyze_zout(open_: list[Reading], loaded: list[Reading], *, load_ohms: float, load_rel: float = 0.0,
                 open_load_ohms: float | None = None) -> ZoutResult:
    """The output impedance at each frequency read both unloaded and
    across a load.

    Parameters
    ----------
    open_, loaded : list of Reading
        The stage's output unloaded and across ``load_ohms``: gains against
        its input (complex, ``phase_known``) or levels; readings are paired
        by frequency (within 0.5 %).
    load_ohms : float
        The load of the loaded reading.
    open_load_ohms : float, optional
        What the unloaded output drove (the pad and the input); open when
        not given (a warning says so).
    load_rel : float
        The load resistance's relative standard uncertainty (its tolerance
        +-t: t / sqrt 3): Zout scales with it (the damping factor does not).
        Each reading's own is its ``rel_u``.

    Returns
    -------
    ZoutResult
        Z (complex with phases, else its magnitude) at each frequency, and
        the damping factor into the load.

    References
    ----------
    The voltage divider of a Thevenin source: Z = R (V_open / V_loaded - 1)
    (circuit theory); with the open reading across Rp the two loads'
    parallel values take the place of R (the same divider twice).

    Examples
    --------
    An output of 0.5 ohm into 8 ohm drops by 8 / 8.5:

    >>> import benchkit
    >>> r = benchkit.analyze_zout([benchkit.Reading(1000.0, 1.0, phase_known=True)],
    ...                           [benchkit.Reading(1000.0, 8 / 8.5, phase_known=True)], load_ohms=8.0)
    >>> round(r.points[0].zout_ohms, 6), round(r.points[0].damping_factor, 3)
    (0.5, 16.0)
    """
    if not load_ohms > 0:
        raise BenchkitError(f"the load must be a positive resistance, got {load_ohms:g} ohm")
    if open_load_ohms is not None and not open_load_ohms > load_ohms:
        raise BenchkitError(f"the unloaded output's load ({open_load_ohms:g} ohm) must be far above the load's")
    warnings = []
    complex_ = all(r.phase_known for r in open_ + loaded)
    if not complex_:
        warnings.append(BenchWarning("assumed", "levels only (no phase): |Zout| is right only where the output impedance is resistive"))
    r_eff = load_ohms if open_load_ohms is None else load_ohms * open_load_ohms / (load_ohms + open_load_ohms)
    points, drifted, unresolved = [], [], []
    for a in open_:
        b = min(loaded, key=lambda r: abs(r.frequency_hz - a.frequency_hz), default=None)
        if b is None or abs(b.frequency_hz / a.frequency_hz - 1.0) > SAME_FREQUENCY:
            continue
        va, vb = (a.value, b.value) if complex_ else (abs(a.value), abs(b.value))
        if vb == 0:
            continue
        k = va / vb
        if a.drive_dbfs is not None and b.drive_dbfs is not None and abs(a.drive_dbfs - b.drive_dbfs) > DRIVE_WARN_DB:
            drifted.append(a.frequency_hz)
            if not a.phase_known:  # levels: a linear stage's output follows its drive
                k /= units.ratio_from_db(a.drive_dbfs - b.drive_dbfs)
        if open_load_ohms is None:
            z = r_eff * (k - 1.0)
        else:
            z = open_load_ohms * r_eff * (k - 1.0) / (open_load_ohms - k * r_eff)
        if abs(k - 1.0) < RESOLUTION:
            unresolved.append(a.frequency_hz)
        # dZ/dk, and k's own u from the two readings' (JCGM 100 5.1.2)
        dz = r_eff if open_load_ohms is None else (open_load_ohms * r_eff * (open_load_ohms - r_eff)
                                                   / (open_load_ohms - k * r_eff) ** 2)
        # (a reading's u not known: nor is Zout's)
        noise = math.nan if a.rel_u is None or b.rel_u is None else abs(dz) * abs(k) * math.hypot(a.rel_u, b.rel_u)
        budget = Budget.of(noise=noise, load=load_rel * abs(z))
        points.append(ZoutPoint(a.frequency_hz, complex(k), complex(z), load_ohms, a.valid and b.valid, a.drive_dbfs,
                                budget))
    if not points:
        raise BenchkitError("the unloaded and loaded readings share no frequency")
    if drifted:
        what = "levels were scaled by the drive ratio" if not complex_ else "the gains were compared"
        warnings.append(BenchWarning("drive-changed", f"the two readings were not at the same drive at {_hz_list(drifted)}: {what} (the stage "
                        "taken as linear there)"))
    if unresolved:
        warnings.append(BenchWarning("below-resolution", f"at {_hz_list(unresolved)} the load changed the output by under {100 * RESOLUTION:g} %: the "
                        f"output impedance is below what this resolves (about {quantity(RESOLUTION * load_ohms, 'ohm', 2)})"))
    if open_load_ohms is None:
        warnings.append(BenchWarning("assumed", "the unloaded output's load (pad and input) is not known: taken as open"))
    return ZoutResult(load_ohms, open_load_ohms, "gain-ratio" if complex_ else "levels", tuple(points), tuple(warnings))


def _hz_list(freqs: list[float]) -> str:
    return ", ".join(f"{f:g} Hz" for f in freqs[:4]) + (" ..." if len(freqs) > 4 else "")


def zout_figures(doc: dict) -> list[Figure]:
    at = f"{doc['reference_hz']:g} Hz" if finite(doc.get("reference_hz")) is not None else ""
    out = [Figure("zout_ohms", "output impedance", finite(doc.get("zout_ohms")), "ohm", "lower", at=at,
                  headline=True).of(doc, "zout_ohms"),
           Figure("damping_factor", "damping factor", finite(doc.get("damping_factor")), "", "higher", at=at,
                  headline=True).of(doc, "damping_factor")]
    for i, p in enumerate(doc.get("points") or []):
        f = finite(p.get("frequency_hz"))
        if f is not None:
            out.append(Figure(f"zout_ohms@{f:.4g}Hz", "output impedance", finite(p.get("zout_ohms")), "ohm", "lower",
                              at=f"{quantity(f, 'Hz', 4)}").of(doc, "points.zout_ohms", i))
    return out
