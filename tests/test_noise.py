"""Noise, A-weighting and hum.

References: the A-weighting table of IEC 61672-1 at the exact base-10
frequencies 1000 x 10^(n/10) Hz (values from memory of the table,
REFERENCES.md; tolerance 0.1 dB as the table's own rounding); the noise
power of white noise of variance s^2 sampled at fs: a one-sided density
2 s^2 / fs, so s^2 (2/fs) (f_hi - f_lo) over a band (Parseval), and
s^2 (2/fs) times the integral of |A(f)|^2 A-weighted (scipy.integrate.quad
as the independent integrator); a sine of amplitude a has RMS a / sqrt(2).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.integrate

from benchkit.analysis.noise import analyze_noise
from benchkit.analysis.weighting import a_weighting_db, a_weighting_power

# IEC 61672-1 A-weighting, dB, by the band number n of 1000 x 10^(n/10) Hz (from memory, REFERENCES.md)
TABLE = {-20: -70.4, -17: -50.5, -15: -39.4, -13: -30.2, -10: -19.1, -7: -10.9, -3: -3.2, 0: 0.0, 3: 1.2,
         6: 1.0, 9: -1.1, 10: -2.5, 12: -6.6, 13: -9.3}


@pytest.mark.parametrize("n, want", sorted(TABLE.items()))
def test_a_weighting_matches_the_iec_table(n, want):
    assert a_weighting_db(1000 * 10 ** (n / 10)) == pytest.approx(want, abs=0.1)


def test_a_weighting_at_a_nominal_label_is_not_the_table_value():
    # REFERENCES.md: at a nominal 31.5 Hz the formula gives -39.53 dB, the
    # table's -39.4 belongs to 31.62 Hz
    assert a_weighting_db(31.5) == pytest.approx(-39.53, abs=0.01)


RATE = 48000.0


def _white(sigma, seconds=20.0, seed=1):
    return np.random.default_rng(seed).normal(0.0, sigma, int(RATE * seconds))


def test_white_noise_unweighted_and_a_weighted_match_the_integrals():
    sigma = 1e-3
    r = analyze_noise(_white(sigma), RATE)
    density = 2 * sigma**2 / RATE
    want = math.sqrt(density * (20000.0 - 20.0))
    a_int, _err = scipy.integrate.quad(lambda f: float(a_weighting_power(f)), 20.0, 20000.0, limit=400)
    want_a = math.sqrt(density * a_int)
    assert 20 * math.log10(r.rms_fs / want) == pytest.approx(0.0, abs=0.2)
    assert 20 * math.log10(r.a_rms_fs / want_a) == pytest.approx(0.0, abs=0.2)
    assert r.a_rms_fs < r.rms_fs  # white noise: the A curve takes more than it adds


def test_hum_lines_are_called_out_with_their_levels():
    t = np.arange(int(RATE * 10)) / RATE
    hum = 1e-4 * np.sin(2 * np.pi * 50 * t) + 3e-5 * np.sin(2 * np.pi * 150 * t + 0.3)
    r = analyze_noise(_white(1e-6, 10.0) + hum, RATE, volts_per_fs=20.0)
    assert r.mains_hz == 50.0
    lines = {h.order: h for h in r.hum}
    assert set(lines) == {1, 3}
    assert lines[1].level_vrms == pytest.approx(1e-4 / math.sqrt(2) * 20.0, rel=0.02)
    assert lines[3].level_vrms == pytest.approx(3e-5 / math.sqrt(2) * 20.0, rel=0.02)
    r60 = analyze_noise(_white(1e-6, 10.0) + 1e-4 * np.sin(2 * np.pi * 60 * t), RATE)
    assert r60.mains_hz == 60.0 and r60.hum[0].order == 1


@pytest.mark.parametrize("mains, lines", [(50.0, {1: 1e-4, 3: 3e-5}), (60.0, {2: 2e-5, 4: 7e-6, 5: 1e-5})])
def test_the_hum_total_is_the_power_sum_of_its_lines(mains, lines):
    # lines of peak a have RMS a / sqrt(2); uncorrelated lines add in power
    # (Parseval), so the total is sqrt(sum a^2 / 2)
    t = np.arange(int(RATE * 10)) / RATE
    x = _white(1e-6, 10.0) + sum(a * np.sin(2 * np.pi * mains * k * t + k) for k, a in lines.items())
    r = analyze_noise(x, RATE)
    want = math.sqrt(sum(a * a / 2 for a in lines.values()))
    # dBFS of an RMS: re the RMS of a full-scale sine, 1 / sqrt(2) (AES17)
    assert r.to_dict()["hum_dbfs"] == pytest.approx(20 * math.log10(want * math.sqrt(2)), abs=0.1)
    assert r.hum_rms_fs == pytest.approx(want, rel=0.02)


@pytest.mark.parametrize("orders, cause", [((2, 4), "rectifier ripple"), ((1, 3), "grounding")])
def test_hum_advice_tells_ripple_from_pickup(orders, cause):
    # common practice: a full-wave rectifier's ripple lies at twice the
    # mains frequency and its multiples; pickup at the mains and its odd multiples
    t = np.arange(int(RATE * 4)) / RATE
    x = _white(1e-6, 4.0) + sum(3e-4 / k * np.sin(2 * np.pi * 50 * k * t) for k in orders)
    r = analyze_noise(x, RATE)
    assert any(cause in w for w in r.warnings), r.warnings


def test_an_offset_or_ultrasonic_content_is_not_a_burst():
    # Gaussian noise's peak over RMS stays near 5 over 4 s (its tail: the
    # chance of 5.5 sigma per sample is about 4e-8); a 0.002 FS offset, or
    # a 30 kHz tone out of the band, leaves the band's noise as steady as it was
    x = _white(1e-5, 4.0)
    for extra in (0.002, 1e-3 * np.sin(2 * np.pi * 30000 * np.arange(x.size) / 96000)):
        r = analyze_noise(x + extra, RATE if np.isscalar(extra) else 96000)
        assert not any("crest" in w for w in r.warnings), r.warnings
    clicks = x.copy()
    clicks[:: int(RATE)] += 0.01  # a click a second: 1000 times the RMS
    assert any("crest" in w for w in analyze_noise(clicks, RATE).warnings)


def test_nan_samples_are_refused_by_every_analysis():
    from benchkit.analysis.imd import analyze_imd
    from benchkit.analysis.tone import analyze_tone
    from benchkit.errors import BenchkitError

    x = _white(1e-3, 1.0)
    x[100] = np.nan
    for analysis in (lambda: analyze_noise(x, RATE), lambda: analyze_tone(x, RATE),
                     lambda: analyze_imd(x, RATE, method="modulation")):
        with pytest.raises(BenchkitError, match="1 NaN or infinite"):
            analysis()


def test_snr_is_referred_to_the_stated_output():
    # 1 W into 8 ohm is 2.828 Vrms (circuit theory: V = sqrt(P R))
    sigma = 1e-4
    r = analyze_noise(_white(sigma), RATE, volts_per_fs=20.0, reference_vrms=math.sqrt(8.0), reference="1 W into 8 ohm")
    assert r.snr_db(False) == pytest.approx(20 * math.log10(math.sqrt(8.0) / r.vrms), abs=1e-9)
    assert r.snr_db(True) > r.snr_db(False)
    d = r.to_dict()
    assert d["noise_dbv"] == pytest.approx(20 * math.log10(r.vrms), abs=1e-9)


def test_noise_command_files_a_run_and_compares(tmp_path):
    import json

    from conftest import run_cli, run_folders

    bench = tmp_path / "bench"
    docs = []
    for bias in ("0.8", "1.2"):
        res = run_cli("noise", "--duration", "2", "--load", "8", "--sim-param", f"bias={bias}", "--tag", f"bias={bias}A",
                      "--bench", str(bench), "--json")
        assert res.returncode == 0, res.stderr
        docs.append(json.loads(res.stdout))
    d = docs[-1]
    assert d["kind"] == "noise" and d["noise_a_vrms"] < d["noise_vrms"]
    # SNR re 1 W into 8 ohm: 2.828 Vrms over the noise (circuit theory: V = sqrt(P R))
    assert d["snr_db"] == pytest.approx(20 * math.log10(math.sqrt(8.0) / d["noise_vrms"]), abs=1e-6)
    # the virtual stage's supply ripple: full-wave, so 100 and 200 Hz, of 50 Hz mains
    assert d["mains_hz"] == 50.0 and {h["freq_hz"] for h in d["hum"]} >= {100.0}
    folder = run_folders(bench)[-1]
    assert (folder / "capture.noise.png").exists() and (folder / "capture.noise.csv").exists()
    off = run_cli("analyze", str(folder / "capture.wav"), "--load", "8", "--json")
    assert off.returncode == 0, off.stderr
    assert json.loads(off.stdout)["noise_vrms"] == pytest.approx(d["noise_vrms"], rel=1e-9)
    comp = run_cli("compare", "--last", "2", "--bench", str(bench), "--json")
    assert comp.returncode == 0, comp.stderr
    names = {x["name"] for x in json.loads(comp.stdout)["deltas"]}
    assert {"noise_a_vrms", "snr_db", "snr_a_db"} <= names
