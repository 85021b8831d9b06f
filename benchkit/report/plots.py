"""What every plot shares: its colours, the log-frequency axis, and
saving a PNG. Each kind draws its own in ``report/NAME.py``.

Plots use matplotlib's object interface with the Agg canvas: no pyplot,
no global state, no display needed.
"""

from __future__ import annotations

from pathlib import Path

from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.ticker import FuncFormatter


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


def log_hz_axis(ax) -> None:
    ax.set_xscale("log")
    ax.xaxis.set_major_formatter(FuncFormatter(hz_label))
    ax.grid(True, which="both", color="#eeeeee", lw=0.5)
