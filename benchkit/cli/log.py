"""The logbook commands (`benchkit log ...`) and `benchkit compare`."""

from __future__ import annotations

import contextlib
import sys
from pathlib import Path
from typing import List

import typer

from benchkit import units
from benchkit.cli.common import answer, app, err, EXIT_BAD_INPUT, one_line, show, takes
from benchkit.errors import BenchkitError
from benchkit.report import logbook as logbook_text


log_app = typer.Typer(no_args_is_help=True,
                      help="The bench logbook: list, show, label, export, rebuild, analyse again and remove runs.")
app.add_typer(log_app, name="log")


RUN = typer.Argument(..., help="Run id, a unique start of it, 'last' or 'last-N'.")


@contextlib.contextmanager
def book_of(bench: Path | None, write: bool = False):
    """The bench's logbook for a log command (:func:`benchkit.logbook.open_bench`);
    a BenchkitError inside the block is one line and exit 1."""
    from benchkit.logbook import open_bench

    with one_line(), open_bench(bench, write) as book:
        yield book


@log_app.command("list")
@takes("tag command since until status last session bench json", "shown")
def log_list(o: dict) -> None:
    """List the logged runs, newest first, with their headline figures.

    Example: benchkit log list --tag bias=1.2A --command power
    """
    from benchkit import logbook
    from benchkit.session import read_session

    with book_of(o["bench"]) as book:
        session = read_session(book.root, o["session"])["id"] if o["session"] else None
        entries = book.entries(logbook.parse_tags(o["tag"]), o["command"], o["status"], o["since"], o["until"], o["last"],
                               session=session)
    if o["json"]:
        from benchkit.report.tables import dumps

        print(dumps({"kind": "runs", "schema_version": 1, "bench": str(book.root),
                     "runs": [logbook_text.entry_doc(e) for e in entries]}))
        return
    if not entries:
        err(f"no runs in {book.root} match")
        return
    for line in logbook_text.runs_lines(entries):
        answer(line)


@log_app.command("show")
@takes("bench json", "shown")
def log_show(run: str = typer.Argument(..., help="Run id, a unique start of it, 'last' or 'last-N'; or a session's id."),
             o: dict = None) -> None:
    """Show one run: when, what, with which device and calibration, its tags, note, figures, warnings and files; or a session and its runs.

    Example: benchkit log show last
    """
    from benchkit.session import SESSIONS, read_session

    with book_of(o["bench"]) as book:
        if (book.root / SESSIONS / run).is_dir():
            doc = read_session(book.root, run)
            _show_session(doc, book.entries(session=doc["id"]), o["json"])
            return
        entry = book.entry(run)
        record = book.read_record(entry.id)
    if o["json"]:
        from benchkit.report.tables import dumps

        print(dumps({**record, "status": entry.status, "folder": str(entry.folder)}))
        return
    for line in logbook_text.run_lines(entry, record, logbook_text.level_scale(_stored_doc(entry, record))):
        answer(line)


def _stored_doc(entry, record: dict) -> dict | None:
    """The result a run stored, or None (none yet, or unreadable: its
    levels then show in their stored units)."""
    from benchkit.jsonfile import load_json

    name = record.get("result_file")
    if not name:
        return None
    try:
        return load_json(entry.folder / name)
    except (OSError, ValueError):
        return None


def _show_session(doc: dict, entries, as_json: bool) -> None:
    from benchkit.report.session import session_lines

    if as_json:
        from benchkit.report.tables import dumps

        print(dumps({**doc, "runs": [logbook_text.entry_doc(e) for e in entries]}))
        return
    for line in session_lines(doc) + (["runs:"] + logbook_text.runs_lines(entries) if entries else []):
        answer(line)


@log_app.command("note")
@takes("append bench")
def log_note(run: str = RUN, text: str = typer.Argument(..., help="The note."), o: dict = None) -> None:
    """Set (or add to) a run's note.

    Example: benchkit log note last "swapped the 2200 uF output capacitor"
    """
    with book_of(o["bench"], write=True) as book:
        record = book.set_note(book.entry(run).id, text, o["append"])
    err(f"run {record['id']}: note: {record['note']}")


@log_app.command("tag")
@takes("remove bench")
def log_tag(run: str = RUN, tags: List[str] = typer.Argument(None, help="Tags key=value to set."), o: dict = None) -> None:
    """Set or remove a run's tags.

    Example: benchkit log tag last bias=1.2A rail=24V
    """
    from benchkit import logbook

    with book_of(o["bench"], write=True) as book:
        if not tags and not o["remove"]:
            raise BenchkitError("give tags key=value to set, or --remove KEY")
        record = book.set_tags(book.entry(run).id, logbook.parse_tags(tags or []), o["remove"])
    err(f"run {record['id']}: tags: " + (" ".join(f"{k}={v}" for k, v in record["tags"].items()) or "none"))


@log_app.command("export")
@takes("file bench", helps=dict(file="Write the CSV to this file (default: stdout)."))
def log_export(o: dict) -> None:
    """Export the catalog as CSV: a row a run, its tags and headline figures in columns.

    Example: benchkit log export --file logbook.csv
    """
    from benchkit.report.tables import write_catalog_csv, write_catalog_file

    with book_of(o["bench"]) as book:
        entries = book.entries()
        if o["file"] is None:
            write_catalog_csv(entries, sys.stdout)
        else:
            write_catalog_file(entries, o["file"])
            err(f"{units.count(len(entries), 'run')}: {o['file']}")


@log_app.command("rebuild")
@takes("bench")
def log_rebuild(o: dict) -> None:
    """Index every run folder afresh, when the catalog is lost or damaged (a damaged one is moved aside first).

    Example: benchkit log rebuild --bench ~/bench/b2
    """
    from benchkit import logbook

    root = logbook.resolve_bench(o["bench"])
    with one_line():
        count, skipped = logbook.rebuild_bench(root, err)
    for why in skipped:
        err(f"warning: skipped: {why}")
    err(f"indexed {units.count(count, 'run')} from {root / logbook.RUNS}")


@log_app.command("reanalyse")
@takes("bench json")
def log_reanalyse(run: str = RUN, o: dict = None) -> None:
    """Analyse a run again from its stored captures with the current analysis, and write its reports anew.

    A tone, sweep or power run killed while it played is recovered from
    its partial recording first (the steps recorded whole).

    Example: benchkit log reanalyse 20261202-101500-tone-bias-1.2A
    """
    from benchkit import logbook
    from benchkit.bench import complete
    from benchkit.kinds import reanalyse

    with book_of(o["bench"], write=True) as book:
        entry = book.entry(run)
        with book.resume(entry.id) as taken:
            doc, written = reanalyse(taken.folder, taken.record, say=err)
            taken.record["reanalysed"] = logbook.now_iso()
            show(complete(taken, doc, written, err, played=False), o["json"])
        done = book.entry(entry.id)
    err(f"run {done.id}: {done.status}; {logbook_text.headline_text(done)}")


@log_app.command("file")
@takes("channel fundamental bandwidth averages volts_per_fs load calibration ref_channel ref_freq smooth as_kind level "
       "rail json", "figures", "filing", level=None,
       helps=dict(level="A capture of one tone: the drive it was made at, e.g. -20dBFS (its step pairs with measured "
                       "tone runs at that drive).",
                  stage="The stage the captures are of: a JSON object or 'key: value' lines (the bench's remembered "
                        "one is left as it is).",
                  stage_info="A field of the captures' stage, key=value (repeatable), e.g. name=B-2.",
                  volts_per_fs="Volts peak at the stage per full scale of the capture (overrides its sidecar)."))
def log_file(files: List[Path] = typer.Argument(..., help="WAV or FLAC captures made elsewhere.", show_default=False),
             o: dict = None) -> None:
    """File captures made elsewhere in the logbook: each analysed as 'analyze' does, filed as a run of its kind.

    Each capture becomes a run of its own (device "file"): a copy of it
    with its sidecar, its result and reports, its stage, tags and note,
    and where it came from (its path and SHA-256). It then lists,
    compares and analyses again like a measured run. A capture that
    cannot be read or analysed is refused and nothing of it is filed.

    Example: benchkit log file amp-997Hz.wav --volts-per-fs 20.36 --level -20dBFS --load 8 --stage-info name=B-2 --tag bias=1.2A
    """
    from benchkit.filing import file_captures

    with one_line():
        filed, refused = file_captures(list(files), o, err, lambda text: answer(text, o["json"]))
    for path, why in refused:
        err(f"benchkit: error: {why}" if str(path) in why else f"benchkit: error: {path}: {why}")
    if o["json"]:
        from benchkit.report.tables import dumps

        docs = [{**f.doc, "run": {"id": f.run.id, "folder": str(f.run.folder), "status": f.status}} for f in filed]
        print(dumps(docs[0] if len(docs) == 1 else docs))
    if refused:
        raise typer.Exit(EXIT_BAD_INPUT)


@log_app.command("remove")
@takes("bench")
def log_remove(runs: List[str] = typer.Argument(..., help="Runs to move to the trash folder."), o: dict = None) -> None:
    """Move runs to the bench's trash/ folder and out of the catalog (nothing is deleted).

    Example: benchkit log remove 20261202-101500-tone
    """
    with book_of(o["bench"], write=True) as book:
        for ref in runs:
            dest = book.remove(book.entry(ref).id)
            err(f"moved {ref} to {dest}")


@app.command()
@takes("last command anyway out bench json", "shown",
       helps=dict(out="Comparison folder (default: comparisons/<time>-<runs> in the bench folder)."))
def compare(runs: List[str] = typer.Argument(None, help="Runs to compare (ids, unique starts, 'last', 'last-N'); the "
                                             "first is the baseline."), o: dict = None) -> None:
    """Compare logged runs of one kind: overlay plots, a delta table with units and direction, a summary.

    Tone runs pair their steps by drive level and overlay THD+N against
    power and the spectra; power runs compare the power at each limit;
    sweeps the response; drift logs the settled value and rate. Runs
    measured under different conditions are refused unless --anyway.

    Two or more sessions (a plan's, by id or a unique start of it; 'last'
    names runs here) compare whole: their measurements pair by kind and
    options, in one table across every kind, and an HTML report of them is
    written beside it.

    Example: benchkit compare --last 2 --command power
    """
    from benchkit.compare_runs import chosen_runs, compare_runs
    from benchkit.session import is_session

    with book_of(o["bench"], write=True) as book:
        if runs and len(runs) > 1 and all(is_session(book.root, r) and not r.startswith("last") for r in runs):
            from benchkit.session_report import report_sessions

            path, compared = report_sessions(book, list(runs), o["anyway"], None,
                                             lambda text: answer(text, o["json"]), out=o["out"])
            err(f"report: {path}")
            if o["json"]:
                from benchkit.report.tables import dumps

                print(dumps({**compared.to_dict(), "folder": str(compared.folder), "report": str(path)}))
            return
        refs = chosen_runs(book, list(runs or []), o["last"], o["command"])
        report = compare_runs(book, refs, anyway=o["anyway"], out=o["out"])
    answer(report.text, o["json"])
    for path in report.files:
        err(f"  wrote        {path}")
    if o["json"]:
        from benchkit.report.tables import dumps

        print(dumps({**report.comparison.to_dict(), "run_ids": [e.id for e in report.entries],
                     "folder": str(report.folder)}))
