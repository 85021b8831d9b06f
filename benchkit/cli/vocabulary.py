"""Old option names, kept for one version (docs/options.md lists both).

An option name means one thing, in one unit, in every command; where an
older name meant something else elsewhere, it was renamed. The old name
still works for one version: the command line is rewritten before it is
parsed, with a one-line notice on stderr.
"""

from __future__ import annotations

from typing import Callable

#: (command, old option) -> the new option's words
RENAMED: dict[tuple[str, str], tuple[str, ...]] = {
    ("analyze", "--gain"): ("--as", "gain"),
    ("analyze", "--noise"): ("--as", "noise"),
    ("analyze", "--power"): ("--as", "power"),
    ("calibrate", "--out"): ("--file",),
    ("log export", "--out"): ("--file",),
    ("log list", "--limit"): ("--last",),
    ("drift", "--resource"): ("--meter",),
    ("drift", "--current-resource"): ("--current-meter",),
    ("drift", "--source"): ("--dc-source",),
    ("watch", "--dc-resource"): ("--meter",),
    ("power", "--supply-meter"): ("--current-meter",),
    ("noise", "--length"): ("--duration",),
    ("sweep", "--length"): ("--duration",),
    ("imd", "--step"): ("--step-duration",),
}

#: (command, option, old value) -> the new value
RENAMED_VALUES: dict[tuple[str, str, str], str] = {
    ("drift", "--dc-source", "interface"): "input",
}

#: commands with commands of their own
_GROUPS = ("log",)


def command_of(args: list[str]) -> str:
    """The command a command line runs ("tone", "log list"), or ""."""
    words = []
    for a in args:  # the words before the first option
        if a.startswith("-"):
            break
        words.append(a)
    if not words:
        return ""
    return " ".join(words[:2]) if words[0] in _GROUPS and len(words) > 1 else words[0]


def modernise(args: list[str], say: Callable[[str], None]) -> list[str]:
    """``args`` with every old option name (and old value) replaced by the
    new one, each replacement said once."""
    command = command_of(args)
    out: list[str] = []
    told: set[str] = set()

    def tell(old: str, new: str) -> None:
        if old not in told:
            told.add(old)
            say(f"benchkit: note: {command} {old} is now {new}; the old name goes in the next version")

    for word in args:
        name, eq, value = word.partition("=")
        new = RENAMED.get((command, name)) if name.startswith("--") else None
        if new is not None:
            tell(name, " ".join(new))
            name, words = new[-1], list(new[:-1])
        else:
            words = []
        if eq and (command, name, value) in RENAMED_VALUES:
            tell(f"{name} {value}", f"{name} {RENAMED_VALUES[(command, name, value)]}")
            value = RENAMED_VALUES[(command, name, value)]
        elif not eq and out and (command, out[-1], word) in RENAMED_VALUES:
            tell(f"{out[-1]} {word}", f"{out[-1]} {RENAMED_VALUES[(command, out[-1], word)]}")
            name = RENAMED_VALUES[(command, out[-1], word)]
        out += [*words, name + eq + value]
    return out
