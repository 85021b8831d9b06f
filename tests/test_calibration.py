"""Calibration profiles, the pad designer and pre-flight refusals.

Checks: the loaded divider and P = V^2/R (circuit theory); preferred values
against the IEC 60063 series (E12/E24 lists from memory of the standard's
tables); a first-order coupling corner (circuit theory); the calibrated
volts of the virtual stage against its true output (power-reduction
identities do not enter: the stage is ideal, gain 10).
"""

from __future__ import annotations

import json
import math

import pytest

from benchkit import pads
from benchkit.calibrate import calibrate
from benchkit.calibration import load_profile, save_profile
from benchkit.capture.virtual import DEMO_PAD, virtual_bench
from benchkit.errors import BenchkitError

from conftest import GlitchingBench, run_cli, run_folders

# IEC 60063 (from memory of its tables)
E12_IEC = [1.0, 1.2, 1.5, 1.8, 2.2, 2.7, 3.3, 3.9, 4.7, 5.6, 6.8, 8.2]
E24_IEC = [1.0, 1.1, 1.2, 1.3, 1.5, 1.6, 1.8, 2.0, 2.2, 2.4, 2.7, 3.0,
           3.3, 3.6, 3.9, 4.3, 4.7, 5.1, 5.6, 6.2, 6.8, 7.5, 8.2, 9.1]
E96_SOME = {0: 1.00, 1: 1.02, 10: 1.27, 24: 1.78, 48: 3.16, 72: 5.62, 95: 9.76}


def test_preferred_values_are_the_iec_60063_series():
    assert list(pads.e_series("E12")) == E12_IEC
    assert list(pads.e_series("E24")) == E24_IEC
    e96 = pads.e_series("E96")
    assert len(e96) == 96 and all(e96[i] == v for i, v in E96_SOME.items())
    with pytest.raises(BenchkitError):
        pads.e_series("E7")


@pytest.mark.parametrize("r1, r2, rin, vin", [(1800.0, 200.0, 10e3, 10.0), (9100.0, 1000.0, 20e3, 30.0), (47e3, 2.2e3, math.inf, 50.0)])
def test_loaded_divider_and_resistor_power_by_hand(r1, r2, rin, vin):
    # circuit theory: Vout/Vin = (R2 || Rin) / (R1 + R2 || Rin); P = V^2 / R
    shunt = r2 if math.isinf(rin) else r2 * rin / (r2 + rin)
    ratio = shunt / (r1 + shunt)
    rep = pads.judge(pads.Pad(r1, r2), vin, 2.0, rin)
    assert rep.ratio == pytest.approx(ratio, rel=1e-12)
    assert rep.r1_watts == pytest.approx((vin - vin * ratio) ** 2 / r1, rel=1e-12)
    assert rep.r2_watts == pytest.approx((vin * ratio) ** 2 / r2, rel=1e-12)
    assert rep.max_safe_stage_vpk == pytest.approx(2.0 / ratio)
    assert rep.r1_rating_w >= 2 * rep.r1_watts and rep.r2_rating_w >= 2 * rep.r2_watts


def test_designed_pads_keep_the_headroom():
    # a 24 V rail into a 2 V-peak, 10 k input with 6 dB of headroom
    proposals = pads.design(24.0, 2.0, 10e3, headroom_db=6.0, series="E24")
    assert proposals
    for rep in proposals:
        landing = 20 * math.log10(rep.input_peak_fs)
        assert -6.7 < landing <= -6.0 + 1e-9
        assert rep.pad.r1_ohms in pads.values("E24", 10, 1e7) and rep.pad.r2_ohms in pads.values("E24", 10, 1e7)


def test_pad_command_designs_and_checks():
    res = run_cli("pad", "--rail", "24", "--json")
    assert res.returncode == 0, res.stderr
    doc = json.loads(res.stdout)
    assert doc["kind"] == "pads" and len(doc["pads"]) >= 3
    assert "BTL" in run_cli("pad", "--help").stdout
    chk = run_cli("pad", "--rail", "50", "--check", "1.8k", "--check", "200", "--json")
    one = json.loads(chk.stdout)["pads"][0]
    assert one["input_peak_fs"] > 1.0 and "less than 6 dB of headroom" in chk.stderr
    assert run_cli("pad").returncode != 0


# --- profiles ------------------------------------------------------------------------


@pytest.fixture()
def profile_path(tmp_path):
    bench = virtual_bench("ideal", seed=5)
    prof = calibrate(bench, bench.output_vrms(-20.0), pad=DEMO_PAD, input_ohms=10e3,
                     wire=lambda step: setattr(bench, "wiring", step))
    return save_profile(prof, tmp_path / "cal.json")


@pytest.mark.parametrize("reported", [True, False], ids=["reported", "unreported"])
def test_a_dropout_in_a_calibration_step_is_played_again(reported):
    # the same virtual interface (the same seed) with 10 ms lost mid-way in
    # the first take of the first step group, reported by the stream or
    # only heard in the tone: only a clean take reaches the profile, which
    # reads as the clean calibration does (same scale within its
    # repeatability); a dropout in every take is refused
    clean = virtual_bench("ideal", seed=5)
    want = calibrate(clean, clean.output_vrms(-20.0))
    flaky = GlitchingBench(virtual_bench("ideal", seed=5), glitched={1}, reported=reported)
    got = calibrate(flaky, flaky.output_vrms(-20.0))
    assert flaky.takes == 4  # three step groups (scale, response, DC) and one retake
    assert got.input_vpk_per_fs == pytest.approx(want.input_vpk_per_fs, rel=1e-4)
    assert got.uncertainty["repeatability_db"] < 0.01
    hopeless = GlitchingBench(virtual_bench("ideal", seed=5), glitched={1, 2, 3}, reported=reported)
    with pytest.raises(BenchkitError, match="in all 3 takes"):
        calibrate(hopeless, hopeless.output_vrms(-20.0))


def test_calibration_finds_the_virtual_interface(profile_path):
    prof = load_profile(profile_path)
    assert prof.output_vpk_per_fs == pytest.approx(2.0, rel=1e-4)
    assert prof.input_vpk_per_fs == pytest.approx(2.0, rel=1e-4)
    assert prof.stage_volts_per_fs == pytest.approx(2.0 / DEMO_PAD.ratio(10e3), rel=1e-4)
    assert not prof.polarity_inverts and not prof.dc_coupled
    # circuit theory: the virtual input's first-order coupling at 3 Hz
    assert prof.ac_corner_hz == pytest.approx(3.0, rel=0.02)
    # and its response at 20 Hz: -10 log10(1 + (3/20)^2) dB
    assert prof.loopback_response[0][1] == pytest.approx(-10 * math.log10(1 + (3 / 20) ** 2), abs=0.02)
    assert prof.loopback_floor["thdn_db"] < -80
    assert prof.uncertainty["total_db"] == pytest.approx(20 * math.log10(1.01), abs=0.01)
    assert len(prof.digest()) == 12


def test_calibration_round_trip_reports_the_true_stage_voltage(tmp_path):
    # calibrate with a voltmeter reading, then measure the virtual stage with
    # the profile: within 0.1 dB of its true output (ideal stage, gain 10)
    cal = tmp_path / "cal.json"
    res = run_cli("calibrate", "--reading", "0.14142V", "--pad", "1.8k:200", "--file", str(cal))
    assert res.returncode == 0, res.stderr
    out = run_cli("tone", "--calibration", str(cal), "--sim", "ideal", "--level", "-20dBFS", "--gain", "10",
                  "--load", "8", "--bench", str(tmp_path / "run"), "--json")
    assert out.returncode == 0, out.stderr
    doc = json.loads(out.stdout)
    step = doc["steps"][0]
    true_vrms = 2.0 * 10 ** (-20 / 20) * 10.0 / math.sqrt(2)
    assert step["scale_source"] == "profile"
    assert 20 * math.log10(step["fundamental_vrms"] / true_vrms) == pytest.approx(0.0, abs=0.1)
    assert doc["calibration"]["hash"] == doc["conditions"]["calibration_hash"] == load_profile(cal).digest()
    # every kind's result names the profile its capture was scaled by, in the conditions all results share
    for command, *extra in (("noise", "--duration", "0.5"), ("gain", "--level", "-30dBFS")):
        res = run_cli(command, "--calibration", str(cal), "--sim", "ideal", *extra, "--bench", str(tmp_path / "run"),
                      "--json")
        assert res.returncode == 0, res.stderr
        assert json.loads(res.stdout)["conditions"]["calibration_hash"] == load_profile(cal).digest(), command


@pytest.mark.parametrize(
    "content, needle",
    [
        ("{not json", "not valid JSON"),
        ('{"kind": "calibration-profile", "schema_version": 1, "interface": "x"', "not valid JSON"),
        ('{"kind": "calibration-profile", "schema_version": 99, "interface": "x"}', "newer"),
        ('{"kind": "something-else"}', "not a benchkit calibration profile"),
        ('{"kind": "calibration-profile", "schema_version": 1, "interface": "x"}', "missing"),
    ],
)
def test_bad_profiles_are_refused_clearly(tmp_path, content, needle):
    bad = tmp_path / "bad.json"
    bad.write_text(content)
    with pytest.raises(BenchkitError, match=needle):
        load_profile(bad)
    res = run_cli("tone", "--calibration", str(bad), "--bench", str(tmp_path / "run"))
    assert res.returncode != 0 and "Traceback" not in res.stderr and needle in res.stderr
    assert not run_folders(tmp_path / "run")


def test_the_interface_floor_is_marked(tmp_path, profile_path):
    # an ideal stage of gain 1 and no pad: what is measured is the interface
    res = run_cli("tone", "--calibration", str(profile_path), "--sim", "ideal", "--sim-param", "gain=1",
                  "--sim-pad", "none", "--level", "-20dBFS", "--bench", str(tmp_path / "run"), "--json")
    assert res.returncode == 0, res.stderr
    step = json.loads(res.stdout)["steps"][0]
    assert any(w["code"] == "interface-limited" and "limited by the interface" in w["text"] for w in step["warnings"])


# --- pre-flight ------------------------------------------------------------------------


def _nothing_played(bench):
    return not run_folders(bench)


def test_preflight_refuses_a_drive_that_would_clip_the_input(tmp_path):
    # gain 10, no pad: -6 dBFS out would be +14 dBFS in
    res = run_cli("tone", "--sim-pad", "none", "--gain", "10", "--level", "-6dBFS", "--load", "8",
                  "--bench", str(tmp_path / "run"))
    assert res.returncode != 0 and "top step would reach" in res.stderr and "lower the drive" in res.stderr
    assert _nothing_played(tmp_path / "run")


def test_preflight_refuses_a_pad_too_small_for_the_rail(tmp_path):
    res = run_cli("tone", "--rail", "50", "--gain", "10", "--level", "-30dBFS", "--load", "8",
                  "--bench", str(tmp_path / "run"))
    assert res.returncode != 0 and "50 V rail" in res.stderr and "benchkit pad" in res.stderr
    assert _nothing_played(tmp_path / "run")


def test_preflight_refuses_an_overloaded_pad_resistor(tmp_path):
    # 7 V peak at the stage: R1 of 1.8 k takes (5 V - 0.5 V)^2 / 1.8 k = 11 mW (circuit theory)
    res = run_cli("tone", "--gain", "10", "--level", "-9dBFS", "--pad-rating", "0.005", "--load", "8",
                  "--bench", str(tmp_path / "run"))
    assert res.returncode != 0 and "R1 would dissipate" in res.stderr
    assert _nothing_played(tmp_path / "run")


def test_preflight_warnings_reach_the_results(tmp_path):
    res = run_cli("tone", "--level", "-20dBFS", "--btl", "--bench", str(tmp_path / "run"), "--json")
    assert res.returncode == 0, res.stderr
    warnings = json.loads(res.stdout)["warnings"]
    assert any(w["code"] == "no-load" and "no load given" in w["text"] for w in warnings)
    assert any(w["code"] == "safety" and "BTL" in w["text"] for w in warnings)
    assert "pre-flight:" in res.stderr  # the gain was measured at a low level first


def test_dc_at_a_dc_coupled_stage_output_is_warned_about(tmp_path):
    # a stage with a square term puts DC on its output: a2 A^2 / 2 for
    # x = A cos (identities): 0.5 x 1^2 / 2 = 0.25 V at 1 V peak in, well
    # over the ~50 mV kept at a speaker output (common practice)
    from benchkit.capture.virtual import InterfaceSpec, VirtualBench
    from benchkit.capture.stages import make_stage
    from benchkit.kinds.tone import tone_run

    bench = VirtualBench(make_stage("poly", dict(gain=1.0, a2=0.5)), DEMO_PAD, InterfaceSpec(ac_coupling_hz=None), seed=3)
    prof = calibrate(bench, bench.output_vrms(-20.0), pad=DEMO_PAD, input_ohms=10e3,
                     wire=lambda step: setattr(bench, "wiring", step))
    assert prof.dc_coupled
    steps = tone_run(bench, tmp_path, 997.0, [-6.0], calibration=prof)
    r = steps.steps[0].result
    assert r.dc_fs * r.volts_per_fs == pytest.approx(0.5 * (2.0 * 10 ** (-6 / 20)) ** 2 / 2, rel=0.02)
    assert any("of DC at the stage's output" in w for w in r.warnings)


# --- the rail rule (docs/safety.md) ----------------------------------------------------


def _loaded_ratio(r1: float, r2: float, rin: float = 10e3) -> float:
    shunt = r2 * rin / (r2 + rin)  # circuit theory: the input's impedance across R2
    return shunt / (r1 + shunt)


def test_the_rail_rule_by_hand():
    from benchkit.preflight import rail_rule

    ratio = _loaded_ratio(1800.0, 200.0)
    # 24 V rail: a normal swing of 12 V peak lands at 20 log10(12 r / 2) dBFS, accepted;
    # the whole rail at 20 log10(24 r / 2), over full scale: a warning naming it
    (note,) = rail_rule(24.0, ratio, 2.0, 3.0, input_max_vpk=10.0)
    assert f"{20 * math.log10(24 * ratio / 2):+.1f} dBFS" in note and "under the input's stated maximum" in note
    # a bridged pair swings the whole rail: 24 r / 2 is over -3 dBFS: refused
    with pytest.raises(BenchkitError, match="normal swing"):
        rail_rule(24.0, ratio, 2.0, 3.0, bridged=True)
    # a stated maximum of 2.2 V peak: the fault's 24 r = 2.36 V would damage the input: refused
    with pytest.raises(BenchkitError, match="stated maximum of 2.2 V"):
        rail_rule(24.0, ratio, 2.0, 3.0, input_max_vpk=2.2)
    assert rail_rule(12.0, ratio, 2.0, 3.0) == ()  # 12 r = 1.18 V: under full scale, nothing to say


@pytest.mark.parametrize("pad, accepted", [("1.8k:200", True), ("1k:200", False)])
def test_one_rail_rule_in_every_command(tmp_path, pad, accepted):
    # the demo's 10:1 pad passes a 24 V rail's normal swing (-4.6 dBFS), a
    # 6:1 pad does not (12 V x 0.164 = 1.97 V peak, -0.1 dBFS): tone, power
    # and pad --check say the same (the power run itself is beside the
    # point: a limit of 0.5 % lies in the noise of its first step and ends it there)
    ratio = _loaded_ratio(*(pads.parse_pad(pad).r1_ohms, pads.parse_pad(pad).r2_ohms))
    for command in (("tone", "--level", "-30dBFS"), ("power", "--load", "8", "--bias", "0.8", "--limit", "0.5")):
        res = run_cli(*command, "--rail", "24", "--sim-pad", pad, "--bench", str(tmp_path / command[0]))
        assert _nothing_played(tmp_path / command[0]) != accepted, res.stderr  # past the pre-flight, a run is filed
        if not accepted:
            assert "normal swing on a 24 V rail" in res.stderr and _nothing_played(tmp_path / command[0])
        else:
            assert f"would reach {20 * math.log10(24 * ratio / 2):+.1f} dBFS" in res.stderr
    r1, r2 = pad.split(":")
    chk = run_cli("pad", "--rail", "24", "--check", r1, "--check", r2, "--json")
    one = json.loads(chk.stdout)["pads"][0]
    assert one["input_peak_fs"] == pytest.approx(12 * ratio / 2.0, rel=1e-9)
    assert one["fault_peak_fs"] == pytest.approx(24 * ratio / 2.0, rel=1e-9)
    assert (one["input_peak_fs"] <= 10 ** (-3 / 20)) == accepted


def test_a_profile_reads_back_as_written(tmp_path):
    # its digest (recorded by every run that used it) is of what it holds:
    # reading must not turn 48000 into 48000.0, or older runs would compare
    # as made with another calibration
    from benchkit.calibration import Profile

    fields = dict(interface="virtual", sample_rate_hz=48000, out_channel=1, in_channel=1, output_vpk_per_fs=2,
                  input_vpk_per_fs=2)
    path = save_profile(Profile(**fields), tmp_path / "p.json")
    assert load_profile(path).digest() == Profile(**fields).digest()


def test_a_drive_worked_out_to_land_on_the_input_limit_passes_and_one_over_it_does_not():
    """A power run's highest drive is -margin less the measured gain in dB:
    whatever the gain, the round trip through dB must not refuse it (it
    did, by one ulp, for some gains); a hundredth of a dB over is refused."""
    from benchkit import units
    from benchkit.preflight import check

    for gain_db in [-0.2 + k * 1e-7 for k in range(-200, 200)] + [-20.13, 3.7, -0.05]:
        gain = units.ratio_from_db(gain_db)
        top = -3.0 - units.db_from_ratio(gain)
        assert check([top - 40.0, top], gain, margin_db=3.0).input_peak_fs[-1] == pytest.approx(units.ratio_from_db(-3.0))
        with pytest.raises(BenchkitError, match="over the -3 dBFS limit"):
            check([top + 0.01], gain, margin_db=3.0)
