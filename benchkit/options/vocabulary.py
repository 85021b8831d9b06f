"""Old option names, kept for one version (docs/options.md lists both).

An option name means one thing, in one unit, in every command; where an
older name meant something else elsewhere, it was renamed. The old name
still works for one version: the command line is rewritten before it is
parsed, with a one-line notice on stderr. A one-value option given twice
is noted the same way (:func:`given_twice`).
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


def given_twice(root, args: list[str]) -> list[str]:
    """The options that take one value but are given more than once in
    ``args``, a command line of the click command ``root`` (the last is
    used, as is usual: a script may override what it gave; the caller says
    so, so that it is not silent). ``-c 1 --channel 2`` is twice."""
    command = root
    for word in command_of(args).split():
        command = getattr(command, "commands", {}).get(word)

    def given(flag: str, word: str) -> bool:
        if flag.startswith("--"):
            return word == flag or word.startswith(flag + "=")
        return word.startswith(flag) and not word.startswith("--")  # -c 2 or -c2

    single = [p.opts for p in getattr(command, "params", ()) if p.param_type_name == "option" and not p.multiple
              and not p.is_flag]
    return [max(opts, key=len) for opts in single if sum(given(f, a) for f in opts for a in args) > 1]
