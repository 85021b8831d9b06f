"""Synchronized exponential sweeps: generation, deconvolution, separation.

The sweep of Novak, Lotton and Simon (JAES 63(10), 2015)::

    x(t) = sin(2 pi f1 L (exp(t / L) - 1)),   L = round(f1 T / ln(f2/f1)) / f1

lasts T^ = L ln(f2/f1) (not the T asked for). Its analytic inverse filter

    X~(f) = 2 sqrt(f / L) exp(-j 2 pi f L (1 - ln(f / f1)) + j pi / 4)

multiplies the continuous-time spectrum of the response, FFT(y)/fs. The
deconvolved response holds the linear impulse response at t = 0 and the
k-th harmonic's before it, at -L ln k (Farina, AES 108th Convention 2000;
Novak 2015), each windowed out and transformed on its own.

A sweep that starts at f1 leaves the deconvolved response spread around
t = 0 at the lowest frequencies (the inverse filter assumes a sweep that
never started), and fades bend both ends. Both are the same for every
signal processed the same way, so :func:`measure` divides the output's
responses by those of a reference processed identically: the reference
input when one is wired, otherwise the digital sweep that was played.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np

# scipy is imported in the functions that use it: it is slow to load, and the
# command line (which reads this module) starts without it

from benchkit.analysis import refuse_non_finite
from benchkit.analysis.spectrum import phasor_run
from benchkit.errors import BenchkitError

#: Raised-cosine fade-in over the first third of an octave and fade-out
#: over the last twelfth (the sweep spends L ln(2^(1/N)) s there).
FADE_IN_OCTAVES = 1.0 / 3.0
FADE_OUT_OCTAVES = 1.0 / 12.0
#: Highest harmonic order separated.
MAX_ORDER = 5
#: Longest window kept after the linear response, s.
MAX_IR_S = 1.0
#: How far either side of the noise stretch the chirp an abrupt sweep end
#: deconvolves to is kept out of the noise read (see noise_read), s.
CLICK_GUARD_S = 0.05
#: A harmonic's curve starts where its frequency stands this many periods
#: of its window's shorter side above the sweep's start (measured on a
#: static polynomial: the level then reads within 0.5 dB of the
#: power-reduction identities, for sweeps of 1 to 10 s from 2 to 20 Hz).
WINDOW_CYCLES = 4.0
#: The same for the linear response, flagged rather than blanked.
LINEAR_CYCLES = 2.0


@dataclass(frozen=True)
class SyncSweep:
    """A synchronized exponential sweep from f1 to f2 Hz.

    ``seconds`` is the length asked for; ``faded`` says whether the played
    sweep had benchkit's fades (a sweep made elsewhere, exactly the formula,
    does not).
    """

    f1_hz: float
    f2_hz: float
    rate: float
    L: float
    seconds: float
    faded: bool = True

    @classmethod
    def design(cls, f1_hz: float, f2_hz: float, seconds: float, rate: float, faded: bool = True) -> "SyncSweep":
        """The sweep of about ``seconds`` (L rounded so harmonics stay in phase)."""
        if not (0 < f1_hz < f2_hz <= rate / 2) or not seconds > 0:
            raise BenchkitError(f"a sweep needs 0 < F1 < F2 <= fs/2 and a positive length, got {f1_hz:g}:{f2_hz:g}:{seconds:g}")
        L = round(f1_hz * seconds / math.log(f2_hz / f1_hz)) / f1_hz
        if L <= 0:
            raise BenchkitError("the sweep is too short for its start frequency: lengthen it or start higher")
        return cls(float(f1_hz), float(f2_hz), float(rate), L, float(seconds), faded)

    @classmethod
    def from_dict(cls, d: dict, rate: float) -> "SyncSweep":
        try:
            return cls.design(float(d["f1_hz"]), float(d["f2_hz"]), float(d["seconds"]), rate, bool(d.get("faded", True)))
        except (KeyError, TypeError, ValueError) as exc:
            raise BenchkitError("the sidecar's sweep description is damaged") from exc

    def to_dict(self) -> dict:
        return {"f1_hz": self.f1_hz, "f2_hz": self.f2_hz, "seconds": self.seconds, "L_s": self.L,
                "duration_s": self.duration_s, "faded": self.faded}

    @property
    def duration_s(self) -> float:
        """T^ = L ln(f2/f1)."""
        return self.L * math.log(self.f2_hz / self.f1_hz)

    @property
    def n_samples(self) -> int:
        return int(math.floor(self.duration_s * self.rate))

    @property
    def band_hz(self) -> tuple[float, float]:
        """Where the response is reported: past the fades."""
        if not self.faded:
            return self.f1_hz, self.f2_hz
        return self.f1_hz * 2 ** FADE_IN_OCTAVES, self.f2_hz * 2 ** -FADE_OUT_OCTAVES

    def samples(self, amplitude: float = 1.0) -> np.ndarray:
        """The sweep as played: its phase starts at zero, so it starts at
        zero; with fades when ``faded``."""
        t = np.arange(self.n_samples) / self.rate
        x = np.empty(t.size)

        def part(lo: int, hi: int) -> None:
            x[lo:hi] = amplitude * np.sin(2 * np.pi * self.f1_hz * self.L * (np.exp(t[lo:hi] / self.L) - 1.0))

        _in_halves(part, x.size)
        if self.faded:
            t_in = self.L * math.log(2 ** FADE_IN_OCTAVES)
            t_out = self.L * math.log(2 ** FADE_OUT_OCTAVES)
            head, tail = t < t_in, t > self.duration_s - t_out
            x[head] *= 0.5 - 0.5 * np.cos(np.pi * t[head] / t_in)
            x[tail] *= 0.5 - 0.5 * np.cos(np.pi * (self.duration_s - t[tail]) / t_out)
        return x

    def harmonic_delay_s(self, order: int) -> float:
        """How long before the linear response the order-k response lies."""
        return self.L * math.log(order)

    def inverse(self, freqs: np.ndarray) -> np.ndarray:
        """Novak's analytic inverse filter X~(f) (zero at f = 0)."""
        f = np.asarray(freqs, dtype=float)
        out = np.zeros(f.shape, dtype=complex)
        pos = f > 0
        fp = f[pos]
        phase = -2 * np.pi * fp * self.L * (1 - np.log(fp / self.f1_hz)) + np.pi / 4
        mag = 2 * np.sqrt(fp / self.L)
        # (the real cosine and sine: far quicker than a complex exponential)
        out.real[pos] = mag * np.cos(phase)
        out.imag[pos] = mag * np.sin(phase)
        return out

    def windows(self, orders: int) -> list[tuple[float, float]]:
        """(before, after) seconds of the window round each order's
        response: before reaches at most half way to the next order (which
        lies earlier), after half way to the previous one; the linear
        response keeps 3/f1 before it and four periods of f1 after it
        (0.25 s to MAX_IR_S)."""
        spans = []
        for k in range(1, orders + 1):
            up = 0.5 * self.L * math.log((k + 1) / k)
            before = min(3.0 / (k * self.f1_hz), up)
            after = min(MAX_IR_S, max(0.25, 4.0 / self.f1_hz)) if k == 1 else 0.5 * self.L * math.log(k / (k - 1))
            spans.append((before, after))
        return spans


def deconvolve(response: np.ndarray, sweep: SyncSweep, nfft: int | None = None) -> np.ndarray:
    """The deconvolved response: linear IR at index 0, the harmonics' IRs
    wrapped round to the end of the buffer (negative times).

    ``response`` must start where the sweep starts (align it first).

    h = IDFT_N(DFT_N(y) G) with G = X~(f) / fs at the bins (the imaginary
    parts of its f = 0 and f = fs/2 bins dropped, as a real inverse
    transform does). For an even N = 2M this runs as two complex
    transforms of M points, faster than real transforms of N: with
    z[m] = y[2m] + j y[2m+1] and Z = DFT_M(z),

        Y[k] = a_k Z[k] + b_k Z*[M-k],   a_k = (1 - j W^k) / 2,  b_k = (1 + j W^k) / 2,

    W = exp(-2 pi j / N), and h's samples packed the same way,
    h[2m] + j h[2m+1] = IDFT_M(Z'), where (h real, so H[k+M] = H*[M-k])

        Z'[k] = c_k H[k] + d_k H*[M-k],   c_k = (1 + j W^-k) / 2,  d_k = (1 - j W^-k) / 2.

    With H = G Y both steps fold into Z'[k] = P_k Z[k] + Q_k Z*[M-k]
    (:func:`_deconvolution_kernel`); Z[M] is Z[0].
    """
    import scipy.fft
    y = np.asarray(response, dtype=float)
    if nfft is None:
        nfft = deconvolution_length(sweep, y.size)
    kernel = _deconvolution_kernel(sweep, nfft)
    if nfft % 2:
        spec = scipy.fft.rfft(y, nfft)
        spec *= kernel[0]
        return scipy.fft.irfft(spec, nfft, overwrite_x=True)
    p, q = kernel
    buf = np.zeros(nfft)
    buf[:min(y.size, nfft)] = y[:nfft]
    z = scipy.fft.fft(buf.view(complex), overwrite_x=True)
    mirror = np.empty_like(z)  # Z*[M-k], k = 0..M-1
    mirror[0] = z[0]
    mirror[1:] = z[:0:-1]
    np.conjugate(mirror, out=mirror)
    mirror *= q
    z *= p
    z += mirror
    return scipy.fft.ifft(z, overwrite_x=True).view(float)


@lru_cache(maxsize=2)
def _deconvolution_kernel(sweep: SyncSweep, nfft: int) -> tuple[np.ndarray, ...]:
    """What :func:`deconvolve` multiplies by (kept, read-only: the output
    and its reference are deconvolved alike): for an odd ``nfft``, G =
    X~(f) / fs at the bins of an nfft-point real FFT; for an even one, P
    and Q for k = 0..M-1 (M = nfft / 2), with G's end bins made real:

        P_k = c_k G_k a_k + d_k (G_{M-k} b_{M-k})*
        Q_k = c_k G_k b_k + d_k (G_{M-k} a_{M-k})*
    """
    freqs = np.fft.rfftfreq(nfft, 1 / sweep.rate)
    g = np.empty(freqs.size, dtype=complex)

    def inverse(lo: int, hi: int) -> None:
        g[lo:hi] = sweep.inverse(freqs[lo:hi])
        g[lo:hi] /= sweep.rate

    _in_halves(inverse, g.size)
    if nfft % 2:
        out: tuple[np.ndarray, ...] = (g,)
    else:
        m = nfft // 2
        g[0], g[m] = g[0].real, g[m].real
        # a_k = 1/2 - (j/2) W^k, b_k = 1 - a_k; c_k = conj(a_k), d_k = 1 - c_k
        # (W^k from a table of phasors; each step in place: these arrays are
        # the transform's length, and fresh ones cost their pages)
        a = np.empty(m + 1, dtype=complex)
        ga = np.empty_like(a)

        def halves_a(lo: int, hi: int) -> None:
            a[lo:hi] = phasor_run(-2 * np.pi * lo / nfft, hi - lo, -2 * np.pi / nfft)
            a[lo:hi] *= -0.5j
            a[lo:hi] += 0.5
            np.multiply(g[lo:hi], a[lo:hi], out=ga[lo:hi])
            np.subtract(g[lo:hi], ga[lo:hi], out=g[lo:hi])  # g b_k = g - g a_k

        _in_halves(halves_a, m + 1)
        gb = g
        p, q = np.empty(m, dtype=complex), np.empty(m, dtype=complex)

        def halves_pq(lo: int, hi: int) -> None:
            rev = slice(m - lo, m - hi, -1)  # index M-k for k = lo..hi-1
            c = np.conjugate(a[lo:hi])
            d = np.subtract(1.0, c)
            np.multiply(c, ga[lo:hi], out=p[lo:hi])
            p[lo:hi] += np.conjugate(gb[rev]) * d
            np.multiply(c, gb[lo:hi], out=q[lo:hi])
            q[lo:hi] += np.conjugate(ga[rev]) * d

        _in_halves(halves_pq, m)
        out = (p, q)
    for a in out:
        a.setflags(write=False)
    return out


def _in_halves(work, size: int) -> None:
    """``work(lo, hi)`` over the two halves of ``range(size)`` at once, one
    on a second thread (numpy lets go of the interpreter in long
    element-wise loops: the halves run on two cores where there are two)."""
    from concurrent.futures import ThreadPoolExecutor

    mid = size // 2
    with ThreadPoolExecutor(max_workers=1) as pool:
        other = pool.submit(work, mid, size)
        work(0, mid)
        other.result()


def deconvolution_length(sweep: SyncSweep, n: int) -> int:
    """An FFT length that keeps every response apart from its wrap."""
    import scipy.fft
    need = int(math.ceil((sweep.duration_s + sweep.harmonic_delay_s(MAX_ORDER + 3) + MAX_IR_S + 1.0) * sweep.rate))
    return scipy.fft.next_fast_len(max(need, n) + int(MAX_IR_S * sweep.rate))


@lru_cache(maxsize=32)
def _window(n_before: int, n_after: int) -> np.ndarray:
    """Flat, with raised-cosine tapers over half the span before and a
    third of the span after (kept, read-only: a sweep's windows recur)."""
    w = np.ones(n_before + n_after)
    a = max(1, n_before // 2)
    w[:a] = 0.5 - 0.5 * np.cos(np.pi * (np.arange(a) + 0.5) / a)
    b = max(1, n_after // 3)
    w[w.size - b:] = 0.5 + 0.5 * np.cos(np.pi * (np.arange(b) + 0.5) / b)
    w.setflags(write=False)
    return w


def _circular_product(h: np.ndarray, start: int, w: np.ndarray, out: np.ndarray) -> None:
    """out[i] = h[(start + i) mod N] w[i], N = h.size, written straight into
    ``out`` from contiguous runs of ``h`` (no index array, no copy)."""
    i, n = 0, h.size
    while i < out.size:
        j = (start + i) % n
        m = min(out.size - i, n - j)
        np.multiply(h[j:j + m], w[i:i + m], out=out[i:i + m])
        i += m


def response_at(h: np.ndarray, sweep: SyncSweep, order: int, freqs: np.ndarray) -> np.ndarray:
    """The order-k response, windowed out of ``h`` and evaluated at
    ``freqs`` (for k > 1, the harmonic's own frequencies k f), referred to
    its exact time -L ln k."""
    rate = sweep.rate
    before, after = sweep.windows(order)[order - 1]
    t0 = -sweep.harmonic_delay_s(order)
    return _windowed_spectrum(h, rate, t0, int(round(before * rate)), int(round(after * rate)), freqs)


def _windowed_spectrum(h: np.ndarray, rate: float, t0: float, nb: int, na: int, freqs: np.ndarray) -> np.ndarray:
    """The spectrum at ``freqs`` of ``h`` windowed from ``nb`` samples
    before time ``t0`` (s, the response's own zero) to ``na`` after."""
    import scipy.fft
    at = int(math.floor(t0 * rate))
    w = _window(nb, na)
    # the response's own t = 0 at index 0 (the part before wraps to the
    # end), so the spectrum is smooth; zero-padded 8x, linear
    # interpolation between its bins is then exact to about 1e-4 for what
    # lies within a tenth of the window of t = 0
    nfft = scipy.fft.next_fast_len(8 * (nb + na))
    buf = np.zeros(nfft)
    _circular_product(h, at, w[nb:], buf[:na])
    _circular_product(h, at - nb, w[:nb], buf[nfft - nb:])
    grid = np.asarray(freqs, float) * nfft / rate
    k = np.clip(np.floor(grid).astype(int), 0, nfft // 2 - 1)
    frac = grid - k
    spec = _rfft_bins(buf, np.concatenate([k, k + 1]))
    z = spec[:k.size] * (1 - frac) + spec[k.size:] * frac
    # index 0 is sample ``at``; the exact time is t0
    return z * np.exp(-2j * np.pi * np.asarray(freqs) * (at / rate - t0))


def _rfft_bins(x: np.ndarray, bins: np.ndarray) -> np.ndarray:
    """rfft(x)[bins] (0 <= bins <= N/2, N = x.size; ``x`` is overwritten).
    For an even N = 2M, from one complex transform of M points (see
    :func:`deconvolve`): X[k] = a_k Z[k mod M] + b_k Z*[(M - k) mod M],
    evaluated at the bins asked for only."""
    import scipy.fft
    n = x.size
    if n % 2:
        return scipy.fft.rfft(x, overwrite_x=True)[bins]
    m = n // 2
    z = scipy.fft.fft(x.view(complex), overwrite_x=True)
    zk, zm = z[bins % m], np.conj(z[(m - bins) % m])
    w = np.exp(-2j * np.pi * bins / n)
    return 0.5 * (zk + zm) - 0.5j * w * (zk - zm)


def noise_read(h: np.ndarray, sweep: SyncSweep, freqs: np.ndarray, order: int = 1) -> np.ndarray | None:
    """The RMS of what noise alone adds to the order-k response's read at
    ``freqs`` (:func:`response_at`; for k > 1, the harmonic's own
    frequencies): the order's window laid over a stretch of ``h`` that
    holds no response (after the linear one, before the harmonics wrapped
    to the end), its power smoothed over a sixth of an octave (one read of
    noise scatters as an exponential variable) and scaled to the window's
    energy when the stretch is shorter. Deconvolved noise is the
    recording's noise through the inverse filter: stationary, the same
    wherever it is read. None without such a stretch."""
    rate = sweep.rate
    spans = sweep.windows(order)
    start = int(round(spans[0][1] * rate)) + int(0.05 * rate)  # past the linear response's window
    before, after = spans[order - 1]
    nb, na = int(round(before * rate)), int(round(after * rate))
    stop = h.size - int(math.ceil((sweep.harmonic_delay_s(MAX_ORDER + 3) + MAX_IR_S) * rate))
    room = stop - start
    if room < int(0.05 * rate):
        return None
    scale = 1.0
    if room < nb + na:  # a shorter window of the same shape: its noise power in proportion to its energy
        full = _window(nb, na)
        nb, na = room * nb // (nb + na), room - room * nb // (nb + na)
        scale = float(np.sum(full**2) / np.sum(_window(nb, na) ** 2))
    freqs = np.asarray(freqs, float)
    z = _windowed_spectrum(h, rate, (start + nb) / rate, nb, na, freqs)
    power = np.abs(z) ** 2 * scale
    # a sweep that ends abruptly (not faded) ends in a click, which
    # deconvolves to a chirp after the linear response: frequency f at
    # T^ - L ln(f / f1). Where it crosses the stretch the read is not noise;
    # it is bridged from the frequencies either side (the floor is smooth)
    t_click = sweep.duration_s - sweep.L * np.log(np.maximum(freqs, 1e-12) / sweep.f1_hz)
    clean = sweep.faded | ~((t_click > start / rate - CLICK_GUARD_S) & (t_click < (start + nb + na) / rate + CLICK_GUARD_S))
    if not clean.any():
        return None
    logf = np.log2(np.maximum(freqs, 1e-12))
    smooth = _sixth_octave_mean(logf, power, clean)
    known = np.isfinite(smooth)
    order = np.argsort(logf[known])
    return np.sqrt(np.interp(logf, logf[known][order], smooth[known][order]))


def _sixth_octave_mean(logf: np.ndarray, power: np.ndarray, clean: np.ndarray) -> np.ndarray:
    """At each point i, the mean of ``power`` over the clean points j with
    |log2 f_j - log2 f_i| <= 1/12 (NaN where there is none). With the
    clean points sorted by log2 f, each such set is one contiguous run
    [lo_i, hi_i), found by bisection and summed in one pass."""
    sel = np.flatnonzero(clean)
    sel = sel[np.argsort(logf[sel], kind="stable")]
    keys, vals = logf[sel], np.append(power[sel], 0.0)
    lo = np.searchsorted(keys, logf - 1.0 / 12.0, side="left")
    hi = np.searchsorted(keys, logf + 1.0 / 12.0, side="right")
    count = hi - lo
    # reduceat over the pairs (lo_i, hi_i): its even entries are the runs'
    # sums (an empty run reads one value, blanked below by its zero count)
    sums = np.add.reduceat(vals, np.stack([lo, hi], axis=1).ravel())[::2]
    return np.where(count > 0, sums / np.maximum(count, 1), np.nan)


@dataclass(frozen=True)
class SweepResponses:
    """Linear and harmonic responses of one sweep measurement.

    ``freq_hz`` is the fundamental's frequency for every curve;
    ``linear`` is the complex transfer function there (output over
    reference); ``harmonics`` maps order k to the complex level of the
    k-th harmonic relative to the fundamental, NaN where k f lies outside
    the band analysed.
    """

    freq_hz: np.ndarray
    linear: np.ndarray
    harmonics: dict
    #: order k -> the lowest fundamental frequency its curve is given at
    lowest_hz: dict = field(default_factory=dict)
    #: the linear response's relative standard uncertainty at each frequency (type A: the noise under it)
    linear_rel_u: np.ndarray | None = None
    #: order k -> the RMS noise alone reads as at each fundamental, relative to
    #: the fundamental as ``harmonics`` are (NaN where that curve is; empty: not known)
    harmonic_floor: dict = field(default_factory=dict)


def lowest_valid_hz(sweep: SyncSweep, order: int) -> float:
    """The lowest fundamental frequency at which the order-k response can
    be read from this sweep: the harmonic's response has an edge at k f1
    (where the sweep starts), whose ringing the window round it cuts off;
    its frequency k f must stand WINDOW_CYCLES periods of the shorter side
    of that window above the edge. The window is the shorter for a faster
    sweep (a smaller L), up to 3 / (k f1) before the response: past that,
    only a lower start reaches lower."""
    before, after = sweep.windows(order)[order - 1]
    return sweep.f1_hz + WINDOW_CYCLES / (order * min(before, after))


def paced_by_length(sweep: SyncSweep, order: int) -> bool:
    """Whether the sweep's pace (not its start: the window before the
    linear response is capped at 3 / (k f1)) sets the order's window, so
    that a longer sweep would read it lower."""
    before, after = sweep.windows(order)[order - 1]
    return min(before, after) < 3.0 / (order * sweep.f1_hz)


def lowest_flat_hz(sweep: SyncSweep) -> float:
    """Below this frequency the linear response of a stage with a low
    corner near the sweep's start may read a few tenths of a dB off: the
    linear window's shorter side holds fewer than LINEAR_CYCLES periods of
    the distance from the start (measured: a 9 Hz first-order high-pass on
    a 10 s sweep from 2 Hz reads within 0.1 dB from there on)."""
    before, after = sweep.windows(1)[0]
    return sweep.f1_hz + LINEAR_CYCLES / min(before, after)


def separate(h: np.ndarray, sweep: SyncSweep, orders: int = MAX_ORDER, freqs: np.ndarray | None = None,
             band_hz: tuple[float, float] | None = None) -> SweepResponses:
    """Window out the linear and harmonic responses of one deconvolved
    signal and transform each; harmonics only where the fundamental f and
    k f both lie in ``band_hz`` (default: the sweep's band to 0.45 fs)."""
    if freqs is None:
        freqs = log_grid(*sweep.band_hz)
    freqs = np.asarray(freqs, float)
    lo, top = band_hz if band_hz is not None else (sweep.band_hz[0], 0.45 * sweep.rate)
    linear = response_at(h, sweep, 1, freqs)
    harmonics, lowest = {}, {}
    for k in range(2, orders + 1):
        z = np.full(freqs.shape, np.nan + 0j)
        lowest[k] = max(lo, lowest_valid_hz(sweep, k))
        ok = (freqs >= lowest[k]) & (k * freqs <= top)
        if ok.any():
            z[ok] = response_at(h, sweep, k, k * freqs[ok]) / linear[ok]
        harmonics[k] = z
    return SweepResponses(freqs, linear, harmonics, lowest)


@lru_cache(maxsize=8)
def _played_linear(sweep: SyncSweep, nfft: int, freqs_bytes: bytes) -> np.ndarray:
    """The linear response, at the float64 frequencies packed in
    ``freqs_bytes``, of the digital sweep played at unit amplitude,
    deconvolved with an ``nfft``-point FFT: what :func:`measure` refers an
    output to without a wired reference. Deconvolution and windowing are
    linear, so the sweep played at amplitude A reads A times this; it
    depends only on the sweep's design, the FFT length and the frequencies,
    so it is computed once for each (kept read-only)."""
    freqs = np.frombuffer(freqs_bytes, dtype=float)
    out = response_at(deconvolve(sweep.samples(), sweep, nfft), sweep, 1, freqs)
    out.setflags(write=False)
    return out


def log_grid(lo_hz: float, hi_hz: float, per_octave: int = 24) -> np.ndarray:
    """Log-spaced frequencies from lo to hi, ``per_octave`` to the octave."""
    n = max(2, int(math.ceil(math.log2(hi_hz / lo_hz) * per_octave)) + 1)
    return np.geomspace(lo_hz, hi_hz, n)


def measure(output: np.ndarray, sweep: SyncSweep, reference: np.ndarray | None = None, orders: int = MAX_ORDER,
            freqs: np.ndarray | None = None, band_hz: tuple[float, float] | None = None,
            amplitude: float = 1.0) -> SweepResponses:
    """The response of what lies between the reference and the output.

    ``output`` and ``reference`` start where the sweep starts; without a
    reference the digital sweep played at ``amplitude`` is the reference
    (so the result is in output FS per played FS, processing artefacts
    removed).
    """
    refuse_non_finite(output)
    if reference is not None:
        refuse_non_finite(reference, "the reference")
    n = deconvolution_length(sweep, max(output.size, reference.size if reference is not None else sweep.n_samples))
    freqs = log_grid(*sweep.band_hz) if freqs is None else np.asarray(freqs, float)
    _deconvolution_kernel(sweep, n)  # (built once, before the two deconvolutions share it)
    # the played sweep's own response (the first time for its design: a
    # deconvolution as long as the output's) on a second thread, beside the
    # output's: the transforms let go of the interpreter while they run
    from concurrent.futures import ThreadPoolExecutor

    with ThreadPoolExecutor(max_workers=1) as pool:
        played = None if reference is not None else pool.submit(_played_linear, sweep, n, freqs.tobytes())
        h = deconvolve(output, sweep, n)
        got = separate(h, sweep, orders, freqs, band_hz)
        if played is not None:
            base = amplitude * played.result()
    if reference is not None:
        h_ref = deconvolve(reference, sweep, n)
        base = response_at(h_ref, sweep, 1, got.freq_hz)
    # type A: each end's noise read against its own response (a read's noise
    # splits evenly between the level and the phase: sqrt(1/2) of it on the level)
    rel = None
    noise = noise_read(h, sweep, got.freq_hz)
    floors = {}
    for k, z in got.harmonics.items():
        read = noise_read(h, sweep, np.minimum(k * got.freq_hz, 0.5 * sweep.rate), k)
        if read is not None:
            floors[k] = np.where(np.isfinite(z), read / np.maximum(np.abs(got.linear), 1e-300), np.nan)
    if noise is not None:
        rel = noise / np.maximum(np.abs(got.linear), 1e-300) / math.sqrt(2.0)
        if reference is not None:
            ref_noise = noise_read(h_ref, sweep, got.freq_hz)
            if ref_noise is not None:
                rel = np.hypot(rel, ref_noise / np.maximum(np.abs(base), 1e-300) / math.sqrt(2.0))
    return SweepResponses(got.freq_hz, got.linear / base, got.harmonics, got.lowest_hz, rel, floors)


def find_start(recording: np.ndarray, sweep: SyncSweep) -> float:
    """Where the sweep starts in a recording with unknown leading silence,
    in samples (fractional): the peak of the deconvolved linear response,
    refined by a parabola through its neighbours.

    Raises
    ------
    BenchkitError
        When no response stands out (no sweep in the recording).
    """
    h = deconvolve(recording, sweep)
    usable = max(1, recording.size)
    mag = np.abs(h[:usable])
    peak = int(np.argmax(mag))
    if mag[peak] < 20 * (np.median(mag) + 1e-30):
        raise BenchkitError("no synchronized sweep with these parameters was found in the recording")
    if 0 < peak < usable - 1:
        a, b, c = mag[peak - 1], mag[peak], mag[peak + 1]
        den = a - 2 * b + c
        if den < 0:
            return peak + 0.5 * (a - c) / den
    return float(peak)


#: A steady line stands this far above the median of the quiet spectrum.
LINE_PROMINENCE_DB = 15.0


def steady_lines(quiet: np.ndarray, rate: float, lo_hz: float = 20.0) -> list[float]:
    """Frequencies of steady tones (hum, supply ripple) in a stretch with
    no stimulus. A sweep cannot tell them from distortion: a tone at F
    shows as a harmonic response of order k at F / k."""
    import scipy.fft
    import scipy.signal
    n = quiet.size
    if n < int(0.1 * rate):
        return []
    # Blackman-Harris: sidelobes 92 dB down, so a strong line has no neighbours
    spec = np.abs(scipy.fft.rfft(quiet * scipy.signal.get_window("blackmanharris", n), 4 * n))
    f = np.fft.rfftfreq(4 * n, 1 / rate)
    level = 20 * np.log10(spec + 1e-300)
    use = f >= lo_hz
    floor = np.median(level[use])
    hot = use[1:-1] & (level[1:-1] > floor + LINE_PROMINENCE_DB) & (level[1:-1] >= level[:-2]) & (level[1:-1] > level[2:])
    return [float(x) for x in f[1:-1][hot]]


def line_mask(freqs: np.ndarray, order: int, lines: list[float], resolution_hz: float) -> np.ndarray:
    """Where k f lies within ``resolution_hz`` of a steady line."""
    hit = np.zeros(np.shape(freqs), bool)
    for line in lines:
        hit |= np.abs(order * np.asarray(freqs) - line) <= max(resolution_hz, 0.03 * line)
    return hit


def clock_offset(freqs: np.ndarray, phase_rad: np.ndarray, sweep: SyncSweep, lo_hz: float, hi_hz: float):
    """How fast the recorder's clock ran against the player's, ppm, from
    the phase of a sweep recorded on another device, and the phase the
    offset and the delay it leaves add (to subtract).

    A recorder running e fast stretches the sweep: the response at f
    arrives e L ln(f/f1) late, adding 2 pi f e L ln(f/f1) to the phase's
    -2 pi f tau. Fitted over lo..hi with a c/f + d term for the stage's own
    low corner and polarity. None when there are too few points.
    """
    f = np.asarray(freqs, float)
    sel = (f >= lo_hz) & (f <= hi_hz)
    if sel.sum() < 8:
        return None
    ph = np.unwrap(np.asarray(phase_rad, float))
    cols = np.stack([f, f * np.log(f / sweep.f1_hz), 1.0 / f, np.ones_like(f)], axis=1)
    coef, *_ = np.linalg.lstsq(cols[sel], ph[sel], rcond=None)
    ppm = -coef[1] / (2 * np.pi * sweep.L) * 1e6
    return float(ppm), cols[:, :2] @ coef[:2]
