"""The Python API: every analysis under one naming pattern, imported
lazily, keyword-only options, 2-D input with a channel, and every
docstring example run as it is written (doctest, standard library). The
examples' values come from outside the project, each named beside it:
plain ratios (a harmonic at 1 % is -40 dBc), the power-reduction
identities (IMD products of a polynomial), Parseval
(band noise), circuit theory (a Thevenin divider, gain in dB, P = V^2/R,
first-order settling) and scipy.signal.freqz (a filter's corner)."""

from __future__ import annotations

import doctest
import inspect
import subprocess
import sys

import numpy as np
import pytest

import benchkit
from benchkit import BenchkitError

ENTRY_POINTS = sorted(n for n in benchkit.__all__ if n.startswith("analyze_"))
#: the data each entry point takes by position; everything else is a keyword
DATA = {"analyze_zout": 2, "analyze_drift": 2, "analyze_power": 1, "analyze_gain": 1, "analyze_grid": 1,
        "analyze_power_bandwidth": 1, "analyze_loopback": 2}


def test_import_benchkit_loads_nothing_heavy():
    code = "import sys, benchkit; print(sorted(m for m in ('numpy', 'scipy', 'matplotlib', 'typer') if m in sys.modules))"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.strip() == "[]"


def test_one_entry_point_a_kind():
    from benchkit import kinds

    assert ENTRY_POINTS == sorted(f"analyze_{k.replace('-', '_')}" for k in kinds.names() if k != "watch")  # (watch: live)


@pytest.mark.parametrize("name", ENTRY_POINTS)
def test_an_entry_point_takes_its_options_by_keyword_and_says_how(name):
    fn = getattr(benchkit, name)
    params = list(inspect.signature(fn).parameters.values())
    positional = [p for p in params if p.kind is p.POSITIONAL_OR_KEYWORD]
    assert len(positional) == DATA.get(name, 2), [p.name for p in positional]
    assert all(p.kind is p.KEYWORD_ONLY for p in params[len(positional):])
    doc = inspect.getdoc(fn)
    for section in ("Parameters", "Returns", "References", "Examples"):
        assert f"\n{section}\n{'-' * len(section)}\n" in doc, (name, section)
    documented = {p.name for p in params}
    assert all(p in doc for p in documented), name


@pytest.mark.parametrize("name", ENTRY_POINTS)
def test_every_docstring_example_runs_as_written(name):
    fn = getattr(benchkit, name)
    tests = doctest.DocTestFinder().find(fn, name, globs={})
    runner = doctest.DocTestRunner(optionflags=doctest.NORMALIZE_WHITESPACE)
    for t in tests:
        runner.run(t)
    result = runner.summarize(verbose=False)
    assert result.attempted > 0 and result.failed == 0, name


def test_a_stereo_file_read_by_soundfile_takes_a_channel(tmp_path):
    soundfile = pytest.importorskip("soundfile")
    t = np.arange(48000) / 48000
    left, right = 0.5 * np.sin(2 * np.pi * 1000 * t), 0.25 * np.sin(2 * np.pi * 1000 * t) + 0.0025 * np.sin(2 * np.pi * 3000 * t)
    soundfile.write(tmp_path / "stereo.wav", np.stack([left, right], axis=1), 48000, subtype="FLOAT")
    x, rate = soundfile.read(tmp_path / "stereo.wav")
    assert x.shape == (48000, 2)
    r = benchkit.analyze_tone(x, rate, channel=2)
    assert r.to_dict() == benchkit.analyze_tone(x[:, 1], rate).to_dict()
    assert r.harmonics[1].level_dbc == pytest.approx(-40.0, abs=1e-3)  # 0.0025 / 0.25: -40 dB (plain arithmetic)
    with pytest.raises(BenchkitError, match="2 channels: say which with channel=1 to 2"):
        benchkit.analyze_tone(x, rate)
    with pytest.raises(BenchkitError, match="channel 3 does not exist"):
        benchkit.analyze_noise(x, rate, channel=3)


def test_an_unknown_name_is_an_attribute_error():
    with pytest.raises(AttributeError, match="no attribute 'analyse_tone'"):
        benchkit.analyse_tone  # noqa: B018 - the spelling people try


def test_every_plot_is_a_figure_first_and_a_png_second():
    # a notebook shows the figure; the report writes the same figure as PNG
    import importlib
    import pkgutil

    import benchkit.report

    writers = []
    for mod in pkgutil.iter_modules(benchkit.report.__path__):
        module = importlib.import_module(f"benchkit.report.{mod.name}")
        writers += [(module, n[:-4]) for n, f in vars(module).items()
                    if n.endswith("_png") and callable(f) and f.__module__ == module.__name__
                    and n not in ("save_png", "result_csv_png")]
    assert len(writers) >= 15
    missing = [f"{m.__name__}.{n}_figure" for m, n in writers if not callable(getattr(m, f"{n}_figure", None))]
    assert not missing


def test_a_result_plots_in_a_notebook():
    from matplotlib.figure import Figure

    from benchkit.report.noise import noise_figure
    from benchkit.report.tone import spectrum_figure

    t = np.arange(48000) / 48000
    tone = benchkit.analyze_tone(0.5 * np.sin(2 * np.pi * 1000 * t) + 0.005 * np.sin(2 * np.pi * 2000 * t), 48000,
                                 traces=True)
    noise = benchkit.analyze_noise(np.random.default_rng(2).normal(0.0, 1e-4, 48000), 48000, traces=True)
    for fig, title in ((spectrum_figure(tone, "a 1 kHz tone"), "a 1 kHz tone"), (noise_figure(noise, "hiss"), "hiss")):
        assert isinstance(fig, Figure) and fig.axes[0].lines
        assert title in fig.axes[0].get_title(loc="left")
