"""Windowed spectra: the analysis window, its exact kernel, band power.

The window is the four-term cosine sum with a continuous first derivative
(Nuttall 1981, "Some windows with very good sidelobe behavior", IEEE Trans.
ASSP 29(1)): highest sidelobe about -93 dB, falling 18 dB per octave, so a
strong tone's leakage far from it stays well below -150 dB. As a cosine sum
its DFT is a sum of shifted Dirichlet kernels, known exactly at any
fractional bin offset; that lets a component at a known frequency be read
off the FFT by least squares, without scalloping loss.
"""

from __future__ import annotations

import threading
from functools import lru_cache

import numpy as np
import scipy.fft

#: Nuttall (1981) four-term window, continuous first derivative.
WINDOW_COEFFS = (0.355768, 0.487396, 0.144232, 0.012604)
WINDOW_NAME = "Nuttall 4-term (continuous first derivative), periodic"
#: Half-width of the window's main lobe in bins.
MAIN_LOBE_BINS = 4


@lru_cache(maxsize=8)
def _window_cached(n: int) -> np.ndarray:
    a0, a1, a2, a3 = WINDOW_COEFFS
    c = np.cos(2.0 * np.pi * np.arange(n) / n)
    # sum_m (-1)^m a_m cos(m x) written as a polynomial in cos x (Chebyshev)
    w = ((-4.0 * a3 * c + 2.0 * a2) * c + (3.0 * a3 - a1)) * c + (a0 - a2)
    w.setflags(write=False)
    return w


def window(n: int) -> np.ndarray:
    """The analysis window of length ``n`` (periodic, DFT-even); read-only."""
    return _window_cached(int(n))


_scratch = threading.local()


def windowed_rfft(x: np.ndarray) -> np.ndarray:
    """``rfft(x * window(len(x)))``, the product formed in a per-thread
    scratch buffer (a fresh array per call costs a third of the FFT)."""
    n = x.size
    buf = getattr(_scratch, "buf", None)
    if buf is None or buf.size != n:
        buf = _scratch.buf = np.empty(n)
    return scipy.fft.rfft(np.multiply(x, window(n), out=buf))


def power(spec: np.ndarray) -> np.ndarray:
    """``|spec|^2`` in one contiguous pass over the complex array."""
    v = spec.view(np.float64).reshape(-1, 2)
    return np.einsum("ij,ij->i", v, v)


def _dirichlet(mu: np.ndarray, n: int) -> np.ndarray:
    """``sum_{k=0}^{n-1} e^{-j 2 pi mu k / n}`` for real bin offsets ``mu``."""
    num = np.sin(np.pi * mu)
    den = np.sin(np.pi * mu / n)
    small = np.abs(den) < 1e-9
    # near mu = 0 (mod n) use the limit n cos(pi mu) / cos(pi mu / n)
    ratio = np.where(small, n * np.cos(np.pi * mu) / np.cos(np.pi * mu / n), num / np.where(small, 1.0, den))
    return np.exp(-1j * np.pi * mu * (n - 1) / n) * ratio


_SHIFTS = np.concatenate([-np.arange(len(WINDOW_COEFFS)), np.arange(len(WINDOW_COEFFS))]).astype(float)
_WEIGHTS = np.concatenate([np.asarray(WINDOW_COEFFS) * (-1.0) ** np.arange(len(WINDOW_COEFFS))] * 2) / 2.0


def kernel(mu: np.ndarray, n: int) -> np.ndarray:
    """The window's DFT ``W(mu) = sum_k w[k] e^{-j 2 pi mu k / n}`` at real
    bin offsets ``mu``; exact for the periodic cosine-sum window:
    ``W(mu) = sum_m (-1)^m a_m / 2 [D(mu - m) + D(mu + m)]`` with D the
    Dirichlet kernel."""
    mu = np.asarray(mu, dtype=float)
    return _dirichlet(mu[..., None] + _SHIFTS, n) @ _WEIGHTS


def refine_peak(spec: np.ndarray, peak: int, n: int) -> float:
    """Fractional bin of a single tone whose largest bin is ``peak``.

    Solves ``|X[p+1]| / |X[p-1]| = |W(p+1-nu)| / |W(p-1-nu)|`` for nu with
    the exact window kernel (secant steps from parabolic interpolation), so
    the estimate carries no interpolation bias; leakage from other
    components limits it to ~1e-5 bin.
    """
    mags = np.abs(spec[peak - 1 : peak + 2])
    lp, cp, rp = np.log(np.maximum(mags, 1e-300))
    den = lp - 2.0 * cp + rp
    d0 = 0.5 * (lp - rp) / den if den < 0 else 0.0
    target = rp - lp
    if not np.isfinite(target):
        return float(peak + np.clip(d0, -0.5, 0.5))

    def h(d: float) -> float:
        w = np.abs(kernel(np.array([1.0 - d, -1.0 - d]), n))
        return float(np.log(w[0]) - np.log(w[1]) - target)

    a, b = float(np.clip(d0, -0.5, 0.5)), float(np.clip(d0, -0.5, 0.5)) + 1e-3
    ha, hb = h(a), h(b)
    for _ in range(8):
        if hb == ha:
            break
        a, b, ha = b, b - hb * (b - a) / (hb - ha), hb
        b = float(np.clip(b, -0.6, 0.6))
        hb = h(b)
        if abs(b - a) < 1e-7:  # the sine fit takes it from here
            break
    return float(peak + b)


def sine_amplitude_scale(n: int) -> float:
    """Factor that turns ``|rfft(x * window)|`` at a sine's bin into its peak
    amplitude: 2 / sum(window)."""
    return 2.0 / (WINDOW_COEFFS[0] * n)


def power_scale(n: int) -> float:
    """Factor that turns a sum of ``|rfft(x * window)|^2`` over bins into the
    mean-square power of those bins (one-sided): 2 / (N sum w^2)."""
    a = np.asarray(WINDOW_COEFFS)
    sum_w2 = n * (a[0] ** 2 + 0.5 * np.sum(a[1:] ** 2))
    return 2.0 / (n * sum_w2)


def read_components(spec: np.ndarray, n: int, bins: np.ndarray, half_width: int = 3) -> np.ndarray:
    """Complex amplitudes of real sinusoids at known fractional bins.

    For ``x[k] = A cos(2 pi nu k / n + phi)`` the windowed DFT is
    ``X[m] = alpha W(m - nu) + conj(alpha) W(m + nu)`` with
    ``alpha = (A/2) e^{j phi}``; alpha is solved by least squares over the
    ``2 * half_width + 1`` bins nearest ``nu``, which removes scalloping loss
    and the negative-frequency image exactly.

    Parameters
    ----------
    spec : ndarray
        ``rfft(x * window(n))``.
    n : int
        Record length.
    bins : ndarray
        Fractional bin positions ``nu`` of the components (0 < nu < n/2).

    Returns
    -------
    ndarray of complex
        ``A e^{j phi}`` for each component (peak amplitude and phase,
        cosine reference, phase at the first sample).
    """
    nu = np.asarray(bins, dtype=float)
    if nu.size == 0:
        return np.zeros(0, dtype=complex)
    offs = np.arange(-half_width, half_width + 1)
    m = np.clip(np.rint(nu)[:, None] + offs[None, :], 0, spec.size - 1).astype(int)
    w1 = kernel(m - nu[:, None], n)
    w2 = kernel(m + nu[:, None], n)
    x = spec[m]
    # X = p (w1 + w2) + q j (w1 - w2), alpha = p + j q, real least squares
    g1 = w1 + w2
    g2 = 1j * (w1 - w2)

    def rdot(u, v):
        return np.sum(u.real * v.real + u.imag * v.imag, axis=1)

    a11, a12, a22 = rdot(g1, g1), rdot(g1, g2), rdot(g2, g2)
    b1, b2 = rdot(g1, x), rdot(g2, x)
    det = a11 * a22 - a12 * a12
    p = (a22 * b1 - a12 * b2) / det
    q = (a11 * b2 - a12 * b1) / det
    return 2.0 * (p + 1j * q)


def band_bins(n: int, sample_rate: float, lo_hz: float, hi_hz: float) -> slice:
    """The rfft bins whose centre frequency lies in [lo_hz, hi_hz]."""
    lo = max(0, int(np.ceil(lo_hz * n / sample_rate - 1e-9)))
    hi = min(n // 2, int(np.floor(hi_hz * n / sample_rate + 1e-9)))
    return slice(lo, max(lo, hi + 1))


def peak_amplitude(spec: np.ndarray, peak: int, nu: float, n: int) -> complex:
    """``A e^{j phi}`` of a tone at fractional bin ``nu`` from its largest
    bin alone (its negative-frequency image neglected): a starting value."""
    return complex(2.0 * spec[peak] / kernel(np.array([peak - nu]), n)[0])
