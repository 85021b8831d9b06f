"""The measuring commands: one for every kind that measures on a bench,
with the options and help the kind declares (its ``ON_BENCH``); the kind
measures, the one way (:func:`benchkit.bench.measure`)."""

from __future__ import annotations

from benchkit import kinds
from benchkit.cli.common import app, measured, takes

#: the order --help lists them in (a kind not named here comes after)
ORDER = ("tone", "noise", "gain", "imd", "zout", "crosstalk", "sweep", "power")


def _command(kind):
    live = kind.live

    @takes(live.options, *live.groups, "shown", helps=live.helps, **live.defaults)
    def command(o: dict) -> None:
        measured(kind.name, o)

    command.__doc__ = live.about
    return command


for _kind in sorted((k for k in kinds.all_kinds() if k.live is not None and not k.live.over_time),
                    key=lambda k: (ORDER.index(k.name) if k.name in ORDER else len(ORDER), k.name)):
    app.command(_kind.name)(_command(_kind))
