"""JSON writers, and the CSV of a comparison and of the catalog (each
kind's own tables in ``report/NAME.py``). Every CSV has a header row with
units in the column names (docs/file-formats.md)."""

from __future__ import annotations

import csv
import json
import math
from pathlib import Path

import numpy as np

from benchkit.errors import BenchkitError


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


def dumps_line(doc) -> str:
    """One JSON document on one line (a stream of them: JSON lines)."""
    return json.dumps(_clean(doc), separators=(",", ":"), allow_nan=False)


def write_json(doc, path: Path) -> Path:
    """A result document, written whole and renamed into place."""
    from benchkit.recordings import write_text_atomic

    return write_text_atomic(path, dumps(doc) + "\n")


def write_deltas_csv(c, path: Path) -> Path:
    """A comparison, one row a figure: its value and standard uncertainty
    in each run, the change from the first run, the change's expanded
    uncertainty (at the comparison's coverage factor) and the verdict
    (better, worse, within uncertainty, in the noise; same, where the
    uncertainty is not known)."""
    labels = list(c.labels)
    n = len(labels)
    with path.open("w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(["figure", "at", "unit", "better_when", *(f"value [{k}] {lab}" for k, lab in enumerate(labels)),
                    *(f"u [{k}]" for k in range(n)), *(f"change [{k}]-[0]" for k in range(1, n)),
                    *(f"U of change [{k}] (k={c.coverage:.3g})" for k in range(1, n)),
                    *(f"verdict [{k}]" for k in range(1, n))])
        for d in c.deltas:
            us = list(d.us) + [None] * (n - len(d.us))
            w.writerow([d.name, d.at, d.unit, d.better or "",
                        *("" if v is None else f"{v:.6g}" for v in d.values),
                        *("" if u is None else f"{u:.3g}" for u in us),
                        *("" if ch is None else f"{ch:+.6g}" for ch in d.changes),
                        *("" if d.change_u(k) is None else f"{d.change_u(k):.3g}" for k in range(1, n)),
                        *(d.verdict(k) or "" for k in range(1, n))])
    return path


def write_catalog_file(entries, path: Path) -> Path:
    """The logbook as CSV (:func:`write_catalog_csv`) in a file."""
    try:
        with Path(path).open("w", newline="", encoding="utf-8") as fh:
            write_catalog_csv(entries, fh)
    except OSError as exc:
        raise BenchkitError(f"cannot write {path}: {exc.strerror or exc}") from None
    return Path(path)


def write_catalog_csv(entries, fh) -> None:
    """The logbook as CSV, a row a run: what and when, its state, device,
    calibration, stage, note, a column for each tag key ("tag KEY") and
    for each headline figure the runs hold (units in the names), in the
    order they first appear."""
    keys = sorted({k for e in entries for k in e.tags})
    columns = list(dict.fromkeys(f["name"] for e in entries for f in e.figures))
    w = csv.writer(fh)
    w.writerow(["id", "started", "finished", "command", "status", "valid", "device", "calibration_file",
                "calibration_hash", "stage", "note", *(f"tag {k}" for k in keys), *columns, "warnings"])
    for e in entries:
        figures = {f["name"]: f["value"] for f in e.figures}
        w.writerow([e.id, e.started, e.finished or "", e.command, e.status, "" if e.valid is None else str(e.valid).lower(),
                    e.device or "", e.calibration_file or "", e.calibration_hash or "",
                    json.dumps(e.stage, ensure_ascii=False) if e.stage else "", e.note,
                    *(e.tags.get(k, "") for k in keys),
                    *("" if figures.get(n) is None else f"{figures[n]:.6g}" for n in columns),
                    " | ".join(e.warnings)])


def write_batch_csv(headers, rows, path: Path) -> Path:
    """Many captures' results (:func:`benchkit.kinds.batch_rows`), a row a
    file and channel: its kind, whether it is valid, and each headline
    figure (units in the column names)."""
    try:
        Path(path).parent.mkdir(parents=True, exist_ok=True)
        with Path(path).open("w", newline="", encoding="utf-8") as fh:
            w = csv.writer(fh)
            w.writerow(["file", "channel", "kind", "valid", *(f"{label} ({unit})" for label, unit in headers)])
            for r in rows:
                w.writerow([*r[:4], *("" if v is None else f"{v:.6g}" for v in r[4:])])
    except OSError as exc:
        raise BenchkitError(f"cannot write {path}: {exc.strerror or exc}") from None
    return Path(path)
