"""The live displays as a person sees them: the command runs in a real
pseudo-terminal (tmux, Debian's package), and the test reads the screen
tmux shows, not the bytes the program wrote.

Plumbing of what a person reads: no outside source applies; the values
asserted come from the run's own result file, which other tests check
against theirs.
"""

from __future__ import annotations

import json
import math
import shlex
import subprocess
import sys
import time
import uuid
from pathlib import Path

import pytest

from conftest import run_folders, system_program

DONE = "[benchkit exited"


class Terminal:
    """A tmux server of its own with one pane WIDTH x HEIGHT, running one
    command; the pane's screen (and what scrolled off it) read as text."""

    def __init__(self, tmux: str, width: int = 120, height: int = 50):
        self.tmux, self.socket = tmux, f"benchkit-test-{uuid.uuid4().hex[:8]}"
        self.width, self.height = width, height

    def _call(self, *args: str) -> str:
        return subprocess.run([self.tmux, "-L", self.socket, *args], check=True, capture_output=True, text=True).stdout

    def run(self, *argv: str, cwd: Path, env: str = "") -> None:
        command = env + " " + " ".join(shlex.quote(a) for a in (sys.executable, "-m", "benchkit", *argv))
        # the pane stays open after the command, showing how it exited
        self._call("new-session", "-d", "-x", str(self.width), "-y", str(self.height), "-c", str(cwd),
                   f"{command}; echo '{DONE}' $?; sleep 600")

    def press(self, *keys: str) -> None:
        """Keys typed into the pane, one at a time, as a person types them."""
        for key in keys:
            self._call("send-keys", "-l", key)

    def wait_for(self, text: str, hang_guard_s: float = 120.0) -> str:
        """The screen once it shows ``text`` (the guard only stops a hang)."""
        until = time.monotonic() + hang_guard_s
        while time.monotonic() < until:
            screen = self.screen()
            if text in screen:
                return screen
            time.sleep(0.1)
        raise AssertionError(f"the screen never showed {text!r}:\n" + self.screen())

    def screen(self, escapes: bool = False) -> str:
        """The screen's text (with ``escapes``: its colours as escape sequences too)."""
        return self._call("capture-pane", "-p", "-J", "-S", "-", *(["-e"] if escapes else []))

    def wait_done(self, hang_guard_s: float = 400.0) -> str:
        """The screen once the command has exited (it waits on the command,
        which waits on its stream; the guard only stops a hang)."""
        return self.wait_for(DONE, hang_guard_s)

    def close(self) -> None:
        subprocess.run([self.tmux, "-L", self.socket, "kill-server"], capture_output=True)


@pytest.fixture
def terminal():
    t = Terminal(system_program("tmux", "tmux", "a terminal multiplexer (for the screen tests)"))
    yield t
    t.close()


def _result(bench: Path) -> dict:
    (folder,) = run_folders(bench)
    record = json.loads((folder / "run.json").read_text())
    return json.loads((folder / record["result_file"]).read_text())


def test_a_power_run_shows_its_steps_live_on_a_terminal(terminal, tmp_path):
    # on a terminal the steps are a table redrawn in place (step, drive, output, power, THD+N, the next
    # limit), not a line a step; the top step's drive and THD+N are those the result file holds
    bench = tmp_path / "bench"
    terminal.run("power", "--load", "8", "--rail", "24", "--bias", "0.8", "--limit", "1", "--start", "-20",
                 "--bench", str(bench), cwd=tmp_path)
    screen = terminal.wait_done()
    assert f"{DONE} 0" in screen, screen
    header = next(line for line in screen.splitlines() if "drive (dBFS)" in line)
    assert header.split() == ["step", "drive", "(dBFS)", "output", "power", "THD+N", "(%)", "next", "limit"]
    assert "step  1  drive" not in screen  # the plain lines are for pipes
    top = _result(bench)["steps"][-1]  # (in rising drive)
    rows = [line.split() for line in screen.splitlines()]
    assert any(r[1:2] == [f"{top['drive_dbfs']:.2f}"] and f"{top['thdn_pct']:.4f}" in r for r in rows), (top, screen)
    assert "Ctrl-C fades out" in screen


def test_a_power_run_in_a_pipe_prints_a_line_a_step(tmp_path):
    # without a terminal: one plain line a step on stderr, as many as the result has steps, stdout untouched
    from conftest import run_cli

    bench = tmp_path / "bench"
    res = run_cli("power", "--load", "8", "--rail", "24", "--bias", "0.8", "--limit", "1", "--start", "-20",
                  "--bench", str(bench), "--json")
    assert res.returncode == 0, res.stderr
    lines = [line for line in res.stderr.splitlines() if line.startswith("step ") and " drive " in line]
    steps = json.loads(res.stdout)["steps"]
    assert len(lines) >= len(steps) and f"{steps[-1]['thdn_pct']:.4f} %" in res.stderr
    assert "drive (dBFS)" not in res.stderr


def test_watch_shows_its_table_on_a_terminal(terminal, tmp_path):
    # the watch's live table: a row a figure with now, min, max and the trend, and the keys it takes
    terminal.run("watch", "--duration", "3", "--level", "-20dBFS", "--bench", str(tmp_path / "bench"), cwd=tmp_path)
    screen = terminal.wait_done()
    assert f"{DONE} 0" in screen, screen
    header = next(line for line in screen.splitlines() if " now " in line)
    assert header.split() == ["figure", "now", "min", "max", "trend"]
    assert any(line.split()[:1] == ["THD+N"] for line in screen.splitlines()), screen
    assert "keys: h hold" in screen


def test_watch_keys_turn_the_virtual_bias_and_step_the_spectrum_averaging(terminal, tmp_path):
    # on the virtual bench + and - turn the simulated stage's bias: from 0.5 A its current limit
    # (I_bias x R_L = 4 V peak into 8 ohm, the model's circuit identity, docs/virtual-bench.md) cuts the
    # 5.6 V peak a -10 dBFS drive asks for; ten turns up (1.0 A: 8 V) clear it, and the THD+N falls by
    # tens of dB. The recorded watch keeps each turn; a steps the spectrum's averaging from 4 blocks to 16
    bench = tmp_path / "bench"
    terminal.run("watch", "--duration", "6", "--level", "-10dBFS", "--load", "8", "--sim-param", "bias=0.5",
                 "--record", "--bench", str(bench), cwd=tmp_path)
    before = terminal.wait_for("readings.")
    assert "the power mean of" in before and "bias 0.50 A" in before
    terminal.press(*"+" * 10, "a")
    after = terminal.wait_for("bias 1.00 A")
    screen = terminal.wait_done()
    assert f"{DONE} 0" in screen, screen
    assert "the power mean of 16 blocks" in screen
    marks = next(line for line in screen.splitlines() if " f     2" in line)
    assert "3" in marks.split("f", 1)[1]  # the harmonics marked beside the fundamental
    doc = _result(bench)
    turns = doc["bias_turns"]
    assert [t["bias_a"] for t in turns] == pytest.approx([0.5 + 0.05 * k for k in range(1, 11)])
    column = doc["figures"]  # the first reading's THD+N (clipped by the current limit) and the last's
    assert column["thdn_db"]["first"] > -25.0 and column["thdn_db"]["last"] < -50.0, (column, after)


@pytest.mark.parametrize("no_color", [False, True])
def test_warnings_stand_out_in_colour_on_a_terminal_and_no_color_turns_it_off(terminal, tmp_path, no_color):
    # no-color.org: NO_COLOR set (to anything) means no colour; the words are the same either way
    terminal.run("tone", "--level", "-20dBFS", "--bench", str(tmp_path / "bench"), cwd=tmp_path,
                 env="NO_COLOR=1" if no_color else "")
    terminal.wait_done()
    screen = terminal.screen(escapes=True)
    warning = next(line for line in screen.splitlines() if "no load given" in line)
    assert ("\x1b[" in warning) is not no_color, repr(warning)
    table = next(line for line in screen.splitlines() if "drive (dBFS)" in line)
    assert "\x1b[" not in table.replace("\x1b[0m", "") or not no_color


def test_a_tables_decimal_points_line_up_under_units_in_its_headers():
    from benchkit.report.screen import Column, table_text
    from benchkit.units import in_one_unit

    unit, cells = in_one_unit([0.447, 1.414, 4.46, None], "Vrms")
    assert (unit, cells) == ("Vrms", ["0.447", "1.414", "4.460", "-"])
    assert in_one_unit([347e-6, 90e-6], "Vrms") == ("uVrms", ["347.0", "90.0"])
    assert in_one_unit([0.07811, 20.9], "%") == ("%", ["0.07811", "20.90000"])
    text = table_text([Column(f"level ({unit})"), Column("H2 (dBc)"), Column("note", "left")],
                      [[cells[0], "-79.6", ""], [cells[1], "(-107.3)", "x"], [cells[2], "-50.93", ""], [cells[3], "-", ""]])
    lines = text.splitlines()
    assert lines[0].split() == ["level", "(Vrms)", "H2", "(dBc)", "note"]
    rows = list(zip(lines[1:4], cells[:3], ["-79.6", "(-107.3)", "-50.93"]))

    def point(line: str, cell: str, after: int = 0) -> int:
        at = line.index(cell, after)
        return at + cell.index(".")

    assert len({point(line, level) for line, level, _ in rows}) == 1, text
    assert len({point(line, h2, point(line, level) + 4) for line, level, h2 in rows}) == 1, text


@pytest.mark.parametrize("choice, header, convert", [
    (("--levels-in", "dBu"), "level (dBu)", lambda v: 20 * math.log10(v / math.sqrt(0.6))),
    (("--dbr-ref", "2Vrms"), "level (dBr)", lambda v: 20 * math.log10(v / 2.0)),
])
def test_one_level_unit_in_the_tone_table_the_watch_line_and_the_power_steps(tmp_path, choice, header, convert):
    # dBu re sqrt(0.6) V, dBr re the level given (common practice, from memory): the tone table's level column and
    # the watch's line show the level the result holds in volts, converted; a power run's steps alike
    from conftest import run_cli

    tone = run_cli("tone", "--level", "-30dBFS", "--level", "-20dBFS", *choice, "--bench", str(tmp_path / "b"), "--json")
    assert tone.returncode == 0, tone.stderr
    vrms = [s["fundamental_vrms"] for s in json.loads(tone.stdout)["steps"]]
    table = tone.stderr.splitlines()
    at = next(i for i, line in enumerate(table) if header in line)
    shown = [float(line.split()[1]) for line in table[at + 1: at + 3]]
    assert shown == pytest.approx([convert(v) for v in vrms], abs=0.006)
    if choice[0] != "--levels-in":
        return  # (the live displays once: they show a level the one way whatever the unit)
    watch = run_cli("watch", "--plain", "--duration", "1", "--level", "-20dBFS", *choice)
    assert watch.returncode == 0, watch.stderr
    first = watch.stdout.splitlines()[0].split()
    level = float(first[first.index("level") + 1])
    volts = float(first[first.index("Vrms") - 1])
    assert level == pytest.approx(convert(volts), abs=0.01)
    power = run_cli("power", "--load", "8", "--rail", "24", "--bias", "0.8", "--limit", "1", "--start", "-12", *choice)
    assert power.returncode == 0, power.stderr
    unit = header.split("(")[1].rstrip(")")
    assert sum(f" {unit}  " in line for line in power.stderr.splitlines() if line.startswith("step ")) >= 3


def test_a_measurement_shows_how_long_it_has_been_measuring_on_a_terminal(terminal, tmp_path):
    # anything longer than a second says on the terminal what it is measuring, redrawn in place, and is left
    # as "measured ... in" when it ends; it comes before the summary, which the run's result file matches
    terminal.run("sweep", "--duration", "3", "--bench", str(tmp_path / "bench"), cwd=tmp_path)
    screen = terminal.wait_done()
    assert f"{DONE} 0" in screen, screen
    lines = screen.splitlines()
    done = next(i for i, line in enumerate(lines) if line.startswith("measured sweep in "))
    summary = next(i for i, line in enumerate(lines) if line.startswith("sweep response"))
    assert done < summary and not any("measuring sweep" in line for line in lines[done:])
    ripple = _result(tmp_path / "bench")["ripple_db"]
    assert f"ripple       {ripple:.2f} dB" in screen


@pytest.fixture
def shown_in():
    """Levels shown in a unit for one test, then back to each screen's own way."""
    from benchkit import units

    yield units.show_levels_in
    units.show_levels_in(None)


def test_the_gain_and_power_bandwidth_summaries_show_levels_in_the_unit_chosen(shown_in):
    # dBu = 20 log10(Vrms / 0.7746 V) (0 dBu = sqrt(0.6) V); without --levels-in the screens are as they were
    from benchkit.report.gain import gain_summary
    from benchkit.report.power_bandwidth import bandwidth_summary

    gain = {"gain_vv": 10.0, "gain_db": 20.0, "frequency_hz": 997.0, "phase_deg": 0.5, "inverting": False,
            "vin_vrms": 0.04472, "input_source": "reference-channel", "vout_vrms": 0.4472, "load_ohms": 8.0}
    band = {"points": [{"frequency_hz": f, "power_w": v * v / 8, "power_u_w": 0.08, "vrms": v, "reached": True}
                       for f, v in ((20.0, 4.63), (1000.0, 4.68))],
            "limit_pct": 1.0, "limit_metric": "thdn", "reference_power_w": None, "warnings": []}
    assert "dBu" not in gain_summary(gain) and "level (Vrms)" in bandwidth_summary(band)
    shown_in("dBu")
    text = gain_summary(gain)
    for v in (0.04472, 0.4472):
        assert f"({20 * math.log10(v / 0.7746):+.2f} dBu)" in text
    table = bandwidth_summary(band).splitlines()
    assert "level (dBu)" in table[0] and "(W)" in table[0]  # the power stays a power
    assert [float(line.split()[-1]) for line in table[1:3]] == pytest.approx(
        [20 * math.log10(v / 0.7746) for v in (4.63, 4.68)], abs=0.006)
