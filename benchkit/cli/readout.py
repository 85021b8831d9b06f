"""The commands that read over time: watch (live) and drift (a DC log)."""

from __future__ import annotations

import sys

import typer

from benchkit.cli.common import answer, app, err, EXIT_BAD_INPUT, EXIT_INTERRUPTED, EXIT_STOPPED_EARLY, live_run, show, takes


@app.command()
@takes("freq level load bandwidth duration plain json_lines record record_audio dc_source meter ref_channel", "live",
       "filing", "shown", helps=dict(duration="Stop after this many seconds (default: until q or Ctrl-C)."))
def watch(o: dict) -> None:
    """Play a steady tone and show its figures live while you adjust the stage.

    Ten times a second: level (V and W with a scale and --load), THD+N,
    THD, H2, H3, noise, the residual's level and, with --dc-source, DC;
    each with its minimum, maximum and trend since the start; beside them
    the spectrum, averaged over the last 4 blocks, the harmonics marked.
    Keys: h holds the display, r resets min/max, s shows or hides the
    spectrum, a steps its averaging (1, 4, 16, 64 blocks), q stops; on the
    virtual bench + and - turn the simulated stage's bias by 50 mA. Marks
    a clipped input or a lost tone.

    Example: benchkit watch --level -20dBFS --load 8 --sim-param bias=1.2 --record --tag trim=R7

    Safety: the tone ramps in from silence and fades out on q, Ctrl-C or
    any error; the drive cap holds; the watch stops if the input clips.
    Adjust a live stage with insulated tools, one hand, and mind hot parts
    and the supply's stored charge.
    """
    from benchkit.kinds.watch import watch as run_watch

    mode = "json" if o["json_lines"] else "plain" if o["plain"] or not sys.stdout.isatty() else "live"
    with live_run():
        end = run_watch(o, mode, err)
    if end.clipped or end.interrupted:
        raise typer.Exit(EXIT_STOPPED_EARLY if end.clipped else EXIT_INTERRUPTED)


from benchkit.kinds.drift import ON_BENCH as _DRIFT  # noqa: E402


@app.command()
@takes(_DRIFT.options, *_DRIFT.groups, helps=_DRIFT.helps, **_DRIFT.defaults)
def drift(o: dict) -> None:
    from benchkit.kinds.drift import log

    with live_run():
        filed, end = log(o, err, lambda text: answer(text, o["json"]))
    show(filed, o["json"])
    if end.how not in ("duration", "settled"):
        raise typer.Exit(EXIT_INTERRUPTED if end.how == "interrupted" else EXIT_BAD_INPUT)


drift.__doc__ = _DRIFT.about
