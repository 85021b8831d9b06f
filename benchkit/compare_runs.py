"""Comparing logged runs: their stored results side by side, written out.

Takes runs from a bench's logbook, reads the result each stored, checks
that they compare (:func:`benchkit.analysis.compare.compare`), and writes a
comparison folder: the delta table (CSV), the comparison (JSON), the
overlay plots (PNG) and a short text summary.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime
from pathlib import Path

from benchkit import kinds
from benchkit.analysis.compare import Comparison, compare
from benchkit.analysis.documents import upgrade
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
    #: each run's scale and load ((volts peak per FS, ohms), None where it
    #: has none): what shows its levels in other units
    scales: tuple[tuple[float | None, float | None], ...] = ()


def stored_result(book: Logbook, entry: RunEntry) -> tuple[dict, dict]:
    """A run's record and the result document it stored (a version-1
    document read as version 2)."""
    record = book.read_record(entry.id)
    name = record.get("result_file")
    if entry.status in ("running", "incomplete", "failed") or not name:
        raise BenchkitError(f"run {entry.id} is {entry.status} and holds no result: "
                            f"'benchkit log reanalyse {entry.id}' analyses what it captured")
    path = entry.folder / name
    try:
        doc = upgrade(load_json(path))
    except (OSError, ValueError) as exc:
        raise BenchkitError(f"run {entry.id}: its result {path} is unreadable ({exc}); "
                            f"'benchkit log reanalyse {entry.id}' writes it again") from None
    return record, doc


def run_label(entry: RunEntry) -> str:
    """What a run is called in tables and legends: its tags, else its id."""
    return ", ".join(f"{k}={v}" for k, v in entry.tags.items()) or entry.id


def chosen_runs(book: Logbook, refs: list[str], last: int | None = None, command: str | None = None) -> list[str]:
    """The runs ``compare`` was asked for: ``refs`` as given, or the newest
    ``last`` complete runs (of ``command``, else of the newest run's
    command), oldest first; two at least."""
    if last is not None:
        if refs or last < 2:
            raise BenchkitError("give runs or --last N, not both" if refs else "--last compares 2 runs or more")
        if command is None:
            newest = book.entries(status="complete", limit=1)
            command = newest[0].command if newest else None
        chosen = book.entries(command=command, status="complete", limit=last)
        if len(chosen) < last:
            raise BenchkitError(f"the logbook has {len(chosen)} complete {command or ''} run(s), not {last}")
        refs = [e.id for e in reversed(chosen)]
    if len(refs) < 2:
        raise BenchkitError("name two or more runs to compare, or --last 2")
    return refs


def comparison_folder(book: Logbook, out: Path | None, name: str) -> Path:
    """The folder a comparison is written in, made: ``out``, or
    comparisons/<time>-<name> in the bench folder."""
    if out is None:
        out = book.root / COMPARISONS / f"{datetime.now():%Y%m%d-%H%M%S}-{name}"
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise BenchkitError(f"cannot create the comparison folder {out}: {exc.strerror or exc}") from None
    return out


def compare_runs(book: Logbook, refs: list[str], anyway: bool = False, out: Path | None = None,
                 title: str | None = None) -> ComparisonReport:
    """Compare logged runs (ids, unique prefixes, 'last', 'last-N'), the
    first the baseline, and write the comparison folder (default:
    comparisons/<time>-<first>-vs-<second> in the bench folder)."""
    from benchkit.recordings import write_text_atomic
    from benchkit.report import summary, tables
    from benchkit.report.logbook import level_scale

    entries = [book.entry(r) for r in refs]
    if len({e.id for e in entries}) < len(entries):
        raise BenchkitError("a run is named twice: compare different runs")
    stored = [stored_result(book, e) for e in entries]
    records, docs = [r for r, _d in stored], [d for _r, d in stored]
    labels = [run_label(e) for e in entries]
    if len(set(labels)) < len(labels):
        labels = [e.id for e in entries]
    kind = kinds.of_result(docs[0])
    comparison = compare(docs, labels, None if kind is None else kind.figures, records, anyway=anyway)
    out = comparison_folder(book, out, f"{slug(entries[0].id[16:], 30)}-vs-{slug(entries[1].id[16:], 30)}")
    title = title or " vs ".join(labels)
    doc = {**comparison.to_dict(), "run_ids": [e.id for e in entries]}
    written = [tables.write_json(doc, out / "comparison.json"),
               tables.write_deltas_csv(comparison, out / "comparison.csv")]
    if kind.overlay is not None:  # (a single figure, a gain: the delta table says it all)
        written += kind.overlay(comparison, docs, entries, out, title)
    scales = tuple(_scale(level_scale(d), c) for d, c in zip(docs, comparison.conditions))
    text = f"{title}\n" + summary.comparison_text(comparison, scales)
    written.append(write_text_atomic(out / "summary.txt", text + "\n"))
    return ComparisonReport(out, comparison, tuple(entries), tuple(written), text, scales)


def _scale(scale: tuple[float | None, float | None], conditions: dict) -> tuple[float | None, float | None]:
    """A run's scale and load, the load from its conditions when its result keeps none."""
    vpf, load = scale
    return vpf, load if load is not None else conditions.get("load_ohms")

