"""Result documents: the one envelope every result is stored and printed in.

A result's document names its kind (the kind's one name: the command that
makes it and its run record's ``command`` alike) and the schema version,
then its figures, units in every key, and its warnings, each a code and a
text (:class:`benchkit.errors.BenchWarning`). Version 2 gave every kind its one
name and every load its unit; :func:`upgrade` reads a version-1 document
(a bench folder from before) as version 2, so old runs still list,
reanalyse and compare.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from benchkit.errors import warning_docs

#: The version of every result document.
RESULT_VERSION = 2

#: Version-1 result kinds under their one name since version 2.
V1_KINDS = {"tone-steps": "tone", "response": "sweep", "output-impedance": "zout"}
#: Version-1 keys with their unit since version 2.
V1_KEYS = {"load_ohm": "load_ohms"}


@dataclass(frozen=True)
class Conditions:
    """What a result's figures were measured under, the same keys in every
    result: the sample rate, the band, the window and the method, the
    averaging, the voltage scale and where it came from, the load, the
    calibration profile and its hash; ``more`` holds what only one method
    has (a fit's iterations, a PSD's segment length, a floor margin)."""

    sample_rate_hz: float | None = None
    bandwidth_hz: tuple[float, float] | None = None
    window: str | None = None
    method: str | None = None
    averages: int | None = None
    scale_source: str | None = None
    volts_per_fs: float | None = None
    load_ohms: float | None = None
    calibration_file: str | None = None
    calibration_hash: str | None = None
    more: dict = field(default_factory=dict)

    def calibrated(self, calibration: dict | None) -> "Conditions":
        """These conditions with the calibration profile a sidecar names."""
        from dataclasses import replace

        cal = calibration or {}
        return replace(self, calibration_file=cal.get("file"), calibration_hash=cal.get("hash"))

    def to_dict(self) -> dict:
        return {"sample_rate_hz": self.sample_rate_hz,
                "bandwidth_hz": None if self.bandwidth_hz is None else list(self.bandwidth_hz),
                "window": self.window, "method": self.method, "averages": self.averages,
                "scale_source": self.scale_source, "volts_per_fs": self.volts_per_fs, "load_ohms": self.load_ohms,
                "calibration_file": self.calibration_file, "calibration_hash": self.calibration_hash, **self.more}


def document(kind: str, fields: dict, conditions: Conditions | None = None) -> dict:
    """The document of a result of ``kind``: its kind, the schema version,
    then ``fields``; a measurement's result its ``conditions`` too."""
    doc = {"kind": kind, "schema_version": RESULT_VERSION, **fields}
    if "warnings" in doc:
        doc["warnings"] = warning_docs(doc["warnings"])
    if conditions is not None:
        doc["conditions"] = conditions.to_dict()
    return doc


def upgrade(doc: dict) -> dict:
    """A stored result document as version 2 (a version-2 one unchanged)."""
    if not isinstance(doc, dict) or doc.get("schema_version", 1) != 1:
        return doc
    out = {V1_KEYS.get(k, k): v for k, v in doc.items()}
    out["kind"] = V1_KINDS.get(doc.get("kind"), doc.get("kind"))
    out["schema_version"] = RESULT_VERSION
    out["upgraded_from"] = 1  # (what version 1 did not record stays unknown, not different)
    for part in (out, *(s for s in out.get("steps") or () if isinstance(s, dict))):
        if "warnings" in part:  # (texts then: "unclassified")
            part["warnings"] = warning_docs(part["warnings"])
    return out
