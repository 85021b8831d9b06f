"""The readings of a live readout: what one update holds, and each
figure's latest value, minimum, maximum and trend since the start.

Pure data (no stream, no screen): benchkit.kinds.watch makes the readings as a
tone plays, benchkit.report.live shows them.
"""

from __future__ import annotations

import threading
from collections import deque
from dataclasses import asdict, dataclass

import numpy as np

from benchkit import units
from benchkit.analysis.compare import Figure, finite

#: The figures a reading has, in display order: (key, label, unit).
FIGURES = (
    ("level_vrms", "level", "Vrms"),
    ("power_w", "power", "W"),
    ("level_dbfs", "level", "dBFS"),
    ("thdn_db", "THD+N", "dB"),
    ("thd_db", "THD", "dB"),
    ("h2_dbc", "H2", "dBc"),
    ("h3_dbc", "H3", "dBc"),
    ("noise_dbfs", "noise", "dBFS"),
    ("residual_vrms", "residual", "Vrms"),
    ("residual_dbfs", "residual", "dBFS"),
    ("dc_v", "DC", "V"),
)
READING_VERSION = 1
#: The smallest change of each figure worth seeing in its trend: levels in
#: dB to a hundredth, distortion and noise to a tenth (the scatter of one
#: reading); volts and watts relative to their value (a tenth of a percent
#: of volts, two tenths of watts); DC to a tenth of a millivolt.
RESOLUTION = {"level_dbfs": 0.01, "residual_dbfs": 0.1, "thdn_db": 0.1, "thd_db": 0.1, "h2_dbc": 0.1, "h3_dbc": 0.1, "noise_dbfs": 0.1,
              "dc_v": 1e-4}
RELATIVE_RESOLUTION = {"level_vrms": 1e-3, "power_w": 2e-3, "residual_vrms": 1e-2}


def resolution(key: str, values) -> float:
    """The smallest change of figure ``key`` its trend shows, in its unit."""
    if key in RELATIVE_RESOLUTION:
        vals = [abs(v) for v in values if v is not None]
        return RELATIVE_RESOLUTION[key] * (max(vals) if vals else 1.0)
    return RESOLUTION.get(key, 0.0)


@dataclass(frozen=True)
class Reading:
    """One update: the figures of the latest block, at ``t_s`` seconds
    into the tone (the block's end, as recorded)."""

    t_s: float
    level_dbfs: float | None
    level_vrms: float | None
    power_w: float | None
    thdn_db: float | None
    thd_db: float | None
    h2_dbc: float | None
    h3_dbc: float | None
    noise_dbfs: float | None
    dc_v: float | None
    clipped: bool
    tone_lost: bool
    #: the stream reported a dropout (over- or underflow) inside the block:
    #: its figures are shown marked and left out of minimum, maximum and trend
    disturbed: bool = False
    #: what is left of the block without its fundamental (THD+N's numerator), in the band
    residual_dbfs: float | None = None
    residual_vrms: float | None = None

    def to_dict(self) -> dict:
        return {"kind": "reading", "schema_version": READING_VERSION, **asdict(self)}


class Tracker:
    """Each figure's latest value, minimum, maximum and recent trend since
    the start (or the last reset); ``hold`` freezes what is shown."""

    def __init__(self, trend: int = 40):
        self.trend = trend
        self.reset()
        self.held: Reading | None = None

    def reset(self) -> None:
        self.count = 0
        self.disturbed = 0
        self.min: dict[str, float] = {}
        self.max: dict[str, float] = {}
        self.history: dict[str, deque] = {key: deque(maxlen=self.trend) for key, _l, _u in FIGURES}
        self.last: Reading | None = None

    def add(self, r: Reading) -> None:
        self.count += 1
        self.disturbed += r.disturbed
        self.last = r
        for key, _label, _unit in FIGURES:
            v = getattr(r, key)
            if v is None or r.disturbed or (r.tone_lost and key != "dc_v"):
                continue
            self.min[key] = min(self.min.get(key, v), v)
            self.max[key] = max(self.max.get(key, v), v)
            self.history[key].append(v)

    def toggle_hold(self) -> None:
        self.held = None if self.held is not None else self.last

    @property
    def shown(self) -> Reading | None:
        return self.held if self.held is not None else self.last


class SpectrumAverage:
    """The power mean of the last ``count`` spectra of a live readout (each
    a sine's level in dBFS at each bin, one block's), for a spectrum view
    that settles the noise while it follows a change: reset on a new
    count or a new block length."""

    def __init__(self, count: int = 4):
        self.count = max(1, int(count))
        self._lock = threading.Lock()  # added to by the stream's thread, read by the screen's
        self.reset()

    def reset(self) -> None:
        with self._lock:
            self._clear()

    def _clear(self) -> None:
        self._powers: deque = deque()
        self._sum = None
        self.freq_hz = None

    def set_count(self, count: int) -> None:
        with self._lock:
            self.count = max(1, int(count))
            self._trim()

    def _trim(self) -> None:
        while len(self._powers) > self.count:
            self._sum = self._sum - self._powers.popleft()

    def add(self, freq_hz, spectrum_dbfs) -> None:
        power = units.ratio_from_db(spectrum_dbfs) ** 2
        with self._lock:
            if self._sum is not None and self._sum.shape != power.shape:
                self._clear()
            self.freq_hz = np.asarray(freq_hz, dtype=float)
            self._powers.append(power)
            self._sum = power.copy() if self._sum is None else self._sum + power
            self._trim()

    @property
    def held(self) -> int:
        """How many spectra the mean holds now (fewer than ``count`` at the start)."""
        return len(self._powers)

    def mean_dbfs(self):
        """The frequencies and the averaged spectrum, dBFS a bin (None before the first)."""
        with self._lock:
            if self._sum is None or not self._powers:
                return None
            return self.freq_hz, units.db_from_power_ratio(self._sum / len(self._powers))


def watch_figures(doc: dict) -> list[Figure]:
    """A watch: the last reading of each figure (where the adjustment ended)."""
    better = {"thdn_db": "lower", "thd_db": "lower", "h2_dbc": "lower", "h3_dbc": "lower", "noise_dbfs": "lower",
              "residual_dbfs": "lower", "residual_vrms": "lower"}
    return [Figure(key, f"{f['label']} ({f['unit']}), last reading", finite(f.get("last")), f["unit"], better.get(key),
                   headline=key == "thdn_db").of(doc, f"figures.{key}.last")
            for key, f in (doc.get("figures") or {}).items()]
