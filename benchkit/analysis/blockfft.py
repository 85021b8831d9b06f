"""A long real FFT as two passes of short ones, written into a given array.

One transform of a long record (96,000 samples and up) asks the C library
for work buffers as long as the record on every call; past its mapping
threshold (128 KiB by default) each comes fresh from the kernel, and
faulting its pages in costs about as much as the transform itself. The
four-step form (Bailey, "FFTs in external or hierarchical memory", J.
Supercomputing 4, 1990) splits ``N = N1 N2``: short real transforms down
the columns of the record laid out ``(N2, N1)``, one twiddle product, short
complex transforms along the rows. Every work buffer is a row long, and the
two intermediate arrays live in per-thread scratch, so nothing long is
allocated per call. The result matches ``numpy.fft.rfft`` to a few ulp of
the largest bin.
"""

from __future__ import annotations

import math
import threading
from functools import lru_cache

import numpy as np

_scratch = threading.local()

#: Below about this length a single transform is as fast (measured on
#: bench/analysis_speed.py's machine: 0.19 against 0.20 ms at 32,768
#: samples, 1.04 against 0.39 ms at 96,000).
MIN_LENGTH = 40_000
#: numpy 2 writes a transform into a given array; older numpy cannot.
OUT_SUPPORTED = int(np.__version__.split(".")[0]) >= 2


def scratch(name: str, shape, dtype) -> np.ndarray:
    """A per-thread buffer kept between calls (contents undefined)."""
    shape = (shape,) if isinstance(shape, int) else tuple(shape)
    buf = getattr(_scratch, name, None)
    if buf is None or buf.shape != shape or buf.dtype != dtype:
        buf = np.empty(shape, dtype=dtype)
        setattr(_scratch, name, buf)
    return buf


def _smooth(m: int, primes=(2, 3, 5, 7)) -> bool:
    for p in primes:
        while m % p == 0:
            m //= p
    return m == 1


@lru_cache(maxsize=16)
def split(n: int) -> tuple[int, int] | None:
    """``(n1, n2)`` with ``n1 n2 = n``, both 7-smooth and within a factor of
    eight of sqrt(n), ``n1`` the nearer; None if ``n`` has no such split."""
    root = math.isqrt(n)
    for n1 in range(root, max(1, root // 8) - 1, -1):
        if n % n1 == 0 and _smooth(n1) and _smooth(n // n1):
            return n1, n // n1
    return None


@lru_cache(maxsize=4)
def _twiddles(n1: int, n2: int) -> np.ndarray:
    """``e^{-j 2 pi k2 m1 / n}`` for k2 = 0..n2/2 (rows), m1 = 0..n1-1, the
    product reduced mod n exactly in integers first."""
    k2 = np.arange(n2 // 2 + 1, dtype=np.int64)[:, None]
    m1 = np.arange(n1, dtype=np.int64)[None, :]
    tw = np.exp(-2j * np.pi * ((k2 * m1) % (n1 * n2)) / (n1 * n2))
    tw.setflags(write=False)
    return tw


def rfft(x: np.ndarray, out: np.ndarray) -> np.ndarray:
    """``numpy.fft.rfft(x)`` written into ``out`` (``len(x) // 2 + 1``
    complex), by the four-step form where it pays; ``x`` 1-D float64."""
    n = x.size
    parts = split(n) if n >= MIN_LENGTH else None
    if parts is None:
        return np.fft.rfft(x, out=out)
    n1, n2 = parts
    h = n2 // 2
    # x[m1 + n1 m2]: real transforms over m2 down each column m1
    a = np.fft.rfft(x.reshape(n2, n1), axis=0, out=scratch("fft4_a", (h + 1, n1), complex))
    a *= _twiddles(n1, n2)
    # c[k2, k1] = X[k2 + n2 k1], for k2 = 0..n2/2
    c = np.fft.fft(a, axis=1, out=scratch("fft4_c", (h + 1, n1), complex))
    # X[k] for k2 > n2/2 from the conjugate symmetry X[k] = conj X[n - k],
    # n - k = (n2 - k2) + n2 (n1 - 1 - k1)
    # (the half spectrum ends within the first half of a row: n = n1 n2
    # leaves a last part row of at most n2/2 + 1 bins, all read directly)
    rows, rest = divmod(n // 2 + 1, n2)
    grid = out[: rows * n2].reshape(rows, n2)
    grid[:, : h + 1] = c[:, :rows].T
    np.conjugate(c[1 : n2 - h, n1 - rows : n1][::-1, ::-1].T, out=grid[:, h + 1 :])
    out[rows * n2 :] = c[:rest, rows]
    return out
