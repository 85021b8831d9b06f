"""The demo plan on the virtual bench: what it plays and what it costs.

Prints, for the shipped plan (benchkit/plans/stage-b2.toml) measured as
one session: the simulated stimulus seconds (every capture's length), the
wall seconds and their ratio; the stimulus seconds of a full
characterization (the plan's tones, sweep, power to 10 %, noise and IMD:
target <= 60 s); and the whole demo (two sessions side by side, the
comparison and the HTML report: `benchkit demo`), median wall seconds of three
(target < 20 s on an idle 2-core machine).

Run: python bench/demo_plan.py
"""

from __future__ import annotations

import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")  # as the command line has it, before numpy loads

import soundfile as sf  # noqa: E402

from benchkit.logbook import Logbook  # noqa: E402
from benchkit.plan import DEMO_PLAN, read_plan  # noqa: E402
from benchkit.session import run_session  # noqa: E402

#: the kinds of a full characterization (the plan's others, zout, crosstalk and drift, come on top)
FULL = ("tone", "sweep", "power", "noise", "imd")


def stimulus_s(folder: Path) -> float:
    """Seconds of audio a run captured (every WAV in its folder)."""
    return sum(sf.info(str(p)).duration for p in folder.glob("*.wav"))


def main() -> None:
    with tempfile.TemporaryDirectory() as tmp:
        t0 = time.perf_counter()
        end = run_session(read_plan(DEMO_PLAN), Path(tmp), lambda _m: None)
        wall = time.perf_counter() - t0
        with Logbook(tmp) as book:
            runs = {s["kind"]: book.entry(s["run"]).folder for s in end.doc["steps"]}
        per_kind = {k: stimulus_s(f) for k, f in runs.items()}
    total = sum(per_kind.values())
    full = sum(per_kind[k] for k in FULL)
    print("one session of the demo plan on the virtual bench:")
    print("  " + ", ".join(f"{k} {s:.1f} s" for k, s in per_kind.items()))
    print(f"  simulated stimulus {total:.1f} s, wall {wall:.1f} s: {total / wall:.2f} s of stimulus per wall second")
    print(f"  a full characterization ({', '.join(FULL)}): {full:.1f} s of stimulus (target <= 60 s)")
    walls = []
    for _ in range(3):  # as a user runs it: the command, in a process of its own
        with tempfile.TemporaryDirectory() as tmp:
            t0 = time.perf_counter()
            subprocess.run([sys.executable, "-m", "benchkit", "demo", "--out", str(Path(tmp) / "demo")],
                           check=True, capture_output=True)
            walls.append(time.perf_counter() - t0)
    print(f"the demo (two sessions, comparison, report): median {statistics.median(walls):.1f} s wall of three "
          f"({', '.join(f'{w:.1f}' for w in walls)}; target < 20 s idle; 27 s before plans)")


if __name__ == "__main__":
    main()
