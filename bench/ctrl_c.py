"""Ctrl-C to silence on a real audio server: how long after SIGINT the
stage's drive is silent (target: within 50 ms).

A JACK dummy server at period 1024 (21.3 ms at 48 kHz); benchkit plays a
stepped tone run through it, and a second JACK client (the tests' patch
bay) hears the output port. The patch bay reads the server's frame clock
the moment the signal is sent and the frame of the output's last sound;
their difference, over 20 trials at random points of the period, is
printed as a distribution. Needs jackd, libportaudio2 and the test extras;
says so and exits 0 without them.

Run: python bench/ctrl_c.py [TRIALS]
"""

from __future__ import annotations

import random
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))

TARGET_MS = 50.0


def _trial(server, jackbench, folder: Path) -> float | None:
    """Milliseconds from SIGINT to silence, or None when the run did not get going."""
    with jackbench.Patchbay(server, "loopback") as bay:
        proc = subprocess.Popen([sys.executable, "-m", "benchkit", "tone", "--device", "system", "--ref-channel", "2",
                                 "--bench", str(folder), *sum((["--level", "-20dBFS"] for _ in range(6)), [])],
                                env=server.env(), stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline:  # the run (not the pre-flight probe) a second into its tones
            partials = list(folder.glob("runs/*/capture.partial.wav"))
            if partials and partials[0].stat().st_size > 44 + 8 * 48000 * 1.5:
                break
            time.sleep(0.01)
        else:
            proc.kill()
            return None
        time.sleep(random.uniform(0.0, 0.05))  # anywhere in the period
        bay.interrupt(proc)
        proc.communicate(timeout=30)
        return bay.frames_to_silence() / server.rate * 1000.0


def main() -> None:
    if shutil.which("jackd") is None:
        print("ctrl-c to silence: skipped (no jackd; apt-get install jackd2 libportaudio2)")
        return
    import importlib.util

    if importlib.util.find_spec("jack") is None:  # the patch bay's client library
        print("ctrl-c to silence: skipped (no jack-client; pip install -e '.[test]')")
        return
    import jackbench

    trials = int(sys.argv[1]) if len(sys.argv) > 1 else 20
    got = []
    with jackbench.JackServer(period=1024) as server, tempfile.TemporaryDirectory() as tmp:
        for k in range(trials):
            ms = _trial(server, jackbench, Path(tmp) / f"t{k}")
            if ms is not None:
                got.append(ms)
    if not got:
        print("ctrl-c to silence: no trial got going")
        return
    ms = np.array(got)
    print(f"ctrl-c to silence on JACK (period 1024 at 48 kHz, fade 20 ms), {len(ms)} trials:")
    print(f"  min {ms.min():.1f} ms, median {np.median(ms):.1f} ms, max {ms.max():.1f} ms; "
          f"over {TARGET_MS:g} ms: {int(np.sum(ms > TARGET_MS))} of {len(ms)}")
    print(f"  worst / target: {ms.max() / TARGET_MS:.2f} (target <= 1)")


if __name__ == "__main__":
    main()
