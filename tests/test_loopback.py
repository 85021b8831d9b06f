"""`benchkit loopback`: the interface alone, output wired to input.

References: independent noises add in power (handbook); the A-weighting
of IEC 61672-1 (its analog formula, normalised to 0 dB at 1 kHz, computed
here from the standard, not by benchkit) over white noise; THD+N is the
residual over the fundamental, so a residual of noise alone falls 1 dB
for each dB the level rises (handbook identity); a first-order high-pass
|H| = 1/sqrt(1 + (fc/f)^2) (circuit theory). The virtual interface's noise
(-110 dBFS from the converter out, -110 dBFS into the converter in, over
20 Hz-20 kHz) and its 3 Hz input coupling are its documented parameters
(docs/virtual-bench.md); the JACK loopback is a digital wire.
"""

from __future__ import annotations

import json
import math
import shutil

from pathlib import Path

import numpy as np
import pytest

from conftest import run_cli, the_run

PROFILE = Path(__file__).resolve().parents[1] / "calibration" / "virtual-interface.json"


def _a_weighting_db(f):
    """IEC 61672-1 A-weighting, its analog pole-zero formula, 0 dB at 1 kHz."""
    f2 = np.asarray(f, float) ** 2
    ra = 12194.0**2 * f2**2 / ((f2 + 20.6**2) * np.sqrt((f2 + 107.7**2) * (f2 + 737.9**2)) * (f2 + 12194.0**2))
    return 20 * np.log10(ra) + 2.00


@pytest.fixture(scope="module")
def selftest(tmp_path_factory):
    bench = tmp_path_factory.mktemp("loopback") / "bench"
    res = run_cli("loopback", "--duration", "2", "--starts", "3", "--bench", str(bench), "--json")
    assert res.returncode == 0, res.stderr
    return json.loads(res.stdout), bench, res.stderr


def test_the_noise_floor_is_both_converters_noise_and_a_weighting_takes_its_share(selftest):
    doc, _bench, _err = selftest
    both = 10 * math.log10(2 * 10 ** (-110.0 / 10))  # two independent -110 dBFS noises, in power
    assert doc["noise_dbfs"] == pytest.approx(both, abs=0.3)
    f = np.linspace(20.0, 20000.0, 200001)
    share = 10 * np.log10(np.mean(10 ** (_a_weighting_db(f) / 10)))  # white noise: the mean of |A|^2 over the band
    assert doc["noise_a_dbfs"] - doc["noise_dbfs"] == pytest.approx(share, abs=0.3)
    # volts at the interface's own input: its 2 V peak per FS (no pad in a loopback)
    assert doc["volts_per_fs"] == 2.0
    assert doc["noise_vrms"] == pytest.approx(10 ** (doc["noise_dbfs"] / 20) / math.sqrt(2) * 2.0, rel=1e-6)


def test_the_residual_at_low_levels_is_the_noise_over_the_tone(selftest):
    doc, _bench, _err = selftest
    rows = {round(r["drive_dbfs"]): r for r in doc["levels"]}
    for level in (-60, -50, -40):
        r = rows[level]
        assert r["thdn_db"] == pytest.approx(doc["noise_dbfs"] - r["level_dbfs"], abs=0.3)
        assert r["residual_dbfs"] == pytest.approx(r["level_dbfs"] + r["thdn_db"], abs=1e-9)
    assert doc["best_thdn_db"] == min(r["thdn_db"] for r in doc["levels"])


def test_the_response_is_the_input_coupling_and_both_inputs_match(selftest):
    doc, _bench, _err = selftest
    by_f = {round(r["frequency_hz"], 1): r for r in doc["response"]}  # (as measured: within a hair of as played)
    for f in (20.0, 31.5, 50.0):
        assert by_f[f]["gain_db"] == pytest.approx(-10 * math.log10(1 + (3.0 / f) ** 2), abs=0.01)
    assert doc["other_channel"] == 2 and doc["worst_match_db"] < 0.01 and doc["worst_phase_deg"] < 0.05


def test_the_round_trip_at_each_start_and_the_stream_without_dropouts(selftest):
    doc, bench, err = selftest
    lat = doc["latencies_samples"]
    assert len(lat) == 3 and all(300 <= n < 3000 for n in lat)  # the virtual bench's simulated range
    assert doc["latency_spread_samples"] == max(lat) - min(lat)
    assert doc["latency_ms"] == pytest.approx(1e3 * np.mean(lat) / 48000.0)
    assert doc["dropouts"] == 0 and doc["stream_s"] == 2.0
    run = the_run(bench)
    for name in ("loopback.png", "loopback.levels.csv", "loopback.response.csv", "levels.wav", "response.wav",
                 "noise.wav", "start3.wav", "stream.wav"):
        assert (run / name).is_file(), name
    again = json.loads(run_cli("log", "reanalyse", "last", "--bench", str(bench), "--json").stdout)
    assert again["levels"] == doc["levels"] and again["noise_dbfs"] == doc["noise_dbfs"]


def test_the_floor_goes_into_the_calibration_profile(tmp_path):
    from benchkit.calibration import load_profile

    profile = tmp_path / "cal.json"
    shutil.copy(PROFILE, profile)
    res = run_cli("loopback", "--duration", "1", "--starts", "2", "--calibration", str(profile), "--bench",
                  str(tmp_path / "bench"), "--json")
    assert res.returncode == 0, res.stderr
    doc = json.loads(res.stdout)
    floor = load_profile(profile).interface_floor
    assert floor["thdn_db"] == [r["thdn_db"] for r in doc["levels"]]
    assert floor["levels_dbfs"] == [r["level_dbfs"] for r in doc["levels"]]
    assert floor["noise_dbfs"] == doc["noise_dbfs"] and "loopback run" in floor["source"]
    # its THD+N's frequency, and the span of the response's frequencies around it where the response
    # steps' THD+N stays within 3 dB of the one nearest 997 Hz (recomputed here from the result's rows)
    assert floor["frequency_hz"] == 997.0
    rows = sorted(doc["response"], key=lambda r: r["frequency_hz"])
    k = min(range(len(rows)), key=lambda i: abs(rows[i]["frequency_hz"] - 997.0))
    lo, hi = floor["flat_hz"]
    assert lo <= 1000.0 <= hi
    inside = [r for r in rows if lo * 0.999 <= r["frequency_hz"] <= hi * 1.001]
    assert all(abs(r["thdn_db"] - rows[k]["thdn_db"]) <= 3.0 for r in inside)
    assert f"stored the interface's floor in {profile}" in res.stderr
    # a later run with the profile states the floor and marks the step within 6 dB of it: a stage
    # without noise or ripple of its own leaves the interface's noise as the residual at -60 dBFS; at -6
    # dBFS the stage's distortion stands far above the interface's -100 dB
    tone = run_cli("tone", "--calibration", str(profile), "--level", "-60dBFS", "--level", "-6dBFS", "--sim-param",
                   "noise_uv=0", "--sim-param", "ripple_mv=0", "--bench", str(tmp_path / "bench"), "--json")
    assert tone.returncode == 0, tone.stderr
    steps = json.loads(tone.stdout)["steps"]
    low, high = sorted(steps, key=lambda st: st["drive_dbfs"])
    assert "thdn_db" in low.get("near_interface_floor", []) and "thdn_db" not in high.get("near_interface_floor", [])
    assert "interface floor" in tone.stderr
    # the floor changes no scale: the profile's hash, which runs compare by, stays as it was
    assert load_profile(profile).digest() == load_profile(PROFILE).digest()
    # noise over another band than the floor's is another figure: not judged against it
    noise = run_cli("noise", "--calibration", str(profile), "--duration", "1", "--bandwidth", "400:4000", "--yes",
                    "--bench", str(tmp_path / "bench"), "--json")
    assert noise.returncode == 0, noise.stderr
    doc = json.loads(noise.stdout)
    assert "interface_floor_margin_db" not in doc and "near_interface_floor" not in doc


def test_every_take_of_a_repeated_self_test_is_a_loopback(tmp_path):
    # the virtual bench is wired as a loopback for each take (and back as it was after): both takes read
    # both inputs alike and the level at the input as driven (through the stage it would not)
    bench = tmp_path / "bench"
    res = run_cli("loopback", "--repeat", "2", "--duration", "1", "--starts", "2", "--bench", str(bench))
    assert res.returncode == 0, res.stderr
    run = the_run(bench)
    for take in ("take-1", "take-2"):
        doc = json.loads((run / take / "loopback.json").read_text())
        assert doc["worst_match_db"] < 0.01, take
        assert all(abs(r["level_dbfs"] - r["drive_dbfs"]) < 0.05 for r in doc["levels"]), take


def test_too_few_starts_are_refused_in_one_line(tmp_path):
    res = run_cli("loopback", "--starts", "1", "--bench", str(tmp_path / "bench"))
    assert res.returncode != 0 and "--starts must be at least 2" in res.stderr and "Traceback" not in res.stderr
    assert not list((tmp_path / "bench").glob("runs/*/levels.wav"))
    stereo = run_cli("loopback", "--sim-stereo", "--bench", str(tmp_path / "bench"))
    assert stereo.returncode != 0 and "no stereo stage" in stereo.stderr and "Traceback" not in stereo.stderr


def test_a_session_that_starts_with_the_self_test_reports_the_floor_it_found(tmp_path):
    # the plan's calibration takes the self-test's floor; the tone step after it is judged against it,
    # and the session's HTML report states the floor beside that run's figures
    shutil.copy(PROFILE, tmp_path / "cal.json")
    (tmp_path / "plan.toml").write_text('[stage]\nname = "Test stage B-2 (invented)"\nload = 8\ncalibration = "cal.json"\n\n'
                                       '[[measure]]\nkind = "loopback"\nduration = 1\nstarts = 2\nyes = true\n\n'
                                       '[[measure]]\nkind = "tone"\nlevel = ["-60dBFS"]\n')
    bench = tmp_path / "bench"
    res = run_cli("plan", "run", str(tmp_path / "plan.toml"), "--bench", str(bench))
    assert res.returncode == 0, res.stderr
    (session,) = [p.name for p in (bench / "sessions").iterdir()]
    page = tmp_path / "report.html"
    rep = run_cli("report", session, "--bench", str(bench), "--file", str(page))
    assert rep.returncode == 0, rep.stderr
    text = page.read_text()
    assert text.count("interface floor (loopback run") == 1  # the tone's section; the self-test is not judged by itself
