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
