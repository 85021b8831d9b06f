"""Output impedance and damping factor: the output unloaded and loaded.

References (circuit theory): a Thevenin source V behind Z gives V R / (R + Z)
across R, so Z = R (V_open / V_loaded - 1); with the "open" output still
across R_p (the pad and input), Z = R_p R' (k - 1) / (R_p - k R') with
R' = R || R_p; a resistance r in series with a capacitor C has
Z = r + 1 / (j 2 pi f C); the damping factor is R / |Z| (common practice,
against the nominal load).
"""

from __future__ import annotations

import cmath
import json
import math

import pytest

from benchkit.analysis.zout import analyze_zout, Reading
from benchkit.pads import parallel

from conftest import run_cli


def _thevenin(z: complex, r: float) -> complex:
    return r / (r + z)


@pytest.mark.parametrize("z", [0.5, 0.05, complex(0.2, -3.6)])
def test_the_divider_formula_recovers_the_source_impedance(z):
    r = 8.0
    got = analyze_zout([Reading(1000.0, 1.0 + 0j, phase_known=True)],
                       [Reading(1000.0, _thevenin(z, r), phase_known=True)], load_ohms=r)
    assert got.points[0].zout == pytest.approx(z, abs=1e-12)
    assert got.points[0].damping_factor == pytest.approx(r / abs(z), rel=1e-12)


def test_the_pads_own_load_is_taken_into_account():
    # "open" is the pad's 2 k across the output; loaded, 8 ohm || 2 k
    z, r, rp = 0.25, 8.0, 2000.0
    open_, loaded = _thevenin(z, rp), _thevenin(z, parallel(r, rp))
    exact = analyze_zout([Reading(1e3, open_)], [Reading(1e3, loaded)], load_ohms=r, open_load_ohms=rp)
    assert exact.points[0].zout_ohms == pytest.approx(z, rel=1e-9)
    naive = analyze_zout([Reading(1e3, open_)], [Reading(1e3, loaded)], load_ohms=r)
    # taken as open, the pad across both readings nearly cancels: off by
    # about Z / R_p, no more
    assert abs(naive.points[0].zout_ohms / z - 1.0) == pytest.approx(z / rp, rel=0.05)
    assert any("not known" in w for w in naive.warnings)


def test_levels_at_different_drives_are_scaled_and_warned():
    z, r = 0.5, 8.0
    loaded = abs(_thevenin(z, r)) * 10 ** (-1.0 / 20)  # a dB less drive
    got = analyze_zout([Reading(1e3, 1.0, -20.0)], [Reading(1e3, loaded, -21.0)], load_ohms=r)
    assert got.method == "levels" and got.points[0].zout_ohms == pytest.approx(z, rel=1e-9)
    assert any("not at the same drive" in w for w in got.warnings)
    assert any("resistive" in w for w in got.warnings)


def test_virtual_stage_with_a_known_series_resistance(tmp_path):
    res = run_cli("zout", "--sim", "poly", "--sim-param", "rout=0.5", "--load", "8", "--json")
    assert res.returncode == 0, res.stderr
    d = json.loads(res.stdout)
    assert d["kind"] == "zout" and d["method"] == "gain-ratio"
    for p in d["points"]:
        assert p["valid"], p
        assert p["zout_ohms"] == pytest.approx(0.5, rel=0.02), p
    assert d["damping_factor"] == pytest.approx(16.0, rel=0.02)
    again = run_cli("log", "reanalyse", "last", "--json")
    assert again.returncode == 0, again.stderr
    assert json.loads(again.stdout)["zout_ohms"] == pytest.approx(d["zout_ohms"], rel=1e-9)


def test_class_a_stage_shows_its_coupling_capacitor(tmp_path):
    # the demo stage: 0.2 ohm of loop output resistance behind 2200 uF
    res = run_cli("zout", "--sim-param", "bias=1.2", "--load", "8", "--json")
    assert res.returncode == 0, res.stderr
    for p in json.loads(res.stdout)["points"]:
        want = 0.2 + 1 / (2j * math.pi * p["frequency_hz"] * 2200e-6)
        assert p["zout_ohms"] == pytest.approx(abs(want), rel=0.02), p
        assert p["reactance_ohms"] == pytest.approx(want.imag, abs=0.02 * abs(want)), p


def test_two_sweeps_give_zout_across_frequency(tmp_path):
    assert run_cli("sweep", "--sim-param", "bias=1.2", "--sim-load", "off", "--tag", "load=off").returncode == 0
    assert run_cli("sweep", "--sim-param", "bias=1.2", "--load", "8", "--tag", "load=8").returncode == 0
    # the virtual pad presents 1800 + 200 || 10k ohm to the stage
    res = run_cli("zout", "--from", "last-1", "--from", "last", "--load", "8", "--open-load", str(1800 + parallel(200, 1e4)),
                  "--json")
    assert res.returncode == 0, res.stderr
    points = json.loads(res.stdout)["points"]
    assert len(points) > 30
    for p in points:
        want = abs(0.2 + 1 / (2j * math.pi * p["frequency_hz"] * 2200e-6))
        assert p["zout_ohms"] == pytest.approx(want, rel=0.03), p
    bad = run_cli("zout", "--from", "last", "--load", "8")
    assert bad.returncode == 1 and "two runs" in bad.stderr
    # a loaded sweep at another level: compared as gains, with a warning
    assert run_cli("sweep", "--sim-param", "bias=1.2", "--load", "8", "--level", "-26dBFS").returncode == 0
    # (the runs now: the sweep unloaded, loaded, the zout run, the new sweep)
    res = run_cli("zout", "--from", "last-3", "--from", "last", "--load", "8", "--json")
    assert res.returncode == 0, res.stderr
    d = json.loads(res.stdout)
    assert any(w["code"] == "drive-changed" and "not at the same drive" in w["text"] for w in d["warnings"])
    assert d["zout_ohms"] == pytest.approx(abs(0.2 + 1 / (2j * math.pi * d["reference_hz"] * 2200e-6)), rel=0.03)


def test_zout_runs_compare():
    for r in ("0.5", "0.25"):
        assert run_cli("zout", "--sim", "poly", "--sim-param", f"rout={r}", "--load", "8", "--freq", "1000",
                       "--tag", f"rout={r}").returncode == 0
    comp = run_cli("compare", "--last", "2", "--json")
    assert comp.returncode == 0, comp.stderr
    deltas = {d["name"]: d for d in json.loads(comp.stdout)["deltas"]}
    assert deltas["damping_factor"]["values"][1] == pytest.approx(32.0, rel=0.02)
    assert deltas["damping_factor"]["verdicts"][0] == "better"


def test_a_phase_from_two_readings_is_used():
    # a purely reactive change (same magnitude, shifted phase) is a reactance
    z = complex(0.0, 1.0)
    k = 1.0 / _thevenin(z, 8.0)
    got = analyze_zout([Reading(50.0, k, phase_known=True)], [Reading(50.0, 1.0, phase_known=True)], load_ohms=8.0)
    assert got.points[0].zout.real == pytest.approx(0.0, abs=1e-12)
    assert cmath.phase(got.points[0].zout) == pytest.approx(math.pi / 2, abs=1e-12)
