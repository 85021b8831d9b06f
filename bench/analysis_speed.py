"""Speed of benchkit.analyze_tone, as a ratio to one scipy.fft.rfft of the
same samples, measured in the same run (target: at most 2x at 1 s, 96 kHz).

Also prints the float64 floor reached: THD+N of an ideal tone.

Run: python bench/analysis_speed.py
"""

from __future__ import annotations

import numpy as np
import scipy.fft

import benchkit

from _timing import best_of


def one(rate: int, seconds: int, repeats: int, rng) -> tuple[float, float, float]:
    """analyze_tone's time and one rfft's on the same record, seconds, and the float64 floor reached."""
    n = rate * seconds
    t = np.arange(n) / rate
    # a realistic capture: 997 Hz with H2, H3 and a -120 dBFS noise floor
    x = 0.5 * np.sin(2 * np.pi * 997.0 * t) + 1e-4 * np.sin(2 * np.pi * 1994.0 * t)
    x += 3e-5 * np.sin(2 * np.pi * 2991.0 * t) + 7e-7 * rng.standard_normal(n)
    benchkit.analyze_tone(x, rate)  # warm caches (window, FFT plans)
    scipy.fft.rfft(x)
    ta = best_of(lambda: benchkit.analyze_tone(x, rate), repeats)
    tf = best_of(lambda: scipy.fft.rfft(x), repeats)
    ideal = 0.9 * np.cos(2 * np.pi * 1234.567 * t + 0.3)
    return ta, tf, benchkit.analyze_tone(ideal, rate).thdn_db


def ratio() -> float:
    """The target's figure: analyze_tone of 1 s at 96 kHz over one rfft of it."""
    ta, tf, _floor = one(96000, 1, 40, np.random.default_rng(1))
    return ta / tf


def main() -> None:
    rng = np.random.default_rng(1)
    print(f"{'record':>16} {'analyze_tone':>14} {'rfft':>10} {'ratio':>7} {'floor (THD+N)':>14}")
    for rate, seconds, repeats in ((96000, 1, 40), (192000, 10, 7)):
        ta, tf, floor = one(rate, seconds, repeats, rng)
        label = f"{seconds} s @ {rate // 1000} kHz"
        print(f"{label:>16} {ta * 1e3:11.2f} ms {tf * 1e3:7.2f} ms {ta / tf:6.2f}x {floor:10.1f} dB")


if __name__ == "__main__":
    main()
