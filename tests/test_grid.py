"""Distortion across frequency and level (the grid kind) against its
outside references.

The stage: a first-order low-pass at fc, then y = g v + a2 v^2 + a3 v^3
(the virtual bench's filtered-poly). For v = B cos, B = A |H(f)| with
|H(f)| = 1 / sqrt(1 + (f / fc)^2) (first-order low-pass, circuit theory),
the power-reduction identities give H1 = g B + 3 a3 B^3 / 4, H2 = a2 B^2 / 2,
H3 = a3 B^3 / 4. ISO 266 lists the preferred third-octave frequencies.
"""

from __future__ import annotations

import json
import math

import pytest

from benchkit.kinds.grid import preferred_thirds
from conftest import run_cli, run_folders

A2, A3, FC, GAIN = 0.1, 0.05, 2000.0, 10.0


def _expected_dbc(drive_dbfs: float, f: float, out_vpk_per_fs: float) -> dict[int, float]:
    b = 10 ** (drive_dbfs / 20) * out_vpk_per_fs / math.sqrt(1 + (f / FC) ** 2)
    h1 = GAIN * b + 3 * A3 * b**3 / 4
    return {2: 20 * math.log10(A2 * b**2 / 2 / h1), 3: 20 * math.log10(A3 * b**3 / 4 / h1)}


def test_the_grid_follows_the_identities_through_a_low_pass_then_a_polynomial(tmp_path):
    # every cell's H2 and H3 within 0.1 dB of the identities on the filtered amplitude, where the
    # harmonic stands 20 dB over the cell's noise; the harmonics fall above the corner (H2 as B, H3 as B^2)
    bench = tmp_path / "bench"
    res = run_cli("grid", "--sim", "filtered-poly", *(f"--sim-param={k}={v}" for k, v in
                                                      (("a2", A2), ("a3", A3), ("fc", FC), ("gain", GAIN))),
                  "--at", "200", "--at", "2000", "--at", "5000", "--level", "-20dBFS", "--level", "-10dBFS",
                  "--bench", str(bench), "--json")
    assert res.returncode == 0, res.stderr
    doc = json.loads(res.stdout)
    (folder,) = run_folders(bench)
    scale = json.loads((folder / "capture.json").read_text())["output_vpk_per_fs"]
    assert doc["kind"] == "grid" and doc["frequencies_hz"] == [200.0, 2000.0, 5000.0] and doc["levels_dbfs"] == [-20.0, -10.0]
    checked = {2: 0, 3: 0}
    for cell in doc["steps"]:
        want = _expected_dbc(cell["drive_dbfs"], cell["frequency_hz"], scale)
        for h in cell["harmonics"]:
            if h["order"] in want and h["level_dbfs"] >= cell["noise_dbfs"] + 20:
                assert h["level_dbc"] == pytest.approx(want[h["order"]], abs=0.1), (cell["frequency_hz"], h)
                checked[h["order"]] += 1
    assert checked[2] >= 5 and checked[3] >= 2, checked  # (H2 at 5 kHz, -20 dBFS stands 12 dB over its noise)
    # the files: the result, a row a cell (H2 and H3 with their state), the plot
    rows = (folder / "capture.grid.csv").read_text().splitlines()
    assert len(rows) == 1 + 6 and rows[0].startswith("frequency_hz,drive_dbfs,") and "h2_state" in rows[0]
    assert (folder / "capture.grid.png").stat().st_size > 10_000


def test_preferred_third_octave_frequencies_are_iso_266s():
    # ISO 266 (R10 series, nominal values; from memory): 20 Hz to 20 kHz is 31 of them
    got = preferred_thirds(20, 20000)
    assert len(got) == 31 and got[:8] == [20, 25, 31.5, 40, 50, 63, 80, 100]
    assert got[-6:] == [6300, 8000, 10000, 12500, 16000, 20000]


def test_levels_as_output_powers_give_those_powers_and_two_runs_compare(tmp_path):
    # --at-power 0.5 and 2 W into 8 ohm: each level's drive from the measured gain, so the cells at
    # 1 kHz make those powers (P = Vrms^2 / R); two such runs (bias 0.8 A and 1.2 A) compare, overlaid
    bench = tmp_path / "bench"
    for bias in ("0.8", "1.2"):
        res = run_cli("grid", "--load", "8", "--at-power", "0.5", "--at-power", "2", "--at", "100", "--at", "1000",
                      "--sim-param", f"bias={bias}", "--tag", f"bias={bias}A", "--bench", str(bench), "--json")
        assert res.returncode == 0, res.stderr
        doc = json.loads(res.stdout)
        at_1k = sorted((c for c in doc["steps"] if c["frequency_hz"] == 1000.0), key=lambda c: c["drive_dbfs"])
        assert [c["power_w"] for c in at_1k] == pytest.approx([0.5, 2.0], rel=0.02)
        assert doc["powers_w"] == [0.5, 2.0]
    cmp = run_cli("compare", "--last", "2", "--bench", str(bench))
    assert cmp.returncode == 0, cmp.stderr
    assert "THD+N, worst over the band" in cmp.stdout
    (folder,) = (bench / "comparisons").iterdir()
    assert (folder / "overlay.png").exists()


# --- power bandwidth ------------------------------------------------------------------

def test_power_bandwidth_falls_3_db_where_the_output_low_pass_says(tmp_path):
    # hard clipping at vclip, then a first-order low-pass at fc (circuit theory): the largest clean
    # fundamental is vclip |H(f)|, so the power at the limit goes as |H(f)|^2 = 1 / (1 + (f / fc)^2), and
    # against 1 kHz it falls 3 dB where 1 + (f / fc)^2 = 2 (1 + (1000 / fc)^2): f = fc sqrt(1.5) for fc = 2 kHz,
    # 2449 Hz. The limit's harmonics are filtered too (3 f more than f), which moves it up by a few percent.
    fc = 2000.0
    bench = tmp_path / "bench"
    res = run_cli("power-bandwidth", "--sim", "hard-clip", "--sim-param", f"fc={fc:g}", "--load", "8", "--start", "-14",
                  *(a for f in (1000, 2000, 2500, 3000) for a in ("--at", str(f))), "--bench", str(bench), "--json")
    assert res.returncode == 0, res.stderr
    doc = json.loads(res.stdout)
    assert doc["kind"] == "power-bandwidth" and doc["reference_hz"] == 1000.0 and doc["low_3db_hz"] is None
    assert doc["high_3db_hz"] == pytest.approx(fc * math.sqrt(1.5), rel=0.04)
    ref = doc["reference_power_w"]
    for p in doc["points"]:
        assert p["power_w"] / ref == pytest.approx((1 + (1000 / fc) ** 2) / (1 + (p["frequency_hz"] / fc) ** 2), rel=0.05)
    (folder,) = run_folders(bench)
    assert sorted(x.name for x in folder.glob("capture-*Hz.wav")) == [f"capture-{f}Hz.wav" for f in (1000, 2000, 2500, 3000)]
    again = run_cli("log", "reanalyse", folder.name, "--bench", str(bench))
    assert again.returncode == 0, again.stderr
    redone = json.loads((folder / "capture.power-bandwidth.json").read_text())
    assert redone["high_3db_hz"] == pytest.approx(doc["high_3db_hz"], rel=1e-9)


def test_the_corners_interpolate_in_log_frequency_and_power():
    from benchkit.kinds.power_bandwidth import corners

    # a first-order roll-off sampled densely: the -3 dB points re 1 kHz of 1 / (1 + (f / 5000)^2) and of its
    # high-pass mirror 1 / (1 + (50 / f)^2) (circuit theory), each side where it falls
    freqs = [10 * 1.05**k for k in range(170)]
    powers = [1 / ((1 + (f / 5000) ** 2) * (1 + (50 / f) ** 2)) for f in freqs]
    low, high = corners(freqs, powers)
    ref = 1 / ((1 + 0.04) * (1 + 0.0025))
    def p(f):
        return 1 / ((1 + (f / 5000) ** 2) * (1 + (50 / f) ** 2))
    assert p(low) == pytest.approx(ref / 2, rel=0.005) and p(high) == pytest.approx(ref / 2, rel=0.005)
    assert low < 100 < 3000 < high
    assert corners([100, 1000], [1.0, 1.0]) == (None, None)


def test_a_frequency_whose_distortion_lies_above_the_band_is_refused(tmp_path):
    res = run_cli("power-bandwidth", "--load", "8", "--at", "10000", "--bench", str(tmp_path / "bench"))
    assert res.returncode == 2 or res.returncode == 1, res.stderr
    assert "third harmonic lies above the 20000 Hz band" in res.stderr and "Traceback" not in res.stderr


@pytest.mark.parametrize("exponent", [2.0, 0.5])
def test_a_corners_uncertainty_agrees_with_a_monte_carlo_of_its_powers(exponent):
    # JCGM 101 (propagation by Monte Carlo) against the law of propagation corner_u applies (JCGM 100
    # 5.1.2): powers on a straight line in log-log, P = (f / 1 kHz)^-n, each with 1 % of own standard
    # uncertainty; the chain's shared part (here 3 %) cancels in their ratio and must not count. n = 2 puts
    # the corner next to the reference (one of its two points), n = 0.5 between two others
    import numpy as np

    from benchkit.kinds.power_bandwidth import corner_u, corners

    freqs = [1000.0, 2000.0, 4000.0, 8000.0]
    truth = [(f / 1000.0) ** -exponent for f in freqs]
    points = [{"frequency_hz": f, "power_w": p, "power_u_w": p * math.hypot(0.01, 0.03), "power_shared_u_w": 0.03 * p}
              for f, p in zip(freqs, truth)]
    high = corners(freqs, truth)[1]
    assert high == pytest.approx(1000 * 10 ** (0.3 / exponent), rel=1e-9)  # (f / 1 kHz)^n = 10^0.3
    rng = np.random.default_rng(1)
    shared = 1 + 0.03 * rng.standard_normal(20000)
    draws = [corners(freqs, [p * s * (1 + 0.01 * rng.standard_normal()) for p in truth])[1] for s in shared]
    assert corner_u(points, high, 1000.0) == pytest.approx(np.std(draws), rel=0.08)


def test_the_grids_top_level_comes_from_the_newest_power_run_into_the_same_load(tmp_path):
    # no budget given: the top level is 80 % of the power at 1 % that a logged power run into 8 ohm found,
    # and the cell at 1 kHz makes that power (P = Vrms^2 / R)
    bench = tmp_path / "bench"
    power = run_cli("power", "--load", "8", "--limit", "1", "--start", "-16", "--bench", str(bench), "--json")
    assert power.returncode == 0, power.stderr
    watts = json.loads(power.stdout)["power_at_limit_w"]["1"]
    res = run_cli("grid", "--load", "8", "--at", "1000", "--bench", str(bench), "--json")
    assert res.returncode == 0, res.stderr
    doc = json.loads(res.stdout)
    assert doc["powers_w"] == pytest.approx([0.1, 1.0, 0.8 * watts])
    top = max(doc["steps"], key=lambda c: c["drive_dbfs"])
    assert top["power_w"] == pytest.approx(0.8 * watts, rel=0.03)
    assert "of power run" in res.stderr
