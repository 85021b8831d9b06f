"""The building blocks against general-purpose reference computations:
direct numpy sums and FFTs, and scipy's own least-squares solver."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import least_squares
from scipy.signal.windows import general_cosine

from benchkit.analysis import spectrum as sp
from benchkit.analysis.sinefit import RecordLayout, fit_tone


@pytest.mark.parametrize("n", [97, 4800, 48037])
def test_block_sums_equal_direct_sums(n):
    # the n = bB + i factoring must give the plain sums (checked by numpy)
    rng = np.random.default_rng(n)
    x = rng.standard_normal(n)
    c = 0.0217
    layout = RecordLayout(n)
    ph = layout.harmonic_phasors(c, 5)
    e = layout.record_sums(ph, 2)
    s, t = layout.data_sums(x, ph, 4, weighted=True)
    idx = np.arange(n)
    tt = (idx - (n - 1) / 2) / n
    for m in range(5):
        z = np.exp(2j * np.pi * m * c * idx)
        for p in range(3):
            assert e[p][m] == pytest.approx(np.sum(tt**p * z), rel=1e-10, abs=1e-9)
        assert s[m] == pytest.approx(np.sum(x * z.conj()), rel=1e-10, abs=1e-9)
        assert t[m] == pytest.approx(np.sum(tt * x * z.conj()), rel=1e-10, abs=1e-9)
    assert layout.sine(c, 0.3, -0.2) == pytest.approx(0.3 * np.cos(2 * np.pi * c * idx) - 0.2 * np.sin(2 * np.pi * c * idx))


def test_sine_fit_matches_scipy_least_squares():
    # IEEE 1057 fit = the least-squares minimiser: scipy.optimize.least_squares
    # on the same model must land on the same parameters
    rng = np.random.default_rng(5)
    n, c = 6000, 0.0312345
    idx = np.arange(n)
    x = 0.6 * np.cos(2 * np.pi * c * idx + 0.8) + 0.02 * np.cos(4 * np.pi * c * idx - 0.3) + 0.1
    x += 0.01 * rng.standard_normal(n)

    def model(p):
        ph = 2 * np.pi * p[0] * idx
        return p[1] + p[2] * np.cos(ph) + p[3] * np.sin(ph) + p[4] * np.cos(2 * ph) + p[5] * np.sin(2 * ph)

    ref = least_squares(lambda p: model(p) - x, x0=[c * 1.00002, 0, 0.5, -0.5, 0, 0], xtol=1e-15, ftol=1e-15, gtol=1e-15)
    fit = fit_tone(x, RecordLayout(n), c * 1.00002, orders=2)
    assert fit.cycles == pytest.approx(ref.x[0], rel=1e-10)
    assert fit.offset == pytest.approx(ref.x[1], abs=1e-9)
    assert [fit.cos[0], fit.sin[0], fit.cos[1], fit.sin[1]] == pytest.approx(list(ref.x[2:]), abs=1e-8)


def test_window_equals_scipy_general_cosine():
    # the same periodic cosine-sum window as scipy.signal.windows.general_cosine
    n = 1000
    assert sp.window(n) == pytest.approx(general_cosine(n, sp.WINDOW_COEFFS, sym=False), abs=1e-14)


def test_kernel_equals_the_direct_dft_of_the_window():
    # W(mu) = sum_k w[k] e^{-j 2 pi mu k / N}, checked by direct summation
    n = 2049
    w = sp.window(n)
    mu = np.array([0.0, 0.25, -1.5, 3.7, 40.5, 1000.2])
    direct = np.array([np.sum(w * np.exp(-2j * np.pi * m * np.arange(n) / n)) for m in mu])
    assert np.max(np.abs(sp.kernel(mu, n) - direct)) < 1e-9 * n


def test_window_sidelobes():
    # Nuttall (1981): highest sidelobe about -93 dB, falling 18 dB per octave
    n, pad = 1024, 64
    spec = np.abs(np.fft.rfft(sp.window(n), n * pad))
    db = 20 * np.log10(spec / spec[0] + 1e-300)
    bins = np.arange(db.size) / pad
    assert db[bins > 4.5].max() < -92.0
    far = db[(bins > 80) & (bins < 90)].max()
    near = db[(bins > 20) & (bins < 22.5)].max()
    assert near - far > 30.0  # two octaves at 18 dB/octave, with margin


def test_components_read_at_exact_frequencies():
    # two sines off the bin grid: read back amplitude and phase exactly
    n = 8192
    idx = np.arange(n)
    nu = np.array([100.37, 401.81])
    x = 0.3 * np.cos(2 * np.pi * nu[0] * idx / n + 0.7) + 1e-4 * np.cos(2 * np.pi * nu[1] * idx / n - 2.0)
    z = sp.read_components(np.fft.rfft(x * sp.window(n)), n, nu)
    assert np.abs(z) == pytest.approx([0.3, 1e-4], rel=1e-6)
    assert np.angle(z) == pytest.approx([0.7, -2.0], abs=1e-5)
    assert sp.power_scale(n) == pytest.approx(2 / (n * np.sum(sp.window(n) ** 2)))


@pytest.mark.parametrize("delta", [0.3, 0.5, 1e-7, 1e-13, 1 - 1e-13, 0.0])
def test_kernel_at_bins_near_and_far(delta):
    # W(j - delta) at integer j, against the direct DFT of the window (numpy),
    # including tones a hair away from a bin, where cancellation would bite
    n = 6000
    w = sp.window(n)
    j = np.array([-2999, -400, -9, -4, -3, -1, 0, 1, 2, 3, 4, 8, 9, 57, 2999])
    direct = np.array([np.sum(w * np.exp(-2j * np.pi * (jj - delta) * np.arange(n) / n)) for jj in j])
    assert np.max(np.abs(sp.kernel_at_bins(j, delta, n) - direct)) < 1e-13 * n


@pytest.mark.parametrize("n", [4800, 20000, 20001])
@pytest.mark.parametrize("nu", [3.2, 40.0, 997.3, 123.0000001, -3.0])
def test_remove_tone_equals_the_fft_of_the_residual(n, nu):
    # removing a known sine and offset from the windowed spectrum must equal
    # the windowed FFT of the record without them (numpy FFT as reference)
    nu = n / 2 - 3.0 if nu < 0 else nu  # and one just below half the rate
    k = np.arange(n)
    rest = 1e-3 * np.cos(2 * np.pi * 2 * nu * k / n + 1.0)
    x = 0.7 * np.cos(2 * np.pi * nu * k / n + 0.4) + 0.01 + rest
    got = sp.remove_tone(np.fft.rfft(x * sp.window(n)), n, nu, 0.7 * np.exp(0.4j), 0.01)
    want = np.fft.rfft(rest * sp.window(n))
    assert np.max(np.abs(got - want)) < 1e-11 * n


@pytest.mark.parametrize("n", [
    96000,   # 300 x 320, whole rows
    88200,   # 294 x 300
    33075,   # odd: 175 x 189
    35721,   # 189 x 189
    98304,   # 256 x 384
    1920000,  # 1280 x 1500
    96001,   # no split: one transform
])
def test_block_fft_equals_scipy_rfft(n):
    """The four-step transform against scipy.fft.rfft (reference library),
    to a few ulp of the largest bin, also for odd lengths."""
    from scipy.fft import rfft
    from benchkit.analysis import blockfft
    x = np.random.default_rng(n).standard_normal(n)
    out = np.empty(n // 2 + 1, dtype=complex)
    got = blockfft.rfft(x, out)
    ref = rfft(x)
    assert got is out
    assert np.max(np.abs(got - ref)) < 4e-15 * np.max(np.abs(ref))
    assert (blockfft.split(n) is None) == (n == 96001)


def test_block_sums_paths_agree():
    # the shorter paths fit_tone takes (no t weights, phasors into a given
    # array) give the same sums as the full ones
    n, c = 4801, 0.0311
    x = np.random.default_rng(2).standard_normal(n)
    layout = RecordLayout(n)
    ph = layout.harmonic_phasors(c, 7)
    out = np.empty((7, layout.positions.size), dtype=complex)
    for a, b in zip(layout.harmonic_phasors(c, 7, out=out), ph):
        assert np.array_equal(a, b)
    assert np.allclose(layout.record_sums(ph, 0)[0], layout.record_sums(ph, 2)[0], rtol=1e-13, atol=1e-12)
    full = layout.conj_data_sums(x, ph, 3, weighted=True)
    assert np.allclose(layout.conj_data_sums(x, ph, 3, weighted=False)[0], full[0], rtol=1e-13, atol=1e-12)
    assert full.shape == (2, 4)


@pytest.mark.parametrize("n", [4801, 96000, 1920000])
def test_fast_kernels_equal_the_reference_kernel(n):
    # the scalar kernel and the read basis (cotangent forms) against kernel(),
    # near a bin (its limit branch), at an exact bin and far from one
    mus = [0.3, -0.7, 1e-9, -1e-12, 1e-4, 1.0, -1.0, 0.0, 2.5, -3.0, 1 - 1e-13]
    for mu in mus:
        assert abs(sp._kernel_at(mu, n) - sp.kernel(np.array([mu]), n)[0]) < 1e-15 * n
    nu = np.array([20.3, 1994.0000001, 2991.0, 997.00000001234 * 7, 5.5, 3.0])
    m, basis = sp._read_basis(n, nu, n // 2 + 1, 3)
    w1, w2 = sp.kernel(m - nu[:, None], n), sp.kernel(m + nu[:, None], n)
    assert np.max(np.abs(basis[:, 0] - (w1 + w2))) < 1e-14 * n
    assert np.max(np.abs(basis[:, 1] - 1j * (w1 - w2))) < 1e-14 * n


@pytest.mark.parametrize("nu", [997.0, 997.0 + 1e-6, 997.3, 997.5, 997.9999])
def test_refine_peak_and_peak_amplitude_on_a_lone_tone(nu):
    n = 96000
    k = np.arange(n)
    spec = np.fft.rfft(0.5 * np.cos(2 * np.pi * nu * k / n + 0.3) * sp.window(n))
    peak = int(np.argmax(np.abs(spec)))
    got = sp.refine_peak(spec, peak, n)
    assert got == pytest.approx(nu, abs=2e-5)
    assert abs(sp.peak_amplitude(spec, peak, nu, n) - 0.5 * np.exp(0.3j)) < 1e-4
