"""What a watch shows: plain figures with their minimum, maximum and a
short trend, marks for a clipped input or a lost tone. A rich table on a
terminal; one plain line a reading otherwise."""

from __future__ import annotations

import math
import time

from benchkit import units
from benchkit.units import quantity
from benchkit.analysis.readings import FIGURES, Reading, resolution, Tracker

_BARS = "▁▂▃▄▅▆▇█"


def sparkline(values, width: int = 32, resolution: float = 0.0) -> str:
    """A trend in block characters, the lowest value at the bottom: the
    values to ``resolution`` (the smallest change worth seeing), the bars
    spanning at least eight times it, centred, so a steady figure's scatter
    below it draws a flat line, not the full height."""
    vals = [v for v in list(values)[-width:] if v is not None and math.isfinite(v)]
    if not vals:
        return ""
    if resolution > 0:  # to the resolution: a scatter below it is no change
        vals = [round(v / resolution) * resolution for v in vals]
    lo, hi = min(vals), max(vals)
    span = max(hi - lo, 8.0 * resolution)
    if span < 1e-12 * max(1.0, abs(hi)):
        return _BARS[3] * len(vals)
    lo -= (span - (hi - lo)) / 2.0
    return "".join(_BARS[max(0, min(7, int((v - lo) / span * 8)))] for v in vals)


def value_text(v: float | None, unit: str) -> str:
    if v is None:
        return "-"
    if unit in ("dB", "dBc", "dBFS"):
        return f"{v:7.2f} {unit}"
    if unit == "V":  # DC: a midpoint near 12 V moves by millivolts
        return f"{v:+.4f} V"
    return quantity(v, unit, 4)


def trend(tracker: Tracker, key: str) -> str:
    """A figure's trend at its meaningful resolution (benchkit.analysis.readings.resolution)."""
    history = tracker.history[key]
    return sparkline(history, resolution=resolution(key, history))


def _shown(r: Reading, key: str) -> bool:
    return getattr(r, key) is not None


def marks(r: Reading | None, held: bool) -> list[str]:
    out = []
    if r is not None and r.clipped:
        out.append("CLIPPED: the input reached full scale")
    if r is not None and r.tone_lost:
        out.append("TONE LOST: no steady tone at the input (wiring? stage off?)")
    if r is not None and r.disturbed:
        out.append("DROPOUT: the stream lost samples in this block; left out of min, max and trend")
    if held:
        out.append("HELD (h releases)")
    return out


def plain_line(r: Reading) -> str:
    """One reading on one line (for logs and pipes)."""
    parts = [f"t {r.t_s:8.2f} s"]
    view = units.level_view()
    if view.own(r.level_dbfs, r.level_vrms, r.power_w):
        parts.append(f"level {view.text(r.level_dbfs, r.level_vrms, r.power_w)}")
    for key, label, unit in FIGURES:
        v = getattr(r, key)
        if v is not None:
            parts.append(f"{label} {value_text(v, unit).strip()}")
    parts += marks(r, False)
    return "  ".join(parts)


#: The keys a watch takes, as its screen names them (``BIAS_KEYS`` on a virtual stage with a bias).
KEYS = (("h", "hold"), ("r", "reset"), ("s", "spectrum"), ("a", "averaging"))
BIAS_KEYS = (("+ -", "bias"),)


def keys_text(more=()) -> str:
    """The keys line: each key and what it does, then how to stop."""
    return ", ".join(f"{k} {what}" for k, what in (*KEYS, *more)) + ", q stop (or Ctrl-C)"


def table(tracker: Tracker, title: str, keys: str | None = None, notes: tuple[str, ...] = ()):
    """The live table: figure, now, minimum, maximum, trend; ``notes``
    (a line each) above the keys."""
    from rich.table import Table
    from rich.text import Text

    r = tracker.shown
    t = Table(title=title, title_justify="left", box=None, pad_edge=False, header_style="bold")
    for name, justify in (("figure", "left"), ("now", "right"), ("min", "right"), ("max", "right"), ("trend", "left")):
        t.add_column(name, justify=justify, no_wrap=True)
    if r is not None:
        view = units.level_view()
        if view.own(r.level_dbfs, r.level_vrms, r.power_w):
            # the level as levels are shown: it rises and falls with the dBFS, so its extremes are theirs
            def shown(which):
                return "-" if which.get("level_dbfs") is None else view.text(
                    which["level_dbfs"], which.get("level_vrms"), which.get("power_w"))
            unit = view.value(r.level_dbfs, r.level_vrms)[1]
            t.add_row(f"level ({unit})", view.text(r.level_dbfs, r.level_vrms, r.power_w), shown(tracker.min),
                      shown(tracker.max), trend(tracker, "level_dbfs"))
        for key, label, unit in FIGURES:
            if not _shown(r, key) and key not in tracker.min:
                continue
            t.add_row(f"{label} ({unit})", value_text(getattr(r, key), unit), value_text(tracker.min.get(key), unit),
                      value_text(tracker.max.get(key), unit), trend(tracker, key))
    caption = Text()
    for m in marks(r, tracker.held is not None):
        caption.append(m + "\n", style="bold red" if not m.startswith("HELD") else "bold")
    for note in notes:
        caption.append(note + "\n")
    when = f"{fmt_time(r.t_s)}, {units.count(tracker.count, 'reading')}" if r is not None else "waiting for the first reading"
    caption.append(f"{when}.  keys: {keys or keys_text()}")
    t.caption = caption
    t.caption_justify = "left"
    return t


#: The spectrum view: columns, rows and dB a row.
SPECTRUM_COLS, SPECTRUM_ROWS, SPECTRUM_DB_ROW = 60, 10, 12.0
#: Harmonics marked in the spectrum view: up to this order.
MARKED_ORDERS = 9


def spectrum_view(spectrum, fundamental_hz: float, band=None, cols: int = SPECTRUM_COLS, rows: int = SPECTRUM_ROWS,
                  db_row: float = SPECTRUM_DB_ROW):
    """The averaged spectrum as text: a bar a column on a log-frequency
    axis across the band (the strongest bin of the column, in eighths of
    a row), dBFS down the side, the fundamental (``f``) and its harmonics
    (2 to 9) marked under the columns that hold them. None before the
    first spectrum."""
    import numpy as np
    from rich.text import Text

    got = spectrum.mean_dbfs()
    if got is None:
        return None
    freq, db = got
    lo = max(band[0] if band else 20.0, freq[1])
    hi = min(band[1] if band else freq[-1], freq[-1])
    edges = np.geomspace(lo, hi, cols + 1)
    idx = np.searchsorted(freq, edges)
    centre = np.sqrt(edges[:-1] * edges[1:])
    level = np.empty(cols)
    for c in range(cols):  # the column's strongest bin, or the bin nearest its centre where it holds none
        a, b = idx[c], idx[c + 1]
        level[c] = db[a:b].max() if b > a else db[min(int(np.searchsorted(freq, centre[c])), freq.size - 1)]
    top = db_row * math.ceil(max(level.max(), -db_row * rows + db_row) / db_row)
    out = Text(f"spectrum, the power mean of {units.count(spectrum.held, 'block')} (dBFS)\n", style="bold")
    for row in range(rows):
        ceiling = top - row * db_row  # this row spans ceiling - db_row .. ceiling
        label = f"{ceiling:>5.0f} " if row % 2 == 0 else " " * 6
        eighths = np.clip(np.floor((level - (ceiling - db_row)) / db_row * 8), 0, 8).astype(int)
        out.append(label + "".join(" " if e == 0 else _BARS[e - 1] for e in eighths) + "\n")
    marks = [" "] * cols
    for k in range(MARKED_ORDERS, 0, -1):  # the lower orders win a shared column
        f = k * fundamental_hz
        if lo <= f <= hi:
            marks[min(max(int(np.searchsorted(edges, f, side="right")) - 1, 0), cols - 1)] = "f" if k == 1 else str(k)
    out.append(" " * 6 + "".join(marks) + "\n", style="bold")
    ticks = [" "] * cols
    for f, name in ((20, "20"), (100, "100"), (1000, "1k"), (10000, "10k")):
        at = max(0, int(np.searchsorted(edges, f)) - 1)
        if lo <= f <= hi and at + len(name) <= cols and all(t == " " for t in ticks[max(0, at - 1):at + len(name)]):
            ticks[at:at + len(name)] = name
    out.append(" " * 6 + "".join(ticks) + " Hz")
    return out


def screen(tracker: Tracker, title: str, spectrum=None, fundamental_hz: float | None = None, band=None,
           keys: str | None = None, notes: tuple[str, ...] = ()):
    """What a watch's terminal shows: the table and, with a spectrum
    average, the spectrum view beside it (under it on a narrow terminal)."""
    shown = table(tracker, title, keys, notes)
    view = spectrum_view(spectrum, fundamental_hz, band) if spectrum is not None else None
    return shown if view is None else _Beside(shown, view)


class _Beside:
    """Two renderables side by side where the terminal is wide enough for
    both at their natural widths, else one under the other."""

    GAP = 4

    def __init__(self, left, right):
        self.left, self.right = left, right

    def __rich_console__(self, console, options):
        from rich.measure import Measurement
        from rich.table import Table

        widths = [Measurement.get(console, options, r).maximum for r in (self.left, self.right)]
        if sum(widths) + self.GAP <= options.max_width:
            grid = Table.grid(padding=(0, self.GAP))
            grid.add_row(self.left, self.right)
            yield grid
        else:
            yield self.left
            yield self.right


def fmt_time(seconds: float) -> str:
    """Seconds into a watch as shown: 12.3 s, or hh:mm:ss from a minute."""
    return time.strftime("%H:%M:%S", time.gmtime(seconds)) if seconds >= 60 else f"{seconds:5.1f} s"


def summary_lines(tracker: Tracker) -> list[str]:
    """Each figure's minimum and maximum over a watch."""
    shown = [(key, label, unit) for key, label, unit in FIGURES if key in tracker.min]
    width = max((len(label) for _k, label, _u in shown), default=0)
    return [f"  {label:<{width}} {unit:<5} min {value_text(tracker.min[key], unit).strip():>14}   "
            f"max {value_text(tracker.max[key], unit).strip():>14}"
            for key, label, unit in shown]


class Keys:
    """Single key presses from a terminal without Enter (cbreak mode),
    restored on close; nothing on a system without termios."""

    def __init__(self):
        self._old, self._pending = None, ""
        try:
            import termios
            import tty

            import sys

            self._fd = sys.stdin.fileno()
            self._old = termios.tcgetattr(self._fd)
            tty.setcbreak(self._fd)
        except Exception:  # noqa: BLE001 - not a terminal we can put in cbreak mode
            self._old = None

    def read(self) -> str | None:
        """The next key pressed, or None. Read from the descriptor itself:
        a text stream's buffer would hide keys typed together from select."""
        if self._old is None:
            return None
        import os
        import re
        import select

        if not self._pending and select.select([self._fd], [], [], 0)[0]:
            # an arrow or function key sends an escape sequence (ESC [ A ...): not a key of ours
            self._pending = re.sub(r"\x1b(\[[0-9;]*[A-Za-z~]|O[A-Za-z]|.)?", "",
                                   os.read(self._fd, 256).decode(errors="replace"))
        key, self._pending = self._pending[:1], self._pending[1:]
        return key.lower() or None

    def close(self) -> None:
        if self._old is not None:
            import termios

            termios.tcsetattr(self._fd, termios.TCSADRAIN, self._old)
            self._old = None


class OnTerminal:
    """A display redrawn in place on stderr (``render`` makes what it
    shows, on rich's own thread) while a ``with`` block runs, left showing
    its last state; nothing at all when not ``live``. Notes printed
    meanwhile appear above it. A subclass sets what ``render`` reads
    before calling ``__init__`` (rich renders once at once)."""

    def __init__(self, live: bool):
        self._display, self._started = None, time.monotonic()
        if live:
            from rich.console import Console
            from rich.live import Live

            self._display = Live(console=Console(stderr=True), get_renderable=self.render, refresh_per_second=4,
                                 transient=False)

    @property
    def live(self) -> bool:
        return self._display is not None

    def render(self):
        raise NotImplementedError

    def ended(self, failed: bool) -> None:
        """Called as the block ends, before the last drawing."""

    def __enter__(self):
        if self._display is not None:
            self._display.start()
        return self

    def __exit__(self, kind, *_exc) -> None:
        if self._display is not None:
            self.ended(kind is not None)
            self._display.refresh()
            self._display.stop()


class StepBoard(OnTerminal):
    """What a stepped power run shows while it drives the stage up: each
    step's drive, the output (volts and watts with a calibration and a
    load, else dBFS), THD+N (or THD) and the next limit it approaches. A
    live table on stderr when stderr is a terminal; one line a step
    otherwise (``say``). ``step`` may be called from the audio thread: it
    only files the step, the table is drawn on the display's own thread."""

    SHOWN = 12  # the latest steps in the table

    def __init__(self, title: str, limits_pct, metric: str, volts_per_fs: float | None, load_ohms: float | None,
                 say, live: bool):
        self.title, self.limits, self.metric = title, sorted(float(x) for x in limits_pct), metric
        self.volts_per_fs, self.load_ohms, self.say = volts_per_fs, load_ohms, say
        self.steps: list[tuple] = []
        self.retakes = 0
        super().__init__(live)

    def _output(self, amplitude_fs: float) -> tuple[str, str]:
        """The output level as levels are shown (volts RMS by default, with
        a calibration), and the power."""
        vrms = units.vrms_from_vpk(amplitude_fs * self.volts_per_fs) if self.volts_per_fs else None
        watts = vrms * vrms / self.load_ohms if vrms is not None and self.load_ohms else None
        level = units.level_view().text(units.dbfs_from_peak(amplitude_fs), vrms, watts)
        return level, "-" if watts is None else quantity(watts, "W", 3)

    def _next_limit(self, pct: float, before: float | None) -> str:
        """How near the next limit up is, and which way the figure moves
        (at low drive noise holds it up, falling as the drive rises)."""
        way = "" if before is None else "rising, " if pct > before else "falling, "
        ahead = [x for x in self.limits if x > pct]
        if not ahead:
            return f"{way}past {self.limits[-1]:g} %"
        return f"{way}{pct / ahead[0] * 100:.0f} % of {ahead[0]:g} %"

    def step(self, level_dbfs: float, amplitude_fs: float, pct: float, retake: bool = False) -> None:
        """A step analysed (``retake``: spoiled by a dropout, to be played again)."""
        if retake:
            self.retakes += 1
            if not self.live:
                self.say(f"step at {level_dbfs:.2f} dBFS spoiled by a dropout: played again")
            return
        before = self.steps[-1][3] if self.steps else None
        self.steps.append((len(self.steps) + 1, level_dbfs, amplitude_fs, pct, before))
        if not self.live:
            volts, watts = self._output(amplitude_fs)
            self.say(f"step {len(self.steps):>2}  drive {level_dbfs:7.2f} dBFS  output {volts:>10}  {watts:>8}  "
                     f"{self._metric_name} {pct:8.4f} %  ({self._next_limit(pct, before)})")

    @property
    def _metric_name(self) -> str:
        return "THD+N" if self.metric == "thdn" else "THD"

    def render(self):
        from rich.table import Table
        from rich.text import Text

        t = Table(title=self.title, title_justify="left", box=None, pad_edge=False, header_style="bold")
        for name in ("step", "drive (dBFS)", "output", "power", f"{self._metric_name} (%)", "next limit"):
            t.add_column(name, justify="left" if name == "next limit" else "right", no_wrap=True)
        for n, level, amp, pct, before in self.steps[-self.SHOWN:]:
            volts, watts = self._output(amp)
            near = next((x for x in self.limits if x > pct), None)
            style = "bold red" if near is None else "yellow" if pct > 0.5 * near else ""
            t.add_row(str(n), f"{level:.2f}", volts, watts, Text(f"{pct:.4f}", style=style), self._next_limit(pct, before))
        caption = Text()
        if self.retakes:
            caption.append(f"{units.count(self.retakes, 'step')} spoiled by dropouts, played again\n", style="bold")
        caption.append(f"{fmt_time(time.monotonic() - self._started)}: stepping up to the highest limit "
                       f"({', '.join(f'{x:g} %' for x in self.limits)}).  Ctrl-C fades out and keeps the steps done.")
        t.caption, t.caption_justify = caption, "left"
        return t


class Measuring(OnTerminal):
    """While a measurement plays and is analysed, a line on a terminal
    (stderr) saying what and for how long, redrawn in place, with how to
    stop it; left as "measured in ..." when it ends. Nothing when not
    ``shown``."""

    def __init__(self, what: str, shown: bool):
        self.what = what
        self._done: str | None = None
        super().__init__(shown)

    def render(self):
        from rich.text import Text

        if self._done is not None:
            return Text(self._done)
        spin = "|/-\\"[int(time.monotonic() * 4) % 4]
        return Text(f"{spin} measuring {self.what}: {fmt_time(time.monotonic() - self._started).strip()}  "
                    "(Ctrl-C fades the output to silence and keeps what was captured)", style="bold")

    def ended(self, failed: bool) -> None:
        took = fmt_time(time.monotonic() - self._started).strip()
        self._done = f"{self.what} stopped after {took}" if failed else f"measured {self.what} in {took}"
