"""Comparing logged runs: their stored results side by side, written out.

Takes runs from a bench's logbook, reads the result each stored, checks
that they compare (:func:`benchkit.analysis.compare.compare`), and writes a
comparison folder: the delta table (CSV), the comparison (JSON), the
overlay plots (PNG) and a short text summary.
"""

from __future__ import annotations

import csv
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path

from benchkit.analysis.compare import Comparison, compare
from benchkit.errors import BenchkitError
from benchkit.logbook import Logbook, RunEntry, slug
from benchkit.jsonfile import load_json

COMPARISONS = "comparisons"


@dataclass(frozen=True)
class ComparisonReport:
    folder: Path
    comparison: Comparison
    entries: tuple[RunEntry, ...]
    files: tuple[Path, ...]
    text: str


def stored_result(book: Logbook, entry: RunEntry) -> tuple[dict, dict]:
    """A run's record and the result document it stored."""
    record = book.read_record(entry.id)
    name = record.get("result_file")
    if entry.status in ("running", "incomplete", "failed") or not name:
        raise BenchkitError(f"run {entry.id} is {entry.status} and holds no result: "
                            f"'benchkit log reanalyse {entry.id}' analyses what it captured")
    path = entry.folder / name
    try:
        doc = load_json(path)
    except (OSError, ValueError) as exc:
        raise BenchkitError(f"run {entry.id}: its result {path} is unreadable ({exc}); "
                            f"'benchkit log reanalyse {entry.id}' writes it again") from None
    return record, doc


def run_label(entry: RunEntry) -> str:
    """What a run is called in tables and legends: its tags, else its id."""
    return ", ".join(f"{k}={v}" for k, v in entry.tags.items()) or entry.id


def _spectra(entries, docs, labels, folder: Path, title: str, warnings) -> list[Path]:
    """Tone runs: the spectra of the highest drive level they share."""
    from benchkit.report import overlays
    from benchkit.recordings import read_capture
    from benchkit.runs import analyze_steps

    shared = set.intersection(*({s["drive_dbfs"] for s in d.get("steps") or []} for d in docs))
    if not shared:
        return []
    drive = max(shared)
    results = []
    for entry, doc in zip(entries, docs):
        capture = Path(doc.get("file") or entry.folder / "capture.wav")
        if not capture.is_absolute() or not capture.exists():
            capture = entry.folder / capture.name
        if not capture.exists():
            return []
        steps = analyze_steps(read_capture(capture, int(doc.get("channel") or 1)),
                              tuple(doc["steps"][0].get("bandwidth_hz") or (20.0, 20000.0)), traces=True)
        results.append(next(s.result for s in steps.steps if s.drive_dbfs == drive))
    path = folder / "spectra.png"
    return [overlays.spectra_png(results, labels, path, f"{title}: spectra at drive {drive:g} dBFS", warnings)]


def _columns(folder: Path, kind: str):
    """The curve a noise or watch run left in its CSV: density in dB
    against frequency, or THD+N against time."""
    import numpy as np

    name, xs, ys = ("capture.noise.csv", "freq_hz", "psd_fs2_per_hz") if kind == "noise" else ("readings.csv", "t_s", "thdn_db")
    try:
        with (folder / name).open(encoding="utf-8", newline="") as fh:
            rows = [r for r in csv.DictReader(fh) if r.get(ys)]
    except OSError as exc:
        raise BenchkitError(f"{folder}: cannot read {name} for the overlay ({exc.strerror or exc})") from None
    x = np.array([float(r[xs]) for r in rows])
    y = np.array([float(r[ys]) for r in rows])
    return (x, 10 * np.log10(np.maximum(y, 1e-300))) if kind == "noise" else (x, y)


def compare_runs(book: Logbook, refs: list[str], anyway: bool = False, out: Path | None = None,
                 title: str | None = None) -> ComparisonReport:
    """Compare logged runs (ids, unique prefixes, 'last', 'last-N'), the
    first the baseline, and write the comparison folder (default:
    comparisons/<time>-<first>-vs-<second> in the bench folder)."""
    from benchkit.recordings import write_text_atomic
    from benchkit.report import overlays, summary, tables

    entries = [book.entry(r) for r in refs]
    if len({e.id for e in entries}) < len(entries):
        raise BenchkitError("a run is named twice: compare different runs")
    stored = [stored_result(book, e) for e in entries]
    records, docs = [r for r, _d in stored], [d for _r, d in stored]
    labels = [run_label(e) for e in entries]
    if len(set(labels)) < len(labels):
        labels = [e.id for e in entries]
    comparison = compare(docs, labels, records, anyway=anyway)
    if out is None:
        out = book.root / COMPARISONS / f"{datetime.now():%Y%m%d-%H%M%S}-{slug(entries[0].id[16:], 30)}-vs-{slug(entries[1].id[16:], 30)}"
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise BenchkitError(f"cannot create the comparison folder {out}: {exc.strerror or exc}") from None
    title = title or " vs ".join(labels)
    doc = {**comparison.to_dict(), "run_ids": [e.id for e in entries]}
    series = None
    if comparison.kind == "drift":
        from benchkit.meters import read_drift_csv

        series = [read_drift_csv(e.folder / "log.csv")[:2] for e in entries]
    elif comparison.kind in ("noise", "watch"):
        series = [_columns(e.folder, comparison.kind) for e in entries]
    written = [tables.write_json(doc, out / "comparison.json"),
               tables.write_deltas_csv(comparison, out / "comparison.csv")]
    overlay = overlays.curves_png(comparison, docs, out / "overlay.png", title, series)
    written += [overlay] if overlay is not None else []
    if comparison.kind == "tone-steps":
        written += _spectra(entries, docs, labels, out, title, comparison.warnings)
    text = f"{title}\n" + summary.comparison_text(comparison)
    written.append(write_text_atomic(out / "summary.txt", text + "\n"))
    return ComparisonReport(out, comparison, tuple(entries), tuple(written), text)

