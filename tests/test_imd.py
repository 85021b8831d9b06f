"""Intermodulation: the products of a two-tone test.

References: the trigonometric power-reduction identities for
y = g x + a2 x^2 + a3 x^3 and x = A1 cos w1 t + A2 cos w2 t (REFERENCES.md
gives the one-tone case; the two-tone case follows the same way):
a2 A1 A2 at f2 +- f1; (3/4) a3 A1^2 A2 at 2 f1 +- f2; (3/4) a3 A1 A2^2 at
2 f2 +- f1; the tones come back as g A1 + a3 (3/4 A1^3 + 3/2 A1 A2^2) and
g A2 + a3 (3/4 A2^3 + 3/2 A1^2 A2). The methods' definitions (SMPTE RP120;
IEC 60268-3 ed. 4): sideband pairs over f2 (modulation), products over
the sum of the tones (difference), from memory.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from benchkit.analysis.imd import analyze_imd
from benchkit.capture.virtual import virtual_bench
from benchkit.kinds.imd import imd_run, twin_tone

from conftest import run_cli, the_run


def _expected(a1, a2, g, k2, k3):
    """Every product of the cubic's two-tone response, and the tones."""
    sb2, sb31, sb32 = k2 * a1 * a2, 0.75 * k3 * a1 * a1 * a2, 0.75 * k3 * a1 * a2 * a2
    tones = (g * a1 + k3 * (0.75 * a1 ** 3 + 1.5 * a1 * a2 * a2), g * a2 + k3 * (0.75 * a2 ** 3 + 1.5 * a1 * a1 * a2))
    return {(-1, 1): sb2, (1, 1): sb2, (2, -1): sb31, (2, 1): sb31, (-2, 1): sb31, (-1, 2): sb32, (1, 2): sb32}, tones


@pytest.mark.parametrize("method,rate", [("modulation", 48000.0), ("difference", 96000.0)])
def test_products_of_a_cubic_follow_the_identities(method, rate):
    tw = twin_tone(method)
    a1, a2 = tw.amplitudes(-6.0)
    t = np.arange(int(rate)) / rate
    x = a1 * np.cos(2 * np.pi * tw.f1_hz * t + 0.4) + a2 * np.cos(2 * np.pi * tw.f2_hz * t + 1.1)
    g, k2, k3 = 1.0, 0.03, 0.08
    y = g * x + k2 * x * x + k3 * x ** 3
    r = analyze_imd(y, rate, method=method)
    want, (t1, t2) = _expected(a1, a2, g, k2, k3)
    assert r.a1_fs == pytest.approx(t1, rel=1e-6) and r.a2_fs == pytest.approx(t2, rel=1e-6)
    got = {(p.m, p.n): p.amplitude_fs for p in r.products}
    # at 96 kHz the cubic's 3 f1 (57 kHz) folds onto f1 + f2 (39 kHz): not that one
    checked = [k for k in want if k in got and not (method == "difference" and k in ((1, 1), (2, 1), (1, 2)))]
    assert len(checked) >= (4 if method == "modulation" else 3)
    for key in checked:
        assert got[key] == pytest.approx(want[key], rel=1e-5), key
    if method == "modulation":
        # order 2: the pair at f2 +- f1 over f2; order 3: the pair at f2 +- 2 f1
        assert r.orders[2] == pytest.approx(2 * want[(-1, 1)] / t2, rel=1e-5)
        assert r.orders[3] == pytest.approx(2 * want[(2, -1)] / t2, rel=1e-5)
    else:
        ref = t1 + t2
        assert r.orders[2] == pytest.approx(want[(-1, 1)] / ref, rel=1e-5)
        assert r.orders[3] == pytest.approx((want[(2, -1)] + want[(-1, 2)]) / ref, rel=1e-5)
    assert r.ratio == pytest.approx(math.sqrt(sum(v * v for v in r.orders.values())), rel=1e-12)


@pytest.mark.parametrize("rate, f1, f2", [(44100.0, 18000.0, 19000.0), (44100.0, 19000.0, 20000.0),
                                          (48000.0, 20000.0, 21000.0)])
def test_a_product_above_the_limit_is_named_and_its_order_partial(rate, f1, f2):
    # difference tones high in a 44.1 (48) kHz record: 2 f2 - f1 lies above
    # 0.45 fs and cannot be read; d3 then holds 2 f1 - f2 alone, by the
    # identities (3/4) a3 A1^2 A2 over the sum of the tones, and says it is
    # partial; d2 (f2 - f1: a2 A1 A2) stays whole
    t = np.arange(int(rate)) / rate
    a1 = a2 = 0.25
    x = a1 * np.cos(2 * np.pi * f1 * t) + a2 * np.cos(2 * np.pi * f2 * t + 0.5)
    k2, k3 = 0.02, 0.05
    r = analyze_imd(x + k2 * x * x + k3 * x ** 3, rate, method="difference", f1_hz=f1, f2_hz=f2)
    want, (t1, t2) = _expected(a1, a2, 1.0, k2, k3)
    assert r.orders[2] == pytest.approx(want[(-1, 1)] / (t1 + t2), rel=1e-4)
    assert r.orders[3] == pytest.approx(want[(2, -1)] / (t1 + t2), rel=1e-4)
    assert r.partial_orders == (3,)
    assert any("2f2-f1" in u for u in r.unmeasured)
    d = r.to_dict()
    assert d["partial"] and d["orders"]["3"]["partial"] and not d["orders"]["2"]["partial"]


def test_analyze_difference_on_a_44k_capture_is_no_internal_error(tmp_path):
    # the case: f2 = 20 kHz lies above 0.45 x 44.1 kHz; the tone is
    # still read (with a warning), not looked up after being dropped
    import soundfile as sf

    rate = 44100
    t = np.arange(rate) / rate
    x = 0.25 * np.cos(2 * np.pi * 19000 * t) + 0.25 * np.cos(2 * np.pi * 20000 * t)
    sf.write(tmp_path / "hi.wav", x + 0.02 * x * x, rate, subtype="FLOAT")
    res = run_cli("analyze", str(tmp_path / "hi.wav"), "--imd", "difference", "--json")
    assert res.returncode == 0, res.stderr
    d = json.loads(res.stdout)
    step = d["steps"][0] if "steps" in d else d
    assert step["partial"] and "Traceback" not in res.stderr


def test_a_straight_line_makes_no_products():
    rate = 48000.0
    tw = twin_tone("modulation")
    a1, a2 = tw.amplitudes(-3.0)
    t = np.arange(int(rate)) / rate
    y = 0.7 * (a1 * np.sin(2 * np.pi * 60 * t) + a2 * np.sin(2 * np.pi * 7000 * t)) + 1e-7 * np.random.default_rng(5).standard_normal(t.size)
    r = analyze_imd(y, rate, method="modulation")
    assert r.imd_db < -110.0
    assert all(p.at_floor for p in r.products)


def test_virtual_poly_stage_products_in_volts(tmp_path):
    # the stage sees the drive in volts: 2 V peak per FS at the interface
    # output; the pad is divided out by the bench's scale
    res = run_cli("imd", "--sim", "poly", "--sim-param", "a2=0.1", "--sim-param", "a3=0.2", "--level", "-20dBFS",
                  "--load", "8", "--json")
    assert res.returncode == 0, res.stderr
    d = json.loads(res.stdout)
    assert d["kind"] == "imd" and d["method"] == "modulation" and d["run"]["status"] == "complete"
    step = d["steps"][0]
    a1, a2 = (2.0 * a for a in twin_tone("modulation").amplitudes(-20.0))
    want, _tones = _expected(a1, a2, 10.0, 0.1, 0.2)
    got = {(p["m"], p["n"]): p["vrms"] * math.sqrt(2) for p in step["products"]}
    for key in ((-1, 1), (1, 1), (-2, 1), (2, 1)):
        assert 20 * math.log10(got[key] / want[key]) == pytest.approx(0.0, abs=0.1), key
    # the composite's peak at the stage: gain 10 x 2 V x 10^(-20/20)
    assert step["peak_v"] == pytest.approx(2.0, rel=0.01)
    assert step["equivalent_power_w"] == pytest.approx(step["peak_v"] ** 2 / 16, rel=1e-9)
    folder = the_run(tmp_path / "bench")
    assert {"capture.wav", "capture.json", "capture.imd.json", "capture.imd.csv", "capture.imd.png"} <= {p.name for p in folder.iterdir()}
    again = run_cli("log", "reanalyse", "last", "--json")
    assert again.returncode == 0, again.stderr
    assert json.loads(again.stdout)["steps"][0]["imd_db"] == pytest.approx(step["imd_db"], abs=1e-9)


def test_difference_method_at_96k_with_a_clock_offset(tmp_path):
    # 19 + 20 kHz at 1:1; the input clock 40 ppm fast: the tones are found
    # where they landed (the bench resamples by the nearest ratio p/q it can,
    # kept as effective_clock_ppm) and the products read there
    bench = virtual_bench("poly", {"gain": 10.0, "a2": 0.1, "a3": 0.2}, seed=4, sample_rate_hz=96000.0, clock_ppm=40.0)
    result = imd_run(bench, tmp_path, twin_tone("difference"), [-20.0])
    r = result.steps[0].result
    assert bench.effective_clock_ppm == pytest.approx(40.0, abs=15.0)
    assert r.f2_hz == pytest.approx(20000.0 / (1 + bench.effective_clock_ppm * 1e-6), abs=0.005)
    a1, a2 = (2.0 * a for a in twin_tone("difference").amplitudes(-20.0))
    want, _tones = _expected(a1, a2, 10.0, 0.1, 0.2)
    got = {(p.m, p.n): p.amplitude_fs * r.volts_per_fs for p in r.products}
    for key in ((-1, 1), (2, -1), (-1, 2)):
        assert 20 * math.log10(got[key] / want[key]) == pytest.approx(0.0, abs=0.1), key
    assert not result.warnings


def test_imd_against_level_grows_as_its_order(tmp_path):
    # order 2 of the modulation method is 2 a2 A1 / g: up 1 dB a dB of
    # drive; order 3 is (3/2) a3 A1^2 / g: up 2 dB a dB
    bench = virtual_bench("poly", {"gain": 10.0, "a2": 0.1, "a3": 1.0}, seed=6)
    result = imd_run(bench, tmp_path, twin_tone("modulation"), [-26.0, -16.0])
    low, high = (s.result for s in result.steps)
    assert 20 * math.log10(high.orders[2] / low.orders[2]) == pytest.approx(10.0, abs=0.2)
    assert 20 * math.log10(high.orders[3] / low.orders[3]) == pytest.approx(20.0, abs=0.5)
    assert result.top().drive_dbfs == -16.0


def test_imd_runs_compare(tmp_path):
    # with a3 = 0 the total is order 2 alone, proportional to a2: halving
    # a2 lowers it by 20 log10(2) = 6.02 dB
    for a2 in ("0.1", "0.05"):
        res = run_cli("imd", "--sim", "poly", "--sim-param", f"a2={a2}", "--level", "-20dBFS", "--tag", f"a2={a2}")
        assert res.returncode == 0, res.stderr
    comp = run_cli("compare", "--last", "2", "--json")
    assert comp.returncode == 0, comp.stderr
    deltas = {d["name"]: d for d in json.loads(comp.stdout)["deltas"]}
    assert deltas["imd_db"]["changes"][0] == pytest.approx(-6.02, abs=0.1)
    assert deltas["imd_db"]["verdicts"][0] == "better"
    listed = run_cli("log", "list")
    assert "IMD" in listed.stdout  # what was asked for: stdout


@pytest.mark.parametrize("args,needle", [
    (("--tones", "7000:60"), "below F2"),
    (("--method", "beat"), "modulation or difference"),
    (("--tones", "60"), "F1:F2"),
])
def test_bad_imd_input_is_one_line(args, needle):
    res = run_cli("imd", *args)
    assert res.returncode == 1
    assert needle in res.stderr and "Traceback" not in res.stderr


def test_the_imd_table_keeps_the_peak_and_shows_its_sine_in_the_unit_chosen(tmp_path):
    # a two-tone's peak is a peak: its column stays in volts peak whatever --levels-in says; the level in the
    # chosen unit is a column of its own, named as the sine whose peak is the composite's
    # (dBu = 20 log10(Vrms / 0.7746 V); a sine's RMS is its peak / sqrt(2))
    plain = run_cli("imd", "--level", "-20dBFS", "--load", "8", "--json")
    assert plain.returncode == 0, plain.stderr
    assert "peak at stage (Vpk)" in plain.stderr and "sine of that peak" not in plain.stderr
    res = run_cli("imd", "--level", "-20dBFS", "--load", "8", "--levels-in", "dBu", "--json")
    assert res.returncode == 0, res.stderr
    peak = json.loads(res.stdout)["steps"][0]["peak_v"]
    lines = res.stderr.splitlines()
    at = next(i for i, line in enumerate(lines) if "sine of that peak (dBu)" in line)
    assert "peak at stage (Vpk)" in lines[at]
    cells = lines[at + 1].split()
    assert float(cells[1]) == pytest.approx(peak, abs=0.0006)
    assert float(cells[2]) == pytest.approx(20 * math.log10(peak / math.sqrt(2) / 0.7746), abs=0.006)
