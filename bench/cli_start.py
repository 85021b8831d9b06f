"""Time from starting the command line to its first output: `benchkit
--version`, best of 5 (target: at most 0.2 s).

Run: python bench/cli_start.py
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

from _timing import best_of


def seconds() -> float:
    exe = Path(sys.executable).with_name("benchkit")
    return best_of(lambda: subprocess.run([str(exe), "--version"], check=True, capture_output=True), 5)


def main() -> None:
    print(f"benchkit --version: {seconds():.3f} s (best of 5)")


if __name__ == "__main__":
    main()
