"""What every plot shares: its colours, the log-frequency axis, and
saving a PNG. Each kind draws its own in ``report/NAME.py``.

Plots use matplotlib's object interface with the Agg canvas: no pyplot,
no global state, no display needed.
"""

from __future__ import annotations

from pathlib import Path

from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.ticker import Formatter, FuncFormatter


TRACE = "#1f3b57"
BAND = "#dfe9f3"
MARK = "#c2571a"
FAINT = "#9aa5b1"
LABELLED_HARMONICS = 9


def hz_label(v, _pos=None) -> str:
    return f"{v / 1000:g}k" if v >= 1000 else f"{v:g}"


def renderer_of(fig: Figure):
    """The figure's Agg renderer (an Agg canvas attached when it has none), to measure text boxes."""
    canvas = fig.canvas if isinstance(fig.canvas, FigureCanvasAgg) else FigureCanvasAgg(fig)
    return canvas.get_renderer()


def labels_apart(ax, points, levels=(6, 28, 50, 72, -34, -56), placed=None, **style) -> list:
    """Label ``points`` ((x, y, text), in data units) above each point (or below it), each
    at the lowest of ``levels`` (offsets in points) where its box overlaps
    none placed before it (``placed``: boxes already there, such as another
    label's) and stays inside the axes; one that fits nowhere is left out,
    its marker speaking for it. Call once the axes' limits and the
    figure's layout are set: the boxes are measured by the Agg renderer."""
    renderer = renderer_of(ax.figure)
    frame = ax.get_window_extent(renderer)
    placed = list(placed or [])
    drawn = []
    for x, y, text in points:
        for dy in levels:
            a = ax.annotate(text, (x, y), textcoords="offset points", xytext=(0, dy), ha="center", **style)
            box = a.get_window_extent(renderer)
            inside = frame.x0 <= box.x0 and box.x1 <= frame.x1 and frame.y0 <= box.y0 and box.y1 <= frame.y1
            if inside and not any(box.overlaps(b) for b in placed):
                placed.append(box)
                drawn.append(a)
                break
            a.remove()
    return drawn


def save_png(fig: Figure, path: Path) -> Path:
    FigureCanvasAgg(fig)
    fig.savefig(path, dpi=110)
    return path


class ReadableLog(Formatter):
    """Labels a log axis can hold without them running together: the
    decades, and 2 and 5 within them while the axis spans under about
    two decades (and 3 below half a decade); never every minor tick.
    Plain numbers ("0.05", "2", "20"), as the trade reads them."""

    def __call__(self, x, pos=None):
        import math

        if not x > 0:
            return ""
        lo, hi = sorted(abs(v) for v in self.axis.get_view_interval())
        decades = math.log10(hi / lo) if lo > 0 else 99.0
        keep = (1,) if decades > 2.2 else (1, 2, 5) if decades > 0.6 else (1, 2, 3, 5)
        mantissa = round(x / 10 ** math.floor(math.log10(x) + 1e-9), 6)
        return f"{x:g}" if mantissa in keep else ""


def readable_log(*axes) -> None:
    """Put ReadableLog on log axes (``ax.xaxis``, ``ax.yaxis``), major and minor ticks alike."""
    for axis in axes:
        axis.set_major_formatter(ReadableLog())
        axis.set_minor_formatter(ReadableLog())


def log_hz_axis(ax) -> None:
    ax.set_xscale("log")
    ax.xaxis.set_major_formatter(FuncFormatter(hz_label))
    ax.grid(True, which="both", color="#eeeeee", lw=0.5)
