"""What every command shares: the app, exit codes, options from the
vocabulary (:mod:`benchkit.options`), and how a measurement is run and
shown (:mod:`benchkit.bench` runs it)."""

from __future__ import annotations

import contextlib
import functools
import inspect
import os
import sys
from typing import List, Optional

import typer

from benchkit import __version__
from benchkit.errors import BenchkitError
from benchkit.report.screen import emit


app = typer.Typer(
    add_completion=True,
    no_args_is_help=True,
    pretty_exceptions_enable=False,
    help="benchkit: a calibrated bench analyzer for audio amplifier stages.",
)

#: exit codes (listed in the README): bad input or a failed check; a command line of unknown words;
#: a bug; a run that stopped before its last step (what it measured is filed); interrupted (Ctrl-C)
EXIT_BAD_INPUT = 1
EXIT_USAGE = 2
EXIT_INTERNAL = 3
EXIT_STOPPED_EARLY = 4
EXIT_INTERRUPTED = 130


def err(text: str) -> None:
    """Progress, notes and warnings: stderr (warnings in colour on a
    terminal, benchkit.report.screen)."""
    emit(text, sys.stderr)


def answer(text: str, as_json: bool = False) -> None:
    """What the user asked for (a list, a run shown, a comparison's table,
    a result's summary): stdout, unless ``--json`` holds stdout for the
    JSON document alone, when it goes with the notes to stderr. Its
    warning lines ("warning ...", "!! ...") go to stderr either way."""
    for line in text.split("\n"):
        warns = line.lstrip().startswith(("warning", "!! "))
        emit(line, sys.stderr if as_json or warns else sys.stdout)


def progress(items: list, what: str):
    """Iterate with a progress bar on stderr when there are several items
    and stderr is a terminal; plainly otherwise."""
    if len(items) < 2 or not sys.stderr.isatty():
        return items
    from rich.console import Console
    from rich.progress import track

    return track(items, description=what, console=Console(stderr=True), transient=True)


def _version(value: bool) -> None:
    if value:
        print(f"benchkit {__version__}")
        raise typer.Exit()


@app.callback()
def _root(
    version: bool = typer.Option(False, "--version", callback=_version, is_eager=True, help="Print the version."),
) -> None:
    """benchkit: a calibrated bench analyzer for audio amplifier stages.

    Safety: amplifier stages run from mains-derived supplies and get hot;
    an unpadded output can overload an interface input and a test tone can
    damage a speaker. Measure into a dummy load through a pad, and follow
    local codes and licensed practice for anything mains-powered.
    """


def takes(*groups, helps: dict | None = None, **own):
    """A decorator giving a command its options by their keys in the
    vocabulary (:data:`benchkit.options.OPTIONS`): ``own`` with this
    command's defaults (a list: the option repeats; ``...``: it must be
    given), then ``groups`` (strings of keys, or a group's name: "live",
    "figures", "judge", "filing") with their usual ones; ``helps`` words an option's help for this command.
    They reach the command as one dict, ``o``, by key, after its own
    arguments."""
    from benchkit.options import defaults

    chosen = {**own, **{k: v for k, v in defaults(*groups).items() if k not in own}}

    def decorate(command):
        mine = [p for p in inspect.signature(command, eval_str=True).parameters.values() if p.name != "o"]
        extra = [inspect.Parameter(key, inspect.Parameter.KEYWORD_ONLY, default=_option(key, default, (helps or {}).get(key)),
                                   annotation=_annotation(key, default)) for key, default in chosen.items()]

        @functools.wraps(command)
        def wrapper(**kwargs):
            o = {key: kwargs.pop(key) for key in chosen}
            if "levels_in" in o:  # one way of showing levels for all the command prints and draws
                from benchkit import units

                units.show_levels_in(o["levels_in"] or ("dBr" if o["dbr_ref"] else None), o["dbr_ref"])
            return command(o=o, **kwargs)

        wrapper.__signature__ = inspect.Signature([p.replace(kind=inspect.Parameter.KEYWORD_ONLY) for p in mine] + extra)
        wrapper.__annotations__ = {p.name: p.annotation for p in mine + extra}  # (types, not the module's text)
        del wrapper.__wrapped__  # typer must read the new signature, not the command's
        return wrapper

    return decorate


def _option(key: str, default, help_text: str | None):
    """The typer option of a vocabulary entry; a value its parser refuses is click's bad parameter."""
    from benchkit.options import OPTIONS
    from benchkit.options.values import BadValue

    opt = OPTIONS[key]
    more = {}
    if opt.parse is not None:
        def parse(value, read=opt.parse):
            try:
                return read(value)
            except BadValue as exc:
                raise typer.BadParameter(str(exc)) from None

        more["parser"] = parse
    if opt.kind is not bool:
        more["metavar"] = opt.flag.lstrip("-").upper()
    return typer.Option(default, opt.flag, *([opt.short] if opt.short else []), help=help_text or opt.help,
                        show_default=default is not ..., **more)


def _annotation(key: str, default):
    from benchkit.options import OPTIONS

    kind = OPTIONS[key].kind
    return List[str] if isinstance(default, list) else bool if kind is bool else Optional[kind]


@contextlib.contextmanager
def one_line():
    """Bad input as one line and exit 1."""
    try:
        yield
    except BenchkitError as exc:
        err(f"benchkit: error: {exc}")
        raise typer.Exit(EXIT_BAD_INPUT)


def ask(text: str) -> str:
    """Wait for the user at a wiring step (Enter), or for a value typed."""
    return typer.prompt(text, default="", show_default=False, err=True)


@contextlib.contextmanager
def live_run():
    """How a live command ends on bad input, Ctrl-C or a lost device: one
    line and a non-zero exit (the output has faded; the partial capture is
    on disk)."""
    from benchkit.capture.portaudio import CaptureInterrupted

    try:
        yield
    except CaptureInterrupted as exc:
        err(f"benchkit: stopped: {exc}")
        if exc.device_lost:
            leave()
        raise typer.Exit(EXIT_INTERRUPTED if str(exc).startswith("interrupted") else EXIT_BAD_INPUT)
    except BenchkitError as exc:
        err(f"benchkit: error: {exc}")
        raise typer.Exit(EXIT_BAD_INPUT)


def leave() -> None:
    """Leave at once after a lost device: PortAudio can hang for good
    shutting down a dead server's client, and everything is on disk."""
    sys.stdout.flush()
    sys.stderr.flush()
    os._exit(EXIT_BAD_INPUT)


def measured(kind: str, o: dict) -> None:
    """Measure a kind the one way (:func:`benchkit.bench.measure`) and show what was filed."""
    from benchkit import bench

    with live_run():
        filed = bench.measure(kind, o, err, ask, tell=lambda text: answer(text, o["json"]))
    show(filed, o["json"])


def show(filed, as_json: bool) -> None:
    """Print a filed run's result (``--json``) with its id and folder, and
    end as it ended: a lost device, Ctrl-C, or a capture that stopped
    before its last step (EXIT_STOPPED_EARLY: what it measured is filed,
    not all it was asked)."""
    if as_json:
        from benchkit.report.tables import dumps

        run = filed.run
        print(dumps({**filed.doc, "run": {"id": run.id, "folder": str(run.folder), "status": filed.status}}))
    if filed.early:
        err(f"benchkit: stopped early: {filed.early[0]}")
        raise typer.Exit(EXIT_STOPPED_EARLY)
    if filed.ended == "device-lost":
        leave()
    if filed.ended == "interrupted":
        raise typer.Exit(EXIT_INTERRUPTED)
