"""Update rate of the live readout, at 997 Hz and at 20 Hz (where the
analysed block, 20 periods, is a whole second: the blocks overlap), on the
virtual bench at 48 kHz paced to the clock as a stream is:

- readings a second, against the 10 a second the readout must give;
- the analysis's share of one core (its time over the wall time), against
  the 30 % allowed;
- how far the display is behind the audio: from the moment a block's last
  frame was recorded to the moment the screen holding its reading was
  drawn (a rich table and the spectrum view rendered to memory), median
  and worst, against the 150 ms allowed;
- how much of the recording a watch holds in memory after a while.

Run: python bench/watch_rate.py
"""

from __future__ import annotations

import io
import os
import time

# one BLAS thread, as the command line runs (benchkit/cli/__init__.py): set before numpy loads
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import numpy as np

from benchkit.analysis.readings import SpectrumAverage, Tracker
from benchkit.capture.virtual import virtual_bench
from benchkit.kinds.watch import SteadyTone, Watch
from benchkit.report import live

SECONDS = 8.0
RATE_TARGET, SHARE_TARGET, LAG_TARGET_MS = 10.0, 0.30, 150.0


def one(frequency_hz: float) -> dict:
    from rich.console import Console

    bench = virtual_bench("se-class-a", {"bias": 1.2}, seed=2)
    spectrum = SpectrumAverage(4)
    tone = SteadyTone(frequency_hz, -20.0, bench.sample_rate_hz, None, volts_per_fs=bench.inputs()[0].volts_per_fs,
                      load_ohms=8.0, spectrum=spectrum)
    busy = []
    analyse = tone.analyse

    def timed(*args):
        t0 = time.perf_counter()
        r = analyse(*args)
        busy.append(time.perf_counter() - t0)
        return r

    tone.analyse = timed
    console = Console(file=io.StringIO(), width=160, force_terminal=True)
    tracker = Tracker()
    w = Watch(bench, tone).start()
    stamps, lags = [], []
    start = time.monotonic()
    for r in w.readings():
        if time.monotonic() - start > SECONDS:
            w.stop("done")
        if r is not None:
            tracker.add(r)
            console.print(live.screen(tracker, "bench", spectrum, tone.frequency_hz, tone.bandwidth_hz))
            now = time.monotonic()
            stamps.append(now)
            lags.append(now - (tone.started_at + r.t_s))
    w.join()
    wall = stamps[-1] - stamps[0]
    # readings a second by the wall clock, resolved to one reading over the span (its ends jitter by a block)
    return {"f": frequency_hz, "block_s": tone.block_n / tone.sample_rate_hz, "rate": (len(stamps) - 1) / wall,
            "rate_resolution": 1.0 / wall,
            "share": sum(busy[1:]) / wall, "lag_ms": 1e3 * float(np.median(lags[1:])),
            "worst_ms": 1e3 * float(np.max(lags[1:])), "held_mb": w.raw.samples.nbytes / 1e6 if w.raw is not None else 0.0,
            "keep_s": tone.keep_s}


def main() -> None:
    print(f"{'tone':>8} {'block':>7} {'readings/s':>11} {'ratio to 10':>11} {'analysis':>9} {'ratio to 30%':>12} "
          f"{'behind (median/worst)':>22} {'ratio to 150 ms':>15}")
    for f in (997.0, 20.0):
        m = one(f)
        print(f"{m['f']:>6g} Hz {m['block_s']:>5.2f} s {m['rate']:>11.2f} {m['rate'] / RATE_TARGET:>11.2f} "
              f"{100 * m['share']:>8.1f}% {m['share'] / SHARE_TARGET:>12.2f} "
              f"{m['lag_ms']:>10.0f} / {m['worst_ms']:>4.0f} ms {m['worst_ms'] / LAG_TARGET_MS:>15.2f}")
    print(f"recording held in memory at the end: {m['held_mb']:.2f} MB (the last {m['keep_s']:g} s at most)")


if __name__ == "__main__":
    main()
