"""The benchkit command line: thin; parses, calls the layers, prints.

Human text goes to stderr, ``--json`` documents to stdout. Bad input ends
with a one-line reason and a non-zero exit, never a traceback (set
BENCHKIT_DEBUG=1 to see one). Each module registers its commands on the
one app (cli.common); this one runs it.
"""

from __future__ import annotations

import os
import sys

# one BLAS thread, set before numpy loads: the analysis's matrices are small
# (a sine fit's few columns), and idle BLAS threads spinning beside a live
# stream, or beside a second process, only take the CPU (the demo's two
# sessions side by side ran a fifth slower with them)
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

#: the modules that register their commands on the app, in the order --help lists them (so not sorted)
COMMAND_MODULES = ("analyze", "measure", "readout", "tools", "log", "plan")


def _load():
    """The app with every command registered (typer, the kinds, numpy: a
    few tenths of a second, which ``benchkit --version`` does without)."""
    import importlib

    from benchkit.cli.common import app

    for name in COMMAND_MODULES:
        importlib.import_module(f"benchkit.cli.{name}")
    return app


def __getattr__(name: str):
    if name == "app":
        return _load()
    raise AttributeError(f"module 'benchkit.cli' has no attribute {name!r}")


def main() -> None:
    """Console entry point: the typer app with a last guard against
    tracebacks. Bad input (a value out of its range, a file that cannot be
    used) is one line and exit 1; a command line of unknown words (an
    unknown option, a missing argument) one line and exit 2; a bug one line
    and exit 3. An option's old name (docs/options.md) is rewritten to
    its new one first, with a notice."""
    if sys.argv[1:] == ["--version"]:  # the one answer that needs no command loaded
        from benchkit import __version__

        print(f"benchkit {__version__}")
        return
    import typer
    from typer.main import get_command

    from benchkit.cli.common import err, EXIT_BAD_INPUT, EXIT_INTERNAL, EXIT_INTERRUPTED, EXIT_USAGE
    from benchkit.errors import BenchkitError
    from benchkit.options.vocabulary import given_twice, modernise

    app = _load()
    click = sys.modules[typer.BadParameter.__module__]  # (typer keeps its own copy of click: found where BadParameter lives)
    sys.argv[1:] = modernise(sys.argv[1:], err)
    for flag in given_twice(get_command(app), sys.argv[1:]):
        err(f"benchkit: note: {flag} takes one value and is given more than once: the last one given is used")
    try:
        code = app(standalone_mode=False)
    except click.UsageError as exc:
        text, ctx = " ".join(exc.format_message().split()), getattr(exc, "ctx", None)
        if text:  # (none when a group was given no command: its help is the answer)
            err(f"benchkit: error: {text}" + (f" (see '{ctx.command_path} --help')" if ctx is not None else ""))
        # a value out of its range is bad input like any other; a command line of unknown words is a usage error
        bad_value = isinstance(exc, typer.BadParameter) and not isinstance(exc, click.MissingParameter)
        sys.exit(EXIT_BAD_INPUT if bad_value else EXIT_USAGE)
    except BenchkitError as exc:
        err(f"benchkit: error: {exc}")
        sys.exit(EXIT_BAD_INPUT)
    except KeyboardInterrupt:
        err("benchkit: interrupted")
        sys.exit(EXIT_INTERRUPTED)
    except typer.Abort:  # a prompt that got no answer: stdin closed, or Ctrl-C at the prompt
        err("benchkit: error: no answer at the prompt (for scripted use, wire first and give --yes)")
        sys.exit(EXIT_BAD_INPUT)
    except Exception as exc:  # noqa: BLE001 - the one place that turns bugs into one line
        if os.environ.get("BENCHKIT_DEBUG"):
            raise
        err(f"benchkit: internal error: {type(exc).__name__}: {exc} (set BENCHKIT_DEBUG=1 for details)")
        sys.exit(EXIT_INTERNAL)
    sys.exit(code or 0)


if __name__ == "__main__":
    main()
