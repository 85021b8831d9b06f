"""Synchronized sweeps against their published formulas and scipy.

Novak, Lotton, Simon, JAES 63(10) 2015: L = round(f1 T / ln(f2/f1)) / f1,
T^ = L ln(f2/f1); the k-th harmonic response lies L ln k before the linear
one (also Farina, AES 108th Convention 2000). A known linear filter is
compared with scipy.signal.sosfreqz; a memoryless polynomial with the
power-reduction identities.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.signal as ss

from benchkit.analysis.sweep import SyncSweep, deconvolve, separate

RATE = 96000


def test_sweep_design_follows_novak():
    # REFERENCES.md: f1 = 20, f2 = 20k, T = 5 s gives L = 0.7 s, T^ = 4.835 s
    sw = SyncSweep.design(20.0, 20000.0, 5.0, 48000)
    assert sw.L == pytest.approx(0.7)
    assert sw.duration_s == pytest.approx(4.835, abs=0.001)
    assert sw.harmonic_delay_s(3) == pytest.approx(0.7 * math.log(3))
    x = sw.samples()
    assert x.size == int(sw.duration_s * 48000)
    # its instantaneous frequency f1 exp(t/L) reaches f2 at T^: the phase
    # step between the last two samples is 2 pi f2 / fs
    phase = 2 * np.pi * sw.f1_hz * sw.L * (np.exp(np.arange(x.size)[-2:] / 48000 / sw.L) - 1)
    assert np.diff(phase)[0] / (2 * np.pi) * 48000 == pytest.approx(20000.0, rel=1e-3)


def _filter():
    bb, ab = ss.iirpeak(3000, 2, fs=RATE)  # a resonance added to the through path: +6 dB peak at 3 kHz
    return np.vstack([
        ss.butter(2, 10, "highpass", fs=RATE, output="sos"),
        ss.butter(2, 40000, "lowpass", fs=RATE, output="sos"),
        ss.tf2sos(ab + bb, ab),
    ])


def test_linear_filter_matches_sosfreqz():
    # sweep from 5 Hz, two octaves below the lowest frequency checked
    sw = SyncSweep.design(5.0, 40000.0, 10.0, RATE)
    sos = _filter()
    y = ss.sosfilt(sos, np.concatenate([sw.samples(), np.zeros(RATE)]))
    f = np.geomspace(20, 20000, 60)
    r = separate(deconvolve(y, sw), sw, orders=3, freqs=f, ir_seconds=0.5)
    _, h = ss.sosfreqz(sos, worN=f, fs=RATE)
    assert np.max(np.abs(20 * np.log10(np.abs(r.linear) / np.abs(h)))) < 0.05
    assert np.max(np.abs(np.angle(r.linear / h, deg=True))) < 1.0


def test_polynomial_harmonics_match_the_identities():
    # y = x + a2 x^2 + a3 x^3, x = A cos: H2/H1 = (a2 A^2/2) / (A + 3 a3 A^3/4),
    # H3/H1 = (a3 A^3/4) / (A + 3 a3 A^3/4) (power-reduction identities)
    sw = SyncSweep.design(5.0, 40000.0, 5.0, RATE)
    amp, a2, a3 = 0.5, 0.1, 0.05
    x = amp * np.concatenate([sw.samples(), np.zeros(RATE)])
    y = x + a2 * x**2 + a3 * x**3
    f = np.array([200.0, 1000.0, 3000.0, 6000.0])
    r = separate(deconvolve(y, sw), sw, orders=3, freqs=f)
    h1 = amp + 3 * a3 * amp**3 / 4
    assert 20 * np.log10(np.abs(r.linear)) == pytest.approx(20 * math.log10(h1), abs=0.05)
    assert 20 * np.log10(np.abs(r.harmonics[2])) == pytest.approx(20 * math.log10(a2 * amp**2 / 2 / h1), abs=0.5)
    assert 20 * np.log10(np.abs(r.harmonics[3])) == pytest.approx(20 * math.log10(a3 * amp**3 / 4 / h1), abs=0.5)
