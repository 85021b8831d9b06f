"""Power at a set distortion, the clipping onset and half, and the stage
budget, against circuit theory, the textbook class-A analysis of
REFERENCES.md, hand-worked cases and a direct Fourier-series solution.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.integrate
import scipy.optimize

from benchkit.analysis import power
from benchkit.analysis.tone import analyze_tone
from benchkit.budget import ClassABudget, sense_resistor
from benchkit.capture.stages import make_stage

RATE = 48000
F0 = 997.0


# --- the budget: hand-worked cases ----------------------------------------------------


def test_budget_of_the_demo_stage_by_hand():
    # 24 V rail, 0.8 A bias, 8 ohm, 1 V saturation: I R = 6.4 V < 24/2 - 1 = 11 V,
    # so the positive (current-limited) half clips first; P = 6.4^2 / (2 x 8) = 2.56 W
    b = ClassABudget(24.0, 0.8, 8.0, 1.0)
    assert b.current_limited_vpk == pytest.approx(6.4) and b.rail_limited_vpk == pytest.approx(11.0)
    assert b.limiting_half == "positive"
    assert b.max_sine_w == pytest.approx(2.56)
    assert b.supply_w == pytest.approx(19.2) and b.idle_dissipation_w == pytest.approx(19.2)
    assert b.max_efficiency_pct == pytest.approx(100 * 2.56 / 19.2)
    # 4 W into 8 ohm needs Vpk = sqrt(2 x 4 x 8) = 8 V: 1.0 A, and a rail of 2 (8 + 1) = 18 V
    assert b.bias_for(4.0) == pytest.approx(1.0) and b.rail_for(4.0) == pytest.approx(18.0)
    # at 1.6 A the current limit (12.8 V) passes the rail limit: each half
    # ends at a rail, 24/2 - 1 = 11 V both ways, and they clip together
    b16 = ClassABudget(24.0, 1.6, 8.0, 1.0)
    assert b16.limiting_half == "symmetric"
    assert b16.positive_vpk == pytest.approx(11.0) and b16.negative_vpk == pytest.approx(11.0)
    # at 2 A (16 V by the current) the rail still holds the positive swing to 11 V
    b2 = ClassABudget(24.0, 2.0, 8.0, 1.0)
    assert b2.positive_vpk == pytest.approx(11.0) and b2.max_sine_w == pytest.approx(11.0**2 / 16)


def test_class_a_efficiency_is_at_most_a_quarter():
    # textbook class-A analysis: at I = V / (2 R) and no saturation, P = V^2 / (8 R) of V^2 / (2 R): 25 %
    assert ClassABudget(24.0, 1.5, 8.0, 0.0).max_efficiency_pct == pytest.approx(25.0)
    for bias in np.linspace(0.2, 3.0, 15):
        assert ClassABudget(24.0, float(bias), 8.0, 0.0).max_efficiency_pct <= 25.0 + 1e-9


def test_sense_resistor_by_hand():
    # common practice: the limiter's V_BE is about 0.65 V: 1.5 A needs 0.65 / 1.5 = 0.433 ohm, 0.975 W in it
    s = sense_resistor(1.5)
    assert s["sense_ohms"] == pytest.approx(0.4333, abs=1e-4) and s["sense_w"] == pytest.approx(0.975)


# --- interpolation and onset ----------------------------------------------------------------


def test_power_at_limit_is_exact_on_a_power_law():
    # between two steps on a straight line in log-log, the log interpolation is exact
    p = np.array([0.5, 0.9, 1.7, 2.6, 3.4])
    m = 1.0 * (p / 2.0) ** 1.5  # 1 % exactly at 2 W
    v = np.sqrt(p * 8.0)
    pt = power.power_at_limit(v, p, m, 1.0)
    assert pt.power_w == pytest.approx(2.0, rel=1e-12) and (pt.below, pt.above) == (2, 3)
    assert pt.vrms == pytest.approx(4.0, rel=1e-12)
    assert power.power_at_limit(v, p, m, 50.0) is None


def test_power_at_limit_skips_the_noise_at_the_lowest_steps():
    v = np.geomspace(0.05, 5.0, 41)
    m = np.hypot(0.002 / v, 0.02 * v)  # noise falling, distortion rising
    m[0] = 0.5  # a noisy first step already over 0.1 %
    pt = power.power_at_limit(v, v**2 / 8, m, 0.1)
    assert pt.vrms == pytest.approx(5.0 / 1.0, rel=0.05)  # 0.02 V = 0.1 % at V = 5


def test_clipping_onset_finds_the_knee():
    # noise and a growing H2, then a hard knee at 6.4 V peak (4.525 Vrms)
    v = np.geomspace(0.05, 6.0, 60)
    knee = 6.4 / math.sqrt(2)
    m = np.hypot(0.004 / v, 0.01 * v) + np.where(v > knee, 30.0 * (v / knee - 1), 0.0)
    on = power.clipping_onset(v, v**2 / 8, m)
    assert on.vrms == pytest.approx(knee, rel=0.05)


# --- against a direct Fourier-series solution ---------------------------------------------------


def _clipped_harmonics(amp: float, orders: int) -> np.ndarray:
    """Fourier-series sine amplitudes of amp sin(t) clipped at +-1, by quadrature."""
    def b(k):
        return 2 / math.pi * scipy.integrate.quad(lambda t: np.clip(amp * math.sin(t), -1, 1) * math.sin(k * t),
                                                  0, math.pi, limit=200)[0]
    return np.array([b(k) for k in range(1, orders + 1)])


def test_hard_clip_power_at_one_percent_matches_the_fourier_series():
    # THD over the harmonics in the 20 kHz band (H2..H20 at 997 Hz); the
    # clipped sine's series solved for THD = 1 % directly
    def thd(amp):
        b = _clipped_harmonics(amp, 20)
        return math.sqrt(np.sum(b[1:] ** 2)) / b[0]

    amp = scipy.optimize.brentq(lambda a: thd(a) - 0.01, 1.0001, 2.0, xtol=1e-10)
    want_w = _clipped_harmonics(amp, 1)[0] ** 2 / 2 / 8.0
    # a stepped-level run by hand: 0.25 dB steps through the clip, each analysed by the tone core
    t = np.arange(int(0.5 * RATE)) / RATE
    steps = []
    for db in np.arange(-6.0, 4.0, 0.25):
        a = 10 ** (db / 20)
        x = np.clip(a * np.sin(2 * np.pi * F0 * t), -1, 1)
        steps.append((db, analyze_tone(x, RATE, fundamental_hz=F0, volts_per_fs=1.0, load_ohms=8.0)))
    r = power.analyze_power(steps, load_ohms=8.0, metric="thd",
                            samples_of=lambda i: (np.clip(10 ** (steps[i][0] / 20) * np.sin(2 * np.pi * F0 * t), -1, 1), 0.0))
    assert r.rated.power_w == pytest.approx(want_w, rel=0.01)
    assert r.half == "symmetric"
    d = r.to_dict()
    assert d["kind"] == "power" and d["limit_metric"] == "thd" and set(d["power_at_limit_w"]) == {"1", "0.1", "10"}


@pytest.mark.parametrize("bias, half", [(0.8, "positive"), (1.6, "symmetric"), (2.0, "symmetric")])
def test_se_class_a_clips_the_half_the_budget_says(bias, half):
    # the model's transfer past its limits: the current-limited half when
    # I R is below the rail limit, both halves at the rails when above
    stage = make_stage("se-class-a", {"bias": bias, "noise_uv": 0.0, "ripple_mv": 0.0})
    rate = 8 * RATE
    t = np.arange(int(0.4 * rate)) / rate
    budget = ClassABudget(24.0, bias, 8.0, 1.0)
    vin = 1.3 * budget.peak_vpk / 10.0  # 30 % past the ceiling, gain 10
    out = stage.process(vin * np.sin(2 * np.pi * F0 * t), rate)[len(t) // 2:]
    assert budget.limiting_half == half
    assert power.clipping_half(out, float(np.mean(out))) == half


# --- the se-class-a stage through the virtual bench -----------------------------------------


def _stepped_power(tmp_path, bias: float, name: str):
    """An adaptive power run of B-2 at ``bias`` on the virtual bench, with
    the defaults (1 dB steps from 40 dB below the budget's ceiling), into 8 ohm."""
    from benchkit.capture.virtual import virtual_bench
    from benchkit.kinds.power import power_run

    budget = ClassABudget(24.0, bias, 8.0, 1.0)
    knee = 20 * math.log10(budget.peak_vpk / 20.0)  # gain 10, 2 V peak per FS at the output
    bench = virtual_bench("se-class-a", {"bias": bias, "ripple_mv": 0.0}, seed=3)
    folder = tmp_path / name
    folder.mkdir()
    r = power_run(bench, folder, F0, knee - 40.0, -3.0, 8.0, ref_channel=2, supply_v=24.0, supply_a=bias,
                  budget=budget)
    return budget, r


def _model_power_at(bias: float, thd_pct: float) -> float:
    """The model's own power at a THD, found densely from its transfer
    (no interface, no run): numpy least squares for H1..H20 of the output,
    bisection on the level."""
    stage = make_stage("se-class-a", {"bias": bias, "noise_uv": 0.0, "ripple_mv": 0.0})
    rate = 8 * RATE
    t = np.arange(int(0.3 * rate)) / rate
    keep = slice(len(t) // 2, None)
    basis = np.concatenate([np.stack([np.sin(2 * np.pi * k * F0 * t[keep]), np.cos(2 * np.pi * k * F0 * t[keep])], 1)
                            for k in range(1, 21)] + [np.ones((t[keep].size, 1))], axis=1)

    def thd_and_power(vin_pk):
        stage.reset()
        out = stage.process(vin_pk * np.sin(2 * np.pi * F0 * t), rate)[keep]
        c, *_ = np.linalg.lstsq(basis, out, rcond=None)
        amp = np.hypot(c[0:40:2], c[1:40:2])
        return 100 * math.sqrt(np.sum(amp[1:] ** 2)) / amp[0], amp[0] ** 2 / (2 * 8.0)

    vin = scipy.optimize.brentq(lambda a: thd_and_power(a)[0] - thd_pct, 0.3, 1.2, xtol=1e-6)
    return thd_and_power(vin)[1]


def test_se_class_a_power_onset_half_and_efficiency(tmp_path):
    low_b, low = _stepped_power(tmp_path, 0.8, "b08")
    # textbook class A: the positive, current-limited half clips first at 0.8 A
    assert low.half == "positive"
    # the onset within 5 % of the budget's I x R ceiling
    assert low.onset.power_w == pytest.approx(low_b.max_sine_w, rel=0.05)
    # the power at 1 % THD+N within 2 % of the model's own dense solution
    assert low.rated.power_w == pytest.approx(_model_power_at(0.8, 1.0), rel=0.02)
    # efficiency never above the 25 % of class A (REFERENCES.md)
    d = low.to_dict()
    assert max(s["efficiency_pct"] for s in d["steps"]) <= 25.0
    assert d["efficiency_pct"] == pytest.approx(100 * low.rated.power_w / 19.2)
    assert low.info["stop_reason"].startswith("every limit is bracketed")
    for lim, pt in low.limits:  # bisection brackets every limit within 0.1 dB
        assert 20 * math.log10(low.steps[pt.above].vrms / low.steps[pt.below].vrms) <= 0.11
    # raising the bias raises the ceiling as the budget predicts
    high_b, high = _stepped_power(tmp_path, 1.2, "b12")
    assert high.onset.power_w / low.onset.power_w == pytest.approx(high_b.max_sine_w / low_b.max_sine_w, rel=0.05)


def test_the_planner_climbs_then_bisects_each_limit():
    from benchkit.kinds.power import LevelPlanner

    # a stage whose THD+N in % is 0.01 x 10^(level/20) x 100, clipping hard above -10 dBFS
    def thdn(level):
        return 100 * 0.0005 * 10 ** ((level + 40) / 20) * (1 if level < -10 else 10 ** ((level + 10) * 2))

    plan = LevelPlanner(-40.0, -0.5, (1.0, 0.1, 10.0))
    level, seen = plan.first(), []
    while level is not None:
        seen.append(level)
        level = plan.next(level, thdn(level))
    assert seen[:3] == [-40.0, -39.0, -38.0]  # 1 dB steps while it rises slowly
    assert plan.reason.startswith("every limit is bracketed")
    pts = sorted((lv, thdn(lv)) for lv in seen)
    for lim in (0.1, 1.0, 10.0):
        above = next(i for i, (_lv, m) in enumerate(pts) if m >= lim)
        assert pts[above][0] - pts[above - 1][0] <= 0.1 + 1e-9
    stuck = LevelPlanner(-20.0, -18.0, (1.0,))
    assert stuck.next(-20.0, 0.01) == -19.0 and stuck.next(-19.0, 0.01) == -18.0
    assert stuck.next(-18.0, 0.01) is None and "drive limit" in stuck.reason


def test_budget_and_power_commands(tmp_path):
    import json

    from conftest import run_cli

    res = run_cli("budget", "--rail", "24", "--bias", "0.8", "--load", "8", "--target-power", "4",
                  "--limit-current", "1.5", "--json")
    assert res.returncode == 0, res.stderr
    d = json.loads(res.stdout)
    assert d["kind"] == "budget" and d["max_sine_w"] == pytest.approx(2.56) and d["target"]["bias_a"] == pytest.approx(1.0)
    assert run_cli("budget", "--rail", "24", "--bias", "0").returncode == 1
    # a stepped capture analysed for power offline: the sample with four levels, the top one past the limit
    from pathlib import Path

    sample = str(Path(__file__).resolve().parents[1] / "sample_captures" / "b2-bias0.8A-997Hz-steps.wav")
    off = run_cli("analyze", sample, "--as", "power", "--load", "8", "--rail", "24", "--bias", "0.8", "--json",
                  "--out", str(tmp_path / "rep"))
    assert off.returncode == 0, off.stderr
    p = json.loads(off.stdout)
    assert p["kind"] == "power" and len(p["steps"]) == 4 and p["expected"]["max_sine_w"] == pytest.approx(2.56)
    assert (tmp_path / "rep" / "b2-bias0.8A-997Hz-steps.power.png").exists()
    bad = run_cli("analyze", sample, "--as", "power")
    assert bad.returncode == 1 and "--load" in bad.stderr


def test_hard_clip_model_power_run_matches_the_fourier_series(tmp_path):
    # the virtual bench's hard-clip stage (gain 10, clipping at 9.5 V) through
    # an adaptive run: THD crosses 1 % where the clipped sine's series says
    from benchkit.capture.virtual import virtual_bench
    from benchkit.kinds.power import power_run

    def thd(amp):
        b = _clipped_harmonics(amp, 20)
        return math.sqrt(np.sum(b[1:] ** 2)) / b[0]

    amp = scipy.optimize.brentq(lambda a: thd(a) - 0.01, 1.0001, 2.0, xtol=1e-10)
    want_w = (9.5 * _clipped_harmonics(amp, 1)[0]) ** 2 / 2 / 8.0
    bench = virtual_bench("hard-clip", {"gain": 10.0, "vclip": 9.5}, seed=4)
    r = power_run(bench, tmp_path, F0, 20 * math.log10(9.5 / 20) - 25.0, -3.0, 8.0, ref_channel=2, metric="thd",
                  limits_pct=(1.0,))
    assert r.rated.power_w == pytest.approx(want_w, rel=0.01)
    assert r.half == "symmetric"


@pytest.mark.parametrize("reported", [True, False], ids=["reported", "unreported"])
def test_a_dropout_in_an_adaptive_step_is_played_again(tmp_path, monkeypatch, reported):
    # the run above, with 10 ms lost mid-way through its third step (said by
    # the stream, or only heard: a late client on an audio server): that
    # step is played again at its level, and the power at 1 % THD is the
    # Fourier series' as before
    from benchkit.capture.virtual import virtual_bench
    from benchkit.kinds.power import AdaptiveSteps, power_run

    heard = AdaptiveSteps.listen
    lost = []

    def listen(self, block, pos):
        if self.latency is not None and len(self.segments) == 3 and not lost:
            seg = self.segments[2]
            mid = (seg.settled + seg.end) // 2 + self.latency
            if pos <= mid < pos + block.shape[0]:
                lost.append(mid)
                if reported:  # the stream's word alone (the samples stay whole)
                    self.fault(mid, 256)
                else:  # in place: the recording keeps the gap too
                    block[mid - pos : mid - pos + int(0.01 * self.sample_rate_hz)] = 0.0
        heard(self, block, pos)

    monkeypatch.setattr(AdaptiveSteps, "listen", listen)
    amp = scipy.optimize.brentq(lambda a: math.sqrt(np.sum(_clipped_harmonics(a, 20)[1:] ** 2))
                                / _clipped_harmonics(a, 20)[0] - 0.01, 1.0001, 2.0, xtol=1e-10)
    want_w = (9.5 * _clipped_harmonics(amp, 1)[0]) ** 2 / 2 / 8.0
    bench = virtual_bench("hard-clip", {"gain": 10.0, "vclip": 9.5}, seed=4)
    r = power_run(bench, tmp_path, F0, 20 * math.log10(9.5 / 20) - 25.0, -3.0, 8.0, ref_channel=2, metric="thd",
                  limits_pct=(1.0,))
    assert lost, "the gap was not made"
    assert r.rated.power_w == pytest.approx(want_w, rel=0.01)
    # the spoiled take is left out: every reported step is a clean one
    assert all(s.valid for s in r.steps)
    assert any("played again" in w for w in r.warnings)


def test_a_run_that_would_clip_the_input_stops_before_it_does(tmp_path):
    # no pad: the stage's 11 V peak would reach 5.5x the input's 2 V full
    # scale; the check before each step ends the run with every step clean
    from benchkit.capture.virtual import virtual_bench
    from benchkit.kinds.power import power_run

    bench = virtual_bench("se-class-a", {"bias": 0.8}, pad=None, seed=5)
    r = power_run(bench, tmp_path, F0, -40.0, -0.5, 8.0, ref_channel=2)
    assert "would reach" in r.info["stop_reason"]
    assert all(s.valid for s in r.steps) and max(s.vrms for s in r.steps) * math.sqrt(2) < 2.0


def test_preconditioning_in_the_manner_of_16_cfr_432():
    # 16 CFR 432.3: 1/8 of the rated power for one hour before the test.
    # 2.5 W rated into 8 ohm: 0.3125 W, Vpk = sqrt(2 x 0.3125 x 8) = 2.236 V;
    # at 20 V peak per FS of drive (gain 10, 2 V per FS), 20 log10(2.236 / 20) dBFS
    from benchkit.capture.virtual import virtual_bench
    from benchkit.kinds.power import precondition

    bench = virtual_bench("se-class-a", {"bias": 0.8})
    got = precondition(bench, F0, 2.5, 8.0, 20.0)
    assert got["preconditioning"]["power_w"] == pytest.approx(0.3125)
    assert got["preconditioning"]["level_dbfs"] == pytest.approx(20 * math.log10(math.sqrt(5.0) / 20), abs=1e-9)
    assert got["preconditioning"]["seconds"] == 3600.0 and not got["preconditioning"]["shortened"]
    assert got["all_channels_driven"]
    # the stage has warmed for the hour: its junction near its steady rise (tau 240 s)
    op = bench.stage.operating_point()
    assert op["time_s"] == pytest.approx(3600.0) and op["junction_c"] > 23.0 + 0.99 * 1.5 * 12 * 0.8
