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
