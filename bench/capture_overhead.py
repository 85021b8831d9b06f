"""Overhead of a real duplex stream: wall time of a 20-step stepped-level
run on a JACK dummy server, divided by the stimulus duration (target: at
most 1.05; the analysis's imports, once a process, are loaded first). Needs jackd, libportaudio2 and the test extras; says so and
exits 0 without them.

Run: python bench/capture_overhead.py
"""

from __future__ import annotations

import importlib
import os
import shutil
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))


def ratio() -> float | None:
    """The target's figure: a 20-step run's wall time over its stimulus (None without jackd)."""
    got = measure()
    return None if got is None else got[1] / got[0]


def measure():
    """(stimulus seconds, wall seconds, latency samples) of a 20-step run on a JACK dummy server, or None."""
    if shutil.which("jackd") is None:
        return None
    import jackbench

    from benchkit.capture.portaudio import LEAD_S
    from benchkit.signals import stepped_tones

    levels = [-40.0 + i for i in range(20)]
    stim = stepped_tones(997.0, levels, 48000, step_s=0.25, settle_s=0.1, lead_s=LEAD_S, n_out=1)
    with jackbench.JackServer(period=1024) as server, jackbench.Patchbay(server, "loopback"):
        os.environ.update(server.env())
        from benchkit.capture import run
        importlib.import_module("benchkit.capture.align")  # its scipy loads once a process, not once a run
        from benchkit.capture.portaudio import PortAudioBackend

        backend = PortAudioBackend("system", ref_channel=2)
        with tempfile.TemporaryDirectory() as tmp:
            t0 = time.perf_counter()
            cap = run(backend, stim, Path(tmp) / "raw.wav")
            wall = time.perf_counter() - t0
        backend.sd._terminate()  # before the server goes: PortAudio asserts otherwise
    return stim.duration_s, wall, cap.latency_samples


def main() -> None:
    got = measure()
    if got is None:
        print("capture overhead: skipped (no jackd; apt-get install jackd2 libportaudio2)")
        return
    stimulus, wall, latency = got
    print(f"20-step run: stimulus {stimulus:.2f} s, wall {wall:.2f} s, ratio {wall / stimulus:.3f} "
          f"(latency {latency} samples)")


if __name__ == "__main__":
    main()
