"""Frequency weightings for noise: the A-weighting of IEC 61672-1.

The weighting is applied as a magnitude on a power spectrum (no filter
warping, no settling): the noise analysis integrates |A(f)|^2 times the
spectrum over the band.
"""

from __future__ import annotations

import numpy as np

from benchkit import units

#: The A-weighting's pole frequencies, Hz (IEC 61672-1).
F1_HZ, F2_HZ, F3_HZ, F4_HZ = 20.598997, 107.65265, 737.86223, 12194.217
#: The gain that makes the A-weighting 0 dB at 1 kHz (the standard's A1000), dB.
A1000_DB = 2.0


def a_weighting_db(freq_hz) -> np.ndarray:
    """The A-weighting in dB at each frequency.

    A(f) = 20 log10( f4^2 f^4 / ((f^2 + f1^2) sqrt((f^2 + f2^2)(f^2 + f3^2)) (f^2 + f4^2)) ) + 2.00 dB

    References
    ----------
    IEC 61672-1:2013, Electroacoustics - Sound level meters - Part 1:
    Specifications, annex E (the analytic weightings and their pole
    frequencies; the edition followed is 2013, recalled, not re-read).
    """
    f = np.asarray(freq_hz, dtype=float)
    f2 = f * f
    num = (F4_HZ ** 2) * f2 * f2
    den = (f2 + F1_HZ ** 2) * np.sqrt((f2 + F2_HZ ** 2) * (f2 + F3_HZ ** 2)) * (f2 + F4_HZ ** 2)
    with np.errstate(divide="ignore"):
        return units.db_from_ratio(num / den) + A1000_DB


def a_weighting_power(freq_hz) -> np.ndarray:
    """|A(f)|^2, the factor on a power spectrum."""
    return units.ratio_from_db(2 * np.asarray(a_weighting_db(freq_hz)))
