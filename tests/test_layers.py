"""Plumbing: the layering of DEVELOPERS.md holds. No outside source is
needed: these are rules of this codebase, not measurements (REFERENCES.md
lists the sources the measurement tests use)."""

from __future__ import annotations

import ast
import re
from pathlib import Path

import pytest

from conftest import run_cli

PKG = Path(__file__).resolve().parents[1] / "benchkit"


def _imports(path: Path) -> set[str]:
    tree = ast.parse(path.read_text())
    names = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names.update(a.name for a in node.names)
        elif isinstance(node, ast.ImportFrom) and node.module:
            names.add(node.module)
    return names


@pytest.mark.parametrize(
    "folder, forbidden",
    [
        ("analysis", ("benchkit.capture", "benchkit.report", "benchkit.cli", "benchkit.recordings", "benchkit.record",
                      "benchkit.kinds")),
        ("capture", ("benchkit.report", "benchkit.cli", "benchkit.kinds")),
        ("report", ("benchkit.capture", "benchkit.cli", "benchkit.kinds", "benchkit.record", "benchkit.logbook")),
        ("kinds", ("benchkit.cli",)),
    ],
)
def test_layers_do_not_reach_up(folder, forbidden):
    for path in (PKG / folder).glob("*.py"):
        bad = {m for m in _imports(path) if any(m == f or m.startswith(f + ".") for f in forbidden)}
        assert not bad, f"{path.name} imports {bad}"


def test_the_logbook_is_storage_only():
    # the catalog and the run folders: no capture, no analysis, no reports, no CLI
    bad = {m for m in _imports(PKG / "logbook.py")
           if m.startswith(("benchkit.capture", "benchkit.analysis", "benchkit.report", "benchkit.cli", "benchkit.kinds"))}
    assert not bad


def test_sounddevice_only_lazily():
    for path in PKG.rglob("*.py"):
        if path.name != "portaudio.py":
            assert "sounddevice" not in _imports(path), path


def test_pyvisa_is_an_optional_extra():
    # only the meter source imports it, inside the class that needs it
    for path in PKG.rglob("*.py"):
        names = _imports(path)
        if path.name != "meters.py":
            assert not any(n.startswith("pyvisa") for n in names), path
    top = ast.parse((PKG / "meters.py").read_text())
    assert not any(isinstance(n, ast.Import) and any(a.name.startswith("pyvisa") for a in n.names) for n in top.body)


@pytest.mark.parametrize("command", ["analyze", "tone", "sweep", "power", "watch", "noise", "gain", "budget", "drift", "calibrate", "pad",
                                     "demo", "models", "compare", "log list", "log show", "log note", "log tag",
                                     "log export", "log rebuild", "log reanalyse", "log remove"])
def test_every_command_has_help_with_an_example(command):
    res = run_cli(*command.split(), "--help")
    assert res.returncode == 0 and "Example: benchkit" in res.stdout


def test_missing_portaudio_is_one_clear_line(monkeypatch):
    # without the PortAudio library, sounddevice fails to import with OSError;
    # real-device commands must say which system package to install
    import builtins

    from benchkit.capture import portaudio
    from benchkit.errors import BenchkitError

    real_import = builtins.__import__

    def fake(name, *args, **kwargs):
        if name == "sounddevice":
            raise OSError("PortAudio library not found")
        return real_import(name, *args, **kwargs)

    monkeypatch.setattr(builtins, "__import__", fake)
    with pytest.raises(BenchkitError, match="libportaudio2"):
        portaudio.list_devices()


def test_every_kind_is_one_module_named_as_it_is():
    # a kind's module bears its name, and the registry finds it without being told
    import re

    from benchkit import kinds

    found = {k.name for k in kinds.all_kinds()}
    # (a hyphen in a kind's name is an underscore in its module's)
    assert found == set(kinds.names()) == {p.stem.replace("_", "-") for p in (PKG / "kinds").glob("*.py") if p.stem != "__init__"}
    assert all(callable(k.reanalyse) for k in kinds.all_kinds())
    # a kind's run is reported by the kind (the live readout shows its own)
    assert all(callable(k.summary) and callable(k.reports) for k in kinds.all_kinds() if k.name != "watch")
    # every kind that measures on a bench is a command of its name, run the one way (benchkit.bench.measure) ...
    measuring = {k.name for k in kinds.all_kinds() if k.live is not None}
    assert measuring >= {"tone", "sweep", "power", "imd", "noise", "gain", "zout", "crosstalk"}
    from typer.main import get_command

    from benchkit.cli import app

    assert measuring <= set(get_command(app).commands)
    # ... and a run filed another way (a watch, a drift log, zout from two runs) is filed under a kind's name
    filed = set(re.findall(r'start_run\(book, labels, "(\w+)"', "".join(p.read_text() for p in PKG.rglob("*.py"))))
    assert filed and filed <= found


def test_the_registry_loads_no_plotting_and_no_cli():
    import subprocess
    import sys

    code = ("import sys; from benchkit import kinds; kinds.all_kinds(); "
            "print(sorted(m for m in ('matplotlib', 'typer', 'sounddevice') if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.strip() == "[]"


def test_the_command_line_starts_without_scipy_or_plotting():
    # every command is declared by its kind, so the command line loads every kind; none of them
    # may load scipy or matplotlib on import (they take most of a second: benchkit --help would wait)
    import subprocess
    import sys

    code = ("import sys; import benchkit.cli; "
            "print(sorted(m for m in ('matplotlib', 'scipy.signal', 'scipy.fft', 'scipy.optimize', 'sounddevice') "
            "if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.strip() == "[]"


def test_commands_ask_a_backend_what_it_can_do_not_its_name():
    # capabilities (capture.Capabilities), never `backend.name == "virtual"`
    for path in PKG.rglob("*.py"):
        if path.parent.name != "capture":
            assert not re.search(r"\.name\s*[!=]=\s*[\"']virtual", path.read_text()), path
