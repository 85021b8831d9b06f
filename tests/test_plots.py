"""Plots that read at a glance: log axes whose tick labels never run together.

The property is common practice for a readable chart (a label a tick,
none on top of another; decades, and 1-2-5 steps within them, as log
graph paper prints them); the boxes are measured by matplotlib's own
renderer once the figure is drawn.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from benchkit.report.plots import readable_log


def overlapping_tick_labels(fig) -> list[tuple[str, str]]:
    """Pairs of visible tick labels on one axis whose boxes overlap, once drawn."""
    canvas = FigureCanvasAgg(fig)
    canvas.draw()
    renderer = canvas.get_renderer()
    found = []
    for ax in fig.axes:
        for axis in (ax.xaxis, ax.yaxis):
            ticks = axis.get_major_ticks() + axis.get_minor_ticks()
            shown = [t.label1 for t in ticks if t.label1.get_visible() and t.label1.get_text()
                     and t.label1.get_window_extent(renderer).width > 0]
            boxes = [(lab.get_text(), lab.get_window_extent(renderer)) for lab in shown]
            for i, (a, box_a) in enumerate(boxes):
                for b, box_b in boxes[i + 1:]:
                    if box_a.overlaps(box_b):
                        found.append((a, b))
    return found


def visible_labels(fig, axis: str) -> list[str]:
    FigureCanvasAgg(fig).draw()
    ax = fig.axes[0]
    ticks = getattr(ax, f"{axis}axis")
    lo, hi = getattr(ax, f"get_{axis}lim")()
    return [t.label1.get_text() for t in ticks.get_major_ticks() + ticks.get_minor_ticks()
            if t.label1.get_text() and lo <= t.get_loc() <= hi]


@pytest.mark.parametrize("x, y", [
    ((0.025, 2.0), (0.028, 0.19)),    # THD+N in % against W over two decades (a tone run's)
    ((0.2, 9.0), (0.002, 0.09)),      # a power run's top: "0.0020.0030.004..." before
    ((1e-3, 30.0), (1e-3, 30.0)),     # wide: the decades alone
    ((2.0, 3.0), (0.05, 0.07)),       # narrow: 2, 3 and 5 where no decade falls inside
])
def test_log_axes_label_decades_not_every_minor_tick(x, y):
    fig = Figure(figsize=(6.4, 4.0), dpi=110)
    ax = fig.add_subplot(1, 1, 1)
    ax.plot(np.geomspace(*x, 20), np.geomspace(*y, 20))
    ax.set_xscale("log")
    ax.set_yscale("log")
    readable_log(ax.xaxis, ax.yaxis)
    assert overlapping_tick_labels(fig) == []
    for axis in "xy":
        shown = visible_labels(fig, axis)
        assert shown, axis  # every axis still says what it reads
        for text in shown:  # only mantissas of 1, 2, 3 and 5 are labelled
            assert f"{float(text):.1e}"[0] in "1235", (axis, shown)


def test_a_runs_plots_are_titled_by_its_stage_and_tags_not_its_file(tmp_path):
    # a logged run names the stage (--stage-info name=...) and its tags; a file made elsewhere keeps its name
    import json

    from benchkit.report.files import title_of

    from conftest import run_cli

    res = run_cli("tone", "--level", "-20dBFS", "--tag", "bias=1.2A", "--stage-info", "name=Stage X-1", "--bench",
                  str(tmp_path / "bench"), "--json")
    assert res.returncode == 0, res.stderr
    folder = Path(json.loads(res.stdout)["run"]["folder"])
    assert title_of(folder / "capture.wav") == "Stage X-1; bias=1.2A"
    assert title_of(tmp_path / "elsewhere.wav") == "elsewhere.wav"
    # a run naming neither: its command and when it started, not capture.wav
    record = json.loads((folder / "run.json").read_text())
    (folder / "run.json").write_text(json.dumps({**record, "stage": None, "tags": {}}))
    assert title_of(folder / "capture.wav") == f"tone run of {record['started'][:10]} {record['started'][11:16]}"


def test_a_response_plots_its_group_delay_and_keeps_its_corner_labels_inside():
    # a first-order high-pass at 10 Hz and low-pass at 30 kHz (closed forms, circuit theory): the group
    # delay panel draws -d(phase)/d(omega), fc / (2 pi (fc^2 + f^2)) for the high-pass, and both -3 dB
    # labels lie inside the figure (the upper one was cut off at the right edge before)
    from benchkit.analysis.response import ResponseResult
    from benchkit.report.sweep import response_figure

    f = np.geomspace(2, 40000, 1200)
    h = (1j * f / (10 + 1j * f)) / (1 + 1j * f / 30000)
    r = ResponseResult("sweep", f, 20 * np.log10(np.abs(h)), np.degrees(np.angle(h)), (), np.full(f.size, np.nan), None,
                       "given", "dB re 1 V/V", 1000.0)
    fig = response_figure(r, "band-pass")
    canvas = FigureCanvasAgg(fig)
    canvas.draw()
    delay = fig.axes[2]
    assert "group delay" in delay.get_ylabel()
    x, y = delay.lines[0].get_data()
    at = (x > 20) & (x < 200)  # where the low-pass adds under a microsecond
    want = 1e3 * (10 / (2 * np.pi * (10**2 + x[at] ** 2)) + 30000 / (2 * np.pi * (30000**2 + x[at] ** 2)))
    assert np.allclose(y[at], want, rtol=0.02)
    box = fig.bbox
    labels = [t for t in fig.axes[0].texts if t.get_text().startswith("-3 dB")]
    assert len(labels) == 2
    for t in labels:
        e = t.get_window_extent(canvas.get_renderer())
        assert box.x0 <= e.x0 and e.x1 <= box.x1, t.get_text()
    assert overlapping_tick_labels(fig) == []


def test_a_noise_comparison_draws_in_the_units_of_each_runs_own_plot(tmp_path, monkeypatch):
    # two runs with a scale of 20 V/FS: the overlay in dB re 1 V/sqrt(Hz), 20 log10(20) = 26.02 dB over the
    # density in FS (as each run's plot draws it); without a scale, in FS/sqrt(Hz) - never FS^2/Hz
    from types import SimpleNamespace

    import benchkit.report.overlays as overlays
    from benchkit.kinds import get

    got = {}
    monkeypatch.setattr(overlays, "lines_png", lambda series, labels, path, title, warnings, xl, yl, logx: got.update(
        series=series, unit=yl) or path)
    entries = []
    for name in ("a", "b"):
        folder = tmp_path / name
        folder.mkdir()
        (folder / "capture.noise.csv").write_text("freq_hz,psd_fs2_per_hz,psd_a_fs2_per_hz\n100.0,1.0e-10,1.0e-10\n")
        entries.append(SimpleNamespace(folder=folder))
    comparison = SimpleNamespace(labels=("a", "b"), warnings=())
    get("noise").overlay(comparison, [{"volts_per_fs": 20.0}] * 2, entries, tmp_path, "t")
    assert got["unit"] == "dB re 1 V/sqrt(Hz)" and got["series"][0][1][0] == pytest.approx(-100 + 20 * np.log10(20))
    get("noise").overlay(comparison, [{"volts_per_fs": None}] * 2, entries, tmp_path, "t")
    assert got["unit"] == "dB re 1 FS/sqrt(Hz)" and got["series"][0][1][0] == pytest.approx(-100.0)


@pytest.mark.parametrize("scale", [2.0, 20.36, None])
def test_a_calibrated_spectrum_reads_in_dbv_beside_dbfs_and_its_overlay_alike(scale):
    # a full-scale sine is scale / sqrt 2 V rms, so dBV = dBFS + 20 log10(scale / sqrt 2) (0 dBV = 1 Vrms,
    # IEC 60027-3 level conventions); 2 V/FS: +3.01 dB. Two runs with that scale overlay alike; no scale, no volts
    from benchkit.analysis.tone import analyze_tone
    from benchkit.report.tone import spectra_figure, spectrum_figure

    rate = 48000
    t = np.arange(rate) / rate
    r = analyze_tone(0.5 * np.sin(2 * np.pi * 1000 * t), rate, volts_per_fs=scale, traces=True)
    for fig in (spectrum_figure(r, "t"), spectra_figure([r, r], ["a", "b"], "t")):
        FigureCanvasAgg(fig).draw()
        ax = fig.axes[0]
        if scale is None:
            assert ax.child_axes == []
            continue
        (right,) = ax.child_axes
        assert "dBV" in right.get_ylabel()
        assert np.subtract(right.get_ylim(), ax.get_ylim()) == pytest.approx([20 * np.log10(scale / np.sqrt(2))] * 2)


def test_a_spectrums_harmonic_labels_never_collide():
    # a hard-clipped sine's odd harmonics (Fourier series: every one well over the noise) crowd the top
    # decade of a log axis: no two labels' boxes overlap, none leaves the axes, and the low orders are named
    from benchkit import analyze_tone
    from benchkit.report.tone import spectrum_figure

    t = np.arange(48000) / 48000
    x = np.clip(1.3 * np.sin(2 * np.pi * 997 * t), -1, 1) * 0.5
    x = x + 0.3 * x**2 + np.random.default_rng(1).normal(0, 1e-6, t.size)  # even orders too
    fig = spectrum_figure(analyze_tone(x, 48000, traces=True), "clipped")
    canvas = FigureCanvasAgg(fig)
    canvas.draw()
    renderer = canvas.get_renderer()
    ax = fig.axes[0]
    texts = [t for t in ax.texts if t.get_text()]
    boxes = [t.get_window_extent(renderer) for t in texts]
    frame = ax.get_window_extent(renderer)
    assert all(frame.x0 <= b.x0 and b.x1 <= frame.x1 for b in boxes)
    assert not [(a.get_text(), b.get_text()) for i, (a, ba) in enumerate(zip(texts, boxes))
                for b, bb in list(zip(texts, boxes))[i + 1:] if ba.overlaps(bb)]
    named = {t.get_text().split("\n")[0] for t in texts}
    assert {"H2", "H3"} <= named


def test_a_power_plots_onset_label_stays_off_its_curves_and_its_top_off_the_frame():
    # the hard-clip stage of analyze_power's example (Fourier: onset where the peaks reach 10 V): the onset's
    # label box holds no point of either curve, and the top point stands clear of the frame
    import benchkit
    from benchkit.report.power import power_figure

    t = np.arange(24000) / 48000
    steps = []
    for vpk in np.arange(8.0, 12.01, 0.25):
        out = np.clip(vpk * np.sin(2 * np.pi * 1000 * t), -10.0, 10.0) + np.random.default_rng(1).normal(0, 1e-4, t.size)
        steps.append((20 * np.log10(vpk / 20), benchkit.analyze_tone(out / 20.0, 48000, volts_per_fs=20.0, load_ohms=8.0)))
    result = benchkit.analyze_power(steps, load_ohms=8.0)
    fig = power_figure(result, "hard clip")
    canvas = FigureCanvasAgg(fig)
    canvas.draw()
    renderer = canvas.get_renderer()
    ax = fig.axes[0]
    onset = next(t for t in ax.texts if t.get_text().startswith("onset"))
    box = onset.get_window_extent(renderer)
    for line in ax.lines[:2]:  # THD+N, THD
        points = ax.transData.transform(np.column_stack(line.get_data()))
        assert not any(box.contains(x, y) for x, y in points)
    top = max(ax.transData.transform(np.column_stack(ax.lines[0].get_data()))[:, 1])
    assert ax.get_window_extent(renderer).y1 - top > 10  # pixels
