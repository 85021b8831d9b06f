"""Synchronized exponential sweeps: generation, deconvolution, separation.

The sweep of Novak, Lotton and Simon (JAES 63(10), 2015)::

    x(t) = sin(2 pi f1 L (exp(t / L) - 1)),   L = round(f1 T / ln(f2/f1)) / f1

lasts T^ = L ln(f2/f1) (not the T asked for). Its analytic inverse filter

    X~(f) = 2 sqrt(f / L) exp(-j 2 pi f L (1 - ln(f / f1)) + j pi / 4)

multiplies the continuous-time spectrum of the response, FFT(y)/fs. The
deconvolved response holds the linear impulse response at t = 0 and the
k-th harmonic's before it, at -L ln k (Farina, AES 108th Convention 2000;
Novak 2015), each windowed out and transformed on its own.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.fft

from benchkit.errors import BenchkitError


@dataclass(frozen=True)
class SyncSweep:
    """A synchronized exponential sweep from f1 to f2 Hz."""

    f1_hz: float
    f2_hz: float
    rate: float
    L: float

    @classmethod
    def design(cls, f1_hz: float, f2_hz: float, seconds: float, rate: float) -> "SyncSweep":
        """The sweep of about ``seconds`` (L rounded so harmonics stay in phase)."""
        if not (0 < f1_hz < f2_hz <= rate / 2) or seconds <= 0:
            raise BenchkitError(f"a sweep needs 0 < F1 < F2 <= fs/2 and a positive length, got {f1_hz:g}:{f2_hz:g}:{seconds:g}")
        L = round(f1_hz * seconds / math.log(f2_hz / f1_hz)) / f1_hz
        if L <= 0:
            raise BenchkitError("the sweep is too short for its start frequency: lengthen it or start higher")
        return cls(float(f1_hz), float(f2_hz), float(rate), L)

    @property
    def duration_s(self) -> float:
        """T^ = L ln(f2/f1)."""
        return self.L * math.log(self.f2_hz / self.f1_hz)

    def samples(self, amplitude: float = 1.0) -> np.ndarray:
        """The sweep itself, unit amplitude by default, with no fades: its
        phase starts at zero, so it starts at zero."""
        n = int(math.floor(self.duration_s * self.rate))
        t = np.arange(n) / self.rate
        return amplitude * np.sin(2 * np.pi * self.f1_hz * self.L * (np.exp(t / self.L) - 1.0))

    def harmonic_delay_s(self, order: int) -> float:
        """How long before the linear response the order-k response lies."""
        return self.L * math.log(order)

    def inverse(self, freqs: np.ndarray) -> np.ndarray:
        """Novak's analytic inverse filter X~(f) (zero at f = 0)."""
        f = np.asarray(freqs, dtype=float)
        out = np.zeros(f.shape, dtype=complex)
        pos = f > 0
        fp = f[pos]
        out[pos] = 2 * np.sqrt(fp / self.L) * np.exp(
            -2j * np.pi * fp * self.L * (1 - np.log(fp / self.f1_hz)) + 1j * np.pi / 4
        )
        return out


def deconvolve(response: np.ndarray, sweep: SyncSweep) -> np.ndarray:
    """The deconvolved response: linear IR at index 0, the harmonics' IRs
    wrapped round to the end of the buffer (negative times).

    ``response`` must start where the sweep starts (align it first).
    """
    y = np.asarray(response, dtype=float)
    need = int(math.ceil((sweep.duration_s + sweep.harmonic_delay_s(8) + 1.0) * sweep.rate))
    nfft = scipy.fft.next_fast_len(max(need, y.size) * 2)
    f = np.fft.rfftfreq(nfft, 1 / sweep.rate)
    spec = scipy.fft.rfft(y, nfft) / sweep.rate * sweep.inverse(f)
    return scipy.fft.irfft(spec, nfft)


@dataclass(frozen=True)
class SweepResponses:
    """Linear and harmonic responses of one deconvolved sweep.

    ``freq_hz`` is the fundamental's frequency for every curve;
    ``linear`` is the complex transfer function there; ``harmonics`` maps
    order k to the complex response of the k-th harmonic, as a ratio to the
    linear one (level in dBc = 20 log10 |.|).
    """

    freq_hz: np.ndarray
    linear: np.ndarray
    harmonics: dict


def separate(h: np.ndarray, sweep: SyncSweep, orders: int = 5, freqs: np.ndarray | None = None,
             ir_seconds: float | None = None) -> SweepResponses:
    """Window out the linear and harmonic impulse responses and transform each.

    Each window spans from a little before its response to half way to the
    next one (the gap between orders k and k+1 is L ln((k+1)/k)).
    """
    rate = sweep.rate
    n = h.size
    gap = sweep.harmonic_delay_s(orders + 1) - sweep.harmonic_delay_s(orders)
    length = ir_seconds if ir_seconds is not None else min(0.5 * gap, 1.0)
    pre = min(0.1 * length, 0.005)
    m = int(round((pre + length) * rate))
    nfft = scipy.fft.next_fast_len(max(m, int(rate)) * 2)
    if freqs is None:
        freqs = np.geomspace(max(sweep.f1_hz, 1.0), sweep.f2_hz, 400)
    win = np.ones(m)
    taper = max(1, int(0.2 * m))
    win[-taper:] = 0.5 + 0.5 * np.cos(np.pi * np.arange(taper) / taper)
    k0 = max(1, int(round(pre * rate)))
    win[:k0] = 0.5 - 0.5 * np.cos(np.pi * np.arange(k0) / k0)

    def response_at(order: int, at: np.ndarray) -> np.ndarray:
        start = int(round(-sweep.harmonic_delay_s(order) * rate)) - k0 if order > 1 else -k0
        idx = (np.arange(m) + start) % n
        seg = h[idx] * win
        # the segment starts k0 samples before the response's t = 0
        spec = scipy.fft.rfft(seg, nfft)
        f = np.fft.rfftfreq(nfft, 1 / rate)
        z = np.interp(at, f, spec.real) + 1j * np.interp(at, f, spec.imag)
        frac = -sweep.harmonic_delay_s(order) * rate - (start + k0) if order > 1 else 0.0
        return z * np.exp(2j * np.pi * at * (k0 + frac) / rate)

    linear = response_at(1, freqs)
    harmonics = {}
    for k in range(2, orders + 1):
        harmonics[k] = response_at(k, k * freqs) / linear
    return SweepResponses(np.asarray(freqs), linear, harmonics)
