"""What a person reads on a screen: tables rendered by rich (the unit of
each column in its header, numbers with their decimal points in line),
and text that, on a terminal, shows warnings in colour. ``NO_COLOR``
(no-color.org) or a pipe gives plain text, the same words."""

from __future__ import annotations

import io
import os
from dataclasses import dataclass



@dataclass(frozen=True)
class Column:
    """A table's column: its header (the unit in it) and how its cells
    line up: "decimal" (numbers, decimal points in line), "right" or "left"."""

    header: str
    align: str = "decimal"


def level_column(levels) -> tuple[str, list[str]]:
    """Levels ((dBFS, volts RMS or None, watts or None) each) as one table
    column in the unit levels are shown in (benchkit.units.level_view):
    the unit for the header and the cells, one unit for all of them (volts
    and watts with the prefix the column needs, dB to 0.01)."""
    from benchkit.units import in_one_unit, level_view

    view = level_view()
    got = [view.value(*lv) for lv in levels]
    units_seen = {u for _v, u in got}
    if len(units_seen) > 1:  # some without volts: the column in what all have
        got = [(dbfs, "dBFS") for dbfs, *_rest in levels]
    unit = got[0][1] if got else "dBFS"
    if unit in ("Vrms", "W"):
        return in_one_unit([v for v, _u in got], unit)
    return unit, [f"{v:+.2f}" if unit != "dBFS" else f"{v:.2f}" for v, _u in got]


def stored_level_column(values, unit: str, scale: tuple[float | None, float | None] = (None, None)) -> tuple[str, list[str]]:
    """Levels as a result stored them (``unit`` dBFS or Vrms; None where
    missing) as one column in the unit levels are shown in, read with the
    result's ``scale`` (volts peak per FS, load ohms); as stored when no
    unit is chosen or some cannot be shown in it."""
    from benchkit.units import in_one_unit, level_view

    view = level_view()
    got = [None if v is None else view.stored(v, unit, *scale) for v in values]
    seen = {g[1] for g in got if g is not None}
    if view.unit is None or len(seen) != 1 or seen == {unit}:
        return in_one_unit(values, unit)
    shown = seen.pop()
    if shown in ("Vrms", "W"):
        return in_one_unit([None if g is None else g[0] for g in got], shown)
    return shown, ["-" if g is None else f"{g[0]:+.2f}" if shown != "dBFS" else f"{g[0]:.2f}" for g in got]


def _in_line(cells: list[str]) -> list[str]:
    """Cells padded on the right so their decimal points fall in one column
    (a cell with no point lines its end up with the others' points)."""
    def tail(c: str) -> int:
        digits = [i for i, ch in enumerate(c) if ch.isdigit()]
        if not digits:
            return 0
        point = c.find(".", digits[0])
        return len(c) - point if point >= 0 else len(c) - digits[-1] - 1

    width = max((tail(c) for c in cells), default=0)
    return [c + " " * (width - tail(c)) if any(ch.isdigit() for ch in c) else c for c in cells]


def table_text(columns: list[Column], rows: list[list[str]], indent: str = "  ") -> str:
    """A table as plain text, rendered by rich: a header row, a row a
    line, no rules; numbers right-aligned on their decimal points."""
    from rich.console import Console
    from rich.table import Table
    from rich.text import Text

    cols = [list(c) for c in zip(*rows)] if rows else [[] for _ in columns]
    cols = [_in_line(cells) if col.align == "decimal" else cells for col, cells in zip(columns, cols)]
    headers = []
    for k, (col, cells) in enumerate(zip(columns, cols)):
        if col.align != "left":  # justified here: rich would strip the spaces that line the points up
            width = max([len(col.header), *(len(c) for c in cells)])
            cols[k] = [c.rjust(width) for c in cells]
            headers.append(col.header.rjust(width))
        else:
            headers.append(col.header)
    t = Table(box=None, pad_edge=False, show_header=True, header_style="", show_edge=False, padding=(0, 2, 0, 0))
    for header in headers:  # (as Text: a note's "[red]" is words, not markup)
        t.add_column(Text(header), justify="left", no_wrap=True)
    for row in zip(*cols):
        t.add_row(*(Text(c) for c in row))
    out = io.StringIO()
    Console(file=out, width=10_000, no_color=True, color_system=None, force_terminal=False, highlight=False).print(t)
    return "\n".join(indent + line.rstrip() for line in out.getvalue().rstrip("\n").split("\n"))


#: how a line stands out on a terminal, by how it starts (after its indent)
_STYLES = (("!! ", "bold red"), ("warning", "yellow"), ("NOT VALID", "bold red"), ("error", "bold red"))


def coloured(stream) -> bool:
    """Whether text to ``stream`` may be coloured: a terminal, and neither
    NO_COLOR set nor TERM=dumb."""
    try:
        tty = stream.isatty()
    except (AttributeError, ValueError):
        return False
    return tty and not os.environ.get("NO_COLOR") and os.environ.get("TERM") != "dumb"


def style_of(line: str) -> str | None:
    """The style a line stands out in (a warning, an invalid step), or None."""
    bare = line.lstrip()
    for start, style in _STYLES:
        if bare.startswith(start):
            return style
    return "bold red" if "NOT VALID" in line or " INVALID" in line else None


def emit(text: str, stream) -> None:
    """Print ``text`` to ``stream``: warnings and invalid steps in colour on
    a terminal, the words unchanged; plain otherwise."""
    if not coloured(stream):
        print(text, file=stream, flush=True)
        return
    from rich.console import Console
    from rich.text import Text

    console = Console(file=stream, highlight=False, soft_wrap=True, emoji=False)
    for line in text.split("\n"):
        console.print(Text(line, style=style_of(line) or ""))
    stream.flush()
