"""Plans and sessions (`benchkit plan ...`) and `benchkit report`: a
stage described once, measured as one session (:mod:`benchkit.session`),
sessions compared, one HTML report."""

from __future__ import annotations

from pathlib import Path
from typing import List

import typer

from benchkit.cli.common import answer, app, err, EXIT_BAD_INPUT, EXIT_INTERRUPTED, ask, leave, live_run, one_line, takes
from benchkit.errors import BenchkitError

plan_app = typer.Typer(no_args_is_help=True, help="Bench plans: a stage described once, measured as one session.")
app.add_typer(plan_app, name="plan")

PLAN = typer.Argument(..., help="The plan file (TOML; 'benchkit plan new' writes one).")
SESSION = typer.Argument(..., help="Session id, a unique start of it, 'last' or 'last-N'.")


def _changes(items: list[str]) -> dict:
    from benchkit.logbook import parse_tags

    return parse_tags(items, "--set is key=value, e.g. bias=1.2")


def _plan(path: Path, changes: list[str]):
    from benchkit.plan import read_plan

    return read_plan(path).with_stage(_changes(changes))


@plan_app.command("new")
def plan_new(file: Path = typer.Argument(..., help="The plan file to write.")) -> None:
    """Write a starter plan, commented: the demo stage's, to edit for your own.

    Example: benchkit plan new my-stage.toml
    """
    from benchkit.plan import DEMO_PLAN
    from benchkit.recordings import write_text_atomic

    from benchkit.options.values import out_file

    with one_line():
        if file.exists():
            raise BenchkitError(f"{file} exists: name another file (a plan is never overwritten)")
        try:
            out_file(file).parent.mkdir(parents=True, exist_ok=True)
            write_text_atomic(file, DEMO_PLAN.read_text(encoding="utf-8"))
        except OSError as exc:
            raise BenchkitError(f"cannot write {file}: {exc.strerror or exc}") from None
    err(f"wrote {file}: edit its [stage] and [bench], then 'benchkit plan check {file}' and 'benchkit plan run {file}'")


@plan_app.command("check")
@takes("set_stage json")
def plan_check(file: Path = PLAN, o: dict = None) -> None:
    """Read a plan and say what each step will measure, with what: nothing plays.

    Example: benchkit plan check my-stage.toml --set bias=1.2
    """
    from benchkit.report.session import plan_lines

    with one_line():
        plan = _plan(file, o["set_stage"])
    if o["json"]:
        from benchkit.report.tables import dumps

        print(dumps({"kind": "plan", "schema_version": 1, "stage": plan.stage, "tags": plan.session_tags(),
                     "steps": [{"kind": s.kind, "label": s.label, "line": s.line,
                                "options": {k: str(v) if isinstance(v, Path) else v for k, v in s.given.items()}}
                               for s in plan.steps]}))
        return
    for line in plan_lines(plan):
        answer(line)


def _ran(run) -> None:
    """Run a session (``run()``), and end as it ended."""
    from benchkit.session import SessionInterrupted

    with live_run():
        try:
            end = run()
        except SessionInterrupted as exc:  # (a BenchkitError, told apart first)
            err(f"benchkit: stopped: {exc}")
            if exc.device_lost:
                leave()
            raise typer.Exit(EXIT_INTERRUPTED)
    if not end.complete:
        raise typer.Exit(EXIT_BAD_INPUT)


@plan_app.command("run")
@takes("set_stage bench")
def plan_run(file: Path = PLAN, o: dict = None) -> None:
    """Measure a whole plan as one session: one pre-flight, every step filed with the session's id and tags.

    Ctrl-C fades the output to silence, keeps what was measured and marks
    the rest skipped; 'benchkit plan resume' measures what is left.

    Example: benchkit plan run my-stage.toml --set bias=1.2

    Safety: the pre-flight checks the highest drive of the plan against the
    pad, the rail and the input before anything plays; still start with a
    dummy load, never a speaker, and mind hot heat sinks and mains wiring
    (follow local codes and licensed practice).
    """
    from benchkit.logbook import resolve_bench
    from benchkit.session import run_session

    with one_line():
        plan = _plan(file, [])
    _ran(lambda: run_session(plan, resolve_bench(o["bench"]), err, ask, changes=_changes(o["set_stage"])))


@plan_app.command("resume")
@takes("bench")
def plan_resume(session: str = SESSION, o: dict = None) -> None:
    """Measure what an interrupted session left: its skipped, failed and interrupted steps, in the same session.

    Example: benchkit plan resume last
    """
    from benchkit.logbook import resolve_bench
    from benchkit.session import run_session

    _ran(lambda: run_session(None, resolve_bench(o["bench"]), err, ask, resume=session))


@plan_app.command("list")
@takes("bench json")
def plan_list(o: dict = None) -> None:
    """List the bench's sessions, newest first: their plan, tags, state and steps.

    Example: benchkit plan list
    """
    from benchkit.logbook import resolve_bench
    from benchkit.report.session import sessions_lines
    from benchkit.session import all_sessions

    found = all_sessions(resolve_bench(o["bench"]), err)
    if o["json"]:
        from benchkit.report.tables import dumps

        print(dumps({"kind": "sessions", "schema_version": 1, "sessions": found}))
        return
    for line in sessions_lines(found) if found else ():
        answer(line)
    if not found:
        err("no sessions in this bench ('benchkit plan run' makes one)")


@app.command()
@takes("anyway file bench", helps=dict(file="The HTML file (default: report.html in the session's or the comparison's folder)."))
def report(sessions: List[str] = typer.Argument(..., help="Sessions (ids, unique starts, 'last', 'last-N'); two or "
                                                          "more are compared, the first the baseline."),
           o: dict = None) -> None:
    """Write one self-contained HTML report of a session, or of sessions compared (the before/after table first).

    Images are embedded: it reads offline and prints to PDF from a browser.

    Example: benchkit report last-1 last
    """
    from benchkit.cli.log import book_of
    from benchkit.logbook import resolve_bench
    from benchkit.session import SESSIONS
    from benchkit.session_report import report_sessions

    with one_line():
        if not (resolve_bench(o["bench"]) / SESSIONS).is_dir():  # (not a logbook made in a wrong folder)
            raise BenchkitError(f"{resolve_bench(o['bench'])} holds no sessions ('benchkit plan run' makes them; "
                                "--bench names the bench folder)")
    with book_of(o["bench"], write=True) as book:
        path, _compared = report_sessions(book, sessions, o["anyway"], o["file"], err)
    err(f"report: {path}")
