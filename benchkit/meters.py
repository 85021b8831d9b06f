"""Sources of a DC reading for drift logs: one protocol, several kinds.

- :class:`ScpiMeter`: a bench multimeter over SCPI through pyvisa with the
  pure-Python pyvisa-py backend (USB-TMC, serial, or a raw TCP socket such
  as ``TCPIP::192.168.1.50::5025::SOCKET``); an optional extra,
  ``pip install benchkit[meter]``.
- :class:`InterfaceDc`: a DC-coupled interface input, scaled by the
  calibration profile (refused on an AC-coupled input).
- :class:`VirtualMidpoint`: the virtual ``se-class-a`` stage's midpoint as
  it warms, in accelerated time.
- :func:`read_drift_csv`: a log from any other logger.

Every source has ``name``, ``accelerated`` (seconds of the source's time
per second of waiting; 0 for a real instrument), ``read()`` -> volts and
``close()``; a source that goes away raises :class:`SourceLost`.
"""

from __future__ import annotations

import csv
import math
import re
from pathlib import Path

import numpy as np

from benchkit.errors import BenchWarning, BenchkitError


class SourceLost(BenchkitError):
    """The instrument stopped answering mid-log."""


class ScpiMeter:
    """A multimeter reading DC volts (or, ``quantity="amps"``, DC current:
    a supply's draw) over SCPI (``*IDN?``, ``CONF:VOLT:DC`` or
    ``CONF:CURR:DC``, ``READ?``)."""

    accelerated = 0.0

    def __init__(self, resource: str, timeout_s: float = 5.0, quantity: str = "volts"):
        if quantity not in ("volts", "amps"):
            raise BenchkitError(f"a meter reads volts or amps, not {quantity!r}")
        try:
            import pyvisa
        except ImportError:
            raise BenchkitError("a multimeter needs pyvisa and pyvisa-py: pip install 'benchkit[meter]'") from None
        self._errors = (pyvisa.errors.VisaIOError, OSError, ValueError)
        try:
            self._rm = pyvisa.ResourceManager("@py")
            self._inst = self._rm.open_resource(resource)
            self._inst.timeout = int(timeout_s * 1000)
            self._inst.read_termination = "\n"
            self._inst.write_termination = "\n"
            self.idn = self._inst.query("*IDN?").strip()
            self._inst.write("CONF:VOLT:DC" if quantity == "volts" else "CONF:CURR:DC")
        except self._errors as exc:
            raise BenchkitError(f"cannot reach the multimeter at {resource}: {exc}") from None
        self.quantity = quantity
        self.name = f"{self.idn} at {resource}"

    def read(self) -> float:
        try:
            text = self._inst.query("READ?").strip()
        except self._errors as exc:
            raise SourceLost(f"the multimeter stopped answering ({type(exc).__name__})") from None
        try:
            return float(text.split(",")[0])
        except ValueError:
            raise SourceLost(f"the multimeter answered {text!r}, not a number") from None

    def close(self) -> None:
        for thing in (getattr(self, "_inst", None), getattr(self, "_rm", None)):
            try:
                if thing is not None:
                    thing.close()
            except Exception:  # noqa: BLE001 - closing something already gone
                pass


class InterfaceDc:
    """The mean of a short recording of a DC-coupled input, in volts by
    the calibration profile's DC scale."""

    accelerated = 0.0

    def __init__(self, backend, profile, channel: int = 1, seconds: float = 0.2):
        if profile is None:
            raise BenchkitError("a DC reading from the interface needs its calibration profile (--calibration)")
        if not profile.dc_coupled or not profile.dc_volts_per_fs:
            raise BenchkitError("the profile says this input is AC coupled: it cannot read DC; use a multimeter "
                                "(--dc-source meter) or a logger's CSV")
        self.backend, self.channel, self.seconds = backend, channel, seconds
        self.scale = profile.dc_volts_per_fs
        self.name = f"{backend.name} input {channel} (DC coupled)"

    def read(self) -> float:
        from benchkit import capture
        from benchkit.signals import stepped_tones

        # a silent step: the marker aligns it, the settled span is averaged
        stim = stepped_tones(1000.0, [-200.0], self.backend.sample_rate_hz, step_s=self.seconds, settle_s=0.05,
                             out_channel=getattr(self.backend, "drive_output", 1), n_out=self.backend.n_outputs)
        cap = capture.run_clean(self.backend, stim)
        seg = stim.segments[0]
        return float(np.mean(cap.channel(self.channel)[seg.settled: seg.end])) * self.scale

    def close(self) -> None:
        pass


class VirtualMidpoint:
    """The virtual se-class-a stage's output midpoint as it warms, read as
    a meter would (with 20 uV of noise); ``accelerated`` seconds of the
    model pass per reading interval."""

    def __init__(self, stage, accelerated: float = 60.0, seed: int = 1, noise_v: float = 20e-6):
        if not hasattr(stage, "midpoint_v"):
            raise BenchkitError(f"the virtual stage {stage.NAME!r} has no operating point that drifts; use se-class-a")
        self.stage, self.accelerated, self.noise_v = stage, float(accelerated), noise_v
        self._rng = np.random.default_rng(seed)
        self.name = f"virtual {stage.NAME} midpoint (accelerated {accelerated:g}x)"

    def advance(self, seconds: float) -> None:
        self.stage.advance(seconds)

    def read(self) -> float:
        return float(self.stage.midpoint_v()) + self.noise_v * float(self._rng.standard_normal())

    def close(self) -> None:
        pass


_UNITS = {"v": 1.0, "mv": 1e-3, "uv": 1e-6, "µv": 1e-6, "s": 1.0, "ms": 1e-3, "min": 60.0, "h": 3600.0}


def _unit_of(name: str) -> float | None:
    """The scale a header's unit gives: "offset (mV)", "time_s", "t [min]"."""
    m = re.search(r"[\(\[]\s*([a-zµ]+)\s*[\)\]]\s*$", name.strip().lower()) or re.search(r"_([a-zµ]+)$", name.strip().lower())
    return _UNITS.get(m.group(1)) if m else None


def _column(header: list[str], spec: str, what: str) -> int:
    if spec.isdigit():
        k = int(spec)
        if not 1 <= k <= len(header):
            raise BenchkitError(f"{what} column {k} does not exist (the file has {len(header)})")
        return k - 1
    names = [h.strip().lower() for h in header]
    want = spec.strip().lower()
    for i, h in enumerate(names):
        if h == want or re.sub(r"\s*[\(\[].*$", "", h) == want:
            return i
    raise BenchkitError(f"no {what} column named {spec!r}; the columns are: {', '.join(h.strip() for h in header)}")


def read_drift_csv(path: str | Path, time_col: str = "1", value_col: str = "2") -> tuple[np.ndarray, np.ndarray, list[str]]:
    """Time (s) and volts from a logger's CSV, by column name or number
    (from 1); units in the header ("mV", "(ms)", "_min") are applied.
    Rows with a missing or unreadable value are skipped and counted;
    readings out of time order are sorted, with a warning."""
    path = Path(path)
    try:
        with path.open(newline="", encoding="utf-8-sig") as fh:
            rows = list(csv.reader(fh))
    except OSError as exc:
        raise BenchkitError(f"cannot read {path}: {exc.strerror or exc}") from None
    except UnicodeDecodeError:
        raise BenchkitError(f"{path} is not a text CSV") from None
    if len(rows) < 2:
        raise BenchkitError(f"{path}: no readings (a header and at least one row are needed)")
    header = rows[0]
    ti, vi = _column(header, time_col, "time"), _column(header, value_col, "value")
    t_scale = _unit_of(header[ti]) or 1.0
    v_scale = _unit_of(header[vi]) or 1.0
    t, v, bad = [], [], 0
    for row in rows[1:]:
        try:
            a, b = float(row[ti]), float(row[vi])
        except (IndexError, ValueError):
            bad += 1
            continue
        if not (math.isfinite(a) and math.isfinite(b)):
            bad += 1
            continue
        t.append(a * t_scale)
        v.append(b * v_scale)
    warnings = []
    if bad:
        warnings.append(BenchWarning("skipped", f"{bad} row(s) with a missing or unreadable value were skipped"))
    if len(t) < 2:
        raise BenchkitError(f"{path}: fewer than two readable readings")
    ta, va = np.array(t), np.array(v)
    if np.any(np.diff(ta) < 0):
        order = np.argsort(ta, kind="stable")
        ta, va = ta[order], va[order]
        warnings.append(BenchWarning("reordered", "the times were not in order: the readings were sorted by time"))
    if np.any(np.diff(ta) == 0):
        warnings.append(BenchWarning("same-time", "some readings share a time stamp"))
    return ta, va, warnings
