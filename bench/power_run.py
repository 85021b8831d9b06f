"""Cost of the adaptive power run: steps and stimulus seconds it needs to
bracket the 1 % THD+N point of the demo stage within 0.1 dB (and the 0.1 %
and 10 % points besides), against a plain 0.25 dB staircase from the same
first step to the first step past 1 % (which brackets it only within
0.25 dB), its seconds at the adaptive run's mean step length (the waits
for each decision included); prints the ratio.

Run: python bench/power_run.py
"""

from __future__ import annotations

import math
import tempfile
from pathlib import Path

from benchkit.budget import ClassABudget
from benchkit.capture.virtual import virtual_bench
from benchkit.kinds.power import power_run


def main() -> None:
    budget = ClassABudget(24.0, 0.8, 8.0, 1.0)
    first = 20 * math.log10(budget.peak_vpk / 20.0) - 40.0
    with tempfile.TemporaryDirectory() as tmp:
        bench = virtual_bench("se-class-a", {"bias": 0.8}, seed=3)
        r = power_run(bench, Path(tmp), 997.0, first, -3.0, 8.0, ref_channel=2, budget=budget)
    info = r.info
    pt = r.rated
    width = 20 * math.log10(r.steps[pt.above].vrms / r.steps[pt.below].vrms)
    level_1pct = r.steps[pt.above].drive_dbfs
    per_step = info["stimulus_s"] / info["steps_played"]
    stairs = math.ceil((level_1pct - first) / 0.25) + 1
    print(f"demo stage at 0.8 A: 1 % THD+N at {pt.power_w:.4g} W, bracketed within {width:.3f} dB")
    print(f"{'run':>30} {'steps':>6} {'stimulus s':>11}")
    print(f"{'adaptive (1 dB, bisection)':>30} {info['steps_played']:6d} {info['stimulus_s']:11.1f}")
    print(f"{'plain 0.25 dB staircase':>30} {stairs:6d} {stairs * per_step:11.1f}")
    print(f"ratio adaptive / staircase: steps {info['steps_played'] / stairs:.2f}, "
          f"seconds {info['stimulus_s'] / (stairs * per_step):.2f} (and the staircase brackets only within 0.25 dB)")


if __name__ == "__main__":
    main()
