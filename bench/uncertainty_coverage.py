"""Coverage of the power at a limit's uncertainty, by Monte Carlo on the
virtual bench (too slow for the test suite).

The virtual bench's hard-clip stage, its interface made noisy, (gain 10, clipping at 9.5 V into
8 ohm) measured by adaptive power runs with fresh noise (one seed a run):
the power at 1 % THD against the clipped sine's Fourier series (the same
truth tests/test_power.py checks against), and how often the run's k = 2
interval covers it. The interval is the run's own, less the load's
tolerance (the virtual bench's load is exact, so that part would only
widen it): the steps' noise through the interpolation, and the
interpolation itself. A coverage near 95 % says the uncertainty is told
right; well over it, too wide; well under, too narrow.

Run: python bench/uncertainty_coverage.py [runs]
"""

from __future__ import annotations

import math
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import scipy.integrate
import scipy.optimize

from benchkit.capture.virtual import virtual_bench
from benchkit.kinds.power import power_run

F0 = 997.0
#: The interface's input noise, dBFS in 20 Hz to 20 kHz: raised from the
#: virtual bench's -110 so that the noise, not the interpolation, sets the
#: steps' scatter (at -110 dBFS the runs agree to a hundredth of their u).
NOISE_DBFS = -60.0


def clipped_harmonics(amp: float, orders: int) -> np.ndarray:
    """Fourier-series sine amplitudes of amp sin(t) clipped at +-1, by quadrature."""
    def b(k):
        return 2 / math.pi * scipy.integrate.quad(lambda t: np.clip(amp * math.sin(t), -1, 1) * math.sin(k * t),
                                                  0, math.pi, limit=200)[0]
    return np.array([b(k) for k in range(1, orders + 1)])


def main() -> None:
    runs = int(sys.argv[1]) if len(sys.argv) > 1 else 60

    def thd(a):
        b = clipped_harmonics(a, 20)
        return math.sqrt(np.sum(b[1:] ** 2)) / b[0]

    amp = scipy.optimize.brentq(lambda a: thd(a) - 0.01, 1.0001, 2.0, xtol=1e-10)
    truth = (9.5 * clipped_harmonics(amp, 1)[0]) ** 2 / 2 / 8.0
    z, rel_u, t0 = [], [], time.perf_counter()
    with tempfile.TemporaryDirectory() as tmp:
        for seed in range(runs):
            bench = virtual_bench("hard-clip", {"gain": 10.0, "vclip": 9.5}, seed=100 + seed, adc_noise_dbfs=NOISE_DBFS)
            folder = Path(tmp) / str(seed)
            folder.mkdir()
            r = power_run(bench, folder, F0, 20 * math.log10(9.5 / 20) - 25.0, -3.0, 8.0, ref_channel=2,
                          metric="thd", limits_pct=(1.0,))
            block = r.to_dict()["uncertainty"]
            u = block["standard"]["limits.power_w"][0]
            shared = (block.get("shared") or {}).get("limits.power_w", [0.0])[0] or 0.0
            own = math.sqrt(max(u * u - shared * shared, 0.0))
            z.append((r.rated.power_w - truth) / own)
            rel_u.append(own / truth)
    z = np.array(z)
    covered = float(np.mean(np.abs(z) <= 2.0))
    print(f"power at 1 % THD, hard-clip stage: truth {truth:.5f} W (Fourier series); {runs} runs in "
          f"{time.perf_counter() - t0:.0f} s")
    print(f"  run's own standard uncertainty (load's tolerance left out): median {100 * np.median(rel_u):.3f} %")
    print(f"  (measured - truth) / u: mean {z.mean():+.2f}, standard deviation {z.std(ddof=1):.2f}")
    print(f"  coverage of the k = 2 interval: {100 * covered:.1f} % (target 95 % +- 3 %; "
          f"binomial noise of {runs} runs +-{100 * math.sqrt(0.95 * 0.05 / runs):.1f} %)")


if __name__ == "__main__":
    main()
