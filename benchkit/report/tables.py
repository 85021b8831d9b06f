"""CSV and JSON writers. Every CSV has a header row with units in the
column names (docs/file-formats.md)."""

from __future__ import annotations

import csv
import json
import math
from pathlib import Path

import numpy as np

from benchkit.analysis.tone import ToneResult


def _clean(obj):
    """Make a result JSON-safe: numpy scalars to Python, non-finite to None."""
    if isinstance(obj, dict):
        return {k: _clean(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_clean(v) for v in obj]
    if isinstance(obj, (np.floating, float)):
        f = float(obj)
        return f if math.isfinite(f) else None
    if isinstance(obj, np.integer):
        return int(obj)
    if isinstance(obj, np.bool_):
        return bool(obj)
    return obj


def dumps(doc) -> str:
    """One JSON document, as benchkit prints and writes it."""
    return json.dumps(_clean(doc), indent=2, allow_nan=False)


def write_json(doc, path: Path) -> Path:
    path.write_text(dumps(doc) + "\n", encoding="utf-8")
    return path


def write_harmonics_csv(result: ToneResult, path: Path) -> Path:
    """One row per harmonic (the fundamental first, as order 1)."""
    scale = result.volts_per_fs
    header = ["order", "freq_hz", "level_dbc", "level_dbfs", "phase_deg", "method"]
    if scale is not None:
        header.append("level_vrms")
    with path.open("w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(header)
        fund = [1, f"{result.fundamental_hz:.6f}", "0.000", f"{result.fundamental_dbfs:.3f}", "0.000", "fit"]
        if scale is not None:
            fund.append(f"{result.fundamental_vrms:.6g}")
        w.writerow(fund)
        for h in result.harmonics:
            row = [h.order, f"{h.freq_hz:.6f}", f"{h.level_dbc:.3f}", f"{h.level_dbfs:.3f}", f"{h.phase_deg:.3f}", h.method]
            if scale is not None:
                row.append(f"{h.to_dict(scale)['level_vrms']:.6g}")
            w.writerow(row)
    return path


def write_spectrum_csv(result: ToneResult, path: Path) -> Path:
    """The windowed spectrum: frequency and the level of a sine at each bin."""
    tr = result.traces
    if tr is None:
        raise ValueError("the result was analysed without traces")
    with path.open("w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(["freq_hz", "level_dbfs"])
        w.writerows(zip(np.char.mod("%.4f", tr.freq_hz), np.char.mod("%.3f", tr.spectrum_dbfs)))
    return path
