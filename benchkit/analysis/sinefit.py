"""Least-squares sine fitting on long records, without long phasor arrays.

The four-parameter fit of IEEE Std 1057 (and IEEE Std 1241, section 4.1.4)
estimates a sine's frequency, amplitude, phase and offset by Gauss-Newton
iterations on the linearised model; a multi-harmonic linear fit at that
frequency then estimates the fundamental and the low harmonics jointly, so
that neither leaks into the other over a record that holds a non-integer
number of periods.

Every sum these fits need is either ``sum_n x[n] e^{-j w n}`` (a dot product
with the data) or ``sum_n t_n^p e^{j w n}`` (a property of the record length
alone). Writing the sample index as ``n = b*B + i`` with ``B ~ sqrt(N)`` turns
``e^{j w n}`` into the outer product ``e^{j w b B} e^{j w i}``: the data dot
products become one matrix product of the record, reshaped to ``(N/B, B)``,
with a short ``(B, k)`` phasor matrix, and the record sums factor into sums
over ``b`` and over ``i``. Nothing of length N is built except the fitted
fundamental that is finally subtracted.

Frequencies here are in cycles per sample. Time ``t_n = (n - (N-1)/2) / N``
is centred, which keeps the frequency column nearly orthogonal to the others.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from benchkit.errors import BenchkitError


def _phasor(cycles: np.ndarray) -> np.ndarray:
    """e^{j 2 pi cycles}, reducing the argument to one turn first."""
    return np.exp(2j * np.pi * np.mod(cycles, 1.0))


class RecordLayout:
    """The ``n = b*B + i`` split of a record of ``n`` samples.

    Parameters
    ----------
    n : int
        Record length in samples.
    """

    def __init__(self, n: int):
        self.n = n
        self.block = max(1, math.isqrt(n))
        self.blocks = n // self.block
        self.main = self.blocks * self.block
        self.i = np.arange(self.block, dtype=float)
        self.bstart = np.arange(self.blocks, dtype=float) * self.block
        self.tail = np.arange(self.main, n, dtype=float)
        self.centre = centre = (n - 1) / 2.0
        self.t_block = (self.bstart - centre) / n  # t at the start of each block
        self.t_in = self.i / n  # t offset inside a block
        self.t_tail = (self.tail - centre) / n

    def harmonic_phasors(self, cycles: float, count: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """``e^{j 2 pi m c n}`` for m = 0..count-1, split as block starts
        ``(blocks, count)``, in-block offsets ``(block, count)`` and tail
        ``(tail, count)``. Powers by doubling runs, ``b^(k..k+m-1) =
        b^(k-1) b^(1..m)``: a handful of vectorised products instead of
        complex exponentials, each power within a few ulp."""

        def powers(pos: np.ndarray) -> np.ndarray:
            # built as (count, positions), contiguous rows, then viewed the
            # other way round
            out = np.empty((count, pos.size), dtype=complex)
            out[0] = 1.0
            if count > 1:
                out[1] = _phasor(pos * cycles)
            k = 2
            while k < count:
                m = min(k - 1, count - k)
                np.multiply(out[1 : m + 1], out[k - 1], out=out[k : k + m])
                k += m
            return out.T

        return powers(self.bstart), powers(self.i), powers(self.tail)

    def record_sums(self, ph, max_power: int) -> list[np.ndarray]:
        """``E_p(m c) = sum_n t_n^p e^{j 2 pi m c n}`` for p = 0..max_power and
        every m of the phasors ``ph`` (from :meth:`harmonic_phasors`)."""
        ub, vi, tail = ph
        sb = [ub.T @ (self.t_block**q) for q in range(max_power + 1)]
        si = [vi.T @ (self.t_in**r) for r in range(max_power + 1)]
        out = []
        for p in range(max_power + 1):
            total = sum(math.comb(p, q) * sb[q] * si[p - q] for q in range(p + 1))
            out.append(total + tail.T @ (self.t_tail**p))
        return out

    def data_sums(self, x: np.ndarray, ph, orders: int, weighted: bool) -> tuple[np.ndarray, np.ndarray | None]:
        """``S_m = sum_n x[n] e^{-j 2 pi m c n}`` for m = 0..orders and, if
        ``weighted``, ``T_m = sum_n t_n x[n] e^{-j 2 pi m c n}``.

        One matrix product over the record; everything else is short.
        """
        m = orders + 1
        ub, vi, tail = (p[:, :m].conj() for p in ph)
        cols = [vi.real, vi.imag]
        if weighted:
            vt = vi * self.t_in[:, None]
            cols += [vt.real, vt.imag]
        g = x[: self.main].reshape(self.blocks, self.block) @ np.concatenate(cols, axis=1)
        z = g[:, :m] + 1j * g[:, m : 2 * m]
        xt = x[self.main :]
        s = np.sum(ub * z, axis=0) + xt @ tail
        if not weighted:
            return s, None
        zt = g[:, 2 * m : 3 * m] + 1j * g[:, 3 * m :]
        t = np.sum(ub * (self.t_block[:, None] * z + zt), axis=0) + (self.t_tail * xt) @ tail
        return s, t

    def sine(self, cycles: float, a: float, b: float) -> np.ndarray:
        """``a cos(2 pi c n) + b sin(2 pi c n)`` for the whole record.

        The main part is the rank-2 product ``Re(q u_b) Re(v_i) - Im(q u_b)
        Im(v_i)``, written by one matrix product."""
        q = complex(a, -b)
        ub = q * _phasor(self.bstart * cycles)
        vi = _phasor(self.i * cycles)
        out = np.empty(self.n)
        np.dot(np.stack([ub.real, -ub.imag], axis=1), np.stack([vi.real, vi.imag]),
               out=out[: self.main].reshape(self.blocks, self.block))
        out[self.main :] = (q * _phasor(self.tail * cycles)).real
        return out


@dataclass(frozen=True)
class SineFit:
    """Result of :func:`fit_tone`.

    ``cos`` and ``sin`` hold the coefficients of ``cos(2 pi k c n)`` and
    ``sin(2 pi k c n)`` for k = 1..len(cos) (index 0 is the fundamental), with
    n = 0 at the first sample; ``offset`` is the fitted DC. ``iterations``
    counts Gauss-Newton steps on the frequency.
    """

    cycles: float
    offset: float
    cos: np.ndarray
    sin: np.ndarray
    iterations: int

    def amplitude(self) -> np.ndarray:
        return np.hypot(self.cos, self.sin)

    def phase_rad(self) -> np.ndarray:
        """phi_k of ``A_k cos(2 pi k c n + phi_k)``."""
        return np.arctan2(-self.sin, self.cos)


def _gram(e: np.ndarray, orders: int, out: np.ndarray | None = None) -> np.ndarray:
    """Gram matrix ``sum_n t^p u_i u_j`` of the columns [1, cos_1..cos_K,
    sin_1..sin_K], from ``e[m] = E_p(m c)`` for m = 0..2K."""
    k = np.arange(1, orders + 1)
    kl = np.subtract.outer(k, k)
    ediff = e[np.abs(kl)]
    ediff_im = np.sign(kl) * ediff.imag  # Im E_p((k-l)c): E_p(-w) = conj E_p(w)
    esum = e[np.add.outer(k, k)]
    m = 2 * orders + 1
    g = np.empty((m, m)) if out is None else out
    cos_, sin_ = slice(1, orders + 1), slice(orders + 1, m)
    g[0, 0] = e[0].real
    g[0, cos_] = g[cos_, 0] = e[k].real
    g[0, sin_] = g[sin_, 0] = e[k].imag
    g[cos_, cos_] = (ediff.real + esum.real) / 2.0
    g[sin_, sin_] = (ediff.real - esum.real) / 2.0
    g[cos_, sin_] = (esum.imag - ediff_im) / 2.0  # sum t^p cos_k sin_l
    g[sin_, cos_] = g[cos_, sin_].T
    return g


def _solve(g: np.ndarray, rhs: np.ndarray) -> np.ndarray:
    """Solve a normal-equation system after scaling it to unit diagonal."""
    d = 1.0 / np.sqrt(np.abs(np.diag(g)))
    try:
        sol = np.linalg.solve(g * np.outer(d, d), rhs * d) * d
    except np.linalg.LinAlgError as exc:
        raise BenchkitError("the sine fit is singular: the record is too short or holds no usable tone") from exc
    if not np.all(np.isfinite(sol)):
        raise BenchkitError("the sine fit did not converge: the record holds no usable tone")
    return sol


def fit_tone(
    x: np.ndarray,
    layout: RecordLayout,
    cycles0: float,
    orders: int,
    start: complex | None = None,
    energy: float | None = None,
    max_iter: int = 12,
) -> SineFit:
    """Fit an offset, a fundamental of unknown frequency and its harmonics
    up to ``orders``, by least squares.

    Gauss-Newton steps on the frequency (the four-parameter fit of IEEE Std
    1057, with the harmonics carried in the model so that they do not bias
    it); each step solves for every amplitude as well.

    Parameters
    ----------
    x : ndarray
        The record, float64.
    layout : RecordLayout
        Its index layout.
    cycles0 : float
        Starting frequency in cycles per sample, within a fraction of a DFT
        bin of the truth.
    orders : int
        Highest harmonic order in the model (1: the fundamental alone); every
        order must lie below half the sample rate.
    start : complex, optional
        Estimate of the fundamental ``A e^{j phi}`` at ``cycles0``; without
        it a linear fit at ``cycles0`` supplies one.
    energy : float, optional
        ``sum(x**2)``. With it the iteration also stops once the frequency
        error left after a step (Gauss-Newton converges quadratically, so
        about the square of the step) would change the residual by less than
        1e-6 of its power; without it, only at a step below 1e-11 bin.

    Returns
    -------
    SineFit

    References
    ----------
    IEEE Std 1057-2017, four-parameter least-squares sine fit;
    IEEE Std 1241-2010, section 4.1.4 (sine fitting, with harmonics).
    """
    n = layout.n
    k_all = np.arange(0, orders + 1)
    m = 2 * orders + 1

    def sums(c: float, weighted: bool):
        ph = layout.harmonic_phasors(c, m)
        e = layout.record_sums(ph, 2 if weighted else 0)
        s, t = layout.data_sums(x, ph, orders, weighted)
        r0 = np.concatenate([[s[0].real], s[1:].real, -s[1:].imag])
        r1 = None if t is None else np.concatenate([[t[0].real], t[1:].real, -t[1:].imag])
        return e, r0, r1

    c = cycles0
    if start is None:
        e, r0, _ = sums(c, False)
        theta = _solve(_gram(e[0], orders), r0)
    else:
        theta = np.zeros(m)
        theta[1], theta[orders + 1] = start.real, -start.imag
    g = np.empty((m + 1, m + 1))
    it = 0
    for it in range(1, max_iter + 1):
        e, r0, r1 = sums(c, True)
        # d/dc of sum_k a_k cos + b_k sin is 2 pi n sum_k k (b_k cos_k - a_k sin_k);
        # with n = N t + const the constant part lies in the span of the
        # columns, so the frequency column is D = t (w . columns)
        a, b = theta[1 : orders + 1], theta[orders + 1 :]
        w = np.concatenate([[0.0], k_all[1:] * b, -k_all[1:] * a])
        _gram(e[0], orders, out=g[:m, :m])
        g[m, :m] = g[:m, m] = _gram(e[1], orders) @ w
        g[m, m] = w @ _gram(e[2], orders) @ w
        sol = _solve(g, np.concatenate([r0, [w @ r1]]))
        theta = sol[:-1]
        step = sol[-1] / (2.0 * np.pi * n)
        # keep each step within half a bin; the start is already that close
        step = max(-0.5 / n, min(0.5 / n, step))
        c += step
        # the column D moves each phase by 2 pi k step (n - centre): the part
        # 2 pi k step centre went into the coefficients; take it out again so
        # they refer to n = 0 at the new frequency
        z = (theta[1 : orders + 1] - 1j * theta[orders + 1 :]) * np.exp(
            -2j * np.pi * k_all[1:] * step * layout.centre
        )
        theta[1 : orders + 1], theta[orders + 1 :] = z.real, -z.imag
        bins = abs(step) * n
        if bins < 1e-11:
            # converged: a step this small moves the coefficients by far
            # less than the float64 floor, so the last solve stands
            break
        if energy is not None:
            rss = max(energy - float(theta @ r0), 0.0)
            left = 10.0 * bins * bins  # bins of error left, with margin
            # a frequency error of e bins leaves about A (2 pi e) / sqrt(12)
            # of the fundamental in the residual (time centred on the record)
            amp2 = theta[1] ** 2 + theta[orders + 1] ** 2
            if amp2 * (2.0 * np.pi * left) ** 2 / 12.0 < 1e-6 * rss / n:
                break
    else:
        e, r0, _ = sums(c, False)
        theta = _solve(_gram(e[0], orders), r0)
    return SineFit(cycles=c, offset=float(theta[0]), cos=theta[1 : orders + 1], sin=theta[orders + 1 :], iterations=it)
