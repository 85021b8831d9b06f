"""Update rate of the live readout: readings a second a watch delivers on
the virtual bench at 48 kHz (paced to the clock, as a stream is), against
the 4 a second the readout must keep; the analysis time of one reading
against the time between readings; and how much of the recording a watch
holds in memory after running for a while.

Run: python bench/watch_rate.py
"""

from __future__ import annotations

import time

import numpy as np

from benchkit.capture.virtual import virtual_bench
from benchkit.kinds.watch import SteadyTone, Watch

SECONDS = 8.0


def main() -> None:
    bench = virtual_bench("se-class-a", {"bias": 1.2}, seed=2)
    tone = SteadyTone(997.0, -20.0, bench.sample_rate_hz, None, volts_per_fs=bench.inputs()[0].volts_per_fs,
                      load_ohms=8.0)
    costs = []
    analyse = tone.analyse

    def timed(*args):
        t0 = time.perf_counter()
        r = analyse(*args)
        costs.append(time.perf_counter() - t0)
        return r

    tone.analyse = timed
    w = Watch(bench, tone).start()
    stamps = []
    start = time.monotonic()
    for r in w.readings():
        if time.monotonic() - start > SECONDS:
            w.stop("done")
        if r is not None:
            stamps.append(time.monotonic())
    w.join()
    rate = (len(stamps) - 1) / (stamps[-1] - stamps[0])
    held = w.raw.samples.nbytes / 1e6 if w.raw is not None else 0.0
    interval = tone.update_n / tone.sample_rate_hz
    print(f"block {tone.block_n} samples ({tone.block_n / tone.sample_rate_hz:.3f} s), a reading every {interval:.3f} s")
    print(f"readings a second over {SECONDS:g} s: {rate:.2f}; ratio to the 4 a second required: {rate / 4:.2f}")
    print(f"analysis of one reading: median {np.median(costs) * 1e3:.1f} ms, max {max(costs) * 1e3:.1f} ms; "
          f"ratio to the interval: {np.median(costs) / interval:.3f}")
    print(f"recording held in memory at the end: {held:.2f} MB (the last {tone.keep_s:g} s at most)")


if __name__ == "__main__":
    main()
