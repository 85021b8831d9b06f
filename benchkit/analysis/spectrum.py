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

import cmath
import math
from functools import lru_cache

import numpy as np

from benchkit.analysis import blockfft

# scipy is imported in the functions that use it: it is slow to load, and the
# command line (which reads this module) starts without it

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


def windowed_rfft(x: np.ndarray, scratch: bool = False) -> np.ndarray:
    """``rfft(x * window(len(x)))``, the product formed in a per-thread
    scratch buffer (a fresh array per call costs a third of the FFT).

    With ``scratch`` the spectrum itself is written to a per-thread buffer
    (by :func:`benchkit.analysis.blockfft.rfft`, which allocates nothing
    long): valid until the next such call on the same thread, for a caller
    that is done with it by then (and may change it in place). Without
    numpy 2, which can write a transform into a given array, scipy's
    transform serves both."""
    import scipy.fft
    n = x.size
    windowed = np.multiply(x, window(n), out=blockfft.scratch("windowed", n, float))
    if scratch and blockfft.OUT_SUPPORTED:
        return blockfft.rfft(windowed, blockfft.scratch("spectrum", n // 2 + 1, complex))
    return scipy.fft.rfft(windowed)


def power(spec: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
    """``|spec|^2``, as the sum of two squares (no square root)."""
    out = np.square(spec.real, out=out)
    out += np.square(spec.imag)
    return out


def scratch_power(spec: np.ndarray) -> np.ndarray:
    """:func:`power` of a 1-D spectrum into a per-thread buffer (the terms
    of :func:`windowed_rfft`'s ``scratch``)."""
    return power(spec, out=blockfft.scratch("power", spec.size, float))


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


#: The window's DFT as seven shifted Dirichlet kernels, ``W(mu) = sum_s c_s
#: D(mu + s)`` for s = -3..3: c_0 = a_0, c_{+-m} = (-1)^m a_m / 2.
_TAPS = tuple(WINDOW_COEFFS[0] if s == 0 else (-1) ** abs(s) * WINDOW_COEFFS[abs(s)] / 2.0 for s in range(-3, 4))
_TAP_ARRAY = np.array(_TAPS)
_TAP_PAIRS = tuple(zip(range(-3, 4), _TAPS))
_TAP_SHIFTS = np.arange(-3.0, 4.0)
#: ``S = sum_s c_s = a_0 - a_1 + a_2 - a_3``.
_TAP_SUM = sum(_TAPS)
#: Angles within this many bins of zero get their cotangent from tan itself
#: (a small sine needs its relative accuracy); farther ones from a phasor run.
_DIRECT_COT_BINS = 64
#: Longest run of half-bin phasors kept per record length (256 KB).
_TURN_TABLE_MAX = 1 << 14


@lru_cache(maxsize=8)
def _integer_bin_kernel(n: int) -> np.ndarray:
    """W at integer bins -3..3: (-1)^|k| a_|k| n / 2, and a_0 n at 0 (n c_k);
    read-only."""
    out = n * _TAP_ARRAY
    out.setflags(write=False)
    return out


@lru_cache(maxsize=8)
def _turn_table(n: int, size: int) -> np.ndarray:
    """``e^{j pi i / n}`` for i = 0..size-1, each from exp itself; read-only."""
    out = np.exp(1j * (np.pi / n) * np.arange(size))
    out.setflags(write=False)
    return out


def _cot_run(first: int, count: int, delta: float, n: int) -> np.ndarray:
    """``cot(pi (m - delta) / n)`` for m = first..first+count-1.

    Far from m = 0 as the ratio of the parts of ``e^{j pi (first - delta) /
    n} e^{j pi i / n}`` (a cached run of exponentials turned by one
    constant: each within a few ulp of the direct one); within
    ``_DIRECT_COT_BINS`` of it, where a small sine needs its relative
    accuracy, from tan itself."""
    start = cmath.exp(1j * (math.pi * (first - delta) / n))
    if count <= _TURN_TABLE_MAX:
        turn = _turn_table(n, max(64, 1 << (count - 1).bit_length()))[:count] * start
    else:
        turn = phasor_run(math.pi * (first - delta) / n, count, math.pi / n)
    cot = turn.real / turn.imag
    lo, hi = max(0, -_DIRECT_COT_BINS - first), min(count, _DIRECT_COT_BINS + 1 - first)
    if hi > lo:
        cot[lo:hi] = 1.0 / np.tan(np.pi * (np.arange(first + lo, first + hi) - delta) / n)
    return cot


def _cot_sums(j: np.ndarray, delta: float, n: int) -> np.ndarray:
    """``C(j) = sum_s c_s cot(pi (j + s - delta) / n)`` at integer ``j``: for a
    contiguous run a seven-tap filter over one :func:`_cot_run`."""
    if j.ndim == 1 and j.size > 1 and int(j[-1] - j[0]) == j.size - 1 and bool(np.all(np.diff(j) == 1)):
        return np.convolve(_cot_run(int(j[0]) - 3, j.size + 6, delta, n), _TAP_ARRAY, mode="valid")
    return (1.0 / np.tan(np.pi * ((j[..., None] + _TAP_SHIFTS) - delta) / n)) @ _TAP_ARRAY


def _fraction_factor(delta: float) -> complex:
    """``P = -sin(pi delta) e^{j pi delta}``, the factor every ``D(N - delta)``
    (N an integer) shares: ``sin(pi mu) e^{-j pi mu}`` at ``mu = N - delta``."""
    return -math.sin(math.pi * min(delta, 1.0 - delta)) * cmath.exp(1j * math.pi * delta)  # no rounding loss near 1


def kernel_at_bins(j: np.ndarray, delta: float, n: int) -> np.ndarray:
    """``W(j - delta)`` for integer offsets ``j`` and one fraction ``0 <=
    delta < 1``: the same kernel as :func:`kernel`, for many bins at once.

    The Dirichlet kernel is ``D(mu) = sin(pi mu) e^{-j pi mu} (cot(pi mu /
    n) + j)``, and at ``mu = N - delta`` (N an integer) its first factor is
    ``P = -sin(pi delta) e^{j pi delta}`` whatever N; so
    ``W(j - delta) = P (C(j) + j S)`` with ``C(j) = sum_s c_s cot(pi (j + s
    - delta) / n)`` and ``S = sum_s c_s``. No large phase is formed, so W
    stays accurate thousands of bins from the tone, and the arguments ``(j +
    s) - delta`` are exact, so a tone a hair from a bin loses nothing to
    cancellation (P is small where one cotangent is large). For a
    contiguous run, C is a seven-tap filter over one run of cotangents
    (:func:`_cot_run`: a cached table of exponentials, not thousands of
    tangents).
    """
    j = np.asarray(j, dtype=np.int64)
    if delta == 0.0:
        out = np.zeros(j.shape, dtype=complex)
        near = np.abs(j) <= 3
        out[near] = _integer_bin_kernel(n)[j[near] + 3]
        return out
    p = _fraction_factor(delta)
    out = _cot_sums(j, delta, n) * p
    out += p * 1j * _TAP_SUM
    return out


def _subtract_kernel(seg: np.ndarray, first: int, delta: float, n: int, factor: complex) -> None:
    """``seg[i] -= factor W(first + i - delta)`` in place (see
    :func:`kernel_at_bins`): ``factor P`` folded into one constant, no
    kernel array formed."""
    if delta == 0.0:
        table = _integer_bin_kernel(n)
        for j in range(max(first, -3), min(first + seg.size, 4)):
            seg[j - first] -= factor * table[j + 3]
        return
    q = factor * _fraction_factor(delta)
    c = np.convolve(_cot_run(first - 3, seg.size + 6, delta, n), _TAP_ARRAY, mode="valid")
    seg -= q * 1j * _TAP_SUM
    seg -= np.multiply(c, q, out=np.empty(c.size, dtype=complex))


def phasor_run(first: float, count: int, step: float) -> np.ndarray:
    """``e^{j (first + i step)}`` for i = 0..count-1, as the outer product of
    about sqrt(count) block starts and in-block steps: each value within a
    few ulp of the direct exponential, for two short exp calls."""
    b = max(1, math.isqrt(count))
    starts = np.exp(1j * (first + step * b * np.arange(-(-count // b))))
    return np.multiply.outer(starts, np.exp(1j * step * np.arange(b))).ravel()[:count]


def remove_tone(spec: np.ndarray, n: int, nu: float, amplitude: complex, offset: float, span: int = 4096,
                out: np.ndarray | None = None) -> np.ndarray:
    """The windowed spectrum with a sine and an offset taken out.

    ``spec = rfft(x * window(n))``; the result is ``rfft((x - offset - A
    cos(2 pi nu k / n + phi)) * window(n))`` with ``amplitude = A e^{j
    phi}``: exact within ``span`` bins of the tone, and beyond them short
    only by the window's far sidelobes (below -250 dB there). Costs far less
    than a second FFT: per range of bins one run of cotangents, a seven-tap
    filter and two in-place subtractions (:func:`kernel_at_bins`'s method).
    Only the bins of :func:`removal_bins` change; ``out=spec`` takes the
    tone out in place.
    """
    if out is None:
        out = spec.copy()
    elif out is not spec:
        out[...] = spec
    out[:4] -= offset * _integer_bin_kernel(n)[3:3 + min(4, out.size)]
    whole = math.floor(nu)
    delta = nu - whole
    alpha = amplitude / 2.0
    for lo, hi, image, wrap in _tone_ranges(n, whole, out.size, span):
        if not image:
            _subtract_kernel(out[lo:hi], lo - whole, delta, n, alpha)
        elif delta == 0.0:
            _subtract_kernel(out[lo:hi], lo + whole - wrap, 0.0, n, alpha.conjugate())
        else:
            _subtract_kernel(out[lo:hi], lo + whole - wrap + 1, 1.0 - delta, n, alpha.conjugate())
    return out


def _tone_ranges(n: int, whole: int, size: int, span: int) -> list[tuple[int, int, bool, int]]:
    """The bin ranges ``[lo, hi)`` :func:`remove_tone` changes for a tone at
    bin ``whole`` (+ a fraction): its own, and its negative-frequency image's
    near DC and (W has period n) near n/2, ``W(m + nu) = W(j' - (1 - delta))``
    with ``j' = m + whole + 1 (- n)``; each with whether it is the image and
    its wrap (0 or n)."""
    ranges = [(max(0, whole - span), min(size, whole + span + 1), False, 0)]
    split = max(0, min(size, n // 2 - whole))  # below it m + nu is nearer 0 than n
    for wrap, first, last in ((0, 0, split), (n, split, size)):
        lo, hi = max(first, wrap - whole - span), min(last, wrap - whole + span + 1)
        if hi > lo:
            ranges.append((lo, hi, True, wrap))
    return [r for r in ranges if r[1] > r[0]]


def removal_bins(n: int, nu: float, size: int, span: int = 4096) -> list[slice]:
    """The bins :func:`remove_tone` changes, as disjoint slices in order
    (the offset's four bins at DC included)."""
    edges = sorted([(0, min(4, size))] + [(lo, hi) for lo, hi, _i, _w in _tone_ranges(n, int(np.floor(nu)), size, span)])
    merged: list[list[int]] = []
    for lo, hi in edges:
        if merged and lo <= merged[-1][1]:
            merged[-1][1] = max(merged[-1][1], hi)
        else:
            merged.append([lo, hi])
    return [slice(lo, hi) for lo, hi in merged]


def _kernel_at(mu: float, n: int) -> complex:
    """:func:`kernel` at one real ``mu``, in scalar math (for a point or two
    numpy's per-call cost would dominate): ``P sum_s c_s (cot(pi (mu + s) /
    n) + j)`` (see :func:`kernel_at_bins`) with ``P = sin(pi r) e^{-j pi
    r}``, ``r = mu - round(mu)``; a term whose ``tan(pi (mu + s) / n)`` is
    below 1e-9 (:func:`_dirichlet`'s test on the sine, to within round-off)
    takes its limit ``e^{-j pi x (n-1)/n} n cos(pi x) / cos(pi x / n)`` at
    ``x = mu + s``, as :func:`kernel` does."""
    r = mu - round(mu)  # exact
    cot = imag = 0.0
    limit = 0j
    tan, pi = math.tan, math.pi
    for s, c in _TAP_PAIRS:
        x = mu + s
        t = tan(pi * x / n)
        if -1e-9 < t < 1e-9:
            limit += c * cmath.exp(-1j * math.pi * x * (n - 1) / n) * (n * math.cos(math.pi * x) / math.cos(math.pi * x / n))
        else:
            cot += c / t
            imag += c
    return math.sin(math.pi * r) * cmath.exp(-1j * math.pi * r) * complex(cot, imag) + limit


def refine_peak(spec: np.ndarray, peak: int, n: int) -> float:
    """Fractional bin of a single tone whose largest bin is ``peak``.

    Solves ``|X[p+1]| / |X[p-1]| = |W(p+1-nu)| / |W(p-1-nu)|`` for nu with
    the exact window kernel (secant steps from parabolic interpolation), so
    the estimate carries no interpolation bias; leakage from other
    components limits it to ~1e-5 bin. Each step evaluates W at two points
    in scalar math (:func:`_kernel_at`).
    """
    lp, cp, rp = (math.log(max(abs(complex(spec[k])), 1e-300)) for k in (peak - 1, peak, peak + 1))
    den = lp - 2.0 * cp + rp
    d0 = 0.5 * (lp - rp) / den if den < 0 else 0.0
    target = rp - lp
    if not math.isfinite(target):
        return float(peak + min(max(d0, -0.5), 0.5))

    def h(d: float) -> float:
        return math.log(abs(_kernel_at(1.0 - d, n))) - math.log(abs(_kernel_at(-1.0 - d, n))) - target

    a = min(max(d0, -0.5), 0.5)
    b = a + 1e-3
    ha, hb = h(a), h(b)
    for _ in range(8):
        if hb == ha:
            break
        a, b, ha = b, b - hb * (b - a) / (hb - ha), hb
        b = min(max(b, -0.6), 0.6)
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
    m, basis = _read_basis(n, nu, spec.size, half_width, rows=3)
    np.take(spec, m, out=basis[:, 2], mode="clip")  # (m is in range; 'clip' spares a buffer)
    # the normal equations of the real least squares, all in one product:
    # Re(u^H v) is the dot product of the interleaved real parts
    rows = basis.view(float)
    gram = rows @ rows.transpose(0, 2, 1)
    a11, a12, a22, b1, b2 = gram[:, 0, 0], gram[:, 0, 1], gram[:, 1, 1], gram[:, 0, 2], gram[:, 1, 2]
    out = np.empty(nu.size, dtype=complex)
    out.real = a22 * b1 - a12 * b2
    out.imag = a11 * b2 - a12 * b1
    out *= 2.0 / (a11 * a22 - a12 * a12)
    return out


#: Per component, the rows of [[w1 + w2], [j (w1 - w2)]] in terms of
#: ``sin(pi r) e^{j pi r}`` (first column) and its conjugate (second).
_READ_ROWS = (np.array([-1.0, -1j]), np.array([1.0, -1j]))
_READ_SIGNS = np.array([-1.0, 1.0])


def _read_basis(n: int, nu: np.ndarray, size: int, half_width: int, rows: int = 2):
    """The bins a read at ``nu`` uses and its two real basis vectors:
    X = p (w1 + w2) + q j (w1 - w2), alpha = p + j q (real least squares),
    with w1 = W(m - nu), w2 = W(m + nu). Returned as ``m`` (K, bins) and
    an array (K, rows, bins) whose rows 0 and 1 hold the two vectors (the
    rest for the caller).

    W as in :func:`kernel_at_bins`: with ``r = nu - round(nu)`` and ``P =
    -sin(pi r) e^{j pi r}``, ``w1 = P Z1`` and ``w2 = -conj(P) Z2``, where
    ``Z = sum_s c_s (cot(pi x / n) + j)`` at ``x = m -+ nu + s``; so the two
    vectors are one 2 x 2 matrix per component times (Z1, Z2). A term whose
    tangent is below 1e-9 (a read within ~1e-9 n / pi bins of a bin) takes
    :func:`kernel`'s limit ``e^{-j pi x (n-1)/n} n cos(pi x) / cos(pi x /
    n)``, which is ``P (n / tan(pi x)) (1 + j tan(pi x / n))``; at an exact
    bin (r = 0) the basis comes from :func:`kernel` itself."""
    near = np.rint(nu)
    r = nu - near  # exact
    m = near.astype(int)[:, None] + np.arange(-half_width, half_width + 1)
    np.maximum(m, 0, out=m)
    np.minimum(m, size - 1, out=m)
    x = (m[:, None, :, None] + _TAP_SHIFTS) + np.multiply.outer(nu, _READ_SIGNS)[:, :, None, None]  # (K, 2, bins, 7)
    tan = np.tan(x * (np.pi / n))
    small = np.abs(tan) < 1e-9
    basis = np.empty((nu.size, rows, m.shape[1]), dtype=complex)
    if small.any():
        if not r.all():
            w1, w2 = kernel(m - nu[:, None], n), kernel(m + nu[:, None], n)
            np.add(w1, w2, out=basis[:, 0])
            np.multiply(w1 - w2, 1j, out=basis[:, 1])
            return m, basis
        z = 1.0 / tan + 1j
        z[small] = (n / np.tan(np.pi * x[small])) * (1.0 + 1j * tan[small])
        z = z @ _TAP_ARRAY
    else:
        z = (1.0 / tan) @ _TAP_ARRAY + 1j * _TAP_SUM
    angle = np.pi * r
    p = np.sin(angle) * np.exp(1j * angle)  # -P
    mix = np.empty((nu.size, 2, 2), dtype=complex)
    np.multiply.outer(p, _READ_ROWS[0], out=mix[:, :, 0])
    np.multiply.outer(p.conj(), _READ_ROWS[1], out=mix[:, :, 1])
    np.matmul(mix, z, out=basis[:, :2])
    return m, basis


def read_noise_gain(n: int, bins: np.ndarray, size: int, half_width: int = 3) -> np.ndarray:
    """For white noise: the mean of ``|read_components(...)|^2`` at each
    fractional bin over the mean power of one bin of the windowed
    spectrum, so that a floor taken from bin powers converts to what a
    read there gives from noise alone.

    The windowed DFT of white noise of variance s^2 has covariance
    E X[m] X[m']* = s^2 n (h * h)[m - m'], h the window's exponential
    coefficients; the read is real-linear in X (b = Re(G^H X), alpha =
    M^-1 b), so E|2 alpha|^2 = 4 tr(M^-1 B M^-1) with B = Re(G^H C G) / 2
    (circular noise: away from DC and fs/2)."""
    nu = np.asarray(bins, dtype=float)
    if nu.size == 0:
        return np.zeros(0)
    m, basis = _read_basis(n, nu, size, half_width)
    a = np.asarray(WINDOW_COEFFS)
    h = np.concatenate([(-1.0) ** np.arange(3, 0, -1) * a[3:0:-1] / 2, [a[0]], (-1.0) ** np.arange(1, 4) * a[1:] / 2])
    hh = np.convolve(h, h)  # offsets -6..6
    d = m[:, :, None] - m[:, None, :]
    c = np.where(np.abs(d) <= 6, hh[np.clip(d + 6, 0, 12)], 0.0)
    g = basis.transpose(0, 2, 1)  # (K, bins, 2)
    mm = np.einsum("kbi,kbj->kij", g.conj(), g).real
    bb = 0.5 * np.einsum("kbi,kbc,kcj->kij", g.conj(), c, g).real
    inv = np.linalg.inv(mm)
    return 4.0 * np.einsum("kij,kjl,kli->k", inv, bb, inv) / hh[6]


def fit_noise_gain(n: int) -> float:
    """For white noise: the mean of a least-squares fitted sinusoid's
    ``|amplitude|^2`` (4 s^2 / n: each quadrature coefficient has variance
    2 s^2 / n) over the mean power of one bin of the windowed spectrum
    (s^2 sum w^2 = s^2 n (a0^2 + sum a_m^2 / 2))."""
    a = np.asarray(WINDOW_COEFFS)
    return 4.0 / (n * n * (a[0] ** 2 + 0.5 * float(np.sum(a[1:] ** 2))))


def band_bins(n: int, sample_rate: float, lo_hz: float, hi_hz: float) -> slice:
    """The rfft bins whose centre frequency lies in [lo_hz, hi_hz]."""
    lo = max(0, int(np.ceil(lo_hz * n / sample_rate - 1e-9)))
    hi = min(n // 2, int(np.floor(hi_hz * n / sample_rate + 1e-9)))
    return slice(lo, max(lo, hi + 1))


def peak_amplitude(spec: np.ndarray, peak: int, nu: float, n: int) -> complex:
    """``A e^{j phi}`` of a tone at fractional bin ``nu`` from its largest
    bin alone (its negative-frequency image neglected): a starting value."""
    return 2.0 * complex(spec[peak]) / _kernel_at(peak - nu, n)
