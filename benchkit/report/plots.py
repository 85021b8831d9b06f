"""What every plot shares: its colours, the log-frequency axis, and
saving a PNG. Each kind draws its own in ``report/NAME.py``.

Plots use matplotlib's object interface with the Agg canvas: no pyplot,
no global state, no display needed.
"""

from __future__ import annotations

from pathlib import Path

from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.ticker import Formatter


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


#: where a label may stand against its point, in order of preference: (dx, dy) offsets in points, and its alignment
ABOVE = (*((0, dy, "center") for dy in (6, 28, 50, 72, 94)), (-6, -12, "right"), (6, -12, "left"),
         (-6, -34, "right"), (6, -34, "left"))
BESIDE = ((-8, 6, "right"), (-8, -16, "right"), (8, -16, "left"), (8, 6, "left"), (-8, 28, "right"), (8, 28, "left"),
          (-8, -38, "right"), (8, -38, "left"))


def crosses(box, lines, renderer=None) -> bool:
    """Whether any of ``lines`` (Line2D, as drawn: their markers' points
    and the segments between them) passes through ``box`` (display units)."""
    import numpy as np

    for line in lines:
        if not line.get_visible():
            continue
        xy = line.get_transform().transform(np.column_stack(line.get_data()).astype(float))
        ok = np.isfinite(xy).all(axis=1)
        inside = (xy[:, 0] >= box.x0) & (xy[:, 0] <= box.x1) & (xy[:, 1] >= box.y0) & (xy[:, 1] <= box.y1)
        if np.any(inside & ok):
            return True
        if line.get_linestyle() in ("None", "", " "):
            continue
        # a segment between two finite points passes through the box: clipped to it (Liang-Barsky)
        seg = ok[:-1] & ok[1:]
        p, d = xy[:-1][seg], (xy[1:] - xy[:-1])[seg]
        t0, t1 = np.zeros(len(p)), np.ones(len(p))
        with np.errstate(divide="ignore", invalid="ignore"):
            for k, lo, hi in ((0, box.x0, box.x1), (1, box.y0, box.y1)):
                for num, den in ((p[:, k] - lo, -d[:, k]), (hi - p[:, k], d[:, k])):
                    r = num / den
                    t0 = np.where(den < 0, np.maximum(t0, r), t0)
                    t1 = np.where(den > 0, np.minimum(t1, r), t1)
                    t1 = np.where((den == 0) & (num < 0), -1.0, t1)
        if np.any(t0 <= t1):
            return True
    return False


def labels_apart(ax, points, offsets=ABOVE, placed=None, **style) -> list:
    """Label ``points`` ((x, y, text), in data units) at the first of
    ``offsets`` ((dx, dy, ha): points from the point, and the alignment)
    where the label's box overlaps none placed before it (``placed``:
    boxes already there, such as another label's), no curve of the axes
    passes through it and it stays inside the axes; one that fits nowhere
    is left out, its marker speaking for it. Each label's box joins
    ``placed``. Call once the axes' curves, limits and the figure's layout
    are set: the boxes are measured by the Agg renderer."""
    renderer = renderer_of(ax.figure)
    frame = ax.get_window_extent(renderer)
    placed = [] if placed is None else placed
    lines = list(ax.get_lines())
    drawn = []
    for x, y, text in points:
        for dx, dy, ha in offsets:
            a = ax.annotate(text, (x, y), textcoords="offset points", xytext=(dx, dy), ha=ha, **style)
            box = a.get_window_extent(renderer)
            inside = frame.x0 <= box.x0 and box.x1 <= frame.x1 and frame.y0 <= box.y0 and box.y1 <= frame.y1
            if inside and not any(box.overlaps(b) for b in placed) and not crosses(box.padded(1.0), lines):
                placed.append(box)
                drawn.append(a)
                break
            a.remove()
    return drawn


#: where a legend may stand inside its axes, in order of preference
LEGEND_PLACES = ("upper left", "upper right", "lower left", "lower right", "center left", "center right",
                 "upper center", "lower center")


def legend_clear(ax, places=LEGEND_PLACES, **style):
    """The axes' legend at the first of ``places`` where it covers no curve
    and no label; when none is clear, outside the axes on the right, the
    axes narrowed to make room. Call once the curves, limits and layout are set."""
    renderer = renderer_of(ax.figure)
    lines = list(ax.get_lines())
    labels = [t.get_window_extent(renderer) for t in ax.texts if t.get_visible() and t.get_text().strip()]
    for place in places:
        legend = ax.legend(loc=place, **style)
        box = legend.get_window_extent(renderer).padded(2.0)
        if not crosses(box, lines) and not any(box.overlaps(b) for b in labels):
            return legend
    legend = ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), borderaxespad=0.0, **style)
    width = legend.get_window_extent(renderer).width / ax.figure.bbox.width
    pos = ax.get_position()
    ax.set_position([pos.x0, pos.y0, max(pos.width - width - 0.02, 0.3 * pos.width), pos.height])
    return legend


def floored(y, bottom: float):
    """A trace drawn on an axis whose floor is ``bottom``: what lies below
    it (a spectrum's deepest noise dips) drawn at the floor, as a display's
    floor shows it, rather than cut off by the frame."""
    import numpy as np

    return np.maximum(np.asarray(y, float), bottom)


def save_png(fig: Figure, path: Path) -> Path:
    FigureCanvasAgg(fig)
    fig.savefig(path, dpi=110)
    return path


class ReadableLog(Formatter):
    """Labels a log axis can hold without them running together: the
    decades, and 2 and 5 within them while the axis spans under about
    two decades (and 3 below half a decade); never every minor tick.
    Plain numbers ("0.05", "2", "20"), as the trade reads them; ``text``
    writes one (frequencies: "2k")."""

    def __init__(self, text=None):
        super().__init__()
        self.text = text or (lambda x: f"{x:g}")

    def __call__(self, x, pos=None):
        import math

        if not x > 0:
            return ""
        lo, hi = sorted(abs(v) for v in self.axis.get_view_interval())
        decades = math.log10(hi / lo) if lo > 0 else 99.0
        keep = (1,) if decades > 2.2 else (1, 2, 5) if decades > 0.6 else (1, 2, 3, 5)
        mantissa = round(x / 10 ** math.floor(math.log10(x) + 1e-9), 6)
        return self.text(x) if mantissa in keep else ""


def readable_log(*axes) -> None:
    """Put ReadableLog on log axes (``ax.xaxis``, ``ax.yaxis``), major and minor ticks alike."""
    for axis in axes:
        axis.set_major_formatter(ReadableLog())
        axis.set_minor_formatter(ReadableLog())


def log_hz_axis(ax) -> None:
    """A log frequency axis labelled "20", "200", "2k" (ReadableLog: the
    decades, and 2 and 5 where the axis spans less than two decades)."""
    ax.set_xscale("log")
    ax.xaxis.set_major_formatter(ReadableLog(hz_label))
    ax.xaxis.set_minor_formatter(ReadableLog(hz_label))
    ax.grid(True, which="both", color="#eeeeee", lw=0.5)


def volts_axis(ax, volts_per_fs: float | None, what: str = "level of a sine"):
    """Beside a left axis in dBFS, a right one in the dB unit levels are
    shown in (benchkit.units.level_view: dBu or dBr as chosen, else dBV,
    0 dBV = 1 Vrms) when it can be had: a full-scale sine is
    ``volts_per_fs`` (peak volts per FS) over sqrt 2 volts RMS, and a dBr
    against a dBFS reference needs no volts. None otherwise. Leave the
    right margin room for its labels."""
    from benchkit import units

    view = units.level_view()
    unit = view.unit if view.unit in ("dBu", "dBr") else "dBV"
    full = units.vrms_from_vpk(volts_per_fs) if volts_per_fs else None
    shift, shown = units.LevelView(unit, view.ref).value(0.0, full)
    if shown != unit:  # (volts it has not got)
        return None
    right = ax.secondary_yaxis("right", functions=(lambda y: y + shift, lambda y: y - shift))
    right.set_ylabel(f"{what} ({unit})")
    return right


def shared_scale(scales) -> float | None:
    """The volts per FS all of several runs share (to 0.1 %), else None:
    an overlay draws volts only when every run's plot does, alike."""
    scales = list(scales)
    if not scales or any(not s for s in scales):
        return None
    return scales[0] if max(scales) <= min(scales) * 1.001 else None
