"""The logbook commands (`benchkit log ...`) and `benchkit compare`."""

from __future__ import annotations

import contextlib
import sys
from pathlib import Path
from typing import List, Optional

import typer

from benchkit import units
from benchkit.cli import values as V
from benchkit import kinds
from benchkit.errors import BenchkitError
from benchkit.logbook import STATUSES
from benchkit.report import logbook as logbook_text
from benchkit.cli.common import app, err, EXIT_BAD_INPUT, finish_run


log_app = typer.Typer(no_args_is_help=True, help="The bench logbook: list, show, label, export, rebuild, analyse again and remove runs.")
app.add_typer(log_app, name="log")


def _bench_option():
    return typer.Option(None, "--bench", help="Bench folder (default: BENCHKIT_BENCH, else the current folder).")


def _run_argument():
    return typer.Argument(..., help="Run id, a unique start of it, 'last' or 'last-N'.")


@contextlib.contextmanager
def _book(bench: Optional[Path], write: bool = False):
    """The bench's logbook for a log command: one line and exit 1 when it
    cannot be opened, or on a BenchkitError inside the block; a bench that
    cannot be written is read as it stands unless ``write``."""
    from benchkit import logbook

    root = logbook.resolve_bench(bench)
    try:
        if not (root / logbook.CATALOG).exists() and not write:
            raise BenchkitError(f"{root} holds no logbook ({logbook.CATALOG}): run a measurement there, or give --bench")
        try:
            book = logbook.Logbook(root)
        except BenchkitError as exc:
            if write or not str(exc).startswith("cannot write"):
                raise
            book = logbook.Logbook(root, readonly=True)
        with book:
            yield book
    except BenchkitError as exc:
        err(f"benchkit: error: {exc}")
        raise typer.Exit(EXIT_BAD_INPUT)


@log_app.command("list")
def log_list(
    tags: List[str] = typer.Option([], "--tag", help="Only runs with this tag, key=value (repeatable: all must match)."),
    command: Optional[str] = typer.Option(None, "--command", parser=V.one_of(*kinds.names()), help=f"Only runs of this command: {', '.join(kinds.names())}."),
    since: Optional[str] = typer.Option(None, "--since", parser=V.when, help="Only runs started on or after this date (YYYY-MM-DD) or time."),
    until: Optional[str] = typer.Option(None, "--until", parser=V.when, help="Only runs started on or before this date or time."),
    status: Optional[str] = typer.Option(None, "--status", parser=V.one_of(*STATUSES), help="Only runs in this state: complete, interrupted, failed, incomplete, running."),
    limit: Optional[int] = typer.Option(None, "--last", parser=V.COUNT, help="The newest this many runs."),
    bench: Optional[Path] = _bench_option(),
    as_json: bool = typer.Option(False, "--json", help="Print the runs as JSON on stdout."),
) -> None:
    """List the logged runs, newest first, with their headline figures.

    Example: benchkit log list --tag bias=1.2A --command power
    """
    from benchkit import logbook

    with _book(bench) as book:
        entries = book.entries(logbook.parse_tags(tags), command, status, since, until, limit)
    if as_json:
        from benchkit.report.tables import dumps

        print(dumps({"kind": "runs", "schema_version": 1, "bench": str(book.root),
                     "runs": [logbook_text.entry_doc(e) for e in entries]}))
        return
    if not entries:
        err(f"no runs in {book.root} match")
        return
    for line in logbook_text.runs_lines(entries):
        err(line)


@log_app.command("show")
def log_show(
    run: str = _run_argument(),
    bench: Optional[Path] = _bench_option(),
    as_json: bool = typer.Option(False, "--json", help="Print the run's record as JSON on stdout."),
) -> None:
    """Show one run: when, what, with which device and calibration, its tags, note, figures, warnings and files.

    Example: benchkit log show last
    """
    with _book(bench) as book:
        entry = book.entry(run)
        record = book.read_record(entry.id)
    if as_json:
        from benchkit.report.tables import dumps

        print(dumps({**record, "status": entry.status, "folder": str(entry.folder)}))
        return
    for line in logbook_text.run_lines(entry, record):
        err(line)


@log_app.command("note")
def log_note(
    run: str = _run_argument(),
    text: str = typer.Argument(..., help="The note."),
    append: bool = typer.Option(False, "--append", help="Add a line to the note instead of replacing it."),
    bench: Optional[Path] = _bench_option(),
) -> None:
    """Set (or add to) a run's note.

    Example: benchkit log note last "swapped the 2200 uF output capacitor"
    """
    with _book(bench, write=True) as book:
        record = book.set_note(book.entry(run).id, text, append)
    err(f"run {record['id']}: note: {record['note']}")


@log_app.command("tag")
def log_tag(
    run: str = _run_argument(),
    tags: List[str] = typer.Argument(None, help="Tags key=value to set."),
    remove: List[str] = typer.Option([], "--remove", help="Take this tag off (repeatable)."),
    bench: Optional[Path] = _bench_option(),
) -> None:
    """Set or remove a run's tags.

    Example: benchkit log tag last bias=1.2A rail=24V
    """
    from benchkit import logbook

    with _book(bench, write=True) as book:
        if not tags and not remove:
            raise BenchkitError("give tags key=value to set, or --remove KEY")
        record = book.set_tags(book.entry(run).id, logbook.parse_tags(tags or []), remove)
    err(f"run {record['id']}: tags: " + (" ".join(f"{k}={v}" for k, v in record["tags"].items()) or "none"))


@log_app.command("export")
def log_export(
    out: Optional[Path] = typer.Option(None, "--file", parser=V.out_file, help="Write the CSV to this file (default: stdout)."),
    bench: Optional[Path] = _bench_option(),
) -> None:
    """Export the catalog as CSV: a row a run, its tags and headline figures in columns.

    Example: benchkit log export --file logbook.csv
    """
    from benchkit.report.tables import write_catalog_csv

    with _book(bench) as book:
        entries = book.entries()
        try:
            if out is None:
                write_catalog_csv(entries, sys.stdout)
            else:
                with out.open("w", newline="", encoding="utf-8") as fh:
                    write_catalog_csv(entries, fh)
                err(f"{units.count(len(entries), 'run')}: {out}")
        except OSError as exc:
            err(f"benchkit: error: cannot write {out}: {exc.strerror or exc}")
            raise typer.Exit(EXIT_BAD_INPUT)


@log_app.command("rebuild")
def log_rebuild(bench: Optional[Path] = _bench_option()) -> None:
    """Index every run folder afresh, when the catalog is lost or damaged (a damaged one is moved aside first).

    Example: benchkit log rebuild --bench ~/bench/b2
    """
    from datetime import datetime

    from benchkit import logbook

    root = logbook.resolve_bench(bench)
    catalog = root / logbook.CATALOG
    try:
        try:
            book = logbook.Logbook(root)
        except BenchkitError as exc:
            if "not a benchkit catalog" not in str(exc) and "cannot open the catalog" not in str(exc):
                raise
            aside = catalog.with_name(f"{catalog.name}.damaged-{datetime.now():%Y%m%d-%H%M%S}")
            catalog.rename(aside)
            for extra in ("-wal", "-shm"):
                catalog.with_name(catalog.name + extra).unlink(missing_ok=True)
            err(f"the catalog was damaged: moved aside to {aside.name}")
            book = logbook.Logbook(root)
        with book:
            count, skipped = book.rebuild()
    except BenchkitError as exc:
        err(f"benchkit: error: {exc}")
        raise typer.Exit(EXIT_BAD_INPUT)
    for why in skipped:
        err(f"warning: skipped: {why}")
    err(f"indexed {units.count(count, 'run')} from {root / logbook.RUNS}")


@log_app.command("reanalyse")
def log_reanalyse(
    run: str = _run_argument(),
    bench: Optional[Path] = _bench_option(),
    as_json: bool = typer.Option(False, "--json", help="Print the new result as JSON on stdout."),
) -> None:
    """Analyse a run again from its stored captures with the current analysis, and write its reports anew.

    A tone, sweep or power run killed while it played is recovered from
    its partial recording first (the steps recorded whole).

    Example: benchkit log reanalyse 20261202-101500-tone-bias-1.2A
    """
    from benchkit import logbook
    from benchkit.kinds import reanalyse

    with _book(bench, write=True) as book:
        entry = book.entry(run)
        with book.resume(entry.id) as taken:
            doc, written = reanalyse(taken.folder, taken.record, say=err)
            taken.record["reanalysed"] = logbook.now_iso()
            finish_run(written, taken, doc, as_json, played=False)
        done = book.entry(entry.id)
    err(f"run {done.id}: {done.status}; {logbook_text.headline_text(done)}")


@log_app.command("remove")
def log_remove(
    runs: List[str] = typer.Argument(..., help="Runs to move to the trash folder."),
    bench: Optional[Path] = _bench_option(),
) -> None:
    """Move runs to the bench's trash/ folder and out of the catalog (nothing is deleted).

    Example: benchkit log remove 20261202-101500-tone
    """
    with _book(bench, write=True) as book:
        for ref in runs:
            dest = book.remove(book.entry(ref).id)
            err(f"moved {ref} to {dest}")


@app.command()
def compare(
    runs: List[str] = typer.Argument(None, help="Runs to compare (ids, unique starts, 'last', 'last-N'); the first is the baseline."),
    last: Optional[int] = typer.Option(None, "--last", parser=V.number(2, 10000, integer=True), help="Compare the newest N complete runs (of --command, else of the newest run's command), oldest first."),
    command: Optional[str] = typer.Option(None, "--command", parser=V.one_of(*kinds.names()), help="With --last: of this command."),
    anyway: bool = typer.Option(False, "--anyway", help="Compare runs whose conditions differ (load, frequency, band, calibration, sample rate), with a loud warning."),
    out: Optional[Path] = typer.Option(None, "--out", parser=V.out_folder, help="Comparison folder (default: comparisons/<time>-<runs> in the bench folder)."),
    bench: Optional[Path] = _bench_option(),
    as_json: bool = typer.Option(False, "--json", help="Print the comparison as JSON on stdout."),
) -> None:
    """Compare logged runs of one kind: overlay plots, a delta table with units and direction, a summary.

    Tone runs pair their steps by drive level and overlay THD+N against
    power and the spectra; power runs compare the power at each limit;
    sweeps the response; drift logs the settled value and rate. Runs
    measured under different conditions are refused unless --anyway.

    Example: benchkit compare --last 2 --command power
    """
    from benchkit.compare_runs import compare_runs

    with _book(bench, write=True) as book:
        refs = list(runs or [])
        if last is not None:
            if refs:
                raise BenchkitError("give runs or --last N, not both")
            if command is None:
                newest = book.entries(status="complete", limit=1)
                command = newest[0].command if newest else None
            chosen = book.entries(command=command, status="complete", limit=last)
            if len(chosen) < last:
                raise BenchkitError(f"the logbook has {len(chosen)} complete {command or ''} run(s), not {last}")
            refs = [e.id for e in reversed(chosen)]
        if len(refs) < 2:
            raise BenchkitError("name two or more runs to compare, or --last 2")
        report = compare_runs(book, refs, anyway=anyway, out=out)
    err(report.text)
    for path in report.files:
        err(f"  wrote        {path}")
    if as_json:
        from benchkit.report.tables import dumps

        print(dumps({**report.comparison.to_dict(), "run_ids": [e.id for e in report.entries],
                     "folder": str(report.folder)}))
