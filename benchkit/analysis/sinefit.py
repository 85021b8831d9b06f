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
from functools import lru_cache

import numpy as np

from benchkit.analysis.blockfft import scratch
from benchkit.errors import BenchkitError


def _phasor(cycles: np.ndarray) -> np.ndarray:
    """e^{j 2 pi cycles}, reducing the argument to one turn first."""
    return np.exp(2j * np.pi * np.mod(cycles, 1.0))


class _SumWeights:
    """Real weight matrices that sum complex rows, seen as interleaved (re,
    im) pairs: ``kron(w, I_2)`` applies the real weights w to both parts.

    ``powers`` holds, for block starts, in-block offsets and tail, the
    weights ``t^q`` (q = 0..2) as ``(2 positions, 6)``. ``rows`` sums the
    rows of :meth:`RecordLayout.conj_data_sums` (the blocks, then the
    tail's samples): ``rows[False]`` just adds them up; ``rows[True]``
    takes rows z and then zt, adds up the z for conj S, and the z times t
    plus the zt for conj T."""

    def __init__(self, layout: RecordLayout):
        pair = np.eye(2)
        q = np.arange(3)[:, None]
        self.powers = tuple(np.kron((t**q).T, pair) for t in (layout.t_block, layout.t_in, layout.t_tail))
        t_rows = np.concatenate([layout.t_block, layout.t_tail])
        ones, zeros = np.ones_like(t_rows), np.zeros_like(t_rows)
        self.rows = {
            False: np.kron(ones[:, None], pair),
            True: np.kron(np.block([[ones[:, None], t_rows[:, None]], [zeros[:, None], ones[:, None]]]), pair),
        }
        for w in (*self.powers, *self.rows.values()):
            w.flags.writeable = False


@lru_cache(maxsize=8)
def _sum_weights(n: int) -> _SumWeights:
    """The weights of a record of n samples, built once per length (for
    any caller's layout of that length)."""
    return _SumWeights(RecordLayout(n))


@lru_cache(maxsize=None)
def _binomial_weights(max_power: int) -> np.ndarray:
    """``E_p = sum_q C(p, q) B_q I_{p-q}``, as a real map from the products
    ``B_q I_r`` (flattened over q, r; interleaved re, im) to the E_p."""
    size = max_power + 1
    w = np.zeros((size * size, size))
    for q in range(size):
        for r in range(size - q):
            w[q * size + r, q + r] = math.comb(q + r, q)
    w = np.kron(w, np.eye(2))
    w.flags.writeable = False
    return w


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
        # the three sets of positions end to end, for one pass of
        # harmonic_phasors; _cuts splits them again
        self.positions = np.concatenate([self.bstart, self.i, self.tail])
        self._cuts = (self.blocks, self.blocks + self.block)

    @property
    def _weights(self) -> _SumWeights:
        return _sum_weights(self.n)

    def harmonic_phasors(
        self, cycles: float, count: int, out: np.ndarray | None = None
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """``e^{j 2 pi m c n}`` for m = 0..count-1, split as block starts
        ``(count, blocks)``, in-block offsets ``(count, block)`` and tail
        ``(count, tail)``: one row per m, contiguous. Powers by doubling
        runs, ``b^(k..k+m-1) = b^(k-1) b^(1..m)``: a handful of vectorised
        products instead of complex exponentials, each power within a few
        ulp. The three sets of positions go through together, so each step
        is one numpy call. ``out``, complex ``(count, positions)``, takes
        the table if given (the sections returned are views of it)."""
        pos = self.positions
        if out is None:
            out = np.empty((count, pos.size), dtype=complex)
        out[0] = 1.0
        if count > 1:
            # e^{j 2 pi c n} from its cosine and sine, the argument reduced
            # to one turn first (n c - floor(n c) is np.mod(n c, 1), exactly)
            turn = pos * cycles
            turn -= np.floor(turn)
            turn *= 2.0 * np.pi
            np.cos(turn, out=out[1].real)
            np.sin(turn, out=out[1].imag)
        k = 2
        while k < count:
            m = min(k - 1, count - k)
            np.multiply(out[1 : m + 1], out[k - 1], out=out[k : k + m])
            k += m
        b, i = self._cuts
        return out[:, :b], out[:, b:i], out[:, i:]

    def record_sums(self, ph, max_power: int) -> np.ndarray:
        """``E_p(m c) = sum_n t_n^p e^{j 2 pi m c n}`` for p = 0..max_power
        (at most 2) and every m of the phasors ``ph`` (from
        :meth:`harmonic_phasors`), as rows ``(max_power + 1, count)``.

        With ``t_n = t_b + t_i``, ``E_p = sum_q C(p, q) B_q I_{p-q} + L_p``
        where ``B_q = sum_b t_b^q u_b``, ``I_r = sum_i t_i^r v_i`` and
        ``L_p`` is the tail's own sum. Each of these is one real matrix
        product of the phasor rows, seen as interleaved (re, im) pairs, with
        the weights ``t^q`` spread over both parts (see :func:`_sum_weights`).
        """
        if max_power > 2:
            raise ValueError("record_sums goes up to t^2")
        q = 2 * (max_power + 1)
        b, i, tail = (
            (p.view(float) @ w[:, :q]).view(complex) for p, w in zip(ph, self._weights.powers)
        )  # (count, max_power + 1) each
        prod = (b[:, :, None] * i[:, None, :]).reshape(b.shape[0], -1)
        e = (prod.view(float) @ _binomial_weights(max_power)).view(complex)
        e += tail
        return np.ascontiguousarray(e.T)

    def data_sums(self, x: np.ndarray, ph, orders: int, weighted: bool) -> tuple[np.ndarray, np.ndarray | None]:
        """``S_m = sum_n x[n] e^{-j 2 pi m c n}`` for m = 0..orders and, if
        ``weighted``, ``T_m = sum_n t_n x[n] e^{-j 2 pi m c n}``: the complex
        conjugates of the rows of :meth:`conj_data_sums`."""
        sums = self.conj_data_sums(x, ph, orders, weighted).conj()
        return sums[0], (sums[1] if weighted else None)

    def conj_data_sums(self, x: np.ndarray, ph, orders: int, weighted: bool) -> np.ndarray:
        """``conj S_m = sum_n x[n] e^{j 2 pi m c n}`` and, if ``weighted``,
        ``conj T_m`` (with ``t_n x[n]``), as rows ``(1 or 2, orders + 1)``.

        One matrix product over the record, the in-block phasors (as real
        and imaginary rows, and again times ``t_i`` if ``weighted``) against
        the record reshaped to ``(blocks, block)``: it gives, for each block
        b, ``z_b = sum_i x[bB + i] v_i`` and ``zt_b = sum_i t_i x[bB + i]
        v_i``. Then ``conj S = sum_b u_b z_b`` and ``conj T = sum_b u_b (t_b
        z_b + zt_b)``, the tail's samples added as blocks of their own; these
        sums over b are one more (short) matrix product.
        """
        k = orders + 1
        ub, vi, tail = ph
        blocks = self.blocks
        width = 2 if weighted else 1
        # the work arrays (a few hundred kB at 96,000 samples) are per-thread
        # scratch: fresh ones past the C library's mapping threshold would
        # be faulted in from the kernel on every call
        # rows Re v_0..v_K, Im v_1..v_K (v_0 = 1 has no imaginary part)
        cols = scratch("sinefit_cols", (width, 2 * k - 1, self.block), float)
        cols[0, :k] = vi[:k].real
        cols[0, k:] = vi[1:k].imag
        if weighted:
            np.multiply(cols[0], self.t_in, out=cols[1])
        g = scratch("sinefit_blocksums", (width, 2 * k - 1, blocks), float)
        np.matmul(cols.reshape(-1, self.block), x[: self.main].reshape(blocks, self.block).T, out=g.reshape(-1, blocks))
        # z_b u_b (and zt_b u_b) for every block, then the tail's samples
        # x[n] e^{j 2 pi m c n} as rows of their own
        z = scratch("sinefit_rows", (k, width, blocks + tail.shape[1]), complex)
        z.real[:, :, :blocks] = g[:, :k].transpose(1, 0, 2)
        z.imag[0, :, :blocks] = 0.0
        z.imag[1:, :, :blocks] = g[:, k:].transpose(1, 0, 2)
        z[:, :, :blocks] *= ub[:k, None, :]
        np.multiply(tail[:k], x[self.main :], out=z[:, 0, blocks:])
        z[:, 1:, blocks:] = 0.0
        # conj S: the z rows summed; conj T: the z rows weighted by t, plus
        # the zt rows summed (see _SumWeights.rows)
        w = self._weights.rows[weighted]
        return np.ascontiguousarray((z.reshape(k, -1).view(float) @ w).view(complex).T)

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


class _FitTables:
    """Constants of :func:`fit_tone` for a number of harmonic orders K.

    The parameters are ordered ``[offset, a_1, b_1, a_2, b_2, ...]`` (a_k of
    ``cos(2 pi k c n)``, b_k of ``sin``), so that ``theta[1:]`` seen as
    complex is ``a_k + j b_k``, the conjugate of ``A_k e^{j phi_k}``, and
    the data sums ``conj S_m`` are, as (re, im) pairs, the right-hand side.

    ``gram`` maps ``E_p(m c)`` (m = 0..2K, interleaved re, im) to the Gram
    matrix of those columns, flattened: the rows are :func:`_gram` of the
    unit real and imaginary parts, reordered. ``pick`` takes the right-hand
    side from ``conj S`` (all but ``Im conj S_0``, which is zero). The
    frequency column's weights ``[0, k b_k, -k a_k]`` are ``kw *
    theta[swap]``; ``kphase`` is ``2 pi j k``.
    """

    def __init__(self, orders: int):
        m = 2 * orders + 1
        k = np.arange(1, orders + 1)
        order = np.empty(m, dtype=int)  # from _gram's [1, cos_1..K, sin_1..K]
        order[0], order[1::2], order[2::2] = 0, k, k + orders
        units = np.eye(2 * m).view(complex)
        self.gram = np.stack([_gram(e, orders)[np.ix_(order, order)].ravel() for e in units])
        self.pick = np.r_[0, 2 : 2 * orders + 2]
        self.swap = np.arange(m)
        self.swap[1::2], self.swap[2::2] = self.swap[2::2], self.swap[1::2].copy()
        self.kw = np.zeros(m)
        self.kw[1::2], self.kw[2::2] = k, -k
        self.kphase = 2j * np.pi * k
        for a in (self.gram, self.pick, self.swap, self.kw, self.kphase):
            a.flags.writeable = False


@lru_cache(maxsize=None)
def _fit_tables(orders: int) -> _FitTables:
    return _FitTables(orders)


def _solve(g: np.ndarray, rhs: np.ndarray) -> np.ndarray:
    """Solve a normal-equation system after scaling it to unit diagonal."""
    d = np.abs(g.diagonal()) ** -0.5
    try:
        sol = np.linalg.solve(g * d * d[:, None], rhs * d)
    except np.linalg.LinAlgError as exc:
        raise BenchkitError("the sine fit is singular: the record is too short or holds no usable tone") from exc
    sol *= d
    if not np.isfinite(sol).all():
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
    m = 2 * orders + 1
    tab = _fit_tables(orders)
    phasors = scratch("sinefit_phasors", (m, layout.positions.size), complex)

    def sums(c: float, weighted: bool):
        """Gram matrices for t^0 (and t^1, t^2 if ``weighted``), and the
        right-hand sides [sum x u] (and [sum t x u])."""
        ph = layout.harmonic_phasors(c, m, out=phasors)
        e = layout.record_sums(ph, 2 if weighted else 0)
        grams = (e.view(float) @ tab.gram).reshape(-1, m, m)
        r = layout.conj_data_sums(x, ph, orders, weighted).view(float)[:, tab.pick]
        return grams, r

    c = cycles0
    if start is None:
        grams, r = sums(c, False)
        theta = _solve(grams[0], r[0])
    else:
        theta = np.zeros(m)
        theta[1], theta[2] = start.real, -start.imag
    g = np.empty((m + 1, m + 1))
    rhs = np.empty(m + 1)
    it = 0
    for it in range(1, max_iter + 1):
        grams, r = sums(c, True)
        # d/dc of sum_k a_k cos + b_k sin is 2 pi n sum_k k (b_k cos_k - a_k sin_k);
        # with n = N t + const the constant part lies in the span of the
        # columns, so the frequency column is D = t (w . columns)
        w = tab.kw * theta[tab.swap]
        g[:m, :m] = grams[0]
        border = grams[1:] @ w  # G_1 w, G_2 w
        g[m, :m] = g[:m, m] = border[0]
        g[m, m] = border[1] @ w
        rhs[:m] = r[0]
        rhs[m] = r[1] @ w
        sol = _solve(g, rhs)
        theta = sol[:-1]
        step = sol[-1] / (2.0 * np.pi * n)
        # keep each step within half a bin; the start is already that close
        step = max(-0.5 / n, min(0.5 / n, step))
        c += step
        # the column D moves each phase by 2 pi k step (n - centre): the part
        # 2 pi k step centre went into the coefficients; take it out again so
        # they refer to n = 0 at the new frequency (a_k + j b_k is conj A e^{j phi})
        theta[1:].view(complex)[...] *= np.exp(tab.kphase * (step * layout.centre))
        bins = abs(step) * n
        if bins < 1e-11:
            # converged: a step this small moves the coefficients by far
            # less than the float64 floor, so the last solve stands
            break
        if energy is not None:
            rss = max(energy - float(theta @ r[0]), 0.0)
            left = 10.0 * bins * bins  # bins of error left, with margin
            # a frequency error of e bins leaves about A (2 pi e) / sqrt(12)
            # of the fundamental in the residual (time centred on the record)
            amp2 = theta[1] ** 2 + theta[2] ** 2
            if amp2 * (2.0 * np.pi * left) ** 2 / 12.0 < 1e-6 * rss / n:
                break
    else:
        grams, r = sums(c, False)
        theta = _solve(grams[0], r[0])
    return SineFit(cycles=c, offset=float(theta[0]), cos=theta[1::2], sin=theta[2::2], iterations=it)
