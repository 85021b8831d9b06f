"""Finding the stimulus in a recording: the round-trip latency.

The marker is a short chirp; its position is the peak of the magnitude of
the cross-correlation (matched filter), computed with an FFT. The magnitude
makes it indifferent to a stage that inverts.
"""

from __future__ import annotations

import numpy as np
import scipy.signal

from benchkit.errors import BenchkitError

#: The correlation peak must stand this far above the median of |corr|.
MIN_MARKER_PROMINENCE = 8.0


def find_marker(recording: np.ndarray, marker: np.ndarray) -> int:
    """Sample index in ``recording`` where ``marker`` starts.

    Raises
    ------
    BenchkitError
        When no clear correlation peak stands out (nothing came back).
    """
    if recording.size < marker.size:
        raise BenchkitError("the recording is shorter than the alignment marker")
    corr = np.abs(scipy.signal.correlate(recording, marker, mode="valid", method="fft"))
    peak = int(np.argmax(corr))
    floor = float(np.median(corr)) + 1e-30
    if corr[peak] < MIN_MARKER_PROMINENCE * floor or corr[peak] == 0.0:
        raise BenchkitError(
            "the alignment marker did not come back: check the wiring from the output to the input"
        )
    return peak
