"""Tone analysis against values from outside the project (REFERENCES.md).

Each check names its source beside it.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from benchkit import analyze_tone
from benchkit.errors import BenchkitError

from conftest import cosine

RATE = 48000


# --- trigonometric power-reduction identities --------------------------------


@pytest.mark.parametrize("h2_dbc, h3_dbc", [(-40.0, -60.0), (-80.0, -95.0), (-120.0, -110.0), (-100.0, -120.0)])
def test_polynomial_harmonics_match_the_identities(h2_dbc, h3_dbc):
    # y = x + a2 x^2 + a3 x^3, x = A cos(wt): H1 = A + 3 a3 A^3/4,
    # H2 = a2 A^2/2, H3 = a3 A^3/4, DC = a2 A^2/2 (power-reduction identities)
    amp, f, phase = 0.5, 997.3, 0.7
    a2 = 10 ** (h2_dbc / 20) * 2 / amp  # sets H2/A (near H1) to h2_dbc
    a3 = -(10 ** (h3_dbc / 20)) * 4 / amp**2  # negative: H3 in antiphase
    x = cosine(f, RATE, 1.0, amp, phase)
    y = x + a2 * x**2 + a3 * x**3
    h1, h2, h3 = amp + 3 * a3 * amp**3 / 4, a2 * amp**2 / 2, abs(a3) * amp**3 / 4
    r = analyze_tone(y, RATE)
    thd_true = math.hypot(h2, h3) / h1
    assert r.fundamental_fs == pytest.approx(h1, rel=1e-9)
    assert r.dc_fs == pytest.approx(a2 * amp**2 / 2, abs=1e-12)
    assert r.thd_db == pytest.approx(20 * math.log10(thd_true), abs=0.05)
    assert r.thdn_db == pytest.approx(20 * math.log10(thd_true), abs=0.05)
    by_order = {h.order: h for h in r.harmonics}
    assert by_order[2].level_dbc == pytest.approx(20 * math.log10(h2 / h1), abs=0.05)
    assert by_order[3].level_dbc == pytest.approx(20 * math.log10(h3 / h1), abs=0.05)
    # phases: a2 > 0 puts H2 in phase (0 deg), a3 < 0 puts H3 at 180 deg
    assert abs(by_order[2].phase_deg) < 0.5
    assert abs(abs(by_order[3].phase_deg) - 180.0) < 0.5


@pytest.mark.parametrize("psi_deg", [-150.0, -45.0, 10.0, 95.0])
def test_harmonic_phase_is_relative_to_the_fundamental(psi_deg):
    # A cos(theta) + B cos(2 theta + psi): phi_2 - 2 phi_1 = psi by construction
    f, phi1 = 1234.5, 2.1
    n = np.arange(RATE)
    theta = 2 * np.pi * f * n / RATE + phi1
    x = 0.4 * np.cos(theta) + 1e-3 * np.cos(2 * theta + math.radians(psi_deg)) + 3e-4 * np.cos(3 * theta - 1.0)
    r = analyze_tone(x, RATE)
    by_order = {h.order: h for h in r.harmonics}
    assert by_order[2].phase_deg == pytest.approx(psi_deg, abs=0.5)
    assert by_order[3].phase_deg == pytest.approx(math.degrees(-1.0), abs=0.5)
    assert r.fundamental_phase_deg == pytest.approx(math.degrees(phi1), abs=0.01)


@pytest.mark.parametrize("f", [20.0, 31.7, 997.0, 1000.0, 4567.891, 19999.0])
def test_frequency_of_a_clean_one_second_tone(f):
    # issue requirement: within 1e-4 Hz for a clean 1 s tone (IEEE 1057 fit)
    r = analyze_tone(cosine(f, RATE, 1.0, 0.7, 0.3), RATE)
    assert abs(r.fundamental_hz - f) < 1e-4


# --- Fourier series of the classic waveforms -----------------------------------


def _fourier(kind: str, f: float, rate: float, seconds: float = 1.0):
    """Waveform from its Fourier series up to fs/2 and its harmonic amplitudes."""
    n = np.arange(int(rate * seconds))
    kmax = int((rate / 2 - 200) // f)
    ks = np.arange(1, kmax + 1)
    if kind == "square":  # (4/pi) sum_{odd k} sin(k wt)/k
        amps = np.where(ks % 2 == 1, 4 / (np.pi * ks), 0.0)
    elif kind == "triangle":  # (8/pi^2) sum_{odd k} (-1)^((k-1)/2) sin(k wt)/k^2
        amps = np.where(ks % 2 == 1, 8 / (np.pi**2 * ks**2) * (-1.0) ** ((ks - 1) // 2), 0.0)
    else:  # sawtooth: (2/pi) sum_k (-1)^(k+1) sin(k wt)/k
        amps = 2 / (np.pi * ks) * (-1.0) ** (ks + 1)
    x = np.zeros(n.size)
    w = 2 * np.pi * f / rate
    for k, a in zip(ks, amps):
        if a:
            x += a * np.sin(k * w * n)
    return 0.9 * x / np.max(np.abs(x)), ks, np.abs(amps)


@pytest.mark.parametrize("kind", ["square", "triangle", "sawtooth"])
def test_fourier_series_thd_equals_the_partial_sum(kind):
    # THD over the harmonics inside the band = sqrt(sum (A_k/A_1)^2) of the
    # same Fourier series (any signals textbook)
    f = 200.3
    x, ks, amps = _fourier(kind, f, RATE)
    r = analyze_tone(x, RATE)
    inside = (ks >= 2) & (ks * f <= 20000.0)
    partial = math.sqrt(float(np.sum((amps[inside] / amps[0]) ** 2)))
    assert r.thd_pct == pytest.approx(100 * partial, abs=0.01)


@pytest.mark.parametrize(
    "kind, closed",
    [
        ("square", math.sqrt(math.pi**2 / 8 - 1)),  # 48.34 %
        ("triangle", math.sqrt(math.pi**4 / 96 - 1)),  # 12.12 %
        ("sawtooth", math.sqrt(math.pi**2 / 6 - 1)),  # 80.31 %
    ],
)
def test_fourier_series_thd_approaches_the_closed_form(kind, closed):
    # closed forms of the THD of ideal square, triangle, sawtooth (Fourier series)
    rate, f = 192000, 100.0
    x, _, _ = _fourier(kind, f, rate)
    errors = [abs(analyze_tone(x, rate, bandwidth_hz=band).thd_ratio - closed) for band in ((20, 5000), (20, 20000), None)]
    assert errors[0] > errors[1] > errors[2]
    assert errors[2] < 0.002  # full band (96 kHz): within 0.2 % of the closed form


# --- noise ----------------------------------------------------------------------


@pytest.mark.parametrize("band", [(20.0, 20000.0), (20.0, 10000.0), (400.0, 22000.0), None])
def test_white_noise_of_known_variance(band):
    # white noise of variance s^2 spreads evenly over 0..fs/2: the band holds
    # s^2 (hi - lo) / (fs/2) of it (Parseval; IEEE 1241 noise definitions)
    rng = np.random.default_rng(7)
    sigma, amp = 1e-3, 0.5
    x = cosine(997.0, RATE, 2.0, amp) + sigma * rng.standard_normal(2 * RATE)
    lo, hi = band if band else (0.0, RATE / 2)
    noise_rms = sigma * math.sqrt((hi - lo) / (RATE / 2))
    r = analyze_tone(x, RATE, bandwidth_hz=band)
    assert r.thdn_db == pytest.approx(20 * math.log10(noise_rms / (amp / math.sqrt(2))), abs=0.2)
    assert r.noise_dbfs == pytest.approx(20 * math.log10(math.sqrt(2) * noise_rms), abs=0.2)


def test_noise_scales_with_bandwidth():
    # for white noise, halving the band lowers the noise by 3.01 dB (Parseval)
    rng = np.random.default_rng(3)
    x = cosine(1500.0, RATE, 2.0, 0.3) + 1e-4 * rng.standard_normal(2 * RATE)
    wide = analyze_tone(x, RATE, bandwidth_hz=(0.0, 24000.0))
    half = analyze_tone(x, RATE, bandwidth_hz=(0.0, 12000.0))
    assert wide.noise_dbfs - half.noise_dbfs == pytest.approx(10 * math.log10(2), abs=0.15)


# --- quantization (IEEE 1241; Lipshitz, Wannamaker, Vanderkooy 1992) ---------------


def _quantize16(x: np.ndarray, dither: bool, seed: int = 11) -> np.ndarray:
    lsb = 2.0 / 2**16
    if dither:  # TPDF, 2 LSB peak to peak: sum of two uniform +-LSB/2
        rng = np.random.default_rng(seed)
        x = x + (rng.uniform(-0.5, 0.5, x.size) + rng.uniform(-0.5, 0.5, x.size)) * lsb
    return np.clip(np.round(x / lsb), -(2**15), 2**15 - 1) * lsb


@pytest.mark.parametrize("dither, penalty_db", [(False, 0.0), (True, 10 * math.log10(3))])
def test_sinad_of_an_ideal_16_bit_quantizer(dither, penalty_db):
    # IEEE 1241: SNR of an ideal N-bit quantizer with a full-scale sine is
    # 6.02 N + 1.76 dB; at -1 dBFS, 1 dB less; TPDF dither of 2 LSB p-p
    # triples the noise power, 4.77 dB worse (Lipshitz et al., JAES 1992)
    level_db = -1.0
    x = _quantize16(cosine(997.0, RATE, 1.0, 10 ** (level_db / 20), 0.2), dither)
    ideal = 6.02 * 16 + 1.76 + level_db - penalty_db
    full = analyze_tone(x, RATE, bandwidth_hz=None)
    assert full.sinad_db == pytest.approx(ideal, abs=0.3)
    # white noise in 20 Hz-20 kHz of a 24 kHz Nyquist band: better by 10 log10((fs/2)/band)
    audio = analyze_tone(x, RATE)
    assert audio.sinad_db == pytest.approx(ideal + 10 * math.log10(24000 / 19980), abs=0.3)


# --- estimator efficiency: Cramer-Rao bound -----------------------------------------


def test_amplitude_variance_near_the_cramer_rao_bound():
    # Rife and Boorstyn 1974; Handel 2000: var(A^) >= 2 s^2 / N for a sine in
    # white noise of variance s^2; the least-squares fit reaches it
    rng = np.random.default_rng(2024)
    n, sigma, amp = 4800, 0.01, 0.5
    estimates = []
    for _ in range(400):
        phase = rng.uniform(0, 2 * np.pi)
        f = 997.0 + rng.uniform(-0.5, 0.5)
        x = cosine(f, RATE, n / RATE, amp, phase) + sigma * rng.standard_normal(n)
        estimates.append(analyze_tone(x, RATE, fundamental_hz=997.0).fundamental_fs)
    ratio = np.var(estimates, ddof=1) / (2 * sigma**2 / n)
    assert 0.8 < ratio < 1.25


# --- numerical floor ------------------------------------------------------------------


@pytest.mark.parametrize("rate", [48000, 96000, 192000])
@pytest.mark.parametrize("f", [20.0, 61.3, 997.0, 6301.7, 20000.0])
def test_float64_floor_below_minus_180_db(rate, f):
    # issue requirement: an ideal float64 tone analyses to THD+N < -180 dB
    r = analyze_tone(cosine(f, rate, 1.0, 0.9, 1.1), rate)
    assert r.thdn_db < -180.0
    assert r.valid


# --- averaging, clipping, bad input ------------------------------------------------


def test_averaging_over_blocks_keeps_figures():
    # power averaging of a stationary tone leaves THD unchanged (identities above)
    x = cosine(997.0, RATE, 2.0, 0.5)
    y = x + 0.01 * x**2
    one = analyze_tone(y, RATE)
    four = analyze_tone(y, RATE, averages=4)
    assert four.averages == 4
    assert four.thd_db == pytest.approx(one.thd_db, abs=0.01)
    assert four.harmonics[0].phase_deg == pytest.approx(one.harmonics[0].phase_deg, abs=0.1)


def test_clipped_capture_is_flagged_not_valid():
    # common practice: flat tops at full scale mark a clipped converter
    x = np.clip(cosine(997.0, RATE, 1.0, 1.3), -1.0, 1.0)
    r = analyze_tone(x, RATE)
    assert r.clipped and not r.valid
    assert any("clipped" in w for w in r.warnings)
    assert r.to_dict()["valid"] is False


def test_full_scale_sine_is_not_clipping():
    # a sine whose peaks just reach FS (0 dBFS, AES17) is not clipped
    r = analyze_tone(cosine(997.0, RATE, 1.0, 1.0), RATE)
    assert not r.clipped and r.valid
    assert r.fundamental_dbfs == pytest.approx(0.0, abs=1e-6)


@pytest.mark.parametrize(
    "samples, match",
    [
        (np.zeros(0), "no samples"),
        (np.zeros(4800), "silent"),
        (np.full(4800, 0.25), "constant"),
        (np.r_[cosine(997.0, RATE, 0.1), np.nan], "NaN"),
        (np.random.default_rng(1).standard_normal(48000) * 0.01, "no tone"),
        (cosine(997.0, RATE, 0.002), "too short|periods"),
    ],
)
def test_unusable_input_raises_a_clear_error(samples, match):
    with pytest.raises(BenchkitError, match=match):
        analyze_tone(samples, RATE)


def test_tone_above_the_band_is_an_error():
    # the band is the AES17 20 Hz-20 kHz audio band by default
    with pytest.raises(BenchkitError, match="outside the measurement band"):
        analyze_tone(cosine(22000.0, 96000, 1.0), 96000)


# --- harmonics and the noise floor -----------------------------------------------


def _noisy(f0, sigma, rate, seconds, seed, harmonics=()):
    t = np.arange(int(rate * seconds)) / rate
    x = 0.5 * np.cos(2 * np.pi * f0 * t) + np.random.default_rng(seed).normal(0.0, sigma, t.size)
    for k, rel in harmonics:
        x += 0.5 * rel * np.cos(2 * np.pi * k * f0 * t + 0.3 * k)
    return x


@pytest.mark.parametrize("f0, sigma, rate, seconds", [(25.0, 1e-4, 48000, 2.0), (20.0, 1e-5, 48000, 3.0),
                                                      (31.7, 3e-5, 96000, 1.5), (997.0, 1e-4, 44100, 1.0)])
def test_a_clean_tone_in_white_noise_has_no_harmonics_and_its_noise(f0, sigma, rate, seconds):
    # numpy's Gaussian generator as the noise: no harmonic is there, so THD
    # is only a bound and the profile says the residual is noise; the noise
    # of variance s^2 over the band is s^2 (f_hi - f_lo) / (fs / 2) (Parseval),
    # in AES17 dBFS (re the RMS of a full-scale sine, 1 / sqrt(2))
    r = analyze_tone(_noisy(f0, sigma, rate, seconds, seed=int(f0)), rate)
    assert r.thd_upper_bound and r.harmonic_profile == "below-noise"
    assert sum(h.above_noise for h in r.harmonics) <= 1  # a false mark has odds of e^-10 a harmonic
    want = 20 * math.log10(sigma * math.sqrt((20000.0 - 20.0) / (rate / 2)) * math.sqrt(2))
    assert r.noise_dbfs == pytest.approx(want, abs=0.3)
    # the bound lies over what the harmonics could be (each under its noise)
    assert r.thd_db > max(h.level_dbc for h in r.harmonics if h.order <= 10) - 3.0


@pytest.mark.parametrize("f0, rate, harmonics", [(20.0, 48000, ((2, 1e-3), (3, 3e-4))),
                                                 (27.5, 96000, ((3, 2e-4), (5, 3e-5))),
                                                 (45.0, 44100, ((2, 5e-4), (7, 2e-4)))])
def test_low_frequency_thd_sums_the_harmonics_not_the_noise(f0, rate, harmonics):
    # harmonics of known relative amplitude (THD = sqrt(sum rel^2), its
    # definition) in white noise of s = 1e-5 FS: THD is theirs, to 0.05 dB,
    # although hundreds of harmonic positions below 20 kHz hold only noise
    r = analyze_tone(_noisy(f0, 1e-5, rate, 2.0, seed=3, harmonics=harmonics), rate)
    want = 20 * math.log10(math.sqrt(sum(rel**2 for _k, rel in harmonics)))
    assert not r.thd_upper_bound
    assert r.thd_db == pytest.approx(want, abs=0.05)
    heard = {h.order for h in r.harmonics if h.above_noise}
    assert {k for k, _rel in harmonics} <= heard and len(heard) <= len(harmonics) + 1
    # the profile reads the harmonics there are, none of the noise's
    # (orders 5 and up over 5 % of the power would read as a tail)
    tail = sum(rel**2 for k, rel in harmonics if k >= 5) > 0.05 * sum(rel**2 for _k, rel in harmonics)
    even = sum(rel**2 for k, rel in harmonics if k % 2 == 0)
    odd = sum(rel**2 for k, rel in harmonics if k % 2)
    assert r.harmonic_profile == ("high-order-tail" if tail else "even-order" if even > 2 * odd else "odd-order")


@pytest.mark.parametrize("seconds", [1.0, 0.1, 0.02])
@pytest.mark.parametrize("f0, band", [(5000.0, (20.0, 20000.0)), (1000.0, (20.0, 20000.0)),
                                      (20000.0 / 3, (20.0, 20000.0)), (2500.0, (20.0, 10000.0))])
def test_one_band_rule_for_thd_and_thd_n(f0, band, seconds):
    # harmonics of relative amplitude 1e-3 at every order, one of them on
    # the band's upper edge: a harmonic counts in both figures when
    # lo <= k f0 <= hi and in neither otherwise, so with no noise THD+N
    # equals THD, and both equal the root-sum of the orders in the band
    # (THD's definition)
    rate = 48000
    t = np.arange(int(rate * seconds)) / rate
    top = int(rate * 0.45 // f0)
    x = 0.5 * np.cos(2 * np.pi * f0 * t)
    for k in range(2, top + 1):
        x += 0.5e-3 * np.cos(2 * np.pi * k * f0 * t + k)
    r = analyze_tone(x, rate, bandwidth_hz=band)
    counted = [k for k in range(2, top + 1) if band[0] <= k * f0 <= band[1]]
    want = 20 * math.log10(1e-3 * math.sqrt(len(counted)))
    assert r.thd_db == pytest.approx(want, abs=0.01)
    assert r.thdn_db >= r.thd_db
    assert r.thdn_db == pytest.approx(want, abs=0.05)


def test_a_harmonic_13_db_over_the_fits_own_noise_counts():
    # a least-squares fitted sinusoid's amplitude in white noise of s^2 has
    # E|A|^2 = 4 s^2 / N (each quadrature term 2 s^2 / N: the Cramer-Rao
    # bound for a known frequency, from memory): an H3 13 dB over that is
    # over the 10 dB threshold, and is counted in (nearly) every record
    rate, sigma = 48000, 1e-4
    amp3 = math.sqrt(4 * sigma**2 / rate) * 10 ** (13 / 20)
    counted = 0
    for seed in range(10):
        t = np.arange(rate) / rate
        x = 0.5 * np.cos(2 * np.pi * 997 * t) + amp3 * np.cos(2 * np.pi * 2991 * t)
        x += np.random.default_rng(seed).normal(0.0, sigma, t.size)
        counted += analyze_tone(x, rate).harmonics[1].above_noise
    assert counted >= 9


def test_lobes_that_overlap_at_a_band_edge_are_taken_out_once():
    # 120 Hz in 2400 samples (2.5 bins between harmonics): the lobes about
    # 20 kHz overlap; THD+N stays a number and holds THD
    rate = 48000
    t = np.arange(2400) / rate
    x = np.cos(2 * np.pi * 120 * t) + 0.3 * np.cos(2 * np.pi * 167 * 120 * t)
    r = analyze_tone(x, rate)  # (clipped past full scale: said, and still analysed)
    assert r.clipped and math.isfinite(r.thdn_db) and r.thdn_db >= r.thd_db
