"""Voltage gain of a stage: the output's fundamental over the input's.

The input is the stage's input as measured on a second interface input
(wired straight from the driving output), or the drive as the calibrated
output scale says it is. Both are fitted tones (:func:`analyze_tone`), so
the ratio is of fundamentals, not of broadband levels.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

from benchkit import units
from benchkit.analysis.tone import ToneResult
from benchkit.analysis.compare import Figure, finite
from benchkit.analysis.documents import document
from benchkit.analysis import uncertainty as ua
from benchkit.units import quantity



@dataclass(frozen=True)
class GainResult:
    frequency_hz: float
    drive_dbfs: float
    vin_vrms: float
    vout_vrms: float
    input_source: str  # "reference-channel" or "calibrated-drive"
    phase_deg: float | None  # output against input, in (-180, 180]; None from the drive
    output: ToneResult
    load_ohms: float | None = None
    warnings: tuple[str, ...] = ()
    #: the calibration profile its capture's sidecar names (file, hash ...), none without one
    calibration: dict | None = None
    #: the reference input's type-A relative uncertainty of its level (0: from the drive)
    reference_rel: float = 0.0

    @property
    def gain_vv(self) -> float:
        return self.vout_vrms / self.vin_vrms

    @property
    def gain_db(self) -> float:
        return float(units.db_from_ratio(self.gain_vv))

    @property
    def inverting(self) -> bool | None:
        return None if self.phase_deg is None else abs(self.phase_deg) > 90.0

    def uncertainty(self) -> dict:
        """The uncertainty block: the two levels' type A (each fitted tone's;
        a phase's is its amplitude's relative u, in radians) and, of the
        chain, the pad (on the output's input alone) and the interface's
        flatness at the frequency. The voltmeter cancels: the input's scale
        was calibrated from the output's, and both inputs share it."""
        u_out = self.output.level_rel_u
        noise = math.nan if u_out is None else math.hypot(u_out, self.reference_rel)
        chain = self.output.chain
        budget = ua.Budget.of(noise=noise, pad=chain.pad if chain else 0.0,
                              flatness=ua.rel_from_db(chain.flatness_db(self.frequency_hz)) if chain else 0.0)
        out = ua.Collector()
        out.put("gain_db", budget, ua.DB_PER_REL)
        out.put("gain_vv", budget, self.gain_vv)
        if self.phase_deg is not None:
            out.put("phase_deg", ua.Budget.of(noise=noise), 180.0 / math.pi)
        return out.block()

    def to_dict(self) -> dict:
        return document("gain", {
            "frequency_hz": self.frequency_hz, "drive_dbfs": self.drive_dbfs,
            "gain_vv": self.gain_vv, "gain_db": self.gain_db, "vin_vrms": self.vin_vrms, "vout_vrms": self.vout_vrms,
            "phase_deg": self.phase_deg, "inverting": self.inverting, "input_source": self.input_source,
            "load_ohms": self.load_ohms, "output_thdn_db": self.output.thdn_db, "valid": self.output.valid,
            "bandwidth_hz": list(self.output.bandwidth_hz) if self.output.bandwidth_hz else None,
            "sample_rate_hz": self.output.sample_rate_hz,
            "warnings": list(self.warnings) + list(self.output.warnings),
            "uncertainty": self.uncertainty(),
        }, replace(self.output.conditions(), method=f"output over input ({self.input_source}), each tone fitted",
                   load_ohms=self.load_ohms).calibrated(self.calibration))


def analyze_gain(output: ToneResult, *, drive_dbfs: float, reference: ToneResult | None = None,
                 output_vpk_per_fs: float | None = None, load_ohms: float | None = None) -> GainResult:
    """The voltage gain of a stage from its output's analysis and its
    input's.

    Parameters
    ----------
    output : ToneResult
        The stage's output, analysed with a voltage scale.
    drive_dbfs : float
        The level the interface played, dBFS.
    reference : ToneResult, optional
        The stage's input as a second input measured it (with its scale):
        the gain and its phase come from the two.
    output_vpk_per_fs : float, optional
        Without a reference: the interface output's volts peak per FS, so
        the input is the drive at that scale (no phase).
    load_ohms : float, optional
        The load, recorded with the result.

    Returns
    -------
    GainResult
        ``gain_vv``, ``gain_db``, ``phase_deg`` and ``inverting`` (with a
        reference).

    References
    ----------
    Voltage gain A = Vout / Vin, in dB 20 log10 A (circuit theory);
    sine RMS = peak / sqrt(2).

    Examples
    --------
    A stage that gives 2 Vrms out for 0.1 Vrms in gains 20 V/V, 26 dB:

    >>> import numpy as np, benchkit
    >>> t = np.arange(48000) / 48000
    >>> vin = 0.1 * np.sqrt(2) * np.sin(2 * np.pi * 1000 * t)
    >>> out = benchkit.analyze_tone(-0.5 * vin, 48000, volts_per_fs=40.0)
    >>> ref = benchkit.analyze_tone(vin, 48000, volts_per_fs=1.0)
    >>> g = benchkit.analyze_gain(out, drive_dbfs=-20.0, reference=ref)
    >>> round(g.gain_vv, 6), round(g.gain_db, 2), g.inverting
    (20.0, 26.02, True)
    """
    if output.fundamental_vrms is None:
        raise ValueError("the output needs a voltage scale")
    if reference is not None:
        if reference.fundamental_vrms is None:
            raise ValueError("the reference input needs a voltage scale")
        phase = (output.fundamental_phase_deg - reference.fundamental_phase_deg + 180.0) % 360.0 - 180.0
        ref_u = reference.level_rel_u or 0.0
        return GainResult(output.fundamental_hz, drive_dbfs, reference.fundamental_vrms, output.fundamental_vrms,
                          "reference-channel", float(phase), output, load_ohms, tuple(reference.warnings),
                          reference_rel=ref_u)
    vin = float(units.vrms_from_vpk(output_vpk_per_fs * units.ratio_from_db(drive_dbfs)))
    return GainResult(output.fundamental_hz, drive_dbfs, vin, output.fundamental_vrms, "calibrated-drive", None, output,
                      load_ohms)


def gain_figures(doc: dict) -> list[Figure]:
    at = f"{quantity(doc.get('frequency_hz', 0), 'Hz', 4)}, drive {doc.get('drive_dbfs', 0):g} dBFS"
    return [Figure("gain_db", "gain", finite(doc.get("gain_db")), "dB", None, at=at, headline=True).of(doc, "gain_db"),
            Figure("phase_deg", "phase", finite(doc.get("phase_deg")), "deg", None, at=at).of(doc, "phase_deg")]


def gain_readings(doc: dict) -> list:
    """A gain result's gain with its phase, as an output reading for an
    output impedance from two logged runs (:mod:`benchkit.analysis.zout`)."""
    from benchkit.analysis.zout import Reading, phasor

    u, shared = ua.lookup(doc, "gain_db"), ua.lookup(doc, "gain_db", part="shared") or 0.0
    own = None if u is None else ua.rel_from_db(math.sqrt(max(u * u - shared * shared, 0.0)))
    return [Reading(float(doc["frequency_hz"]), phasor(float(doc["gain_vv"]), doc.get("phase_deg")),
                    doc.get("drive_dbfs"), bool(doc.get("valid", True)), doc.get("phase_deg") is not None, own)]
