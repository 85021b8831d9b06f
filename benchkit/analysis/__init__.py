"""Pure analysis: samples and numbers in, figures out (no I/O, no devices)."""

from __future__ import annotations

import numpy as np

from benchkit.errors import BenchkitError


def refuse_non_finite(x: np.ndarray, what: str = "the capture") -> None:
    """Every analysis refuses NaN or infinite samples with one line: a
    figure computed from them would be NaN, or silently wrong."""
    if not np.isfinite(x).all():
        bad = int(np.count_nonzero(~np.isfinite(x)))
        raise BenchkitError(f"{what} holds {bad} NaN or infinite samples")


def one_channel(samples, channel: int | None = None, what: str = "the analysis") -> np.ndarray:
    """One channel of ``samples`` as float64: a 1-D array as it is; of a
    2-D one (frames x channels, as ``soundfile.read`` returns a stereo
    file) column ``channel``, numbered from 1 (needed when there are
    several)."""
    x = np.asarray(samples, dtype=np.float64)
    n = x.shape[1] if x.ndim == 2 else 1
    if x.ndim not in (1, 2):
        raise BenchkitError(f"{what} takes samples as a 1-D array or as frames x channels, got shape {x.shape}")
    if channel is None:
        if n > 1:
            raise BenchkitError(f"{what}: the samples hold {n} channels: say which with channel=1 to {n}")
        channel = 1
    if isinstance(channel, bool) or not isinstance(channel, (int, np.integer)) or not 1 <= channel <= n:
        raise BenchkitError(f"{what}: channel {channel!r} does not exist (1 to {n})")
    return x if x.ndim == 1 else x[:, int(channel) - 1]
