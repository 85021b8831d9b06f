"""Speed of the sweep analysis: deconvolution and separation (linear and
H2..H5) of a 10 s synchronized sweep at 192 kHz, as a ratio to the
capture's duration (target: well under 0.1) and to one scipy.fft.rfft of
the same samples, measured in the same run.

Run: python bench/sweep_speed.py
"""

from __future__ import annotations

import numpy as np
import scipy.fft
import scipy.signal

from benchkit.analysis.sweep import SyncSweep, log_grid, measure

from _timing import best_of


def setup():
    rate = 192000
    sw = SyncSweep.design(10.0, 40000.0, 10.0, rate)
    x = 0.3 * np.concatenate([sw.samples(), np.zeros(rate // 2)])
    sos = scipy.signal.butter(1, 9.0, "highpass", fs=rate, output="sos")
    v = scipy.signal.sosfilt(sos, x)
    y = v + 0.05 * v**2 + 0.02 * v**3 + 1e-6 * np.random.default_rng(1).standard_normal(x.size)
    return rate, sw, x, y, log_grid(*sw.band_hz)


def ratio() -> float:
    """The target's figure: the analysis referred to the played sweep, over the capture's duration."""
    rate, sw, _x, y, freqs = setup()
    measure(y, sw, amplitude=0.3, freqs=freqs, band_hz=(20.0, 20000.0))
    return best_of(lambda: measure(y, sw, amplitude=0.3, freqs=freqs, band_hz=(20.0, 20000.0)), 3) / (y.size / rate)


def first_ratio() -> float:
    """The same, for the first analysis of its sweep design in a process
    (what one command's run sees): the inverse filter and the played
    sweep's own response built first, best of 3 with them cleared."""
    from benchkit.analysis import sweep

    rate, sw, _x, y, freqs = setup()

    def cold():
        sweep._deconvolution_kernel.cache_clear()
        sweep._played_linear.cache_clear()
        measure(y, sw, amplitude=0.3, freqs=freqs, band_hz=(20.0, 20000.0))

    return best_of(cold, 3) / (y.size / rate)


def main() -> None:
    rate, sw, x, y, freqs = setup()
    duration = y.size / rate

    def played():
        return measure(y, sw, amplitude=0.3, freqs=freqs, band_hz=(20.0, 20000.0))

    def with_reference():
        return measure(y, sw, reference=x, freqs=freqs, band_hz=(20.0, 20000.0))

    played()
    scipy.fft.rfft(y)
    t_fft = best_of(lambda: scipy.fft.rfft(y), 5)
    print(f"capture {duration:.2f} s at {rate} Hz ({y.size} samples); one rfft {t_fft * 1e3:.1f} ms")
    print(f"{'analysis':>34} {'time':>9} {'/ duration':>11} {'/ rfft':>8}")
    for name, fn in (("sweep referred to the played one", played), ("sweep referred to a reference", with_reference)):
        t = best_of(fn, 3)
        print(f"{name:>34} {t:8.3f}s {t / duration:11.4f} {t / t_fft:8.1f}")
    t = first_ratio() * duration
    print(f"{'the first of its design':>34} {t:8.3f}s {t / duration:11.4f} {t / t_fft:8.1f}")
    r = played()
    print(f"check: H2 at 1 kHz {20 * np.log10(abs(np.interp(1000.0, freqs, np.abs(r.harmonics[2])))):.2f} dBc")


if __name__ == "__main__":
    main()
