"""Offline analysis of WAV files written by the sox program, which nobody in
this project wrote (an independent generator, REFERENCES.md)."""

from __future__ import annotations

import json
import math
import subprocess

import pytest

from benchkit import analyze_tone
from benchkit.recordings import read_capture

from conftest import run_cli


def _sox(sox_path, path, *effects, dither=False, bits=16, rate=48000, seconds=1.0):
    cmd = [sox_path] + ([] if dither else ["-D"]) + ["-n", "-r", str(rate), "-b", str(bits), "-e", "signed-integer", str(path)]
    subprocess.run(cmd + ["synth", str(seconds), *effects], check=True, capture_output=True, timeout=60)
    return path


def test_sox_sine_frequency_and_level(sox_path, tmp_path):
    # sox synth writes a sine at the frequency asked for; 'gain -6' lowers it
    # by 6 dB from its full-scale peak (sox documentation, from memory)
    wav = _sox(sox_path, tmp_path / "tone.wav", "sine", "1234.5", "gain", "-6", bits=24)
    rec = read_capture(wav)
    r = analyze_tone(rec.samples, rec.sample_rate_hz)
    assert r.fundamental_hz == pytest.approx(1234.5, abs=1e-3)
    assert r.fundamental_dbfs == pytest.approx(-6.0, abs=0.05)


@pytest.mark.parametrize("dither, penalty_db", [(False, 0.0), (True, 10 * math.log10(3))])
def test_sox_16_bit_sine_sinad(sox_path, tmp_path, dither, penalty_db):
    # IEEE 1241: 6.02 N + 1.76 dB at full scale, less the level below FS;
    # sox's default dither (without -D) is TPDF of 2 LSB p-p, 4.77 dB worse
    # (Lipshitz et al. 1992; sox's default from memory)
    wav = _sox(sox_path, tmp_path / "q.wav", "sine", "997", "gain", "-1", dither=dither)
    rec = read_capture(wav)
    r = analyze_tone(rec.samples, rec.sample_rate_hz, bandwidth_hz=None)
    ideal = 6.02 * 16 + 1.76 + r.fundamental_dbfs - penalty_db
    assert r.sinad_db == pytest.approx(ideal, abs=0.3)


def test_sox_square_wave_thd_through_the_cli(sox_path, tmp_path):
    # sox's square is a sampled square: at 1 kHz and 48 kHz, 24 samples high
    # and 24 low. The Fourier series of such a sampled square (aliases
    # included) has odd harmonics H_k / H_1 = sin(pi/P) / sin(pi k/P), P = 48
    wav = _sox(sox_path, tmp_path / "sq.wav", "square", "1000", "gain", "-3", bits=24)
    res = run_cli("analyze", str(wav), "--json")
    assert res.returncode == 0, res.stderr
    doc = json.loads(res.stdout)
    period = 48

    def ratio(k):
        return math.sin(math.pi / period) / math.sin(math.pi * k / period)

    by_order = {h["order"]: h for h in doc["harmonics"]}
    for k in (3, 5, 7, 9, 11, 19):
        assert by_order[k]["level_dbc"] == pytest.approx(20 * math.log10(ratio(k)), abs=0.01)
    assert by_order[2]["level_dbc"] < -120  # no even harmonics in a symmetric square
    partial = math.sqrt(sum(ratio(k) ** 2 for k in range(3, 20, 2)))
    assert doc["thd_pct"] == pytest.approx(100 * partial, abs=0.01)
    assert doc["harmonic_profile"] == "high-order-tail"


def test_sox_two_tones_have_their_ratio_and_no_products(sox_path, tmp_path):
    # sox synth makes the pair (60 Hz and 7 kHz, one channel each) and remix
    # mixes them at 0.4 and 0.1: the 4:1 pair of the modulation method
    # (SMPTE RP120, from memory). Nothing in the pair is nonlinear, so the
    # analysis must find the ratio and no products of its own making.
    wav = _sox(sox_path, tmp_path / "pair.wav", "sine", "60", "sine", "7000", "remix", "1v0.4,2v0.1", bits=24, seconds=2.0)
    res = run_cli("analyze", str(wav), "--imd", "modulation", "--json")
    assert res.returncode == 0, res.stderr
    step = json.loads(res.stdout)["steps"][0]
    assert step["tone_ratio"] == pytest.approx(4.0, rel=1e-4)
    assert step["f1_hz"] == pytest.approx(60.0, abs=1e-3) and step["f2_hz"] == pytest.approx(7000.0, abs=1e-3)
    assert step["imd_db"] < -120.0


def test_sox_tones_give_the_divider_impedance(sox_path, tmp_path):
    # two sox tones whose amplitudes stand as 8.5 : 8, as a Thevenin source
    # behind 0.5 ohm reads open and across 8 ohm: Z = R (V_open / V_loaded - 1)
    # = 0.5 ohm (circuit theory; sox's 'vol' scales the amplitude linearly,
    # from memory of its documentation)
    open_ = _sox(sox_path, tmp_path / "open.wav", "sine", "997", "vol", "0.5", bits=24)
    loaded = _sox(sox_path, tmp_path / "loaded.wav", "sine", "997", "vol", str(0.5 * 8 / 8.5), bits=24)
    res = run_cli("analyze", str(open_), str(loaded), "--zout", "8", "--json")
    assert res.returncode == 0, res.stderr
    d = json.loads(res.stdout)
    assert d["method"] == "levels" and d["zout_ohms"] == pytest.approx(0.5, rel=0.002)
    assert d["damping_factor"] == pytest.approx(16.0, rel=0.002)


@pytest.mark.parametrize("rate", [48000, 96000])
@pytest.mark.parametrize("gain_db", [-0.07, -0.05, -0.035])
def test_a_slow_16_bit_sine_near_full_scale_is_not_called_clipped(sox_path, tmp_path, rate, gain_db):
    # sox's 20 Hz sine at 0.992-0.996 FS, 16 bits without dither: its peaks
    # rest on one code for several samples (the sine moves less than an LSB
    # there), which is rounding, not clipping; the same sine driven 0.5 dB
    # over full scale (sox clips it and says so) is clipped
    wav = _sox(sox_path, tmp_path / "slow.wav", "sine", "20", "gain", str(gain_db), rate=rate, seconds=2.0)
    rec = read_capture(wav)
    r = analyze_tone(rec.samples, rec.sample_rate_hz)
    assert not r.clipped and r.valid, r.warnings
    hot = _sox(sox_path, tmp_path / "hot.wav", "sine", "20", "gain", "0.5", rate=rate, seconds=2.0)
    rec = read_capture(hot)
    assert analyze_tone(rec.samples, rec.sample_rate_hz).clipped
