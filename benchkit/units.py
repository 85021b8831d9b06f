"""Every unit conversion benchkit uses, in one place.

Conventions (see docs/measurement-guide.md):

* Full scale (FS) is a sample value of 1.0.
* An interface's scale is the volts *peak* at its jack for one FS; a
  ``volts_per_fs`` number anywhere in benchkit means volts peak at the point
  measured (after undoing any pad) per unit sample value.
* dBFS of any signal is ``20 log10(sqrt(2) * RMS / FS)`` (AES17), so a sine
  whose peaks just reach FS is 0 dBFS and a sine of peak 0.5 FS is -6.02 dBFS.
* 0 dBV = 1 Vrms; 0 dBu = sqrt(0.6) Vrms = 0.7746 Vrms.
* Ratios in dB are amplitude ratios (``20 log10``) unless named ``power``.

Logarithms of zero are floored at :data:`DB_FLOOR` so that results stay finite
and JSON-serialisable; a figure at the floor means "nothing measurable".
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

import numpy as np

from benchkit.errors import BenchkitError

SQRT2 = math.sqrt(2.0)
#: 0 dBu in Vrms: the voltage that dissipates 1 mW in 600 ohm.
DBU_REF_VRMS = math.sqrt(0.6)
#: 0 dBV in Vrms.
DBV_REF_VRMS = 1.0
#: Lowest level any dB conversion returns (amplitude ratio 1e-20).
DB_FLOOR = -400.0

_TINY_AMPLITUDE = 10.0 ** (DB_FLOOR / 20.0)


def _scalar_or_array(out: np.ndarray):
    return float(out) if out.ndim == 0 else out


def db_from_ratio(ratio):
    """Amplitude ratio to dB, ``20 log10(ratio)``, floored at DB_FLOOR."""
    r = np.maximum(np.abs(np.asarray(ratio, dtype=float)), _TINY_AMPLITUDE)
    return _scalar_or_array(20.0 * np.log10(r))


def ratio_from_db(db):
    """dB to amplitude ratio, ``10^(db/20)``."""
    return _scalar_or_array(10.0 ** (np.asarray(db, dtype=float) / 20.0))


def db_from_power_ratio(power_ratio):
    """Power ratio to dB, ``10 log10(power_ratio)``, floored at DB_FLOOR."""
    p = np.maximum(np.asarray(power_ratio, dtype=float), _TINY_AMPLITUDE**2)
    return _scalar_or_array(10.0 * np.log10(p))


def pct_from_ratio(ratio):
    """Ratio to percent."""
    return ratio * 100.0


def dbfs_from_rms(rms_fs):
    """dBFS of a signal of the given RMS (in FS units), AES17 definition."""
    return db_from_ratio(SQRT2 * np.asarray(rms_fs, dtype=float))


def rms_from_dbfs(dbfs):
    """RMS in FS units of a signal at the given dBFS (AES17 definition)."""
    return ratio_from_db(dbfs) / SQRT2


def dbfs_from_peak(amplitude_fs):
    """dBFS of a sine of the given peak amplitude in FS units."""
    return db_from_ratio(amplitude_fs)


def vrms_from_vpk(vpk):
    """RMS of a sine from its peak."""
    return vpk / SQRT2


def vpk_from_vrms(vrms):
    """Peak of a sine from its RMS."""
    return vrms * SQRT2


def dbv_from_vrms(vrms):
    """Volts RMS to dBV (re 1 Vrms)."""
    return db_from_ratio(np.asarray(vrms, dtype=float) / DBV_REF_VRMS)


def vrms_from_dbv(dbv):
    """dBV to volts RMS."""
    return DBV_REF_VRMS * ratio_from_db(dbv)


def dbu_from_vrms(vrms):
    """Volts RMS to dBu (re 0.7746 Vrms)."""
    return db_from_ratio(np.asarray(vrms, dtype=float) / DBU_REF_VRMS)


def vrms_from_dbu(dbu):
    """dBu to volts RMS."""
    return DBU_REF_VRMS * ratio_from_db(dbu)


def watts_from_vrms(vrms, load_ohms):
    """Average power of a voltage of the given RMS into a resistor, V^2/R."""
    _check_load(load_ohms)
    return _scalar_or_array(np.asarray(vrms, dtype=float) ** 2 / load_ohms)


def vrms_from_watts(watts, load_ohms):
    """RMS voltage that puts the given average power into a resistor."""
    _check_load(load_ohms)
    if watts < 0:
        raise BenchkitError(f"power must not be negative, got {watts} W")
    return math.sqrt(watts * load_ohms)


def _check_load(load_ohms: float) -> None:
    if not (load_ohms > 0 and math.isfinite(load_ohms)):
        raise BenchkitError(f"load must be a positive resistance in ohms, got {load_ohms}")


# --- level strings ---------------------------------------------------------

_UNIT_ALIASES = {
    "dbfs": "dBFS",
    "vrms": "Vrms",
    "v": "Vrms",
    "vpk": "Vpk",
    "vp": "Vpk",
    "vpp": "Vpp",
    "dbv": "dBV",
    "dbu": "dBu",
    "w": "W",
}
_PREFIX = {"m": 1e-3, "u": 1e-6, "µ": 1e-6, "k": 1e3, "": 1.0}

_LEVEL_RE = re.compile(
    r"""^\s*(?P<value>[+-]?(\d+(\.\d*)?|\.\d+)([eE][+-]?\d+)?)\s*
        (?P<unit>[a-zA-Zµ]+)
        (\s*(@|into)\s*(?P<load>(\d+(\.\d*)?|\.\d+))\s*(ohms?|Ω|r)?)?\s*$""",
    re.VERBOSE | re.IGNORECASE,
)


@dataclass(frozen=True)
class Level:
    """A level as the user wrote it: a number with a unit.

    ``unit`` is one of dBFS, Vrms, Vpk, Vpp, dBV, dBu, W. ``load_ohms`` is set
    for a power ("2 W@8ohm"). Voltages are of a sine.
    """

    value: float
    unit: str
    load_ohms: float | None = None

    def to_vrms(self, volts_per_fs: float | None = None) -> float:
        """The level as volts RMS at the measured point.

        A dBFS level needs ``volts_per_fs`` (volts peak per FS).
        """
        if self.unit == "Vrms":
            return self.value
        if self.unit == "Vpk":
            return vrms_from_vpk(self.value)
        if self.unit == "Vpp":
            return vrms_from_vpk(self.value / 2.0)
        if self.unit == "dBV":
            return vrms_from_dbv(self.value)
        if self.unit == "dBu":
            return vrms_from_dbu(self.value)
        if self.unit == "W":
            return vrms_from_watts(self.value, self.load_ohms)
        # dBFS
        if volts_per_fs is None:
            raise BenchkitError(
                f"{self} is relative to full scale; converting it to volts needs the interface scale"
            )
        return rms_from_dbfs(self.value) * volts_per_fs

    def to_dbfs(self, volts_per_fs: float | None = None) -> float:
        """The level in dBFS; an absolute level needs ``volts_per_fs``."""
        if self.unit == "dBFS":
            return self.value
        if volts_per_fs is None:
            raise BenchkitError(
                f"{self} is a voltage; converting it to dBFS needs the interface scale (volts per FS)"
            )
        return dbfs_from_rms(self.to_vrms() / volts_per_fs)

    def __str__(self) -> str:
        load = f"@{self.load_ohms:g}ohm" if self.load_ohms is not None else ""
        return f"{self.value:g} {self.unit}{load}"


#: what a level can be shown in, alike in every command (--levels-in):
#: re full scale, re 1 Vrms, re 0.7746 Vrms, re a reference the user sets
#: (--dbr-ref), volts RMS, watts into the load
LEVEL_UNITS = ("dBFS", "dBV", "dBu", "dBr", "V", "W")


#: the units a level is stored in (results, figures): of a sine, re full
#: scale, volts RMS, watts into the load
STORED_LEVELS = ("dBFS", "Vrms", "W")


@dataclass(frozen=True)
class LevelView:
    """How levels are shown: ``unit`` one of LEVEL_UNITS, or None for each
    screen's own way (dBFS, and volts where a calibration gives them);
    ``ref`` the level dBr is read against (a dBFS one for levels in FS,
    else volts). A level that cannot be shown so (volts without a
    calibration, watts without a load) falls back to the nearest it can."""

    unit: str | None = None
    ref: Level | None = None

    def value(self, dbfs: float | None, vrms: float | None = None, watts: float | None = None) -> tuple[float, str]:
        """A level (its dBFS; its volts RMS and watts where known; one of
        dBFS and volts at least) as a number in the chosen unit, and that unit."""
        unit = self.unit or ("V" if vrms is not None else "dBFS")
        if unit == "W":
            if watts is not None:
                return watts, "W"
            unit = "V"
        if unit == "dBr":
            if (self.ref is None or self.ref.unit == "dBFS") and dbfs is not None:
                return dbfs - (self.ref.value if self.ref is not None else 0.0), "dBr"
            if (self.ref is None or self.ref.unit == "dBFS") and vrms is not None:
                return vrms, "Vrms"  # (re a level in FS, and no scale to read this one in FS)
            if vrms is not None:
                return db_from_ratio(vrms / self.ref.to_vrms()), "dBr"
            unit = "dBFS"
        if dbfs is None and unit == "dBFS":
            return vrms, "Vrms"  # (a level known only in volts: no scale to read it in FS)
        if vrms is None or unit == "dBFS":
            return dbfs, "dBFS"
        if unit == "V":
            return vrms, "Vrms"
        return float(dbv_from_vrms(vrms) if unit == "dBV" else dbu_from_vrms(vrms)), unit

    def stored(self, value: float, unit: str, volts_per_fs: float | None = None,
               load_ohms: float | None = None) -> tuple[float, str]:
        """A level as stored (``unit`` dBFS, Vrms or W, of a sine) in the
        chosen unit: the scale (volts peak per FS) and the load give what
        the stored unit alone does not; without them it falls back, as
        :meth:`value` does (a level known only in volts stays in volts).
        With no unit chosen it is left as stored."""
        if self.unit is None or unit not in STORED_LEVELS:
            return value, unit
        dbfs = vrms = watts = None
        if unit == "dBFS":
            dbfs = value
            vrms = None if volts_per_fs is None else float(rms_from_dbfs(value)) * volts_per_fs
        elif unit == "Vrms":
            vrms = value
        else:
            watts = value
            vrms = None if load_ohms is None else math.sqrt(max(value, 0.0) * load_ohms)
        if vrms is not None:
            if dbfs is None and volts_per_fs:
                dbfs = float(dbfs_from_rms(vrms / volts_per_fs))
            if watts is None and load_ohms:
                watts = vrms * vrms / load_ohms
        if dbfs is None and vrms is None:  # a power with no load: only watts
            return value, unit
        return self.value(dbfs, vrms, watts)

    def stored_text(self, value: float, unit: str, volts_per_fs: float | None = None,
                    load_ohms: float | None = None) -> str:
        """:meth:`stored` as a person reads it; a level left as stored (no
        unit chosen, or not a level) prints as :func:`quantity` prints it."""
        shown, shown_unit = self.stored(value, unit, volts_per_fs, load_ohms)
        if self.unit is None or unit not in STORED_LEVELS:
            return quantity(value, unit)
        return quantity(shown, shown_unit, 4) if shown_unit in ("Vrms", "W") else (
            f"{shown:.2f} dBFS" if shown_unit == "dBFS" else f"{shown:+.2f} {shown_unit}")

    def also(self, value: float | None, unit: str, volts_per_fs: float | None = None,
             load_ohms: float | None = None, shown: tuple[str, ...] = ("Vrms", "W")) -> str:
        """A stored level (:meth:`stored`) as text in the chosen unit, for a
        screen that shows it already in ``shown``: "" when no unit is
        chosen, the value is missing, or the chosen one falls back to one
        of those."""
        if self.unit is None or value is None:
            return ""
        if self.stored(value, unit, volts_per_fs, load_ohms)[1] in shown:
            return ""
        return self.stored_text(value, unit, volts_per_fs, load_ohms)

    def own(self, dbfs: float | None, vrms: float | None = None, watts: float | None = None) -> bool:
        """Whether a level shows in a unit of its own here (dBV, dBu, dBr:
        the screens show dBFS, volts and watts anyway)."""
        return self.unit is not None and dbfs is not None and self.value(dbfs, vrms, watts)[1] not in ("dBFS", "Vrms", "W")

    def text(self, dbfs: float, vrms: float | None = None, watts: float | None = None) -> str:
        """:meth:`value` as a person reads it: "+4.00 dBu", "1.228 Vrms"."""
        v, unit = self.value(dbfs, vrms, watts)
        return quantity(v, unit, 4) if unit in ("Vrms", "W") else f"{v:+.2f} {unit}" if unit != "dBFS" else f"{v:.2f} dBFS"


_VIEW = LevelView()


def level_view() -> LevelView:
    """How this process shows levels (:func:`show_levels_in`)."""
    return _VIEW


def show_levels_in(unit: str | None, ref: str | None = None) -> LevelView:
    """Show every level in ``unit`` (LEVEL_UNITS; None: each screen's own
    way), dBr against ``ref`` (a level, e.g. "2.83Vrms" or "-20dBFS"; 0 dBFS
    when not given). Raises BenchkitError on a unit or level it cannot read."""
    global _VIEW
    if unit is not None:
        match = {u.lower(): u for u in LEVEL_UNITS}.get(unit.strip().lower())
        if match is None:
            raise BenchkitError(f"cannot show levels in {unit!r}: use one of {', '.join(LEVEL_UNITS)}")
        unit = match
    level = parse_level(ref) if ref else None
    if level is not None and unit != "dBr":
        raise BenchkitError("--dbr-ref sets the reference of dBr: give it with --levels-in dBr")
    _VIEW = LevelView(unit, level)
    return _VIEW


def parse_level(text: str) -> Level:
    """Parse a level such as "-12 dBFS", "0.5 Vrms", "300 mVrms", "-6 dBV",
    "+4 dBu", "2.8 Vpk", "2 W@8ohm" or "2 W into 8 ohm".

    A bare "V" means volts RMS. Raises :class:`BenchkitError` on anything else.
    """
    m = _LEVEL_RE.match(text)
    if not m:
        raise BenchkitError(f"cannot read level {text!r}: expected e.g. '-12 dBFS', '0.5 Vrms', '+4 dBu' or '2 W@8ohm'")
    value = float(m.group("value"))
    raw_unit = m.group("unit")
    unit, scale = _resolve_unit(raw_unit)
    if unit is None:
        raise BenchkitError(
            f"unknown unit {raw_unit!r} in {text!r}: use dBFS, Vrms, Vpk, Vpp, dBV, dBu or W@<ohms>"
        )
    load = m.group("load")
    if unit == "W":
        if load is None:
            raise BenchkitError(f"a power needs its load, e.g. '{value:g} W@8ohm'")
        load_ohms = float(load)
        _check_load(load_ohms)
        if value * scale < 0:
            raise BenchkitError(f"power must not be negative in {text!r}")
        return Level(value * scale, "W", load_ohms)
    if load is not None:
        raise BenchkitError(f"only a power takes a load: {text!r}")
    if unit in ("Vrms", "Vpk", "Vpp") and value * scale < 0:
        raise BenchkitError(f"a voltage level must not be negative in {text!r}")
    return Level(value * scale, unit)


def _resolve_unit(raw: str) -> tuple[str | None, float]:
    key = raw.lower()
    if key in _UNIT_ALIASES:
        return _UNIT_ALIASES[key], 1.0
    # prefixed volts and watts: mVrms, uVrms, mW, kW ... (not the dB units)
    prefix, rest = raw[:1], raw[1:].lower()
    if prefix in ("m", "u", "µ", "k") and rest in ("vrms", "v", "vpk", "vp", "vpp", "w"):
        return _UNIT_ALIASES[rest], _PREFIX[prefix]
    return None, 1.0


def parse_frequency(text: str) -> float:
    """A frequency in Hz: "997", "20k", "1.5 kHz", "20000Hz"."""
    m = re.match(r"^\s*(?P<v>(\d+(\.\d*)?|\.\d+)([eE][+-]?\d+)?)\s*(?P<k>k)?\s*(hz)?\s*$", text, re.IGNORECASE)
    if not m:
        raise BenchkitError(f"cannot read frequency {text!r}: expected e.g. '997', '20k' or '1.5 kHz'")
    return float(m.group("v")) * (1000.0 if m.group("k") else 1.0)


def parse_resistance(text: str) -> float:
    """A resistance in ohms, the one reading of it everywhere: "8", "200",
    "1.8k", "10k", "4.7M", "2k2" (the digit standing for the point, as
    printed on parts), "8 ohm", "8R"; the prefix is k or M. A lowercase
    "m" is refused: milli to SI, mega to many a parts list."""
    m = re.match(r"^\s*(?P<v>[+-]?(\d+(\.\d*)?|\.\d+)([eE][+-]?\d+)?)\s*(?P<p>[kKmM]|R)?(?P<d>\d+)?\s*(ohms?|Ω)?\s*$", text)
    if not m or (m.group("d") and (m.group("p") is None or "." in m.group("v") or "e" in m.group("v").lower())):
        raise BenchkitError(f"cannot read resistance {text!r}: expected ohms, e.g. '8', '200', '1.8k', '10k' or '4.7M'")
    if m.group("p") == "m":
        raise BenchkitError(f"resistance {text!r}: write M for megohms (a lowercase m could be milli); "
                            "milliohms as a decimal, e.g. 0.05")
    prefix = (m.group("p") or "").lower()
    scale = {"k": 1e3, "m": 1e6, "r": 1.0, "": 1.0}[prefix]
    value = float(m.group("v") + ("." + m.group("d") if m.group("d") else ""))
    return value * scale


def parse_band(text: str) -> tuple[float, float] | None:
    """A measurement band "LO:HI" in Hz ("20:20k", "22:22000"), or "full"
    (returned as None: 0 Hz to half the sample rate)."""
    if text.strip().lower() == "full":
        return None
    parts = text.split(":")
    if len(parts) != 2:
        raise BenchkitError(f"cannot read band {text!r}: expected LO:HI in Hz (e.g. 20:20000) or 'full'")
    lo, hi = parse_frequency(parts[0]), parse_frequency(parts[1])
    if not lo < hi:
        raise BenchkitError(f"band {text!r}: the low edge must be below the high edge")
    return lo, hi


def parse_tones(text: str) -> tuple[float, float]:
    """"60:7000" -> (60.0, 7000.0): the two tones of an IMD test."""
    parts = text.split(":")
    try:
        f1, f2 = (float(parse_frequency(p)) for p in parts)
    except (ValueError, BenchkitError):
        raise BenchkitError(f"the tones are F1:F2 in Hz, e.g. 60:7000, got {text!r}") from None
    if not 0 < f1 < f2:
        raise BenchkitError(f"the tones {text!r}: F1 must be positive and below F2")
    return f1, f2


def parse_sweep_spec(text: str) -> tuple[float, float, float]:
    """"20:20000:5" -> (20.0, 20000.0, 5.0): a sweep's span and length."""
    parts = text.split(":")
    try:
        f1, f2, seconds = (float(parse_frequency(p)) for p in parts)
    except (ValueError, BenchkitError):
        raise BenchkitError(f"--sweep wants F1:F2:SECONDS, e.g. 20:20000:5, got {text!r}") from None
    if not (0 < f1 < f2 and 0 < seconds <= 3600):
        raise BenchkitError(f"--sweep {text!r}: F1 must be above 0 and below F2, the length above 0 and at most 3600 s")
    return f1, f2, seconds


def parse_span(text: str) -> tuple[float, float]:
    """A span of frequencies "F1:F2" in Hz (a sweep's): a band, never 'full'."""
    band = parse_band(text)
    if band is None or band[0] <= 0:
        raise BenchkitError(f"cannot read span {text!r}: expected F1:F2 in Hz above 0, e.g. 10:22000")
    return band


# --- printing quantities -------------------------------------------------------

#: SI prefixes a printed quantity may take (``u`` for micro: plain ASCII).
_SI = ((1e9, "G"), (1e6, "M"), (1e3, "k"), (1.0, ""), (1e-3, "m"), (1e-6, "u"), (1e-9, "n"), (1e-12, "p"))
#: Units that take a prefix; anything after a "/" (per minute ...) stays as it is.
_PREFIXABLE = ("Vrms", "Vpk", "V", "A", "W", "Hz", "s", "ohm", "F")
#: Units a prefix never goes on (a ratio, a level, a temperature ...).
_BARE = ("dB", "dBc", "dBFS", "dBV", "dBu", "%", "ppm", "degC", "deg", "FS", "V/V", "samples")


def _split_unit(unit: str) -> tuple[float, str, str]:
    """``"mV/min"`` -> (1e-3, "V", "/min"): a unit given with a prefix is
    read back to its base, so that a value in mV/min prints as mV/min."""
    head, sep, tail = unit.partition("/")
    if unit in _BARE:
        return 1.0, unit, ""
    for base in _PREFIXABLE:
        if head == base:
            return 1.0, base, sep + tail
        if len(head) == len(base) + 1 and head.endswith(base):
            scale = dict((p, s) for s, p in _SI if p).get(head[0])
            if scale is not None:
                return scale, base, sep + tail
    return 1.0, unit, ""


def quantity(value: float | None, unit: str, digits: int = 4) -> str:
    """A quantity as a person reads it: ``quantity(0.0123, "V")`` is
    "12.3 mV", ``quantity(29960, "Hz")`` "29.96 kHz", ``quantity(3.279,
    "mV/min")`` "3.279 mV/min"; ``digits`` significant digits, no
    exponent; a unit that takes no prefix (dB, %, ppm ...) prints the
    value as it is. None prints as "-"."""
    if value is None:
        return "-"
    if not math.isfinite(value):
        return f"{value} {unit}".strip()
    scale, base, tail = _split_unit(unit)
    if base not in _PREFIXABLE:
        return f"{_digits(value, digits)} {unit}".strip()
    v = value * scale
    mag = abs(v)
    for size, prefix in _SI:
        if mag >= size * (1 - 0.5 * 10 ** (1 - digits)):
            return f"{_digits(v / size, digits)} {prefix}{base}{tail}"
    return f"{_digits(v, digits)} {base}{tail}" if v == 0 else f"{_digits(v / 1e-12, digits)} p{base}{tail}"


def _digits(v: float, digits: int) -> str:
    """``digits`` significant digits, never an exponent, no trailing zeros."""
    if v == 0:
        return "0"
    places = max(0, digits - 1 - int(math.floor(math.log10(abs(v)))))
    text = f"{v:.{places}f}"
    return text.rstrip("0").rstrip(".") if "." in text else text


def prefix_scale(unit: str) -> float:
    """What one of ``unit`` is in its base unit: ``prefix_scale("uVrms")`` is 1e-6."""
    return _split_unit(unit)[0]


def in_one_unit(values, unit: str, digits: int = 4) -> tuple[str, list[str]]:
    """A column of quantities in one unit, the same decimal places in every
    cell (so their points line up and a reader compares them at a glance):
    a unit that takes a prefix gets the prefix and places the largest
    needs for ``digits`` significant digits (and the smallest for two, up
    to 6 places); a ratio or level (%, dB) the
    places its smallest needs (at most 5). Returns the unit as the header
    shows it and the cells ("-" for None)."""
    known = [abs(v) for v in values if v is not None and math.isfinite(v)]
    scale, base, tail = _split_unit(unit)
    size, prefix = 1.0, ""
    if known and base in _PREFIXABLE and max(known) > 0:
        top = max(known) * scale
        size, prefix = next(((s, p) for s, p in _SI if top >= s * (1 - 0.5 * 10 ** (1 - digits))), _SI[-1])
    # a prefixed unit: the places the largest needs; a ratio or a level
    # (%, dB), which spans decades: the places the smallest needs, at most 5
    nonzero = [v for v in known if v > 0]
    if base in _PREFIXABLE or not nonzero:
        top = max(known) * scale / size if nonzero else 1.0
        places = max(0, digits - 1 - int(math.floor(math.log10(top))))
        if nonzero:  # and at least two significant digits of the smallest
            places = min(6, max(places, 1 - int(math.floor(math.log10(min(nonzero) * scale / size)))))
    else:
        places = min(5, max(0, digits - 1 - int(math.floor(math.log10(min(nonzero))))))
    cells = ["-" if v is None or not math.isfinite(v) else f"{v * scale / size:.{places}f}" for v in values]
    return (f"{prefix}{base}{tail}" if base in _PREFIXABLE else unit), cells


def count(n: int, noun: str, plural: str | None = None) -> str:
    """``count(1, "step")`` is "1 step", ``count(3, "step")`` "3 steps"."""
    return f"{n} {noun if n == 1 else (plural or noun + 's')}"
