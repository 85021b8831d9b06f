"""Bench plans, sessions, whole-session comparisons and the HTML report.

The figures a session files are checked against the class-A budget (a
handbook formula, from memory: a constant-current pull-up of I into R
swings I x R peak, and a sine of peak V gives V^2 / 2R, so a clean sine
is at most (I R)^2 / 2R) and textbook class-A behaviour (more bias, less
distortion: common practice); the rest is plumbing (what a plan refuses,
that a session files every step with its id, that Ctrl-C keeps what was
measured and a resume measures the rest), and the report is checked in a
real browser (Debian's chromium).
"""

from __future__ import annotations

import csv
import json
import os
import re
import shutil
import subprocess
from pathlib import Path

import pytest

from benchkit.errors import BenchkitError
from benchkit.logbook import Logbook
from benchkit.plan import DEMO_PLAN, parse_plan, read_plan
from benchkit.session import SessionInterrupted, read_session, run_session

from conftest import PLAN_STAGE, run_cli, system_program

#: a short plan: the demo stage, a tone at two levels, a power run, noise and a DC log
SHORT = PLAN_STAGE + """
[[measure]]
kind = "tone"
level = ["-30dBFS", "-14dBFS"]

[[measure]]
kind = "power"
limit = [1, 10]

[[measure]]
kind = "noise"
duration = 1
yes = true

[[measure]]
kind = "drift"
duration = 600
interval = 1
accelerate = 20
nominal = 12
"""


def _plan(text: str = SHORT, **stage):
    plan = parse_plan(text, "test.toml")
    return plan.with_stage(stage) if stage else plan


def _refusal(text: str) -> str:
    with pytest.raises(BenchkitError) as got:
        parse_plan(text, "p.toml")
    return str(got.value)


# --- reading a plan ------------------------------------------------------------------


def test_the_shipped_plan_reads_and_describes_the_stage_once():
    plan = read_plan(DEMO_PLAN)
    assert [s.kind for s in plan.steps] == ["tone", "imd", "power", "sweep", "noise", "zout", "crosstalk", "drift"]
    power = plan.options(2, Path("b"))
    # one description of the stage feeds the load, the rail, the bias, the supply and the virtual stage
    assert (power["load"], power["rail"], power["bias"], power["vsat"]) == (8.0, 24.0, 0.8, 1.0)
    assert (power["supply_volts"], power["supply_amps"]) == (24.0, 0.8)
    assert {"bias=0.8", "rail=24", "ambient_c=23"} <= set(power["sim_param"]) and power["sim_pad"] == "1.8k:200"
    assert power["tag"] == ["bias=0.8A", "rail=24V", "stage=B-2"]
    assert plan.with_stage({"bias": "1.2"}).options(2, Path("b"))["bias"] == 1.2
    # options by their command-line names, read by the same parsers
    assert plan.options(0, Path("b"))["level"] == ["-30dBFS", "-20dBFS", "-14dBFS", "-11dBFS"]
    assert plan.options(7, Path("b"))["dc_limit"] == 0.5


@pytest.mark.parametrize("text, line, words", [
    # an unknown kind: its line and key
    ('[stage]\nname = "x"\nload = 8\n\n[[measure]]\nkind = "tone"\n\n[[measure]]\nkind = "warble"\n', 9,
     ["[[measure]] #2 kind", "no kind of measurement 'warble'"]),
    # a value in the wrong unit
    ('[stage]\nname = "x"\nload = "8 V"\n\n[[measure]]\nkind = "tone"\n', 3, ["[stage] load"]),
    ('[stage]\nname = "x"\nload = 8\n\n[[measure]]\nkind = "tone"\nlevel = "-20 dBA"\n', 7, ["#1 level"]),
    ('[stage]\nname = "x"\nload = 8\nrail = "24 A"\n\n[[measure]]\nkind = "tone"\n', 4, ["[stage] rail", "not a number"]),
    # an option the kind does not take, or spelled as in Python
    ('[stage]\nname = "x"\nload = 8\n\n[[measure]]\nkind = "noise"\nspan = "20:20000"\n', 7, ["noise takes no option 'span'"]),
    ('[stage]\nname = "x"\nload = 8\n\n[[measure]]\nkind = "power"\nstep_db = 1\n', 7, ["written step-db"]),
    # what the session sets itself
    ('[stage]\nname = "x"\nload = 8\n\n[[measure]]\nkind = "tone"\nbench = "elsewhere"\n', 7, ["the session sets it"]),
    # a stage value it does not know, a table it does not hold
    ('[stage]\nname = "x"\nload = 8\nwattage = 5\n\n[[measure]]\nkind = "tone"\n', 4, ["no value 'wattage'"]),
    ('[stage]\nname = "x"\nload = 8\n\n[extras]\nfoo = 1\n\n[[measure]]\nkind = "tone"\n', 5, ["not 'extras'"]),
    # one value where a list is not taken, and a list of none
    ('[stage]\nname = "x"\nload = 8\n\n[[measure]]\nkind = "tone"\nload = [8, 4]\n', 7, ["takes one value"]),
    ('[stage]\nname = "x"\nload = 8\n\n[[measure]]\nkind = "tone"\nlevel = []\n', 7, ["an empty list"]),
])
def test_a_bad_plan_is_refused_with_its_line_and_key(text, line, words):
    said = _refusal(text)
    assert f"p.toml line {line}:" in said, said
    assert all(w in said for w in words), said


def test_a_missing_stage_value_is_named():
    assert "the stage needs load" in _refusal('[stage]\nname = "x"\n\n[[measure]]\nkind = "tone"\n')
    assert "no [stage] table" in _refusal('[[measure]]\nkind = "tone"\n')
    assert "measures nothing" in _refusal('[stage]\nname = "x"\nload = 8\n')
    assert "not a TOML file" in _refusal('[stage\nname = "x"\n')
    with pytest.raises(BenchkitError, match="--set bias"):
        _plan().with_stage({"bias": "lots"})


def test_plan_check_refuses_in_one_line_and_plan_new_writes_a_plan_that_reads(tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text('[stage]\nname = "x"\nload = 8\n\n[[measure]]\nkind = "tone"\nfreq = "loud"\n')
    res = run_cli("plan", "check", str(bad))
    assert res.returncode == 1 and "bad.toml line 7: [[measure]] #1 freq" in res.stderr and "Traceback" not in res.stderr
    new = tmp_path / "mine" / "plan.toml"
    assert run_cli("plan", "new", str(new)).returncode == 0
    res = run_cli("plan", "check", str(new), "--set", "bias=1.2", "--json")
    assert res.returncode == 0, res.stderr
    doc = json.loads(res.stdout)
    assert doc["stage"]["bias"] == 1.2 and doc["tags"]["bias"] == "1.2A" and len(doc["steps"]) == 8
    assert run_cli("plan", "new", str(new)).returncode == 1  # never overwritten


# --- a session on the virtual bench ----------------------------------------------------------


@pytest.fixture(scope="module")
def two_sessions(tmp_path_factory):
    """The short plan measured at 0.8 A and again at 1.2 A, one bench."""
    root = tmp_path_factory.mktemp("sessions")
    said = []
    ends = [run_session(_plan(), root, said.append, changes={"bias": bias}) for bias in ("0.8", "1.2")]
    return root, [e.doc for e in ends], said


def test_a_session_files_every_step_with_its_id_and_tags(two_sessions):
    root, (doc, _later), said = two_sessions
    assert doc["status"] == "complete" and [s["state"] for s in doc["steps"]] == ["complete"] * 4
    assert any(line.startswith("plan pre-flight: the highest drive is -14.0 dBFS") for line in said)
    assert any(line.startswith("[3/4] noise") for line in said)
    with Logbook(root) as book:
        runs = book.entries(session=doc["id"])
        assert sorted(e.id for e in runs) == sorted(s["run"] for s in doc["steps"])
        assert all(e.tags == {"bias": "0.8A", "rail": "24V"} and e.stage["name"] == doc["name"] for e in runs)
        record = book.read_record(doc["steps"][1]["run"])
    assert record["session"] == doc["id"] and record["params"]["bias_a"] == 0.8 and record["params"]["supply_v"] == 24.0
    assert (root / "sessions" / doc["id"] / "session.json").is_file()


def test_the_stage_reaches_the_virtual_stage(two_sessions):
    # class-A budget (handbook): the pull-up's I x R limits the positive
    # swing first (0.8 A x 8 ohm = 6.4 V < 24/2 - 1 V; 1.2 A: 9.6 V < 11 V),
    # so clipping sets in near (I R)^2 / 2R = I^2 R / 2: 2.56 W, then 5.76 W
    root, docs, _said = two_sessions
    with Logbook(root) as book:
        for doc, bias in zip(docs, (0.8, 1.2)):
            power = book.entry(doc["steps"][1]["run"])
            onset = power.figure("clipping_onset_w")
            assert onset == pytest.approx(bias**2 * 8 / 2, rel=0.06), (bias, onset)


def test_log_list_and_show_by_session(two_sessions):
    root, (first, second), _said = two_sessions
    res = run_cli("log", "list", "--bench", str(root), "--session", second["id"], "--json")
    assert res.returncode == 0, res.stderr
    assert sorted(r["id"] for r in json.loads(res.stdout)["runs"]) == sorted(s["run"] for s in second["steps"])
    assert all(r["session"] == second["id"] for r in json.loads(res.stdout)["runs"])
    res = run_cli("log", "show", first["id"], "--bench", str(root))  # what was asked for: stdout
    assert res.returncode == 0 and f"session {first['id']}" in res.stdout
    assert all(s["run"] in res.stdout for s in first["steps"])
    res = run_cli("plan", "list", "--bench", str(root), "--json")
    assert [d["id"] for d in json.loads(res.stdout)["sessions"]] == [second["id"], first["id"]]
    res = run_cli("log", "list", "--bench", str(root), "--session", "no-such-session")
    assert res.returncode == 1 and "no session 'no-such-session'" in res.stderr


def test_two_sessions_compare_across_every_kind(two_sessions):
    root, (first, second), _said = two_sessions
    res = run_cli("compare", first["id"], second["id"], "--bench", str(root), "--json")
    assert res.returncode == 0, res.stderr
    doc = json.loads(res.stdout)
    assert doc["kind"] == "session-comparison" and doc["labels"] == ["bias=0.8A", "bias=1.2A"]
    assert [p["kind"] for p in doc["pairs"]] == ["tone", "power", "noise", "drift"] and doc["comparable"]
    with (Path(doc["folder"]) / "sessions.csv").open() as fh:
        rows = {(r["kind"], r["figure"]): r for r in csv.DictReader(fh)}
    # textbook class A: more bias, less distortion at the top level, more power at each limit
    assert rows[("tone", "thdn_db@-14dBFS")]["verdict [1]"] == "better"
    assert float(rows[("tone", "thdn_db@-14dBFS")]["change [1]-[0]"]) < -3.0
    assert rows[("power", "power_w")]["verdict [1]"] == rows[("power", "power_w@10%")]["verdict [1]"] == "better"
    assert "power at 1 % THD+N" in res.stderr and "bias=1.2A" in res.stderr
    assert Path(doc["report"]).is_file()


def test_unlike_sessions_are_refused_unless_anyway(two_sessions, tmp_path):
    # the same plan into 4 ohm: its figures are worked out for another load
    root, (first, _second), _said = two_sessions
    other = run_session(_plan(), root, lambda _m: None, changes={"load": "4"}).doc
    try:
        res = run_cli("compare", first["id"], other["id"], "--bench", str(root))
        assert res.returncode == 1 and "not comparable" in res.stderr and "step 1 (tone)" in res.stderr
        res = run_cli("compare", first["id"], other["id"], "--bench", str(root), "--anyway")
        assert res.returncode == 0 and "NOT LIKE FOR LIKE" in res.stderr
    finally:
        shutil.rmtree(root / "sessions" / other["id"])  # (the other tests see the two sessions)


def test_ctrl_c_keeps_what_was_measured_and_resume_measures_the_rest(tmp_path):
    said = []

    def interrupt_at_power(line):  # Ctrl-C once the power step is under way
        said.append(line)
        if len(said) > 1 and said[-2].startswith("[2/4] power"):
            raise KeyboardInterrupt

    with pytest.raises(SessionInterrupted) as stopped:
        run_session(_plan(), tmp_path, interrupt_at_power)
    doc = stopped.value.doc
    assert doc["status"] == "interrupted"
    assert [s["state"] for s in doc["steps"]] == ["complete", "interrupted", "skipped", "skipped"]
    first_run = doc["steps"][0]["run"]
    res = run_cli("plan", "resume", doc["id"], "--bench", str(tmp_path))
    assert res.returncode == 0, res.stderr
    again = read_session(tmp_path, doc["id"])
    assert again["status"] == "complete" and [s["state"] for s in again["steps"]] == ["complete"] * 4
    assert again["steps"][0]["run"] == first_run  # what was measured stays; the rest in the same session
    with Logbook(tmp_path) as book:
        assert {e.session for e in book.entries()} == {doc["id"]} and len(book.entries(status="complete")) == 4
    res = run_cli("plan", "resume", doc["id"], "--bench", str(tmp_path))
    assert res.returncode == 1 and "nothing is left to measure" in res.stderr


def test_ctrl_c_in_a_dc_log_stops_the_session_too(tmp_path):
    # the log keeps its readings and ends interrupted; the steps after it are not played
    text = SHORT.replace('[[measure]]\nkind = "tone"', '[[measure]]\nkind = "drift"\nduration = 600\ninterval = 1\n'
                         'accelerate = 20\nnominal = 12\n\n[[measure]]\nkind = "tone"', 1)
    said = []

    def interrupt_in_the_log(line):
        said.append(line)
        if line.lstrip().startswith("t ") and any(x.startswith("[1/5] drift") for x in said):
            raise KeyboardInterrupt

    with pytest.raises(SessionInterrupted) as stopped:
        run_session(_plan(text), tmp_path, interrupt_in_the_log)
    doc = stopped.value.doc
    assert [s["state"] for s in doc["steps"]] == ["interrupted"] + ["skipped"] * 4 and doc["steps"][0]["run"]
    with Logbook(tmp_path) as book:
        assert [e.command for e in book.entries()] == ["drift"]  # the tone never played


def test_a_stopped_session_exits_130_and_a_damaged_record_is_one_line(tmp_path, monkeypatch):
    from typer.testing import CliRunner

    import benchkit.session as session
    from benchkit.cli import app

    def stopped(*_args, **_kw):
        raise session.SessionInterrupted({"id": "s1"}, "interrupted")

    monkeypatch.setattr(session, "run_session", stopped)
    plan = tmp_path / "p.toml"
    plan.write_text(SHORT)
    res = CliRunner().invoke(app, ["plan", "run", str(plan), "--bench", str(tmp_path)])
    assert res.exit_code == 130 and "stopped: interrupted: session s1 stopped" in res.output
    Logbook(tmp_path).close()
    (tmp_path / "sessions" / "s2").mkdir(parents=True)
    (tmp_path / "sessions" / "s2" / "session.json").write_text('{"kind": "session", "schema_version": 1, "steps": []}')
    res = run_cli("log", "show", "s2", "--bench", str(tmp_path))
    assert res.returncode == 1 and "is damaged (id is missing" in res.stderr and "Traceback" not in res.stderr
    res = run_cli("plan", "list", "--bench", str(tmp_path))
    assert res.returncode == 0 and "warning: the session record" in res.stderr


def test_a_plan_above_the_drive_cap_is_refused_before_anything_plays(tmp_path):
    # (the virtual bench's cap is its outputs' limit, -0.5 dBFS; a real device's is --drive-cap)
    text = SHORT.replace('level = ["-30dBFS", "-14dBFS"]', 'level = ["-30dBFS", "-0.2dBFS"]')
    with pytest.raises(BenchkitError, match=r"plan pre-flight: step 1\. tone: drive level -0\.2 dBFS is above the -0\.5"):
        run_session(_plan(text), tmp_path, lambda _m: None)
    assert not (tmp_path / "runs").exists() or not any((tmp_path / "runs").iterdir())


# --- the report in a real browser --------------------------------------------------------------


def _chromium() -> str:
    return system_program("chromium", "chromium fonts-dejavu-core", "Debian's chromium")


def _headless(browser: str, page: Path, profile: Path, *more: str) -> subprocess.CompletedProcess:
    return subprocess.run([browser, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                           "--disable-background-networking", "--disable-component-update", "--disable-sync",
                           f"--user-data-dir={profile}", *more, page.as_uri()],
                          capture_output=True, text=True, timeout=120)


def test_the_report_renders_in_a_real_browser(two_sessions, tmp_path):
    browser = _chromium()
    root, (first, second), _said = two_sessions
    page = tmp_path / "report.html"
    res = run_cli("report", first["id"], second["id"], "--bench", str(root), "--file", str(page))
    assert res.returncode == 0, res.stderr
    text = page.read_text()
    assert "http://" not in text and "https://" not in text  # nothing fetched: it reads offline
    assert text.index("Before and after") < text.index(f"Session {first['id']}")
    shot = Path(os.environ.get("BENCHKIT_TEST_OUTPUT", tmp_path)) / "report.png"
    got = _headless(browser, page, tmp_path / "p1", "--window-size=1200,1600", f"--screenshot={shot}")
    assert shot.is_file() and shot.stat().st_size > 20_000, got.stderr[-2000:]
    from matplotlib.image import imread

    pixels = imread(shot)
    assert pixels[..., :3].std() > 0.05  # rendered, not blank
    dom = _headless(browser, page, tmp_path / "p2", "--enable-logging=stderr", "--v=0", "--virtual-time-budget=5000",
                    "--dump-dom")
    body = re.search(r"<body[^>]*>", dom.stdout).group(0)
    images = int(re.search(r'data-image-count="(\d+)"', body).group(1))
    assert 'data-images="ready"' in body and images == text.count("<img ") >= 8, body
    console = [line for line in dom.stderr.splitlines() if "CONSOLE" in line or "Uncaught" in line]
    assert not console, console


def test_the_sessions_distortion_overlay_reads_at_a_glance(two_sessions):
    # the tone runs of the two sessions overlaid, THD+N (%) against power (W) on log axes: no tick
    # labels run together (they did: "0.030.040.050.060.070.080.1")
    from test_plots import overlapping_tick_labels

    from benchkit.compare_runs import stored_result
    from benchkit.report.overlays import distortion_figure

    root, docs, _said = two_sessions
    with Logbook(root) as book:
        results = [stored_result(book, book.entry(d["steps"][0]["run"]))[1] for d in docs]
    fig = distortion_figure(results, ["bias=0.8A", "bias=1.2A"], "Test stage B-2 (invented): tone")
    assert overlapping_tick_labels(fig) == []
