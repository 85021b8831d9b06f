"""What each command-line value may be: one parser per kind of quantity.

Every number a command takes declares its kind here (a resistance, a
frequency, a duration, a count ...), so that a value that cannot be right
(NaN, infinity, a zero or negative load, a length the machine cannot hold,
a level above full scale) is refused while the command line is read:
before a logbook opens, a device starts or a run is filed. The refusal is
one line naming the option: on the command line click's "Invalid value
for '--load': ..." (:func:`benchkit.cli.main`), in a plan its key.

Text options (levels, bands, pads) are checked by their own parsers in
:mod:`benchkit.units` and :mod:`benchkit.pads` through :func:`checked`,
and keep their text: the command reads them again where it uses them.
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Callable

from benchkit import units
from benchkit.errors import BenchkitError


class BadValue(BenchkitError):
    """A value an option cannot take (the command line says which option)."""


def _read(value, integer: bool, hint: str = ""):
    """A number from the command line (or an option's default)."""
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        number = value
    else:
        text = str(value).strip()
        try:
            number = int(text) if integer else float(text)
        except ValueError:
            raise BadValue(f"{text!r} is not {'a whole number' if integer else 'a number'}"
                                     f"{'; ' + hint if hint else ''}") from None
    if integer and number != int(number):
        raise BadValue(f"{value!r} is not a whole number")
    return int(number) if integer else float(number)


def number(low: float | None = None, high: float | None = None, *, above: bool = False, below: bool = False,
           unit: str = "", integer: bool = False, hint: str = "") -> Callable:
    """A parser for a finite number within [low, high] (``above``,
    ``below``: strictly), in ``unit``; ``hint`` follows a refusal."""

    def parse(value):
        x = _read(value, integer, hint)
        finite = math.isfinite(x)
        low_ok = low is None or (finite and (x > low if above else x >= low))
        high_ok = high is None or (finite and (x < high if below else x <= high))
        if not (finite and low_ok and high_ok):
            shown = (lambda v: str(int(v))) if integer else (lambda v: f"{v:g}")
            parts = []  # a finite value hears of the side it fails; nan of both
            if not low_ok:
                parts.append(f"{'above' if above else 'at least'} {shown(low)}")
            if not high_ok:
                parts.append(f"{'below' if below else 'at most'} {shown(high)}")
            raise BadValue(f"must be {'a whole number' if integer else 'a finite number'}"
                           f"{' ' + ' and '.join(parts) if parts else ''}{' ' + unit if unit else ''}, got {value}"
                           f"{'; ' + hint if hint else ''}")
        return x

    return parse


def checked(parse: Callable) -> Callable:
    """A parser that checks text with ``parse`` (which raises
    BenchkitError) and keeps the text as it was given."""

    def check(value):
        if value is None:
            return value
        try:
            parse(str(value))
        except BenchkitError as exc:
            raise BadValue(str(exc)) from None
        return value

    return check


def one_of(*choices: str) -> Callable:
    """A parser for one word of ``choices`` (any case)."""

    def parse(value):
        word = str(value).strip().lower()
        if word not in choices:
            listed = " or ".join(choices) if len(choices) < 3 else f"one of {', '.join(choices[:-1])} or {choices[-1]}"
            raise BadValue(f"must be {listed}, got {value!r}")
        return word

    return parse


def when(value) -> str:
    """A date (YYYY-MM-DD) or a date and time (ISO 8601), as the logbook
    writes them: a date stays a date (a whole day), a time is written
    YYYY-MM-DDTHH:MM:SS (so that text compares as time)."""
    from datetime import datetime

    text = str(value).strip()
    try:
        when = datetime.fromisoformat(text)
    except ValueError:
        raise BadValue(f"must be a date YYYY-MM-DD or a time YYYY-MM-DDTHH:MM, got {value!r}") from None
    if when.time() == datetime.min.time() and when.tzinfo is None and len(text) <= 10:
        return when.date().isoformat()
    return when.isoformat()


def out_file(value) -> Path:
    """A file to write: not an existing folder, in a folder that exists or
    can be made."""
    path = Path(value)
    try:
        if path.is_dir():
            raise BadValue(f"{path} is a folder: give the file to write, e.g. {path / 'profile.json'}")
        parent = next((q for q in path.absolute().parents if q.exists()), None)
    except OSError as exc:  # a name too long, a folder that cannot be read
        raise BadValue(f"{path}: {exc.strerror or exc}") from None
    if parent is not None and not parent.is_dir():
        raise BadValue(f"{path}: {parent} is a file, not a folder")
    return path


def out_folder(value) -> Path:
    """A folder to write into: not an existing file."""
    path = Path(value)
    try:
        is_file = path.exists() and not path.is_dir()
    except OSError as exc:
        raise BadValue(f"{path}: {exc.strerror or exc}") from None
    if is_file:
        raise BadValue(f"{path} is a file: give a folder to write the reports into")
    return path


def _above_zero(parse: Callable, what: str) -> Callable:
    """A parser for a quantity above zero read from text by ``parse``
    (which raises BenchkitError)."""

    def parser(value) -> float:
        if isinstance(value, (int, float)) and not isinstance(value, bool):
            x = float(value)
        else:
            try:
                x = parse(str(value))
            except BenchkitError as exc:
                raise BadValue(str(exc)) from None
        if not (math.isfinite(x) and x > 0):
            raise BadValue(f"must be {what} above zero, got {value}")
        return x

    return parser


_ohms = _above_zero(units.parse_resistance, "a resistance in ohms (e.g. 8, 4.7k)")


def ohms(value) -> float:
    """A resistance: "8", "4.7k", "10k", "4k7", "1M", "8 ohm" (units.parse_resistance,
    the one reading of it), from 10 milliohm (a shunt) to 100 Mohm."""
    r = _ohms(value)
    if not 0.01 <= r <= 1e8:
        raise BadValue(f"must be a resistance from 0.01 ohm to 100 Mohm, got {value}")
    return r
_hertz = _above_zero(units.parse_frequency, "a frequency in Hz (e.g. 997, 20k)")


def hertz(value) -> float:
    """A frequency: "997", "20k", "1.5 kHz"; 1 Hz or more (slower than
    that is a DC drift's business: benchkit drift)."""
    f = _hertz(value)
    if f < 1.0:
        raise BadValue(f"must be a frequency of 1 Hz or more, got {value} (a slower change is DC drift: "
                                 "benchkit drift)")
    return f


def seconds(high: float) -> Callable:
    """A duration above zero and at most ``high`` seconds."""
    return number(0.0, high, above=True, unit="s")


#: the kinds most options are
VOLTS = number(0.0, above=True, unit="V")
AMPS = number(0.0, above=True, unit="A")
WATTS = number(0.0, above=True, unit="W")
PERCENT = number(0.0, 100.0, above=True, below=True, unit="%")
COUNT = number(1, 1_000_000, integer=True)
CHANNEL = number(1, 256, integer=True, hint="channels are numbered from 1")


def channel_or_all(value):
    """A channel number, or "all" (every channel of the file)."""
    return "all" if str(value).strip().lower() == "all" else CHANNEL(value)
SEED = number(0, 2**32 - 1, integer=True)
RATE = number(8000.0, 768000.0, unit="Hz")
#: a live readout or a drift log may run a day
SESSION_S = seconds(86400.0)


def _pad(text: str):
    from benchkit import pads

    return pads.parse_pad(text)


def _sim_pad(text: str):
    return None if text.strip().lower() == "demo" else _pad(text)


def _sim_load(value) -> float | str:
    """Ohms, or "off"."""
    return "off" if str(value).strip().lower() == "off" else ohms(value)


def _latency(value) -> float | str:
    """"low", "high", or seconds."""
    word = str(value).strip().lower()
    return word if word in ("low", "high") else number(0.0, 2.0, above=True, unit="s")(value)


#: a pad R1:R2 (or 'none', or the virtual bench's 'demo'), a simulated load (or 'off'), a stream latency
PAD = checked(_pad)
SIM_PAD = checked(_sim_pad)
SIM_LOAD = _sim_load
LATENCY = _latency
