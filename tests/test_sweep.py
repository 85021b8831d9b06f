"""Frequency response: synchronized sweeps and stepped sines against their
published formulas, scipy and circuit theory.

Novak, Lotton, Simon, JAES 63(10) 2015: L = round(f1 T / ln(f2/f1)) / f1,
T^ = L ln(f2/f1); the k-th harmonic response lies L ln k before the linear
one (also Farina, AES 108th Convention 2000). A known linear filter is
compared with scipy.signal.sosfreqz; a memoryless polynomial with the
power-reduction identities; the coupling-capacitor corner with
f = 1 / (2 pi R C) (circuit theory; 2200 uF into 8 ohm = 9.04 Hz).
"""

from __future__ import annotations

import json
from pathlib import Path
import math
from fractions import Fraction

import numpy as np
import pytest
import scipy.signal as ss
import soundfile as sf

from benchkit.analysis import response as resp
from benchkit.analysis.sweep import SyncSweep, deconvolve, measure, separate, steady_lines
from benchkit.analysis.tone import analyze_tone
from benchkit.capture.virtual import virtual_bench
from benchkit.errors import BenchkitError
from benchkit.kinds.sweep import response_run
from conftest import GlitchingBench, run_cli, the_run

RATE = 96000
CORNER_HZ = 1 / (2 * math.pi * 8 * 2200e-6)  # 9.04 Hz


def test_sweep_design_follows_novak():
    # REFERENCES.md: f1 = 20, f2 = 20k, T = 5 s gives L = 0.7 s, T^ = 4.835 s
    sw = SyncSweep.design(20.0, 20000.0, 5.0, 48000, faded=False)
    assert sw.L == pytest.approx(0.7)
    assert sw.duration_s == pytest.approx(4.835, abs=0.001)
    assert sw.harmonic_delay_s(3) == pytest.approx(0.7 * math.log(3))
    x = sw.samples()
    assert x.size == int(sw.duration_s * 48000)
    # its instantaneous frequency f1 exp(t/L) reaches f2 at T^: the phase
    # step between the last two samples is 2 pi f2 / fs
    phase = 2 * np.pi * sw.f1_hz * sw.L * (np.exp(np.arange(x.size)[-2:] / 48000 / sw.L) - 1)
    assert np.diff(phase)[0] / (2 * np.pi) * 48000 == pytest.approx(20000.0, rel=1e-3)
    # benchkit's own sweep is the same sweep with fades at its ends
    faded = SyncSweep.design(20.0, 20000.0, 5.0, 48000).samples()
    mid = slice(x.size // 3, 2 * x.size // 3)
    assert np.array_equal(faded[mid], x[mid]) and faded[0] == 0 and abs(faded[-1]) < 1e-3


def _filter():
    bb, ab = ss.iirpeak(3000, 2, fs=RATE)  # a resonance added to the through path: +6 dB peak at 3 kHz
    return np.vstack([
        ss.butter(2, 10, "highpass", fs=RATE, output="sos"),
        ss.butter(2, 40000, "lowpass", fs=RATE, output="sos"),
        ss.tf2sos(ab + bb, ab),
    ])


@pytest.mark.parametrize("faded", [True, False])
def test_linear_filter_matches_sosfreqz(faded):
    # the sweep starts at 10 Hz, one octave below the lowest frequency checked
    sw = SyncSweep.design(10.0, 40000.0, 10.0, RATE, faded=faded)
    sos = _filter()
    y = ss.sosfilt(sos, np.concatenate([sw.samples(), np.zeros(RATE)]))
    f = np.geomspace(20, 20000, 80)
    r = measure(y, sw, orders=3, freqs=f)
    _, h = ss.sosfreqz(sos, worN=f, fs=RATE)
    assert np.max(np.abs(20 * np.log10(np.abs(r.linear) / np.abs(h)))) < 0.05
    assert np.max(np.abs(np.angle(r.linear / h, deg=True))) < 1.0


def test_polynomial_after_the_filter_matches_stepped_sines_and_the_identities():
    # y = x + a2 x^2 + a3 x^3 after the filter. At the filter's output the
    # tone has amplitude B = A |H(f)|; power-reduction identities:
    # H2/H1 = (a2 B^2 / 2) / (B + 3 a3 B^3 / 4), H3/H1 = (a3 B^3 / 4) / (same)
    sos = _filter()
    amp, a2, a3 = 0.3, 0.1, 0.05

    def stage(x):
        v = ss.sosfilt(sos, x)
        return v + a2 * v**2 + a3 * v**3

    sw = SyncSweep.design(10.0, 40000.0, 8.0, RATE)
    r = measure(stage(amp * np.concatenate([sw.samples(), np.zeros(RATE)])), sw, amplitude=amp, orders=3,
                freqs=np.array([100.0, 300.0, 1000.0, 2000.0, 5000.0]), band_hz=(20.0, 20000.0))
    _, h = ss.sosfreqz(sos, worN=r.freq_hz, fs=RATE)
    for i, f in enumerate(r.freq_hz):
        b = amp * abs(h[i])
        h1 = b + 3 * a3 * b**3 / 4
        want2, want3 = 20 * math.log10(a2 * b**2 / 2 / h1), 20 * math.log10(a3 * b**3 / 4 / h1)
        # the stepped-sine method: a settled tone through the same stage, the tone core
        t = np.arange(int(1.5 * RATE)) / RATE
        tone = analyze_tone(stage(amp * np.sin(2 * np.pi * f * t))[RATE // 2:], RATE, fundamental_hz=f)
        stepped = {x.order: x.level_dbc for x in tone.harmonics}
        got2, got3 = 20 * math.log10(abs(r.harmonics[2][i])), 20 * math.log10(abs(r.harmonics[3][i]))
        assert got2 == pytest.approx(want2, abs=0.5) and got2 == pytest.approx(stepped[2], abs=0.5), f
        assert got3 == pytest.approx(want3, abs=0.5) and got3 == pytest.approx(stepped[3], abs=0.5), f


def test_harmonic_responses_lie_where_novak_puts_them():
    # a pure square-law term: all its energy lies L ln 2 before the linear response
    sw = SyncSweep.design(20.0, 20000.0, 4.0, 48000, faded=False)
    x = 0.5 * np.concatenate([sw.samples(), np.zeros(48000)])
    h = deconvolve(x**2, sw)
    peak = int(np.argmax(np.abs(h)))
    assert (h.size - peak) / 48000 == pytest.approx(sw.harmonic_delay_s(2), abs=2e-3)
    r = separate(deconvolve(x + 0.1 * x**2, sw), sw, orders=3, freqs=np.array([1000.0]))
    assert abs(r.harmonics[3][0]) < 1e-3  # no third-order term, none separated


@pytest.mark.parametrize("nfft", [150000, 150001])
def test_deconvolution_equals_the_real_transforms(nfft):
    # deconvolve's half-length complex transforms against rfft, X~(f)/fs, irfft
    # (the end bins' imaginary parts dropped, as irfft does) for an even length,
    # and the plain path for an odd one
    import scipy.fft
    sw = SyncSweep.design(20.0, 20000.0, 2.0, 48000)
    y = np.random.default_rng(7).standard_normal(sw.n_samples + 100)
    want = scipy.fft.irfft(scipy.fft.rfft(y, nfft) * sw.inverse(np.fft.rfftfreq(nfft, 1 / 48000)) / 48000, nfft)
    got = deconvolve(y, sw, nfft)
    assert got.shape == (nfft,)
    assert np.max(np.abs(got - want)) < 1e-12 * np.max(np.abs(want))


@pytest.mark.parametrize("n", [4096, 4095])
def test_rfft_bins_equal_the_real_transform(n):
    import scipy.fft
    from benchkit.analysis.sweep import _rfft_bins
    x = np.random.default_rng(8).standard_normal(n)
    bins = np.array([0, 1, 7, n // 4, n // 2 - 1, n // 2])
    want = scipy.fft.rfft(x)[bins]
    assert np.max(np.abs(_rfft_bins(x.copy(), bins) - want)) < 1e-12 * np.max(np.abs(want))


# --- derived figures (circuit theory) ---------------------------------------------


def _first_order(f, fc):
    return -10 * np.log10(1 + (fc / f) ** 2)


def test_corners_and_the_capacitor_of_a_first_order_high_pass():
    f = np.geomspace(2, 40000, 400)
    mag = _first_order(f, CORNER_HZ)
    low, high = resp.corners(f, mag, 0.0, 3.0)
    # circuit theory: -N dB where (fc/f)^2 = 10^(N/10) - 1 (-3.01 dB at fc)
    assert low == pytest.approx(CORNER_HZ / math.sqrt(10 ** 0.3 - 1), rel=1e-4) and high is None
    assert resp.corners(f, mag, 0.0, 1.0)[0] == pytest.approx(CORNER_HZ / math.sqrt(10 ** 0.1 - 1), rel=1e-4)
    fit = resp.fit_first_order_highpass(f, mag, 0.0, low)
    assert fit.fits and fit.corner_hz == pytest.approx(CORNER_HZ, rel=1e-4)
    assert resp.coupling_capacitor_f(fit.corner_hz, 8.0) == pytest.approx(2200e-6, rel=1e-4)
    assert resp.level_at(f, mag, 20.0) == pytest.approx(_first_order(20.0, CORNER_HZ), abs=1e-3)
    # a second-order (Butterworth) corner is not mistaken for a capacitor
    _, h = ss.sosfreqz(ss.butter(2, 9.0, "highpass", fs=48000, output="sos"), worN=f, fs=48000)
    b = 20 * np.log10(np.abs(h))
    assert not resp.fit_first_order_highpass(f, b, 0.0, resp.corners(f, b, 0.0, 3.0)[0]).fits


def test_smoothing_keeps_a_flat_response_flat_and_evens_out_ripple():
    f = np.geomspace(20, 20000, 500)
    assert np.allclose(resp.smooth(f, np.full(f.size, -2.0), 3), -2.0)
    wiggle = 1.0 * np.sin(40 * np.log(f))  # ripple much finer than a third of an octave
    assert np.ptp(resp.smooth(f, wiggle, 3)[50:-50]) < 0.3 * np.ptp(wiggle)


# --- the virtual stage ----------------------------------------------------------------


def test_se_class_a_low_corner_and_capacitor(tmp_path):
    # the stage's 2200 uF into 8 ohm, swept from 2 Hz; the reference input
    # divides out the interface's own 3 Hz input coupling
    r = response_run(virtual_bench("se-class-a"), tmp_path, -20.0, (2.0, 22000.0), seconds=10.0, ref_channel=2,
                     load_ohms=8.0)
    d = r.to_dict()
    assert d["scale_source"] == "reference-channel" and d["mag_units"] == "dB re 1 V/V"
    assert d["low_3db_hz"] == pytest.approx(CORNER_HZ, rel=0.03)
    assert d["low_corner_fit"]["fits"]
    assert d["coupling_capacitor_uf"] == pytest.approx(2200.0, rel=0.03)
    # the same sweep referred to the played signal alone keeps the input's
    # high-pass in the result: the corner moves (why the reference matters)
    bare = response_run(virtual_bench("se-class-a"), tmp_path, -20.0, (2.0, 22000.0), seconds=10.0,
                        load_ohms=8.0, name="bare")
    assert bare.scale_source == "reference-frequency"
    assert abs(bare.corners_3db[0] / CORNER_HZ - 1) > 0.03
    for key in ("freq_hz", "mag_db", "phase_deg"):
        assert len(d["response"][key]) == len(d["response"]["freq_hz"])
    assert {h["order"] for h in d["harmonic_responses"]} == {2, 3, 4, 5}


def test_profile_division_corrects_the_corner(tmp_path):
    from benchkit.calibrate import calibrate
    from benchkit.capture.virtual import DEMO_PAD

    bench = virtual_bench("ideal", seed=5)
    prof = calibrate(bench, bench.output_vrms(-20.0), pad=DEMO_PAD, input_ohms=10e3,
                     wire=lambda step: setattr(bench, "wiring", step))
    r = response_run(virtual_bench("se-class-a"), tmp_path, -20.0, (2.0, 22000.0), seconds=10.0, load_ohms=8.0,
                     calibration=prof)
    assert r.scale_source == "profile" and r.mag_units == "dB re 1 V/V"
    assert r.corners_3db[0] == pytest.approx(CORNER_HZ, rel=0.03)
    assert r.coupling_capacitor_f == pytest.approx(2200e-6, rel=0.03)


def test_stepped_sines_agree_with_the_sweep(tmp_path):
    bench = virtual_bench("se-class-a")
    common = dict(ref_channel=2, load_ohms=8.0)
    swept = response_run(bench, tmp_path, -20.0, (5.0, 22000.0), seconds=5.0, **common)
    stepped = response_run(bench, tmp_path, -20.0, (10.0, 20000.0), stepped=True, per_octave=2, name="stepped", **common)
    assert stepped.method == "stepped" and stepped.thdn_db is not None
    at = stepped.freq_hz
    mag = np.interp(np.log(at), np.log(swept.freq_hz), swept.mag_db)
    assert np.max(np.abs(mag - stepped.mag_db)) < 0.1
    ph = np.interp(np.log(at), np.log(swept.freq_hz), swept.phase_deg)
    assert np.max(np.abs(ph - stepped.phase_deg)) < 1.0
    # away from the supply ripple's lines, the sweep's H2 is the tones' H2
    h2_sweep = swept.harmonics[0]
    for f, lvl in zip(stepped.harmonics[0].freq_hz, stepped.harmonics[0].level_dbc):
        if 300 <= f <= 5000:
            assert np.interp(math.log(f), np.log(h2_sweep.freq_hz), h2_sweep.level_dbc) == pytest.approx(lvl, abs=1.0)


def test_steady_ripple_is_not_taken_for_distortion():
    rate = 48000
    t = np.arange(int(0.45 * rate)) / rate
    quiet = 1e-4 * np.sin(2 * np.pi * 100 * t) + 1e-7 * np.random.default_rng(1).standard_normal(t.size)
    lines = steady_lines(quiet, rate)
    assert len(lines) == 1 and lines[0] == pytest.approx(100.0, abs=1.0)


# --- offline: a sweep made elsewhere ----------------------------------------------------


def _elsewhere(tmp_path, silence: int, ppm: float = 0.0, cut_s: float = 0.0, sos=None, loopback: bool = False):
    """The formula's sweep (unit amplitude, no fades) at 48 kHz through a
    known filter (default a first-order 30 Hz high-pass), after ``silence``
    samples, written as a bare WAV; with ``loopback``, the sweep itself as
    a second channel (the reference input), on the same recorder's clock."""
    rate = 48000
    sw = SyncSweep.design(10.0, 22000.0, 6.0, rate, faded=False)
    sos = ss.butter(1, 30.0, "highpass", fs=rate, output="sos") if sos is None else sos
    played = np.concatenate([np.zeros(silence), sw.samples(), np.zeros(rate)])
    y = 0.5 * ss.sosfilt(sos, played)
    y += 1e-6 * np.random.default_rng(3).standard_normal(y.size)
    if loopback:
        y = np.stack([y, 0.5 * played + 1e-6 * np.random.default_rng(4).standard_normal(y.size)], axis=1)
    if ppm:
        q = Fraction(1 + ppm * 1e-6).limit_denominator(20000)
        y = ss.resample_poly(y, q.numerator, q.denominator, axis=0)
    if cut_s:
        y = y[: silence + int((sw.duration_s - cut_s) * rate)]
    path = tmp_path / "elsewhere.wav"
    sf.write(path, y, rate, subtype="FLOAT")
    return path, sos, rate


@pytest.mark.parametrize("silence, ppm, loopback", [(23457, 0.0, False), (23457, 40.0, True), (23457, -30.0, True),
                                                    (0, 40.0, True), (23457, 0.0, True)])
def test_offline_sweep_after_unknown_silence(tmp_path, silence, ppm, loopback):
    path, sos, rate = _elsewhere(tmp_path, silence=silence, ppm=ppm, loopback=loopback)
    # the recorder's clock as resampled: the nearest p/q to 1 + ppm 1e-6
    true_ppm = (float(Fraction(1 + ppm * 1e-6).limit_denominator(20000)) - 1) * 1e6
    res = run_cli("analyze", str(path), "--sweep", "10:22000:6", "--json", "--out", str(tmp_path / "rep"),
                  *(["--ref-channel", "2"] if loopback else []))
    assert res.returncode == 0, res.stderr
    d = json.loads(res.stdout)
    assert d["kind"] == "sweep" and d["method"] == "sweep"
    # a clock offset smears the start over ppm x the sweep's length
    assert d["sweep_start_s"] == pytest.approx(silence / rate, abs=2e-4 + abs(ppm) * 1e-6 * 7)
    f = np.array(d["response"]["freq_hz"])
    sel = (f >= 20) & (f <= 20000)
    _, h = ss.sosfreqz(sos, worN=f[sel], fs=rate)
    _, h1k = ss.sosfreqz(sos, worN=[1000.0], fs=rate)
    want = 20 * np.log10(np.abs(h) / np.abs(h1k[0]))
    # a clock offset stretches the sweep in time: the magnitude holds
    assert np.max(np.abs(np.array(d["response"]["mag_db"])[sel] - want)) < (0.05 if not ppm else 0.1)
    # circuit theory: the first-order 30 Hz corner, within 1 %
    assert d["low_3db_hz"] == pytest.approx(30.0, rel=0.01) and d["low_corner_fit"]["fits"]
    # the clock offset is read from the reference's loopback (none without
    # one), and the response referred to the reference carries none of it
    if loopback:
        assert d["clock_offset_ppm"] == pytest.approx(true_ppm, abs=0.5)
    else:
        assert d["clock_offset_ppm"] is None and any(w["code"] == "no-reference" and "no reference input" in w["text"] for w in d["warnings"])
    assert np.max(np.abs(np.angle(np.exp(1j * np.radians(np.array(d["response"]["phase_deg"])[sel]))
                                  / (h / np.abs(h)), deg=True))) < 1.0
    assert (tmp_path / "rep" / "elsewhere.response.csv").exists()


def _peaking(f0, gain_db, q, rate):
    """A peaking equaliser biquad (the audio-EQ cookbook's, common practice)."""
    a = 10 ** (gain_db / 40)
    w = 2 * math.pi * f0 / rate
    alpha = math.sin(w) / (2 * q)
    b = [1 + alpha * a, -2 * math.cos(w), 1 - alpha * a]
    den = [1 + alpha / a, -2 * math.cos(w), 1 - alpha / a]
    return ss.tf2sos(b, den)


@pytest.mark.parametrize("which", ["peaking", "lowpass"])
def test_a_stages_own_phase_is_not_taken_for_a_clock_offset(tmp_path, which):
    # equal clocks, no reference input, a stage whose phase bends (a +6 dB
    # peak at 3 kHz, Q 2; a second-order 5 kHz low-pass): no offset is made
    # up, and the phase is the filter's as scipy.signal.sosfreqz gives it,
    # up to a pure delay (a sweep found after unknown silence fixes the time
    # only as well as the stage's own delay lets it); a made-up offset's
    # bend, 2 pi f e L ln(f / f1), is no delay and would show
    rate = 48000
    sos = _peaking(3000.0, 6.0, 2.0, rate) if which == "peaking" else ss.butter(2, 5000.0, fs=rate, output="sos")
    path, sos, rate = _elsewhere(tmp_path, silence=12000, sos=sos)
    res = run_cli("analyze", str(path), "--sweep", "10:22000:6", "--json", "--ref-freq", "100")
    assert res.returncode == 0, res.stderr
    d = json.loads(res.stdout)
    assert d["clock_offset_ppm"] is None
    f = np.array(d["response"]["freq_hz"])
    sel = (f >= 20) & (f <= 19500)
    _, h = ss.sosfreqz(sos, worN=f[sel], fs=rate)
    got = np.exp(1j * np.radians(np.array(d["response"]["phase_deg"])[sel]))
    err = np.unwrap(np.angle(got / (h / np.abs(h))))
    delay = np.polyfit(2 * np.pi * f[sel], err, 1)[0]
    assert abs(delay) * rate < 3.0  # samples
    assert np.max(np.abs(np.degrees(err - 2 * np.pi * f[sel] * delay - np.mean(err - 2 * np.pi * f[sel] * delay)))) < 1.0


def test_truncated_sweep_is_a_clear_error(tmp_path):
    path, _sos, _rate = _elsewhere(tmp_path, silence=4800, cut_s=1.0)
    res = run_cli("analyze", str(path), "--sweep", "10:22000:6")
    assert res.returncode == 1 and "truncated" in res.stderr and "Traceback" not in res.stderr
    assert len(res.stderr.strip().splitlines()) == 1
    bad = run_cli("analyze", str(path), "--sweep", "10:22000")
    assert bad.returncode == 1 and "F1:F2:SECONDS" in bad.stderr


def test_sweep_command_writes_reports_and_reanalyses(tmp_path):
    res = run_cli("sweep", "--span", "5:22000", "--duration", "3", "--load", "8", "--smooth", "6", "--bench", str(tmp_path), "--json")
    assert res.returncode == 0, res.stderr
    live = json.loads(res.stdout)
    assert the_run(tmp_path) == Path(live["run"]["folder"])
    out = the_run(tmp_path)
    for name in ("capture.wav", "capture.json", "capture.response.csv", "capture.response.png", "capture.distortion.png"):
        assert (out / name).exists(), name
    again = run_cli("analyze", str(out / "capture.wav"), "--load", "8", "--json")
    assert again.returncode == 0, again.stderr
    off = json.loads(again.stdout)
    assert off["ref_channel"] == 2 and off["low_3db_hz"] == pytest.approx(live["low_3db_hz"], rel=1e-9)
    # the CSV holds the raw magnitude, not the smoothed plot
    rows = np.loadtxt(out / "capture.response.csv", delimiter=",", skiprows=1, usecols=(0, 1))
    assert np.allclose(rows[:, 1], live["response"]["mag_db"], atol=1e-4)


def test_a_sweep_a_dropout_spoiled_is_played_again(tmp_path):
    # the ideal stage: a flat response (identity, 0 dB re the reference
    # input). A dropout in the first take must not reach the result: the
    # sweep plays again, the spoiled take stays on disk beside it
    common = dict(ref_channel=2, seconds=2.0)
    flaky = GlitchingBench(virtual_bench("ideal", {"gain": 1.0}), glitched={1})
    r = response_run(flaky, tmp_path / "a", -20.0, (20.0, 20000.0), **common)
    assert flaky.takes == 2 and (tmp_path / "a" / "capture.spoiled1.wav").is_file()
    band = (r.freq_hz >= 50) & (r.freq_hz <= 15000)
    assert np.max(np.abs(r.mag_db[band] - r.mag_db[band][0])) < 0.05
    # faults in every take: a clear refusal, and every take kept
    hopeless = GlitchingBench(virtual_bench("ideal", {"gain": 1.0}), glitched={1, 2, 3})
    with pytest.raises(BenchkitError, match="spoiled all 3 takes"):
        response_run(hopeless, tmp_path / "b", -20.0, (20.0, 20000.0), **common)
    assert sorted(p.name for p in (tmp_path / "b").glob("*.spoiled*.wav")) == [f"capture.spoiled{k}.wav" for k in (1, 2, 3)]


@pytest.mark.parametrize("f1, f2, seconds", [(10.0, 22000.0, 2.0), (20.0, 20000.0, 2.0), (5.0, 22000.0, 5.0),
                                             (2.0, 22000.0, 10.0), (15.0, 20000.0, 1.0)])
def test_sweep_harmonics_in_the_lowest_octaves_are_right_or_absent(f1, f2, seconds):
    # y = x + a2 x^2 + a3 x^3 on benchkit's own sweep of peak A: H2/H1 =
    # (a2 A / 2) / (1 + 3 a3 A^2 / 4), H3/H1 = (a3 A^2 / 4) / (1 + 3 a3 A^2 / 4)
    # (power-reduction identities) at every frequency. A short sweep cannot
    # read them near its start: those points are blank, from a stated
    # lowest frequency per order, and every point given is right to 0.5 dB
    # (up to 7 kHz: above, the cubic's own products alias at 48 kHz)
    rate, amp, a2, a3 = 48000, 0.5, 0.02, 0.02
    sw = SyncSweep.design(f1, f2, seconds, rate, faded=True)
    x = np.concatenate([sw.samples(amp), np.zeros(rate)])
    got = measure(x + a2 * x * x + a3 * x**3, sw, None, amplitude=amp)
    gain = 1 + 0.75 * a3 * amp * amp
    want = {2: 20 * math.log10(a2 * amp / 2 / gain), 3: 20 * math.log10(a3 * amp * amp / 4 / gain)}
    for k in (2, 3):
        level = 20 * np.log10(np.abs(got.harmonics[k]))
        shown = np.isfinite(level)
        assert np.all(~shown[got.freq_hz < got.lowest_hz[k]])
        assert shown[(got.freq_hz >= got.lowest_hz[k]) & (k * got.freq_hz <= 0.45 * rate)].all()
        check = shown & (got.freq_hz <= 7000.0)
        assert np.max(np.abs(level[check] - want[k])) < 0.5, (k, got.lowest_hz[k])
    # a longer sweep reaches lower while its pace sets the window; past
    # that, only a lower start does
    from benchkit.analysis.sweep import lowest_valid_hz, paced_by_length
    longer = SyncSweep.design(f1, f2, 2 * seconds, rate, faded=True)
    if paced_by_length(sw, 2):
        assert lowest_valid_hz(longer, 2) < lowest_valid_hz(sw, 2)
    else:
        assert lowest_valid_hz(longer, 2) == pytest.approx(lowest_valid_hz(sw, 2))


def test_the_response_near_the_sweeps_start_is_flagged_where_it_may_be_off():
    # a first-order 9 Hz high-pass (scipy.signal.butter, evaluated by
    # sosfreqz) on a 10 s sweep from 2 Hz: above the flagged frequency the
    # magnitude is the filter's within 0.1 dB
    from benchkit.analysis.sweep import lowest_flat_hz

    rate = 48000
    sw = SyncSweep.design(2.0, 22000.0, 10.0, rate, faded=True)
    sos = ss.butter(1, 9.0, "highpass", fs=rate, output="sos")
    got = measure(ss.sosfilt(sos, np.concatenate([sw.samples(0.5), np.zeros(2 * rate)])), sw, None, amplitude=0.5)
    f = got.freq_hz
    err = 20 * np.log10(np.abs(got.linear) / np.abs(ss.sosfreqz(sos, worN=f, fs=rate)[1]))
    flat = lowest_flat_hz(sw)
    assert sw.band_hz[0] < flat < 12.0
    assert np.max(np.abs(err[(f >= flat) & (f <= 20000)])) < 0.1


def _noisy_sweep_analysed(a2: float, seed: int, amp: float = 0.5, rate: int = 48000):
    """y = x + a2 x^2 plus white noise, for a 3 s sweep from 20 Hz to 20 kHz made
    elsewhere (unfaded, after half a second of silence), analysed offline."""
    from benchkit.kinds.sweep import analyze_sweep

    sw = SyncSweep.design(20.0, 20000.0, 3.0, rate, faded=False)
    x = amp * np.concatenate([np.zeros(rate // 2), sw.samples(), np.zeros(rate)])
    noisy = x + a2 * x**2 + 3e-4 * np.random.default_rng(seed).standard_normal(x.size)
    return analyze_sweep(noisy, rate, start_hz=20.0, stop_hz=20000.0, seconds=3.0, bandwidth_hz=(20.0, 20000.0))


def test_harmonics_of_noise_alone_read_as_their_floor_and_are_marked_in_the_noise():
    # Noise alone read through a window is a complex Gaussian whose power is
    # exponential with mean the floor, so its median is ln 2 times the floor,
    # -1.59 dB (handbook facts of the exponential distribution): each harmonic's
    # reads over four noise records sit there (within 1 dB: the floor is itself an
    # estimate), and THD stands in the noise nearly everywhere.
    runs = [_noisy_sweep_analysed(0.0, seed) for seed in range(4)]
    for k in range(2, 6):
        d = np.concatenate([(c.level_dbc - c.floor_dbc)[np.isfinite(c.level_dbc)]
                            for r in runs for c in r.harmonics if c.order == k])
        assert np.median(d) == pytest.approx(10 * math.log10(math.log(2)), abs=1.0), k
    for r in runs:
        measured = np.isfinite(r.thd_db)
        assert measured.sum() > 100 and r.thd_in_noise[measured].mean() > 0.95


def test_a_harmonic_far_over_the_noise_is_not_marked():
    # y = x + 0.04 x^2 at amplitude 0.5: H2 = a2 A / 2 = -40 dBc (the power-reduction
    # identity), 40 dB over the floor: no point is marked. The sweep ends abruptly, as
    # one made elsewhere may: the chirp its end deconvolves to is not taken for noise
    # (it raised the floor 30 dB round 8 kHz, and marked THD from 2 to 5 kHz, before)
    r = _noisy_sweep_analysed(0.04, 5)
    h2 = next(c for c in r.harmonics if c.order == 2)
    ok = np.isfinite(h2.level_dbc)
    assert np.median(h2.level_dbc[ok]) == pytest.approx(20 * math.log10(0.04 * 0.5 / 2), abs=0.3)
    assert np.isfinite(r.thd_db).sum() > 100 and not r.thd_in_noise.any() and not h2.in_noise.any()
    assert np.nanmax(h2.floor_dbc) < -60
