"""DC drift: the first-order settling fit, a SCPI multimeter reached
through pyvisa-py exactly as a real one is (an emulator on 127.0.0.1 with
a known exponential), logger CSVs and the virtual stage's thermal model.
The settling law v = v_f + (v_0 - v_f) exp(-t/tau) is the first-order
(RC or thermal) step response (circuit theory); the fit is
scipy.optimize.curve_fit's.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from benchkit.analysis.drift import analyze_drift, find_steps, fit_settling
from benchkit.capture.stages import make_stage
from benchkit.kinds.drift import analyze_drift_csv, log_drift
from benchkit.errors import BenchkitError
from benchkit.meters import ScpiMeter, VirtualMidpoint, read_drift_csv
from conftest import run_cli, the_run
from scpi_meter import EmulatedMeter

pytest.importorskip("pyvisa_py")


def test_fit_recovers_a_known_exponential_with_honest_uncertainty():
    rng = np.random.default_rng(2)
    t = np.arange(0, 600, 2.0)
    v = 0.030 + (0.120 - 0.030) * np.exp(-t / 90.0) + 50e-6 * rng.standard_normal(t.size)
    fit = fit_settling(t, v, band_v=1e-3)
    assert fit.final_v == pytest.approx(0.030, abs=5 * fit.final_sd_v + 1e-6)
    assert fit.tau_s == pytest.approx(90.0, abs=5 * fit.tau_sd_s)
    # within 1 mV once 90 exp(-t/tau) mV < 1 mV: t = 90 ln(90) s
    assert fit.settle_s == pytest.approx(90.0 * math.log(90.0), rel=0.02)
    r = analyze_drift(t, v, limit_v=0.05)
    assert r.verdict == "within" and r.to_dict()["pp_v"] == pytest.approx(0.090, abs=3e-4)


def test_a_sudden_step_is_an_event_not_drift():
    t = np.arange(0, 400, 1.0)
    v = 0.010 + 0.020 * np.exp(-t / 60.0) + 20e-6 * np.random.default_rng(3).standard_normal(t.size)
    v[250:] += 0.015  # the bias trimmer touched at 250 s
    events = find_steps(t, v)
    assert len(events) == 1 and events[0]["time_s"] == 250.0 and events[0]["step_v"] == pytest.approx(0.015, abs=1e-4)
    r = analyze_drift(t, v)
    assert r.fit.start_s == 250.0 and r.fit.final_v == pytest.approx(0.025, abs=2e-4)
    assert any("step" in w for w in r.warnings)


@pytest.mark.parametrize("resolution, sigma", [(1e-4, 2e-5), (1e-4, 0.0), (1e-3, 1e-4), (1e-5, 3e-6)])
def test_readings_rounded_to_a_meters_resolution_settle_without_false_steps(resolution, sigma):
    # a midpoint settling by 20 counts with tau 240 s, read once a second
    # for 30 min, with less noise than a third of a count, rounded to the
    # meter's last digit: one-count changes are the rounding, not steps;
    # the first-order fit (the step response, circuit theory) finds tau;
    # a 40-count jump at 20 min is the one step there is
    t = np.arange(0, 1800, 1.0)
    v = 12.0 + 20 * resolution * (1 - np.exp(-t / 240.0)) + sigma * np.random.default_rng(7).standard_normal(t.size)
    rounded = np.round(v / resolution) * resolution
    r = analyze_drift(t, rounded, band_v=5 * resolution)
    assert not r.events, r.events[:3]
    assert r.fit is not None and r.fit.tau_s == pytest.approx(240.0, rel=0.1)
    bumped = rounded.copy()
    bumped[1200:] += 40 * resolution
    events = find_steps(t, bumped)
    assert [e["time_s"] for e in events] == [1200.0]


def test_meter_over_pyvisa_settles_as_its_exponential(tmp_path):
    # a few seconds' time constant, logged for more than five of them
    meter = EmulatedMeter(final_v=0.0425, start_v=0.0180, tau_s=1.5, noise_v=30e-6)
    try:
        src = ScpiMeter(meter.resource)
        assert "emulated DMM" in src.name
        end = log_drift(src, tmp_path / "log.csv", interval_s=0.05, duration_s=8.0)
        src.close()
    finally:
        meter.close()
    assert end.how == "duration"
    r = analyze_drift_csv(tmp_path / "log.csv")
    assert r.fit.final_v == pytest.approx(0.0425, abs=1e-3)
    assert r.fit.tau_s == pytest.approx(1.5, rel=0.05)


def test_a_second_meter_logs_the_supply_current(tmp_path):
    volts = EmulatedMeter(final_v=0.02, start_v=0.03, tau_s=1.0)
    amps = EmulatedMeter(final_v=1.20, start_v=1.25, tau_s=1.0, noise_v=1e-4)
    out = tmp_path / "run"
    try:
        res = run_cli("drift", "--dc-source", "meter", "--meter", volts.resource, "--current-meter", amps.resource,
                      "--interval", "0.05", "--duration", "2", "--bench", str(out), "--json")
    finally:
        volts.close()
        amps.close()
    assert res.returncode == 0, res.stderr
    doc = json.loads(res.stdout)
    assert amps.function == "CONF:CURR:DC" and volts.function == "CONF:VOLT:DC"
    assert 1.19 < doc["supply_current_a"]["last"] < 1.23 and doc["supply_current_a"]["max"] <= 1.26
    assert (the_run(out) / "log.drift.csv").exists()


def test_meter_going_away_stops_cleanly_and_keeps_the_log(tmp_path):
    meter = EmulatedMeter(final_v=0.01, start_v=0.02, tau_s=2.0, close_after_s=1.0)
    out = tmp_path / "run"
    try:
        res = run_cli("drift", "--dc-source", "meter", "--meter", meter.resource, "--interval", "0.05",
                      "--duration", "30", "--bench", str(out), "--json")
    finally:
        meter.close()
    assert res.returncode == 1 and "Traceback" not in res.stderr
    assert "stopped answering" in res.stderr
    doc = json.loads(res.stdout)
    assert doc["ended"] == "lost" and doc["samples"] >= 10
    t, v, _ = read_drift_csv(the_run(out) / "log.csv")
    assert t.size == doc["samples"] and (the_run(out) / "log.drift.png").exists()


def test_logger_csv_edge_cases(tmp_path):
    p = tmp_path / "logger.csv"
    p.write_text("stamp,offset (mV)\n0,10.0\n1,\n2,9.0\n1.5,9.5\n3,not a number\n4,8.0\n", encoding="utf-8")
    t, v, warnings = read_drift_csv(p, "stamp", "offset")
    assert list(t) == [0.0, 1.5, 2.0, 4.0] and v[0] == pytest.approx(0.010)  # mV in the header applied
    assert any("skipped" in w for w in warnings) and any("sorted" in w for w in warnings)
    with pytest.raises(BenchkitError, match="no value column named 'volts'"):
        read_drift_csv(p, "stamp", "volts")
    with pytest.raises(BenchkitError, match="column 5 does not exist"):
        read_drift_csv(p, "1", "5")
    minutes = tmp_path / "minutes.csv"
    minutes.write_text("t [min],V\n0,1\n0.5,2\n1,3\n", encoding="utf-8")
    assert list(read_drift_csv(minutes)[0]) == [0.0, 30.0, 60.0]
    res = run_cli("analyze", str(p), "--time-col", "stamp", "--value-col", "2", "--json")
    assert res.returncode == 0 and json.loads(res.stdout)["kind"] == "drift"
    bad = run_cli("analyze", str(p), "--value-col", "volts")
    assert bad.returncode == 1 and len(bad.stderr.strip().splitlines()) == 1


def test_virtual_thermal_model_settles_with_its_own_time_constant(tmp_path):
    # the se-class-a midpoint follows the junction's first-order warming (tau_s)
    stage = make_stage("se-class-a", {"bias": 1.2, "tau_s": 240.0})
    src = VirtualMidpoint(stage, accelerated=10.0)
    end = log_drift(src, tmp_path / "log.csv", interval_s=1.0, duration_s=1500.0)
    assert end.how == "duration"
    r = analyze_drift_csv(tmp_path / "log.csv")
    assert r.fit.tau_s == pytest.approx(240.0, rel=0.05)
    # and its final value: the midpoint moves mid_tc x R_th x P_device
    assert r.fit.final_v == pytest.approx(12.0 - 0.010 * 1.5 * 12.0 * 1.2, abs=1e-3)


def test_drift_on_an_ac_coupled_input_is_refused(tmp_path):
    from benchkit.calibrate import calibrate
    from benchkit.calibration import save_profile
    from benchkit.capture.virtual import DEMO_PAD, virtual_bench

    bench = virtual_bench("ideal", seed=5)
    prof = calibrate(bench, bench.output_vrms(-20.0), pad=DEMO_PAD, input_ohms=10e3,
                     wire=lambda step: setattr(bench, "wiring", step))
    path = save_profile(prof, tmp_path / "cal.json")
    res = run_cli("drift", "--dc-source", "input", "--calibration", str(path), "--duration", "5", "--bench", str(tmp_path / "d"))
    assert res.returncode == 1 and "AC coupled" in res.stderr


@pytest.mark.parametrize("nominal, limit, rise", [(12.0, 0.5, 0.04), (0.0, 0.05, 0.003), (11.9, 0.2, -0.08)])
def test_the_drift_plot_bands_the_limit_about_the_nominal_and_scales_to_the_data(tmp_path, nominal, limit, rise):
    # the verdict holds the value within the limit of the nominal: the band
    # drawn is nominal +- limit; the view spans the readings (a warm-up of a
    # few tens of mV stays visible beside a +-0.5 V band)
    from benchkit.report.drift import drift_png, drift_view

    t = np.arange(0, 900, 3.0)
    v = nominal + rise * (1 - np.exp(-t / 120.0))
    r = analyze_drift(t, v, limit_v=limit, nominal_v=nominal)
    view = drift_view(r)
    k = view["scale"]
    assert view["band"] == pytest.approx(((nominal - limit) * k, (nominal + limit) * k))
    lo, hi = view["ylim"]
    span = abs(rise) * k
    assert lo <= min(v) * k and max(v) * k <= hi and hi - lo <= 1.5 * span
    assert drift_png(r, tmp_path / "d.png", "B-2").stat().st_size > 10_000
