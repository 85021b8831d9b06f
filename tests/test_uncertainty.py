"""Uncertainty of every figure, and comparisons that tell a change from noise.

Outside references: the GUM (JCGM 100:2008: 4.2 the mean's type A, 4.3.7
a stated tolerance as a rectangular distribution, 5.1.2 and 5.1.6 the
combination, 5.2 correlated inputs, 6.2-6.3 the coverage factor; section
numbers from memory) with the worked values of ../shared/REFERENCES.md
(computed there from those formulas); the Cramer-Rao bound of a sine's
amplitude in white Gaussian noise, 2 sigma^2 / N (IEEE Std 1057 Annex;
Kay, Fundamentals of Statistical Signal Processing vol. 1, from memory);
the band power of white noise from Parseval's theorem; numpy's Gaussian
generator for the noise. Monte Carlo runs use fixed seeds.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest

import benchkit
from benchkit.analysis import uncertainty as ua
from benchkit.analysis.compare import IN_NOISE, WITHIN, Delta, Figure, compare
from benchkit.analysis.imd import analyze_imd
from benchkit.analysis.weighting import a_weighting_power
from benchkit.kinds import get as kind_of

from conftest import run_cli


# --- the combination against worked values -----------------------------------------

def test_a_stated_tolerance_is_rectangular():
    # JCGM 100 4.3.7: +-1 % with nothing else known gives u = 0.5774 %
    assert ua.rectangular(0.01) == pytest.approx(0.005774, abs=1e-6)


def test_the_mean_of_readings_and_its_type_a_uncertainty():
    # JCGM 100 4.2: u = s / sqrt(n), s with n - 1 degrees of freedom
    mean, u = ua.mean_and_u([1.00, 1.02, 0.98, 1.01, 0.99])
    assert mean == pytest.approx(1.0) and u == pytest.approx(math.sqrt(0.001 / 4) / math.sqrt(5))


def test_watts_from_volts_and_a_load_combine_as_a_product_of_powers():
    # REFERENCES.md: P = V^2 / R, V = 2.828427 Vrms (u 0.010 V), R = 8.000 ohm (u 0.040 ohm):
    # u_c / P = 0.8660 % (JCGM 100 5.1.6)
    chain = ua.Chain(calibration=0.010 / 2.828427, load=0.040 / 8.0)
    assert chain.watts(None).u == pytest.approx(0.008660, abs=2e-6)
    watts = benchkit.analyze_tone(2.828427 * math.sqrt(2) / 10 * np.sin(2 * np.pi * 1000 * np.arange(48000) / 48000),
                                  48000, volts_per_fs=10.0, load_ohms=8.0, chain=chain)
    assert watts.power_w == pytest.approx(1.0, rel=1e-5)
    # the clean tone's own noise is nil: the chain's 0.866 % is all of it
    assert watts.uncertainty["standard"]["power_w"] == pytest.approx(0.00866, rel=1e-3)
    assert watts.uncertainty["dominant"]["power_w"] == "calibration"


def test_a_pads_ratio_from_its_resistors_tolerance():
    # REFERENCES.md: k = (R1 + R2) / R2, 1800 and 200 ohm each +-1 % rectangular:
    # k = 10.000, u_c(k) = 0.07348 (0.7348 %), 0.0636 dB (JCGM 100 5.1.2 and 4.3.7)
    rel = ua.pad_ratio_rel(1800.0, 200.0, 1.0)
    assert 10.0 * rel == pytest.approx(0.07348, abs=1e-5)
    # in dB: 20 log10(1 + 0.007348) = 0.0636 there; GUM's sensitivity 20 / ln 10 x u_rel gives 0.0638
    assert ua.db_from_rel(rel) == pytest.approx(0.0636, abs=3e-4)
    assert ua.db_from_rel(rel) == pytest.approx(20 / math.log(10) * 0.007348, abs=1e-5)


def test_relative_to_db_and_the_expanded_uncertainty():
    # REFERENCES.md: u_dB = 20 / ln 10 x u_rel = 8.686 x u_rel; U = k u, k = 2 (JCGM 100 6.2-6.3)
    assert ua.db_from_rel(0.01) == pytest.approx(0.08686, abs=1e-5)
    assert ua.Budget.of(noise=0.03, pad=0.04).expanded() == pytest.approx(0.10)


def test_what_two_runs_on_one_chain_share_cancels_in_their_difference():
    # JCGM 100 5.2: correlation +1, the shared calibration drops out of the difference
    d = Delta("power_w", "power", "W", "", (6.00, 6.05), "higher", us=(0.05, 0.05), shared=(0.049, 0.049))
    assert d.change_u(1) == pytest.approx(2 * math.sqrt(2 * (0.05**2 - 0.049**2)))
    assert d.verdict(1) == "better"
    other = Delta("power_w", "power", "W", "", (6.00, 6.05), "higher", us=(0.05, 0.05), shared=(0.049, 0.049),
                  same_chain=False)
    assert other.change_u(1) == pytest.approx(2 * math.sqrt(2) * 0.05) and other.verdict(1) == WITHIN


def test_the_windows_bin_correlation():
    # the Hann window's w^2 = 3/8 - cos/2 + cos2/8: rho(+-1) = -2/3, rho(+-2) = 1/6, sum of squares 35/18 (calculus)
    assert ua.bin_correlation((0.5, 0.5)) == pytest.approx(35 / 18)
    assert ua.bin_correlation((1.0,)) == pytest.approx(1.0)


# --- type A against the Cramer-Rao bound and by Monte Carlo ---------------------------

def _coverage(z) -> np.ndarray:
    return np.mean(np.abs(np.asarray(z)) <= ua.COVERAGE, axis=0)


def test_the_amplitudes_uncertainty_is_the_cramer_rao_bound():
    # IEEE 1057 Annex / Kay vol. 1: var(A) >= 2 sigma^2 / N for a sine in white noise; the
    # least-squares fit meets it, and the reported u says so
    rng = np.random.default_rng(11)
    n, sigma, amp = 48000, 1e-3, 0.5
    t = np.arange(n) / 48000
    reported, got = [], []
    for _ in range(200):
        r = benchkit.analyze_tone(amp * np.sin(2 * np.pi * 997 * t + rng.uniform(0, 6.3)) + rng.normal(0, sigma, n), 48000)
        reported.append(ua.rel_from_db(r.uncertainty["standard"]["fundamental_dbfs"]) * amp)
        got.append(r.fundamental_fs)
    crb = math.sqrt(2 * sigma**2 / n)
    assert np.sqrt(np.mean(np.square(reported))) == pytest.approx(crb, rel=0.05)
    assert np.std(got, ddof=1) == pytest.approx(crb, rel=0.15)  # 200 draws: the scatter's own +-5 %, thrice


def test_the_k2_interval_covers_a_tones_figures_95_percent_of_the_time():
    # 500 realisations of a tone with a harmonic well above white noise: the fundamental's
    # level, THD+N (harmonic and noise: power sum, Parseval) and H2 each covered 95 % +- 3 %
    rng = np.random.default_rng(7)
    fs, n, amp, h2, sigma = 48000, 12000, 0.5, 0.005, 2e-3
    t = np.arange(n) / fs
    noise_in_band = sigma**2 * (20000 - 20) / (fs / 2)
    truth = (20 * math.log10(amp), 10 * math.log10((noise_in_band + h2**2 / 2) / (amp**2 / 2)), 20 * math.log10(h2 / amp))
    z = []
    for _ in range(500):
        ph = rng.uniform(0, 2 * np.pi)
        x = amp * np.sin(2 * np.pi * 997 * t + ph) + h2 * np.sin(2 * np.pi * 1994 * t + 2 * ph + 0.3)
        r = benchkit.analyze_tone(x + rng.normal(0, sigma, n), fs)
        u = r.uncertainty["standard"]
        z.append([(r.fundamental_dbfs - truth[0]) / u["fundamental_dbfs"], (r.thdn_db - truth[1]) / u["thdn_db"],
                  (r.harmonics[0].level_dbc - truth[2]) / u["harmonics.level_dbc"][0]])
    assert _coverage(z) == pytest.approx([0.95, 0.95, 0.95], abs=0.03)


def test_the_k2_interval_covers_a_noise_records_level_95_percent_of_the_time():
    # white noise of known variance: its band power (Parseval) and A-weighted power (IEC 61672-1's
    # curve integrated) covered 95 % +- 3 % by the Welch estimate's interval
    rng = np.random.default_rng(3)
    fs, sigma = 48000, 1e-3
    f = np.linspace(20, 20000, 200001)
    truth = (10 * math.log10(2 * sigma**2 * (20000 - 20) / (fs / 2)),
             10 * math.log10(2 * sigma**2 / (fs / 2) * np.trapezoid(a_weighting_power(f), f)))  # dBFS: re a full-scale sine
    z = []
    for _ in range(500):
        d = benchkit.analyze_noise(rng.normal(0, sigma, fs), fs).to_dict()
        u = d["uncertainty"]["standard"]
        z.append([(d["noise_dbfs"] - truth[0]) / u["noise_dbfs"], (d["noise_a_dbfs"] - truth[1]) / u["noise_a_dbfs"]])
    assert _coverage(z) == pytest.approx([0.95, 0.95], abs=0.03)


def test_an_intermodulation_ratios_uncertainty_matches_its_scatter():
    # SMPTE-style pair with a square-law stage: the order-2 sidebands' ratio scatters as reported
    rng = np.random.default_rng(2)
    fs = 48000
    t = np.arange(fs) / fs
    clean = 0.4 * np.sin(2 * np.pi * 60 * t) + 0.1 * np.sin(2 * np.pi * 7000 * t)
    clean = clean + 0.002 * clean**2
    got, reported = [], []
    for _ in range(200):
        d = analyze_imd(clean + rng.normal(0, 1e-4, fs), fs, method="modulation").to_dict()
        got.append(d["orders"]["2"]["db"])
        reported.append(d["uncertainty"]["standard"]["orders.2.db"])
    assert np.std(got, ddof=1) == pytest.approx(np.mean(reported), rel=0.15)
    assert "orders.5.db" in d["uncertainty"]["bounds"]  # the 5th order lies in the noise: a bound, no u


def test_a_harmonic_below_the_noise_is_a_bound_with_no_uncertainty():
    rng = np.random.default_rng(5)
    t = np.arange(48000) / 48000
    r = benchkit.analyze_tone(0.5 * np.sin(2 * np.pi * 1000 * t) + rng.normal(0, 1e-3, t.size), 48000)
    d = r.to_dict()
    assert d["thd_upper_bound"] and "thd_db" in d["uncertainty"]["bounds"] and "thd_db" not in d["uncertainty"]["standard"]
    assert all(u is None for u in d["uncertainty"]["standard"]["harmonics.level_dbc"])


# --- comparisons ----------------------------------------------------------------------

def test_a_bound_against_a_bound_is_in_the_noise_and_a_reading_clear_above_one_is_worse():
    lower = dict(unit="dB", at="", better="lower")
    assert Delta("imd3", "IMD 3", values=(-94.5, -93.7), bounds=(True, True), us=(None, None), **lower).verdict(1) == IN_NOISE
    assert Delta("imd3", "IMD 3", values=(-94.5, -80.0), bounds=(True, False), us=(None, 0.2), **lower).verdict(1) == "worse"
    assert Delta("imd3", "IMD 3", values=(-94.5, -94.0), bounds=(True, False), us=(None, 0.5), **lower).verdict(1) == IN_NOISE


def test_figures_carry_their_uncertainty_into_a_comparison():
    t = np.arange(48000) / 48000
    docs = []
    for seed, h2 in ((1, 0.001), (2, 0.001), (3, 0.004)):
        x = 0.5 * np.sin(2 * np.pi * 1000 * t) + h2 * np.sin(2 * np.pi * 2000 * t)
        x = x + np.random.default_rng(seed).normal(0, 3e-4, t.size)
        r = benchkit.analyze_tone(x, 48000)
        step = {"drive_dbfs": -6.0, **r.to_dict()}
        docs.append({"kind": "tone", "frequency_hz": 1000.0, "steps": [step],
                     "uncertainty": ua.stacked("steps", [step.pop("uncertainty")])})
    figures = kind_of("tone").figures
    same = {d.name: d for d in compare(docs[:2], ["a", "b"], figures).deltas}
    assert same["thdn_db"].verdict(1) == WITHIN and same["h2_dbc@-6dBFS"].verdict(1) == WITHIN
    worse = {d.name: d for d in compare([docs[0], docs[2]], ["a", "c"], figures).deltas}
    assert worse["h2_dbc@-6dBFS"].verdict(1) == "worse" and worse["thdn_db"].verdict(1) == "worse"
    assert isinstance(figures(docs[0])[0], Figure) and figures(docs[0])[0].u is not None


def _measure(bench, *args):
    res = run_cli(*args, "--bench", str(bench), "--json")
    assert res.returncode == 0, res.stderr
    return json.loads(res.stdout)


def test_the_same_stage_with_fresh_noise_is_within_uncertainty_and_a_bias_change_is_reported(tmp_path):
    # the virtual bench's stage measured twice with other noise (seeds), then with more bias:
    # the first pair differs by noise alone, so no figure may be called better or worse
    bench = tmp_path / "bench"
    for seed, bias in (("1", "0.8"), ("2", "0.8"), ("3", "1.2")):
        for kind in (("tone", "--level", "-20dBFS", "--level", "-12dBFS", "--load", "8"),
                     ("imd", "--level", "-20dBFS", "--load", "8"), ("noise", "--duration", "2", "--load", "8")):
            _measure(bench, *kind, "--seed", seed, "--sim-param", f"bias={bias}", "--tag", f"take={seed}")
    for kind in ("tone", "imd", "noise"):
        fresh = _measure(bench, "compare", "--command", kind, "--last", "3")
        verdicts = [(d["name"], d["verdicts"][0]) for d in fresh["deltas"] if d["better"]]
        called = [(n, v) for n, v in verdicts if v not in (WITHIN, IN_NOISE)]
        assert verdicts and not called, (kind, called)
        assert all(d["change_expanded_uncertainties"][0] is not None for d in fresh["deltas"]
                   if d["better"] and d["verdicts"][0] == WITHIN)
        if kind == "tone":  # more bias, less distortion at the top step (common practice for class A)
            top = next(d for d in fresh["deltas"] if d["name"] == "thdn_db")
            assert top["verdicts"][1] == "better"


# --- repeated takes ---------------------------------------------------------------------

def test_the_mean_of_takes_and_its_type_a_spread():
    # JCGM 100 4.2: the mean, and u = s / sqrt(n) where the takes scatter more than their own noise says
    from benchkit.analysis.repeats import mean_document

    def take(thdn, u, vrms):
        return {"kind": "tone", "n_samples": 48000, "steps": [{"drive_dbfs": -12.0, "thdn_db": thdn, "fundamental_vrms": vrms}],
                "uncertainty": {"coverage_factor": 2, "standard": {"steps.thdn_db": [u], "steps.fundamental_vrms": [0.01]},
                                "shared": {"steps.fundamental_vrms": [0.0099]}}}

    values = [-57.40, -57.46, -57.52]
    mean = mean_document([take(v, 0.001, 1.0 + i * 1e-4) for i, v in enumerate(values)])
    assert mean["steps"][0]["thdn_db"] == pytest.approx(-57.46) and mean["n_samples"] == 48000
    assert mean["uncertainty"]["standard"]["steps.thdn_db"][0] == pytest.approx(np.std(values, ddof=1) / math.sqrt(3))
    # the shared calibration does not average down; the rest does: sqrt((0.01^2 - 0.0099^2) / 3 + 0.0099^2)
    assert mean["uncertainty"]["standard"]["steps.fundamental_vrms"][0] == pytest.approx(
        math.sqrt((0.01**2 - 0.0099**2) / 3 + 0.0099**2))
    quiet = mean_document([take(-57.46 + d, 0.01, 1.0) for d in (0.0, 1e-4, -1e-4)])
    assert quiet["uncertainty"]["standard"]["steps.thdn_db"][0] == pytest.approx(0.01 / math.sqrt(3))  # their own noise
    assert quiet["takes"]["count"] == 3


def test_repeated_takes_file_one_run_that_reanalyses_and_compares(tmp_path):
    bench = tmp_path / "bench"
    doc = _measure(bench, "tone", "--level", "-20dBFS", "--load", "8", "--repeat", "3", "--tag", "take=a")
    folder = Path(doc["run"]["folder"])
    assert doc["takes"]["count"] == 3 and all((folder / f"take-{k}" / "capture.wav").exists() for k in (1, 2, 3))
    singles = [json.loads((folder / f"take-{k}" / "capture.result.json").read_text())["steps"][0]["thdn_db"] for k in (1, 2, 3)]
    assert doc["steps"][0]["thdn_db"] == pytest.approx(np.mean(singles))
    again = _measure(bench, "log", "reanalyse", doc["run"]["id"])
    assert again["steps"][0]["thdn_db"] == pytest.approx(doc["steps"][0]["thdn_db"], abs=1e-9)
    _measure(bench, "tone", "--level", "-20dBFS", "--load", "8", "--repeat", "2", "--tag", "take=b")
    both = _measure(bench, "compare", "--command", "tone", "--last", "2")
    top = next(d for d in both["deltas"] if d["name"] == "thdn_db")
    assert top["verdicts"] == [WITHIN] and top["standard_uncertainties"][0] == pytest.approx(
        doc["uncertainty"]["standard"]["steps.thdn_db"][0])


# --- the other kinds' type A against their scatter ----------------------------------------

def test_a_swept_responses_uncertainty_matches_its_scatter():
    # an exponential sweep through a first-order high-pass (scipy.signal.butter) with white noise
    # added: the level read at each frequency scatters as reported (the noise read off the
    # deconvolved response where no response lies)
    import scipy.signal

    from benchkit.analysis import sweep as sw

    rate = 48000
    s = sw.SyncSweep.design(10, 20000, 2.0, rate)
    b, a = scipy.signal.butter(1, 30 / (rate / 2), "high")
    clean = np.concatenate([scipy.signal.lfilter(b, a, s.samples(0.5)), np.zeros(rate)])
    freqs = np.array([20.0, 100.0, 1000.0, 10000.0])
    rng = np.random.default_rng(0)
    levels, reported = [], []
    for _ in range(80):
        got = sw.measure(clean + rng.normal(0, 3e-3, clean.size), s, None, freqs=freqs, amplitude=0.5)
        levels.append(20 * np.log10(np.abs(got.linear)))
        reported.append(ua.db_from_rel(got.linear_rel_u))
    assert np.std(levels, axis=0, ddof=1) == pytest.approx(np.sqrt(np.mean(np.square(reported), axis=0)), rel=0.25)


def test_a_corners_uncertainty_is_the_levels_over_the_slope():
    # JCGM 100 5.1.2: a crossing's sensitivity to the level is 1 / slope. A first-order high-pass at
    # 10 Hz (its magnitude in closed form, circuit theory) read with 0.01 dB at every frequency: the
    # -3 dB corner (re the level at 1 kHz) lies where the closed form says, and its u is the two
    # levels' (there and at 1 kHz) over the closed form's slope there
    import scipy.optimize

    from benchkit.analysis.response import ResponseResult

    def level(x):
        return -10 * np.log10(1 + (10 / x) ** 2)

    f = np.geomspace(2, 20000, 2000)
    r = ResponseResult("sweep", f, level(f), np.zeros_like(f), (), np.full(f.size, np.nan), None, "given", "dB",
                       1000.0, mag_u_db=np.full(f.size, 0.01))
    corner = scipy.optimize.brentq(lambda x: level(x) - (level(1000.0) - 3.0), 5, 20)
    slope = (level(corner * 1.0001) - level(corner * 0.9999)) / (corner * 0.0002)
    assert r.corners_3db[0] == pytest.approx(corner, rel=1e-4)
    assert r.uncertainty()["standard"]["low_3db_hz"] == pytest.approx(math.hypot(0.01, 0.01) / slope, rel=0.01)


def test_an_output_impedances_uncertainty_matches_its_scatter():
    # Zout = R (V_open / V_loaded - 1) from two readings of 0.01 % noise each: scatter as reported;
    # the load's tolerance is its own (shared) part
    from benchkit.analysis.zout import Reading, analyze_zout

    rng = np.random.default_rng(9)
    got = []
    for _ in range(400):
        a, b = 1.0 + 1e-4 * rng.standard_normal(), (8 / 8.2) * (1.0 + 1e-4 * rng.standard_normal())
        r = analyze_zout([Reading(1000.0, complex(a), rel_u=1e-4)], [Reading(1000.0, complex(b), rel_u=1e-4)],
                         load_ohms=8.0, load_rel=ua.rectangular(0.05))
        got.append(r.points[0].zout_ohms)
    block = r.to_dict()["uncertainty"]
    own = math.sqrt(block["standard"]["zout_ohms"] ** 2 - block["shared"]["zout_ohms"] ** 2)
    assert np.mean(got) == pytest.approx(0.2, abs=0.001) and np.std(got, ddof=1) == pytest.approx(own, rel=0.15)
    assert block["shared"]["zout_ohms"] == pytest.approx(0.2 * ua.rectangular(0.05), rel=0.01)


def test_a_crosstalk_reads_uncertainty_matches_its_scatter():
    rng = np.random.default_rng(4)
    t = np.arange(24000) / 48000
    a = 0.5 * np.sin(2 * np.pi * 1000 * t)
    got, reported = [], []
    for _ in range(200):
        x = benchkit.analyze_crosstalk(np.stack([a + rng.normal(0, 1e-5, t.size), a / 3000 + rng.normal(0, 1e-5, t.size)],
                                                axis=1), 48000, frequency_hz=1000.0)
        got.append(x.crosstalk_db)
        reported.append(x.budget.u)
    assert np.std(got, ddof=1) == pytest.approx(np.sqrt(np.mean(np.square(reported))), rel=0.15)


def test_the_calibration_chain_reaches_every_runs_volts_and_watts(tmp_path):
    # a profile made with a 1.8k:200 pad of 1 % resistors into the virtual interface's 10 k input, a
    # voltmeter of +-0.5 % and a load of +-1 %; a tone run with it: its volts carry the voltmeter
    # (0.5 % / sqrt 3, JCGM 100 4.3.7) and the loaded divider's ratio (each resistor 1 % / sqrt 3,
    # through numerical partial derivatives of (R1 + R2 || Rin) / (R2 || Rin), JCGM 100 5.1.2), its
    # watts twice the volts' relative u and the load's (5.1.6)
    profile = tmp_path / "profile.json"
    res = run_cli("calibrate", "--reading", "0.14142V", "--pad", "1.8k:200", "--pad-tolerance", "1", "--load-tolerance",
                  "1", "--voltmeter-pct", "0.5", "--file", str(profile))
    assert res.returncode == 0, res.stderr

    def ratio(r1, r2, rin=10e3):
        r2p = r2 * rin / (r2 + rin)
        return (r1 + r2p) / r2p

    k = ratio(1800.0, 200.0)
    partials = [(ratio(1800.0 * (1 + 1e-6), 200.0) - k) / (1800.0 * 1e-6), (ratio(1800.0, 200.0 * (1 + 1e-6)) - k) / (200.0 * 1e-6)]
    pad = math.hypot(partials[0] * 1800.0 * 0.01 / math.sqrt(3), partials[1] * 200.0 * 0.01 / math.sqrt(3)) / k
    volts = math.hypot(0.005 / math.sqrt(3), pad)
    doc = _measure(tmp_path / "bench", "tone", "--level", "-20dBFS", "--load", "8", "--calibration", str(profile))
    u, step = doc["uncertainty"], doc["steps"][0]
    assert u["standard"]["steps.fundamental_vrms"][0] / step["fundamental_vrms"] == pytest.approx(volts, rel=0.01)
    assert u["standard"]["steps.power_w"][0] / step["power_w"] == pytest.approx(math.hypot(2 * volts, 0.01 / math.sqrt(3)),
                                                                                rel=0.01)
    assert u["dominant"]["steps.power_w"][0] == "pad" and u["shared"]["steps.power_w"][0] > 0.99 * u["standard"]["steps.power_w"][0]
    # ratios do not see the scale: THD+N's u is the noise's alone
    assert "steps.thdn_db" not in (u.get("shared") or {})


def test_a_crowded_or_unknown_uncertainty_is_never_a_zero():
    # harmonics too close for noise bins between them (a 0.1 s record of 100 Hz): the band's noise
    # taken as white gives every read an uncertainty, not 0
    rng = np.random.default_rng(1)
    t = np.arange(4800) / 48000
    r = benchkit.analyze_tone(0.5 * np.sin(2 * np.pi * 100 * t) + 0.005 * np.sin(2 * np.pi * 200 * t)
                              + rng.normal(0, 1e-4, t.size), 48000)
    u = r.uncertainty["standard"]
    assert u["thd_db"] > 0 and u["thdn_db"] > 0 and u["harmonics.level_dbc"][0] > 0
    # readings whose own uncertainty is not known give an output impedance with none (not 0)
    from benchkit.analysis.zout import Reading, analyze_zout

    z = analyze_zout([Reading(1000.0, 1.0)], [Reading(1000.0, 0.975)], load_ohms=8.0).to_dict()["uncertainty"]
    assert "zout_ohms" not in z["standard"] and z["standard"]["points.zout_ohms"] == [None]


def test_what_is_left_of_a_shared_part_follows_the_change():
    # a 3 % relative error common to both runs moves 100 W by 3 W and 130 W by 3.9 W: their difference
    # keeps 0.9 W of it (JCGM 100 5.2 with the sensitivities of a ratio)
    d = Delta("power_w", "power", "W", "", (100.0, 130.0), "higher", us=(math.hypot(0.1, 3.0), math.hypot(0.1, 3.9)),
              shared=(3.0, 3.9), coverage=2.0)
    assert d.change_u(1) == pytest.approx(2 * math.sqrt(0.1**2 + 0.1**2 + 0.9**2))


def test_the_mean_of_takes_keeps_a_clipped_take_and_counts_as_it_found_them():
    from benchkit.analysis.repeats import mean_document

    takes = [{"kind": "tone", "clipped": c, "valid": not c, "steps_played": 12, "thdn_db": -60.0 + 0.1 * i}
             for i, c in enumerate((False, True, False))]
    mean = mean_document(takes)
    assert mean["clipped"] is True and mean["valid"] is False and mean["steps_played"] == 12
    assert mean["thdn_db"] == pytest.approx(-59.9)
