"""Every plot kind, rendered from fixed inputs, checked for what makes a
chart read at a glance.

Two short sessions of the demo stage on the virtual bench (fixed seeds:
every kind of measurement, at two biases, and the comparison of the
two) draw every plot benchkit makes; each figure is caught as it is
saved and measured by matplotlib's own renderer. The properties are
common practice for a readable chart, not a published standard: no two
tick labels of an axis overlap; every text lies inside the figure; no
label is crossed by a curve or covers another label; a legend covers no
data; every curve lies inside its axes (nothing of it cut off by the
frame). This is plumbing of the report, not a measurement: the
measurements are checked against outside references elsewhere.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from matplotlib.figure import Figure
from matplotlib.lines import Line2D

from conftest import PLAN_STAGE

#: every kind of measurement, short; two levels where a kind plots against level
PLAN = PLAN_STAGE + """
[bench]
seed = 3

[[measure]]
kind = "tone"
level = ["-30dBFS", "-11dBFS"]

[[measure]]
kind = "imd"
level = ["-30dBFS", "-14dBFS"]

[[measure]]
kind = "power"
limit = [1, 10]
start = -16
step-db = 3

[[measure]]
kind = "sweep"
span = "10:22000"
duration = 2
level = "-20dBFS"

[[measure]]
kind = "noise"
duration = 1
yes = true

[[measure]]
kind = "zout"
level = "-20dBFS"
freq = [100, 1000, 10000]
yes = true

[[measure]]
kind = "crosstalk"
level = "-20dBFS"
freq = [100, 1000, 10000]

[[measure]]
kind = "power-bandwidth"
at = [1000, 5000]
limit = [1]
start = -16

[[measure]]
kind = "grid"
at = [50, 1000, 10000]
level = ["-30dBFS", "-12dBFS"]

[[measure]]
kind = "loopback"
duration = 1
starts = 2
yes = true

[[measure]]
kind = "drift"
duration = 600
interval = 1
accelerate = 40
nominal = 12
"""

#: a pixel of slack for the renderer's rounding
SLACK = 1.0


@pytest.fixture(scope="module")
def figures(tmp_path_factory) -> dict[str, Figure]:
    """Every figure two sessions and their comparison save, by file name."""
    return every_plot(tmp_path_factory.mktemp("harness"))


def every_plot(root: Path) -> dict[str, Figure]:
    from benchkit.compare_sessions import compare_sessions
    from benchkit.logbook import Logbook
    from benchkit.plan import parse_plan
    from benchkit.session import run_session
    from benchkit.session_report import write_report

    caught: dict[str, Figure] = {}
    original = Figure.savefig

    def savefig(fig, path, *args, **kwargs):
        original(fig, path, *args, **kwargs)
        caught[str(Path(path).relative_to(root))] = fig

    mp = pytest.MonkeyPatch()
    mp.setattr(Figure, "savefig", savefig)
    try:
        plan = parse_plan(PLAN, "harness.toml")
        docs = [run_session(plan, root, lambda _m: None, changes={"bias": b}).doc for b in ("0.8", "1.2")]
        with Logbook(root) as book:
            compared = compare_sessions(book, [d["id"] for d in docs])
            write_report(book, list(compared.sessions), root / "report.html", compared)
    finally:
        mp.undo()
    return caught


def _drawn(fig: Figure):
    """The figure's renderer, the figure drawn by it once (the checks change
    nothing, so every check reads the one drawing)."""
    if not getattr(fig, "_harness_drawn", False):
        fig.canvas.draw()
        fig._harness_drawn = True
    return fig.canvas.get_renderer()


def _texts(fig: Figure):
    """Every visible text with words in it: titles, labels, annotations, legends, tick labels."""
    for t in fig.findobj(lambda a: hasattr(a, "get_text") and hasattr(a, "get_window_extent")):
        if t.get_visible() and str(t.get_text()).strip() and t.figure is fig:
            yield t


def _tick_labels(axis, renderer):
    ticks = axis.get_major_ticks() + axis.get_minor_ticks()
    lo, hi = sorted(axis.get_view_interval())
    for t in ticks:
        for label in (t.label1, t.label2):  # left or bottom, right or top (a twin axis's)
            if label.get_visible() and label.get_text() and lo <= t.get_loc() <= hi:
                yield label


def _points(line: Line2D) -> np.ndarray:
    """A curve's vertices in display units, the non-finite ones (gaps, nothing drawn) left out."""
    xy = line.get_transform().transform(np.column_stack(line.get_data()).astype(float))
    return xy[np.isfinite(xy).all(axis=1)]


def _crosses(xy: np.ndarray, box) -> bool:
    """Whether the polyline through ``xy`` passes through ``box`` (a segment tested by Liang-Barsky clipping)."""
    if len(xy) == 0:
        return False
    if len(xy) == 1:
        return bool(box.contains(*xy[0]))
    p, q = xy[:-1], xy[1:]
    d = q - p
    t0, t1 = np.zeros(len(p)), np.ones(len(p))
    with np.errstate(divide="ignore", invalid="ignore"):
        for k, lo, hi in ((0, box.x0, box.x1), (1, box.y0, box.y1)):
            for num, den in ((p[:, k] - lo, -d[:, k]), (hi - p[:, k], d[:, k])):
                r = num / den
                outside = (den == 0) & (num < 0)
                t0 = np.where(den < 0, np.maximum(t0, r), t0)
                t1 = np.where(den > 0, np.minimum(t1, r), t1)
                t1 = np.where(outside, -1.0, t1)
    return bool(np.any(t0 <= t1))


def _shrunk(box, by: float = SLACK):
    from matplotlib.transforms import Bbox

    return Bbox.from_extents(box.x0 + by, box.y0 + by, box.x1 - by, box.y1 - by)


def test_the_harness_draws_every_kind(figures):
    # every measurement's plot, each run's own and each comparison's overlay
    names = " ".join(figures)
    for stem in ("spectrum", "residual", "thdn", "imd", "power", "response", "noise", "zout", "crosstalk", "grid", "power-bandwidth", "loopback", "drift"):
        assert f".{stem}" in names or f"{stem}." in names, (stem, sorted(figures))
    assert sum(n.startswith("comparisons/") for n in figures) >= 6, sorted(figures)


def _outside_view(fig: Figure) -> set:
    """The tick labels of ticks beyond their axis's view: matplotlib draws none of them."""
    gone = set()
    for ax in fig.axes:
        for axis in (ax.xaxis, ax.yaxis):
            lo, hi = sorted(axis.get_view_interval())
            gone |= {id(label) for t in axis.get_major_ticks() + axis.get_minor_ticks() for label in (t.label1, t.label2)
                     if not lo - 1e-9 * abs(hi - lo) <= t.get_loc() <= hi + 1e-9 * abs(hi - lo)}
    return gone


def _each_axes(figures):
    """(figure's name, axes, renderer) for every axes of every figure, drawn."""
    for name, fig in figures.items():
        r = _drawn(fig)
        for ax in fig.axes:
            yield name, ax, r


def tick_labels_overlapping(figures) -> list:
    bad = []
    for name, ax, r in _each_axes(figures):
        for axis in (ax.xaxis, ax.yaxis):
            boxes = [(t.get_text(), t.get_window_extent(r)) for t in _tick_labels(axis, r)]
            bad += [(name, a, b) for i, (a, ba) in enumerate(boxes) for b, bb in boxes[i + 1:]
                    if _shrunk(ba).overlaps(bb)]
    return bad


def texts_outside_the_figure(figures) -> list:
    bad = []
    for name, fig in figures.items():
        r = _drawn(fig)
        frame, gone = fig.bbox, _outside_view(fig)
        for t in _texts(fig):
            e = t.get_window_extent(r)
            if id(t) not in gone and (e.x0 < frame.x0 - SLACK or e.x1 > frame.x1 + SLACK
                                      or e.y0 < frame.y0 - SLACK or e.y1 > frame.y1 + SLACK):
                bad.append((name, t.get_text(), tuple(np.round(e.extents))))
    return bad


def curves_outside_their_axes(figures) -> list:
    bad = []
    for name, ax, _r in _each_axes(figures):
        frame = ax.bbox
        for line in ax.get_lines():
            if not line.get_visible():
                continue
            xy = _points(line)
            out = ((xy[:, 0] < frame.x0 - SLACK) | (xy[:, 0] > frame.x1 + SLACK)
                   | (xy[:, 1] < frame.y0 - SLACK) | (xy[:, 1] > frame.y1 + SLACK))
            if out.any():
                bad.append((name, ax.get_ylabel(), line.get_label(), int(out.sum()), len(xy)))
    return bad


def labels_crossed_or_covered(figures) -> list:
    bad = []
    for name, ax, r in _each_axes(figures):
        labels = [(t.get_text(), _shrunk(t.get_window_extent(r), 2.0)) for t in ax.texts
                  if t.get_visible() and t.get_text().strip()]
        for text, box in labels:
            for line in ax.get_lines():
                if line.get_visible() and _crosses(_points(line), box):
                    bad.append((name, text, "crossed by", line.get_label()))
        bad += [(name, a, "covers", b) for i, (a, ba) in enumerate(labels) for b, bb in labels[i + 1:]
                if ba.overlaps(bb)]
    return bad


def legends_over_data(figures) -> list:
    bad = []
    for name, ax, r in _each_axes(figures):
        legend = ax.get_legend()
        if legend is None or not legend.get_visible():
            continue
        box = _shrunk(legend.get_window_extent(r), 2.0)
        bad += [(name, ax.get_ylabel(), line.get_label()) for line in ax.get_lines()
                if line.get_visible() and _crosses(_points(line), box)]
    return bad


def test_no_two_tick_labels_of_an_axis_overlap(figures):
    assert tick_labels_overlapping(figures) == []


def test_every_text_lies_inside_the_figure(figures):
    assert texts_outside_the_figure(figures) == []


def test_every_curve_lies_inside_its_axes(figures):
    assert curves_outside_their_axes(figures) == []


def test_no_label_is_crossed_by_a_curve_or_covers_another(figures):
    # annotations in an axes (harmonic names, limits, corners, onsets): a curve through one hides it
    assert labels_crossed_or_covered(figures) == []


def test_a_legend_covers_no_data(figures):
    assert legends_over_data(figures) == []
