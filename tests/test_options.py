"""One option vocabulary: every option of every command is in
docs/options.md once, with the commands that take it; old names work for
one version with a notice.

Plumbing only: the command line's vocabulary against its own document;
no measured figure is checked here, so no outside source is named."""

from __future__ import annotations

import json
import re
from pathlib import Path

import pytest
from typer.main import get_command

from benchkit.cli import app
from benchkit.options.vocabulary import command_of, modernise, RENAMED, RENAMED_VALUES

from conftest import run_cli

DOC = Path(__file__).resolve().parents[1] / "docs" / "options.md"


def _options() -> dict[str, set[str]]:
    """Every long option, and the commands that take it."""
    found: dict[str, set[str]] = {}

    def walk(c, path=""):
        for name, sub in (getattr(c, "commands", None) or {}).items():
            walk(sub, f"{path} {name}".strip())
        if not getattr(c, "commands", None):
            for p in c.params:
                if getattr(p, "param_type_name", "") == "option":
                    for o in p.opts:
                        if o.startswith("--"):
                            found.setdefault(o, set()).add(path)

    walk(get_command(app))
    return found


def _table(title: str) -> list[list[str]]:
    text = DOC.read_text().split(title, 1)[1].split("\n\n", 1)[0]
    return [[c.strip() for c in line.strip("|").split("|")] for line in text.splitlines()[2:] if line.startswith("|")]


def test_every_option_is_in_the_vocabulary_with_its_commands():
    documented = {o.strip("`"): set(cmds.split(", ")) for o, _meaning, cmds in _table("| option | meaning | commands |")}
    assert documented == _options()


def test_an_option_is_one_thing():
    # the names a review found meaning two things: each now means one
    opts = _options()
    assert "--gain" not in [o for o, c in opts.items() if "analyze" in c]  # analyze --as gain
    for gone in ("--resource", "--dc-resource", "--current-resource", "--supply-meter", "--source", "--length", "--step"):
        assert gone not in opts, gone
    assert opts["--limit"] == {"analyze", "log file", "power", "power-bandwidth"}  # percent of distortion, not a row count
    assert opts["--out"] == {"analyze", "compare", "demo"}  # a folder; a file is --file


def test_the_old_names_are_listed_and_lead_somewhere():
    opts = _options()
    rows = {(c, o.strip("`")): n.strip("`") for c, o, n in _table("| command | old | new |")}
    assert {k: v for k, v in rows.items() if " " not in k[1]} == {k: " ".join(v) for k, v in RENAMED.items()}
    assert {(c, *o.split()) : n.split()[1] for (c, o), n in rows.items() if " " in o} == RENAMED_VALUES
    for (command, _old), new in RENAMED.items():
        assert command in opts[new[0]], (command, new)


def test_an_old_name_is_rewritten_once_with_a_notice():
    said = []
    assert command_of(["log", "list", "--last", "2"]) == "log list" and command_of(["analyze", "a.wav", "--gain"]) == "analyze"
    got = modernise(["drift", "--source", "interface", "--resource=X", "--resource", "Y"], said.append)
    assert got == ["drift", "--dc-source", "input", "--meter=X", "--meter", "Y"]
    # --source, its old value, --resource (once for both)
    assert len(said) == 3 and all(s.startswith("benchkit: note: drift --") for s in said)
    assert modernise(["tone", "--gain", "2"], said.append) == ["tone", "--gain", "2"] and len(said) == 3


def test_an_old_name_still_works_on_the_command_line(tmp_path):
    assert run_cli("tone", "--level", "-30dBFS", "--bench", str(tmp_path)).returncode == 0
    new = run_cli("log", "list", "--last", "1", "--bench", str(tmp_path))
    old = run_cli("log", "list", "--limit", "1", "--bench", str(tmp_path))
    assert new.returncode == old.returncode == 0, old.stderr
    assert old.stdout == new.stdout
    assert re.search(r"note: log list --limit is now --last", old.stderr) and "note:" not in new.stderr


@pytest.mark.parametrize("args", [("analyze", "{wav}", "--noise"), ("analyze", "{wav}", "--as", "noise")])
def test_analyze_as_a_kind(args, tmp_path):
    import numpy as np
    import soundfile

    wav = tmp_path / "hiss.wav"
    soundfile.write(wav, np.random.default_rng(3).normal(0.0, 1e-3, 48000), 48000, subtype="FLOAT")
    res = run_cli(*(str(wav) if a == "{wav}" else a for a in args), "--json")
    assert res.returncode == 0, res.stderr
    assert '"kind": "noise"' in res.stdout
    assert ("note: analyze --noise is now --as noise" in res.stderr) == ("--noise" in args)


def test_every_help_example_uses_the_current_names():
    def walk(c):
        for sub in (getattr(c, "commands", None) or {}).values():
            yield from walk(sub)
        yield c

    examples = [line.split("Example:", 1)[1].split()[1:] for c in walk(get_command(app))
                for line in (c.help or "").splitlines() if "Example:" in line]
    assert len(examples) >= 15
    for words in examples:
        said = []
        assert modernise(words, said.append) == words and not said, words


def test_every_option_comes_from_the_one_table():
    # benchkit.options.OPTIONS declares each option once; every command builds its options from it
    from benchkit.options import OPTIONS

    assert set(_options()) - {"--version"} == {o.flag for o in OPTIONS.values()}
    assert len({o.flag for o in OPTIONS.values()}) == len(OPTIONS)  # one entry an option


def test_every_measuring_kind_names_options_of_the_table():
    # what a kind takes on a bench (its command's options, and a plan's) is named in the vocabulary
    from benchkit import kinds
    from benchkit.options import defaults, OPTIONS

    for kind in kinds.all_kinds():
        if kind.live is not None:
            taken = set(defaults(kind.live.options, *kind.live.groups)) | set(kind.live.defaults)  # (unknown: KeyError)
            assert taken <= set(OPTIONS) and set(kind.live.helps) <= taken, kind.name
            streams = set() if kind.live.over_time else {"rate"}  # (a DC log reads a meter or the virtual midpoint)
            assert {"json", "bench", "device"} | streams <= taken, kind.name


def test_a_one_value_option_given_twice_says_which_is_used(tmp_path):
    # the last of two is used (as is usual: a script overrides what it gave), and said, not silently
    res = run_cli("tone", "--load", "8", "--load=4", "--bench", str(tmp_path), "--json")
    assert res.returncode == 0 and "--load takes one value and is given more than once" in res.stderr
    assert json.loads(res.stdout)["conditions"]["load_ohms"] == 4.0
    # an option that repeats, repeats, without a note
    res = run_cli("tone", "--level", "-30dBFS", "--level", "-24dBFS", "--bench", str(tmp_path))
    assert res.returncode == 0 and "more than once" not in res.stderr


def test_an_option_given_by_its_long_and_short_name_counts_as_given_twice():
    from typer.main import get_command

    from benchkit.cli import app
    from benchkit.options.vocabulary import given_twice

    assert given_twice(get_command(app), ["analyze", "x.wav", "-c", "1", "--channel=2"]) == ["--channel"]
    assert given_twice(get_command(app), ["analyze", "x.wav", "-c2"]) == []
