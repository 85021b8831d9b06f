"""Calibration profiles: the chain that turns full-scale units into volts.

A profile (JSON, calibration/README.md) says, for one interface at one
sample rate, how many volts peak one FS is at the output jack and at the
input jack, what pad sits in front of the input, whether the chain inverts,
whether the input passes DC, how low the interface's own floor is and how
flat its loopback response, the round trip found, when it was made and how
far it can be trusted.

volts at the stage (peak) = samples (FS) x input_vpk_per_fs / pad ratio
"""

from __future__ import annotations

import hashlib
import json
import math
import os
from dataclasses import asdict, dataclass, field
from pathlib import Path

from benchkit.errors import BenchkitError
from benchkit.interface_floor import problem as floor_problem
from benchkit.pads import Pad
from benchkit.jsonfile import load_json, typed

PROFILE_KIND = "calibration-profile"
PROFILE_VERSION = 1


@dataclass(frozen=True)
class PadSpec:
    """The pad in front of the input: resistors (ratio computed with the
    input impedance) or a ratio measured with the pad in place."""

    ratio: float
    r1_ohms: float | None = None
    r2_ohms: float | None = None
    input_ohms: float | None = None
    measured: bool = False
    #: the resistors' tolerance, +-% (None: not stated, a profile from before it was kept)
    tolerance_pct: float | None = None

    def pad(self) -> Pad | None:
        if self.r1_ohms is None or self.r2_ohms is None:
            return None
        return Pad(self.r1_ohms, self.r2_ohms)


@dataclass(frozen=True)
class Profile:
    """One interface's calibration at one sample rate."""

    interface: str
    sample_rate_hz: float
    out_channel: int
    in_channel: int
    output_vpk_per_fs: float
    input_vpk_per_fs: float
    pad: PadSpec | None = None
    ref_channel: int | None = None
    polarity_inverts: bool = False
    dc_coupled: bool = False
    dc_volts_per_fs: float | None = None
    ac_corner_hz: float | None = None
    #: the interface alone, looped back: {"thdn_db", "noise_dbfs", "level_dbfs", "frequency_hz", "bandwidth_hz"}
    loopback_floor: dict = field(default_factory=dict)
    #: the interface's self-test (benchkit loopback): {"levels_dbfs": [ascending], "thdn_db": [one a level],
    #: "noise_dbfs", "noise_a_dbfs" (dBFS at the input, null: not measured), "bandwidth_hz": [lo, hi],
    #: "measured" (ISO time), "source"}; empty: none, and results fall back on loopback_floor
    #: (benchkit.interface_floor)
    interface_floor: dict = field(default_factory=dict)
    #: [[freq_hz, gain_db], ...] of the loopback, re 1 kHz
    loopback_response: list = field(default_factory=list)
    latency_samples: int | None = None
    #: {"voltmeter_pct", "repeatability_db", "total_db", "load_tolerance_pct"}: the voltmeter's
    #: accuracy as stated (+-%), the input's read-to-read scatter (a standard deviation, dB), the two
    #: summed as before (dB), the dummy load's tolerance as stated (+-%)
    uncertainty: dict = field(default_factory=dict)
    created: str = ""
    note: str = ""

    @property
    def pad_ratio(self) -> float:
        return 1.0 if self.pad is None else self.pad.ratio

    @property
    def stage_volts_per_fs(self) -> float:
        """Volts peak at the stage's terminals per FS at the input."""
        return self.input_vpk_per_fs / self.pad_ratio

    def to_dict(self) -> dict:
        d = {"kind": PROFILE_KIND, "schema_version": PROFILE_VERSION, **asdict(self)}
        if not d["interface_floor"]:  # a profile without one is written, and hashed, as before it existed
            del d["interface_floor"]
        return d

    def chain(self):
        """The chain's type-B contributions (benchkit.analysis.uncertainty.Chain)."""
        from benchkit.analysis.uncertainty import Chain

        return Chain.of_profile(self, self.uncertainty.get("load_tolerance_pct"))

    def digest(self) -> str:
        """Short hash of the profile's content, recorded by every run that
        used it."""
        # (the interface's floor, which its self-test adds later, changes no scale: runs before and after it compare)
        text = json.dumps({k: v for k, v in self.to_dict().items() if k != "interface_floor"}, sort_keys=True,
                          separators=(",", ":"))
        return hashlib.sha256(text.encode()).hexdigest()[:12]


def save_profile(profile: Profile, path: str | os.PathLike) -> Path:
    p = Path(path)
    p.parent.mkdir(parents=True, exist_ok=True)
    p.write_text(json.dumps(profile.to_dict(), indent=2) + "\n", encoding="utf-8")
    return p


_REQUIRED = ("interface", "sample_rate_hz", "out_channel", "in_channel", "output_vpk_per_fs", "input_vpk_per_fs")


def load_profile(path: str | os.PathLike) -> Profile:
    """Read a profile, refusing anything that is not one with a clear reason."""
    p = Path(path)
    if not p.is_file():
        raise BenchkitError(f"calibration profile {p}: no such file")
    try:
        doc = load_json(p)
    except (OSError, UnicodeDecodeError) as exc:
        raise BenchkitError(f"calibration profile {p}: cannot read it ({exc.__class__.__name__})") from exc
    except ValueError as exc:
        raise BenchkitError(f"calibration profile {p}: not valid JSON ({exc})") from exc
    if not isinstance(doc, dict) or doc.get("kind") != PROFILE_KIND:
        raise BenchkitError(f"calibration profile {p}: not a benchkit calibration profile")
    version = doc.get("schema_version")
    if not isinstance(version, int) or version < 1:
        raise BenchkitError(f"calibration profile {p}: no valid layout version")
    if version > PROFILE_VERSION:
        raise BenchkitError(
            f"calibration profile {p}: layout version {version} is newer than this benchkit reads "
            f"({PROFILE_VERSION}); update benchkit or calibrate again"
        )
    missing = [k for k in _REQUIRED if k not in doc]
    if missing:
        raise BenchkitError(f"calibration profile {p}: missing {', '.join(missing)}")
    try:
        prof = typed(Profile, doc)
    except (TypeError, ValueError) as exc:
        raise BenchkitError(f"calibration profile {p}: damaged ({exc})") from exc
    for name in ("output_vpk_per_fs", "input_vpk_per_fs", "sample_rate_hz"):
        v = getattr(prof, name)
        if not isinstance(v, (int, float)) or not math.isfinite(v) or v <= 0:
            raise BenchkitError(f"calibration profile {p}: {name} must be a positive number")
    if not 0 < prof.pad_ratio <= 1:
        raise BenchkitError(f"calibration profile {p}: the pad ratio must lie between 0 and 1")
    wrong = floor_problem(prof.interface_floor)
    if wrong:
        raise BenchkitError(f"calibration profile {p}: interface_floor is damaged ({wrong})")
    return prof
