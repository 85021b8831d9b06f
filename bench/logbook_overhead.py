"""Cost of the logbook: filing a run (folder, record, lock, catalog row as
running, then the record and row completed with headline figures) against
the shortest thing a run measures, one 1 s tone step; and listing a
catalog of many runs against the same second.

Run: python bench/logbook_overhead.py
"""

from __future__ import annotations

import json
import sys
import tempfile
import time
from pathlib import Path

from benchkit.kinds import headline_figures
from benchkit.logbook import Logbook

RUNS = 300
#: a stepped-tone result like a real one: four steps with their harmonics
STEP = {"drive_dbfs": -20.0, "thdn_db": -61.2, "thd_db": -61.3, "noise_dbfs": -92.3, "noise_vrms": 3.5e-4,
        "fundamental_vrms": 1.41, "power_w": 0.25, "valid": True,
        "harmonics": [{"order": k, "level_dbc": -60.0 - 10 * k} for k in range(2, 11)]}
DOC = {"kind": "tone-steps", "frequency_hz": 997.0,
       "steps": [{**STEP, "drive_dbfs": d} for d in (-30.0, -20.0, -14.0, -11.0)]}


def main() -> None:
    with tempfile.TemporaryDirectory() as tmp:
        with Logbook(tmp) as book:
            t0 = time.perf_counter()
            for k in range(RUNS):
                run = book.start("tone", tags={"bias": f"{0.8 + k * 1e-3:.3f}A"}, params={"channel": 1})
                result = run.folder / "capture.result.json"
                result.write_text(json.dumps(DOC))
                run.complete(DOC, [result], result, figures=headline_figures(DOC))
            per_run = (time.perf_counter() - t0) / RUNS
            t0 = time.perf_counter()
            entries = book.entries()
            listing = time.perf_counter() - t0
            assert len(entries) == RUNS
        size = sum(p.stat().st_size for p in Path(tmp).glob("logbook.sqlite*"))
    print(f"filing a run (start + complete, fsynced records): {per_run * 1e3:.2f} ms")
    print(f"ratio to a 1 s tone step: {per_run / 1.0:.4f} (target: well under 0.01)")
    print(f"listing {RUNS} runs with tags and figures: {listing * 1e3:.1f} ms, ratio to 1 s: {listing:.3f}")
    print(f"catalog size: {size / RUNS:.0f} bytes a run")


if __name__ == "__main__":
    sys.exit(main())
