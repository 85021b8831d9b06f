"""Speed of the two-tone analysis: every product to order 5 of one step,
as a ratio to the step's duration (target: well under 0.1, so an IMD
sweep over levels is bound by its playing time) and to one windowed FFT
of the same samples, measured in the same run; at 48 kHz (the
modulation method) and 96 kHz (the difference method).

Run: python bench/imd_speed.py
"""

from __future__ import annotations

import numpy as np

from benchkit.analysis import spectrum as sp
from benchkit.analysis.imd import analyze_imd
from benchkit.kinds.imd import twin_tone

from _timing import best_of


def main() -> None:
    print(f"{'method':>11} {'rate':>7} {'step':>6} {'time':>9} {'/ step':>8} {'/ fft':>7} {'products':>9}")
    for method, rate in (("modulation", 48000), ("difference", 96000)):
        tw = twin_tone(method)
        a1, a2 = tw.amplitudes(-10.0)
        t = np.arange(rate) / rate
        x = a1 * np.sin(2 * np.pi * tw.f1_hz * t) + a2 * np.sin(2 * np.pi * tw.f2_hz * t)
        y = x + 0.02 * x * x + 0.05 * x ** 3 + 1e-6 * np.random.default_rng(1).standard_normal(x.size)
        analyze_imd(y, rate, method=method)
        t_fft = best_of(lambda: sp.windowed_rfft(y), 5)
        took = best_of(lambda: analyze_imd(y, rate, method=method), 5)
        n = len(analyze_imd(y, rate, method=method).products)
        print(f"{method:>11} {rate:>7} {y.size / rate:5.1f}s {took * 1e3:7.1f}ms {took / (y.size / rate):8.4f} "
              f"{took / t_fft:7.1f} {n:>9}")


if __name__ == "__main__":
    main()
