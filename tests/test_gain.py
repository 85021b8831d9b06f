"""`benchkit gain`: voltage gain in V/V and dB, with its phase.

References: circuit theory (A = Vout / Vin, 20 log10 A; the virtual pad
is divided out by the loaded-divider ratio (R2 || Rin) / (R1 + R2 || Rin)
that the bench's scale carries); a stage y = -g x inverts, so the output
lies 180 degrees from the input.
"""

from __future__ import annotations

import json
import math

import pytest

from benchkit.analysis.gain import analyze_gain
from benchkit.capture.virtual import virtual_bench
from benchkit.kinds.tone import tone_run

from conftest import run_cli


@pytest.mark.parametrize("g", [10.0, 3.3, -10.0])
def test_gain_of_a_linear_stage(g, tmp_path):
    res = run_cli("gain", "--sim", "poly", "--sim-param", f"gain={g}", "--level", "-30dBFS", "--load", "8",
                  "--bench", str(tmp_path), "--json")
    assert res.returncode == 0, res.stderr
    d = json.loads(res.stdout)
    assert d["kind"] == "gain" and d["input_source"] == "reference-channel"
    assert d["gain_vv"] == pytest.approx(abs(g), rel=1e-3)
    assert d["gain_db"] == pytest.approx(20 * math.log10(abs(g)), abs=0.01)
    assert d["inverting"] is (g < 0)
    assert abs(d["phase_deg"]) == pytest.approx(180.0 if g < 0 else 0.0, abs=0.5)
    again = run_cli("log", "reanalyse", "last", "--bench", str(tmp_path), "--json")
    assert again.returncode == 0 and json.loads(again.stdout)["gain_db"] == pytest.approx(d["gain_db"], abs=1e-9)


def test_the_calibrated_drive_gives_the_same_gain_as_the_reference_input(tmp_path):
    bench = virtual_bench("poly", {"gain": 10.0, "a2": 0.05}, seed=3)
    steps = tone_run(bench, tmp_path, 997.0, [-25.0])
    from benchkit.kinds.gain import gain_of_capture

    by_ref = gain_of_capture(tmp_path / "capture.wav", 1, 2)
    by_drive = analyze_gain(steps.steps[0].result, drive_dbfs=-25.0, output_vpk_per_fs=bench.output_vpk_per_fs)
    assert by_drive.input_source == "calibrated-drive" and by_drive.phase_deg is None
    assert by_drive.gain_db == pytest.approx(by_ref.gain_db, abs=0.02)
    # the drive's RMS from its peak scale: 2 V per FS at -25 dBFS is 2 x 10^(-25/20) / sqrt(2) Vrms
    assert by_drive.vin_vrms == pytest.approx(2.0 * 10 ** (-25 / 20) / math.sqrt(2), rel=1e-9)


def test_gain_runs_compare(tmp_path):
    for g in ("10", "12"):
        assert run_cli("gain", "--sim", "poly", "--sim-param", f"gain={g}", "--tag", f"g={g}",
                       "--bench", str(tmp_path)).returncode == 0
    comp = run_cli("compare", "--last", "2", "--bench", str(tmp_path), "--json")
    assert comp.returncode == 0, comp.stderr
    gain = {d["name"]: d for d in json.loads(comp.stdout)["deltas"]}["gain_db"]
    assert gain["changes"][0] == pytest.approx(20 * math.log10(12 / 10), abs=0.01)
