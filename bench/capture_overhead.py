"""Overhead of a real duplex stream: wall time of a 20-step stepped-level
run on a JACK dummy server, divided by the stimulus duration (target: at
most 1.05; the analysis's imports, once a process, are loaded first). Needs jackd, libportaudio2 and the test extras; says so and
exits 0 without them.

Run: python bench/capture_overhead.py
"""

from __future__ import annotations

import importlib
import shutil
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))


def main() -> None:
    if shutil.which("jackd") is None:
        print("capture overhead: skipped (no jackd; apt-get install jackd2 libportaudio2)")
        return
    import jackbench

    from benchkit.capture.portaudio import LEAD_S
    from benchkit.signals import stepped_tones

    levels = [-40.0 + i for i in range(20)]
    stim = stepped_tones(997.0, levels, 48000, step_s=0.25, settle_s=0.1, lead_s=LEAD_S, n_out=1)
    with jackbench.JackServer(period=1024) as server, jackbench.Patchbay(server, "loopback"):
        env = server.env()
        import os

        os.environ.update(env)
        from benchkit.capture import run
        importlib.import_module("benchkit.capture.align")  # its scipy loads once a process, not once a run
        from benchkit.capture.portaudio import PortAudioBackend

        backend = PortAudioBackend("system", ref_channel=2)
        with tempfile.TemporaryDirectory() as tmp:
            t0 = time.perf_counter()
            cap = run(backend, stim, Path(tmp) / "raw.wav")
            wall = time.perf_counter() - t0
        backend.sd._terminate()  # before the server goes: PortAudio asserts otherwise
    print(f"20-step run: stimulus {stim.duration_s:.2f} s, wall {wall:.2f} s, ratio {wall / stim.duration_s:.3f} "
          f"(latency {cap.latency_samples} samples)")


if __name__ == "__main__":
    main()
