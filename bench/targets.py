"""Every speed target of the measurement loops in one table, each figure
measured in this run against its target (issues 26 and 27), and with
--write the table into bench/RESULTS.md with the machine it came from.

Run: python bench/targets.py [--write]
"""

from __future__ import annotations

import os
import platform
import sys

# one BLAS thread, as the command line runs (benchkit/cli/__init__.py): set before numpy loads
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
from datetime import datetime, timezone
from pathlib import Path

import analysis_speed
import capture_overhead
import cli_start
import sweep_speed
import watch_rate

HERE = Path(__file__).resolve().parent


def rows() -> list[tuple]:
    """(loop, figure, its unit, target, "max" or "min"[, the figure's resolution in this run])."""
    out = [("analyze_tone, 1 s at 96 kHz, over one rfft of it", analysis_speed.ratio(), "x", 2.0, "max"),
           ("sweep analysis, 10 s at 192 kHz, over its duration", sweep_speed.ratio(), "", 0.02, "max"),
           ("the same, the first of its sweep design in a process", sweep_speed.first_ratio(), "", 0.02, "max"),
           ("stepped run of 20 steps (JACK), wall over stimulus", capture_overhead.ratio(), "", 1.05, "max"),
           ("benchkit --version, start to first output", cli_start.seconds(), "s", 0.2, "max")]
    for f in (997.0, 20.0):
        m = watch_rate.one(f)
        out += [(f"watch at {f:g} Hz: readings a second", m["rate"], "/s", 10.0, "min", m["rate_resolution"]),
                (f"watch at {f:g} Hz: analysis's share of a core", m["share"], "", 0.30, "max"),
                (f"watch at {f:g} Hz: screen behind the audio, worst", m["worst_ms"], "ms", 150.0, "max")]
    return out


def table(got) -> str:
    lines = ["| loop | measured | target | measured / target | met |", "|---|---|---|---|---|"]
    for name, value, unit, target, way, *resolved in got:
        if value is None:
            lines.append(f"| {name} | not measured here | {'<=' if way == 'max' else '>='} {target:g}{unit} | | |")
            continue
        step = resolved[0] if resolved else 0.0  # (met within what the run resolves)
        met = value - step <= target if way == "max" else value + step >= target
        shown = f"{value:.4g}{unit}" + (f" +- {step:.2g}" if step else "")
        lines.append(f"| {name} | {shown} | {'<=' if way == 'max' else '>='} {target:g}{unit} | "
                     f"{value / target:.2f} | {'yes' if met else 'no'} |")
    return "\n".join(lines)


def machine() -> str:
    return (f"{platform.system()} {platform.release()}, {os.cpu_count()} cores, Python {platform.python_version()}, "
            f"measured {datetime.now(timezone.utc).isoformat(timespec='minutes')}")


def main() -> None:
    text = table(rows())
    print(text)
    print(machine())
    if "--write" in sys.argv[1:]:
        (HERE / "RESULTS.md").write_text(
            "# Speed targets: the last figures\n\nWritten by `python bench/targets.py --write`; each figure measured "
            "in one run against its target (never a timed assertion in a test).\n\n" + text + "\n\nMachine: "
            + machine() + "\n", encoding="utf-8")


if __name__ == "__main__":
    main()
