"""The bench logbook and run comparisons, end to end.

Outside references: the class-A budget's ceiling is circuit theory (a
current-limited swing I R into R gives (I R)^2 / 2R); the catalog's health
is SQLite's own ``PRAGMA integrity_check``; "a process killed outright
releases its locks" is POSIX flock(2) behaviour. The rest is plumbing:
runs kept, labelled, found, recovered and never silently lost.
"""

from __future__ import annotations

import csv
import io
import json
import math
import os
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import pytest

from benchkit import logbook
from benchkit.analysis.compare import compare
from benchkit.kinds import get as kind_of, headline_figures
from benchkit.errors import BenchkitError

from conftest import run_cli, run_folders


def _json(res):
    assert res.returncode == 0, res.stderr
    return json.loads(res.stdout)


def _drift(bench: Path, *extra: str):
    """A short virtual drift log: the quickest measuring command."""
    return run_cli("drift", "--interval", "0.02", "--duration", "10", "--bench", str(bench), "--json", *extra)


def _runs(bench: Path, *extra: str) -> list[dict]:
    return _json(run_cli("log", "list", "--bench", str(bench), "--json", *extra))["runs"]


def test_power_at_one_percent_rises_as_the_class_a_budget_predicts(tmp_path):
    bench = tmp_path / "b2 bench"
    stored = {}
    for bias in (0.8, 1.2):
        doc = _json(run_cli("power", "--load", "8", "--rail", "24", "--bias", str(bias), "--sim-param", f"bias={bias}",
                            "--supply-volts", "24", "--supply-amps", str(bias), "--tag", f"bias={bias:g}A",
                            "--bench", str(bench), "--json"))
        stored[bias] = json.loads((Path(doc["run"]["folder"]) / "capture.power.json").read_text())
    comp = _json(run_cli("compare", "--last", "2", "--bench", str(bench), "--json"))
    assert comp["kind"] == "comparison" and comp["of"] == "power" and comp["comparable"]
    assert comp["runs"] == ["bias=0.8A", "bias=1.2A"]  # oldest first: the baseline
    deltas = {d["name"]: d for d in comp["deltas"]}
    p = deltas["power_w"]
    # the deltas are the stored figures' differences, not a new measurement
    assert p["values"] == [stored[0.8]["power_at_limit_w"]["1"], stored[1.2]["power_at_limit_w"]["1"]]
    assert p["changes"][0] == pytest.approx(p["values"][1] - p["values"][0], rel=1e-12)
    assert p["verdicts"] == ["better"] and p["unit"] == "W"
    # circuit theory: both biases are current-limited (I R = 6.4 V and 9.6 V
    # against rail/2 - Vsat = 11 V), so the ceiling goes as I^2: x 2.25
    ceiling = [(i * 8.0) ** 2 / (2 * 8.0) for i in (0.8, 1.2)]
    assert deltas["expected_w"]["values"] == pytest.approx(ceiling, rel=1e-9)
    assert p["values"][1] / p["values"][0] == pytest.approx(ceiling[1] / ceiling[0], rel=0.05)
    for measured, expected in zip(p["values"], ceiling):  # 1 % lies just past the onset of clipping
        assert 1.0 <= measured / expected <= 1.15
    folder = Path(comp["folder"])
    with (folder / "comparison.csv").open(encoding="utf-8") as fh:
        rows = {r["figure"]: r for r in csv.DictReader(fh)}
    assert float(rows["power_w"]["change [1]-[0]"]) == pytest.approx(p["changes"][0], rel=1e-5)
    assert (folder / "overlay.png").read_bytes()[:4] == b"\x89PNG"
    # a bench folder from before the result schema 2: the older run's result as
    # version 1 wrote it (the load without its unit's s) compares as before
    old = Path(doc["run"]["folder"]).parent / comp["run_ids"][0] / "capture.power.json"
    v1 = json.loads(old.read_text())
    v1.update(schema_version=1, load_ohm=v1.pop("load_ohms"))
    del v1["conditions"]  # (version 1 kept neither the band nor the scale of a power result)
    old.write_text(json.dumps(v1))
    again = _json(run_cli("compare", "--last", "2", "--bench", str(bench), "--json"))
    assert again["comparable"] and again["deltas"] == comp["deltas"]
    assert again["conditions"][0]["load_ohms"] == comp["conditions"][0]["load_ohms"] == 8.0
    assert again["conditions"][0]["bandwidth_hz"] == "not recorded" and again["conditions"][1] == comp["conditions"][1]
    assert "better" in (folder / "summary.txt").read_text(encoding="utf-8")


def test_runs_that_do_not_compare_are_refused_or_flagged(tmp_path):
    bench = tmp_path / "bench"
    for freq in ("997", "1997"):
        _json(run_cli("tone", "--freq", freq, "--level", "-30dBFS", "--load", "8", "--bench", str(bench), "--json"))
    refused = run_cli("compare", "last-1", "last", "--bench", str(bench))
    assert refused.returncode == 1 and "not comparable" in refused.stderr and "frequency" in refused.stderr
    assert "Traceback" not in refused.stderr and len(refused.stderr.strip().splitlines()) == 1
    anyway = _json(run_cli("compare", "last-1", "last", "--anyway", "--bench", str(bench), "--json"))
    assert not anyway["comparable"] and any(w["code"] == "not-like-for-like" and "NOT LIKE FOR LIKE" in w["text"] and "frequency" in w["text"]
                                                  for w in anyway["warnings"])
    _json(_drift(bench))
    mixed = run_cli("compare", "last-1", "last", "--bench", str(bench))
    assert mixed.returncode == 1 and "different kinds" in mixed.stderr


def test_a_killed_drift_log_is_incomplete_until_reanalysed(tmp_path):
    # SIGKILL: no handler runs, the process's flock goes with it (POSIX)
    bench = tmp_path / "bench"
    proc = subprocess.Popen([sys.executable, "-m", "benchkit", "drift", "--interval", "0.05", "--accelerate", "1",
                             "--duration", "600", "--bench", str(bench)], stderr=subprocess.PIPE, text=True)
    deadline = time.monotonic() + 60
    log = None
    while time.monotonic() < deadline:
        logs = list(bench.glob("runs/*/log.csv"))
        if logs and len(logs[0].read_text().splitlines()) > 12:
            log = logs[0]
            break
        time.sleep(0.05)
    assert log is not None, "the log never got going"
    assert [r["status"] for r in _runs(bench)] == ["running"]  # its process still holds the lock
    proc.send_signal(signal.SIGKILL)
    proc.communicate(timeout=10)
    half_written = log.parent / f".run.json.{proc.pid}.tmp"  # as a kill during an atomic write leaves it
    half_written.write_text('{"kind": "ru')
    (run,) = _runs(bench)
    assert run["status"] == "incomplete" and "went away" in run["error"]
    assert not half_written.exists() and not (log.parent / logbook.LOCK).exists()
    # a second look that fails keeps what the run was, and why
    log.rename(log.with_name("aside.csv"))
    failed = run_cli("log", "reanalyse", run["id"], "--bench", str(bench))
    assert failed.returncode == 1
    (still,) = _runs(bench)
    assert still["status"] == "incomplete" and still["error"] == run["error"]
    log.with_name("aside.csv").rename(log)
    res = run_cli("log", "reanalyse", run["id"], "--bench", str(bench), "--json")
    doc = _json(res)
    assert doc["kind"] == "drift" and doc["samples"] >= 12
    (done,) = _runs(bench)
    assert done["status"] == "complete" and any(f["name"] == "settled_v" for f in done["figures"])
    assert not (log.parent / logbook.LOCK).exists()
    with sqlite3.connect(bench / logbook.CATALOG) as db:
        assert db.execute("PRAGMA integrity_check").fetchone()[0] == "ok"


def test_rebuild_recovers_every_run_with_its_labels(tmp_path):
    bench = tmp_path / "bench"
    for k in range(3):
        _json(_drift(bench, "--tag", f"take={k}"))
    first = _runs(bench)[-1]["id"]
    assert run_cli("log", "note", first, "cold start, lid off", "--bench", str(bench)).returncode == 0
    assert run_cli("log", "tag", first, "rail=24V", "--bench", str(bench)).returncode == 0
    before = _runs(bench)
    for name in (logbook.CATALOG, logbook.CATALOG + "-wal", logbook.CATALOG + "-shm"):
        (bench / name).unlink(missing_ok=True)
    res = run_cli("log", "rebuild", "--bench", str(bench))
    assert res.returncode == 0 and "indexed 3 runs" in res.stderr
    after = _runs(bench)
    assert after == before
    assert after[-1]["note"] == "cold start, lid off" and after[-1]["tags"] == {"rail": "24V", "take": "0"}
    # a damaged catalog is moved aside, and rebuilt the same
    (bench / logbook.CATALOG).write_bytes(b"this is not a database" * 100)
    res = run_cli("log", "rebuild", "--bench", str(bench))
    assert res.returncode == 0 and "moved aside" in res.stderr
    assert _runs(bench) == before


def test_names_with_spaces_and_unicode_tags(tmp_path):
    bench = tmp_path / "Prüfstand B-2 (Keller)"
    stage = tmp_path / "stage description.txt"
    stage.write_text("# the stage\nname: Test stage B-2\noutput capacitor: 2200 µF\n", encoding="utf-8")
    doc = _json(_drift(bench, "--tag", "Ausgangskondensator=2200 µF", "--tag", "bias=1,2 A", "--note", "Lötstelle nachgelötet",
                       "--stage", str(stage)))
    folder = Path(doc["run"]["folder"])
    assert folder.parent == bench / "runs" and "µF" in folder.name and " " not in folder.name
    _json(_drift(bench, "--tag", "bias=0,8 A"))  # the stage is remembered, not retyped
    runs = _runs(bench, "--tag", "Ausgangskondensator=2200 µF")
    assert len(runs) == 1 and runs[0]["note"] == "Lötstelle nachgelötet"
    assert all(r["stage"] == {"name": "Test stage B-2", "output capacitor": "2200 µF"} for r in _runs(bench))
    exported = run_cli("log", "export", "--bench", str(bench))
    rows = list(csv.DictReader(io.StringIO(exported.stdout)))
    assert exported.returncode == 0 and {r["tag bias"] for r in rows} == {"1,2 A", "0,8 A"}
    assert all(r["settled_v"] for r in rows)


def test_runs_started_in_the_same_second_get_their_own_folders(tmp_path):
    with logbook.Logbook(tmp_path) as book:
        runs = [book.start("tone", tags={"bias": "1.2A"}) for _ in range(3)]
        for run in runs:
            run.fail("test")
    names = [r.id for r in runs]
    assert len(set(names)) == 3 and names[1] == names[0] + "-2" and names[2] == names[0] + "-3"


def test_runs_started_in_one_second_keep_their_order(tmp_path):
    # newest first by when they started, whatever their names say (here
    # the later run's name sorts first); two quick commands do this
    for attempt in range(5):  # a pair that straddles a second is tried again
        with logbook.Logbook(tmp_path / str(attempt)) as book:
            first = book.start("imd", tags={"a2": "0.1"})
            first.fail("test")
            second = book.start("imd", tags={"a2": "0.05"})
            second.fail("test")
            if first.id[:15] == second.id[:15]:
                break
    assert first.id[:15] == second.id[:15]  # one second
    with logbook.Logbook(tmp_path / str(attempt)) as book:
        assert [e.id for e in book.entries()] == [second.id, first.id]
        assert book.entry("last").id == second.id


def test_remove_moves_a_run_to_the_trash(tmp_path):
    bench = tmp_path / "bench"
    doc = _json(_drift(bench))
    folder = Path(doc["run"]["folder"])
    files = sorted(p.name for p in folder.iterdir())
    res = run_cli("log", "remove", doc["run"]["id"], "--bench", str(bench))
    assert res.returncode == 0 and not folder.exists()
    assert sorted(p.name for p in (bench / "trash" / folder.name).iterdir()) == files
    assert _runs(bench) == []
    gone = run_cli("log", "show", doc["run"]["id"], "--bench", str(bench))
    assert gone.returncode == 1 and "no run" in gone.stderr


def _make_unwritable(folder: Path) -> bool:
    """chmod for a user; root ignores modes, so the immutable attribute
    (ext4 and others) for root. False when neither holds here."""
    folder.chmod(0o555)
    try:
        (folder / "probe").touch()
    except OSError:
        return True
    (folder / "probe").unlink()
    ok = subprocess.run(["chattr", "+i", str(folder)], capture_output=True).returncode == 0
    return ok


def _make_writable(folder: Path) -> None:
    subprocess.run(["chattr", "-i", str(folder)], capture_output=True)
    folder.chmod(0o755)


def test_a_read_only_bench_folder(tmp_path):
    bench = tmp_path / "bench"
    _json(_drift(bench, "--tag", "take=1"))
    if not _make_unwritable(bench):
        pytest.skip("cannot make a folder unwritable here (root on a file system without chattr +i)")
    try:
        res = run_cli("tone", "--level", "-30dBFS", "--bench", str(bench))
        assert res.returncode == 1 and "Traceback" not in res.stderr
        assert "cannot write to the bench folder" in res.stderr and "--bench" in res.stderr
        assert "pre-flight" not in res.stderr  # refused before anything played
        listed = _runs(bench)  # reading still works
        assert [r["tags"] for r in listed] == [{"take": "1"}]
        note = run_cli("log", "note", "last", "x", "--bench", str(bench))
        assert note.returncode == 1 and "cannot write" in note.stderr
    finally:
        _make_writable(bench)


_WRITER = """
import sys
from benchkit.logbook import Logbook
book = Logbook(sys.argv[1])
for k in range(int(sys.argv[3])):
    run = book.start("tone", tags={"writer": sys.argv[2], "k": str(k)})
    (run.folder / "capture.result.json").write_text("{}")
    run.complete({"kind": "tone", "steps": []}, [run.folder / "capture.result.json"], figures=[])
    book.set_tags(run.id, {"checked": "yes"})
"""


def test_concurrent_writers_do_not_corrupt_the_catalog(tmp_path):
    writers, each = 4, 15
    procs = [subprocess.Popen([sys.executable, "-c", _WRITER, str(tmp_path), str(w), str(each)],
                              stderr=subprocess.PIPE, text=True) for w in range(writers)]
    for p in procs:
        _, err = p.communicate(timeout=120)
        assert p.returncode == 0, err
    with sqlite3.connect(tmp_path / logbook.CATALOG) as db:
        assert db.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        assert db.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
        assert db.execute("SELECT count(*), count(DISTINCT id) FROM runs WHERE status = 'complete'").fetchone() == (60, 60)
        assert db.execute("SELECT count(*) FROM tags WHERE key = 'checked'").fetchone()[0] == 60
    assert len(run_folders(tmp_path)) == writers * each
    # two measuring commands at once into one bench
    both = [subprocess.Popen([sys.executable, "-m", "benchkit", "drift", "--interval", "0.02", "--duration", "10",
                              "--bench", str(tmp_path / "b")], stderr=subprocess.PIPE, text=True) for _ in range(2)]
    for p in both:
        _, err = p.communicate(timeout=120)
        assert p.returncode == 0, err
    assert [r["status"] for r in _runs(tmp_path / "b")] == ["complete", "complete"]


def test_an_older_catalog_is_migrated_and_a_newer_one_refused(tmp_path):
    # a version 1 catalog (no figures table) indexing one run on disk
    with logbook.Logbook(tmp_path) as book:
        run = book.start("drift")
        run.record["figures"] = [{"name": "settled_v", "value": 12.0, "unit": "V", "at": ""}]
        doc = {"kind": "drift", "fit": {"final_v": 11.78}, "nominal_v": 12.0}
        run.complete(doc, [], figures=headline_figures(doc))
    with sqlite3.connect(tmp_path / logbook.CATALOG) as db:
        db.execute("DROP TABLE figures")
        db.execute("DROP INDEX runs_session")  # (version 3's)
        db.execute("ALTER TABLE runs DROP COLUMN session")
        db.execute("UPDATE meta SET value = '1' WHERE key = 'schema_version'")
    with logbook.Logbook(tmp_path) as book:
        assert book.schema_version() == logbook.SCHEMA_VERSION
        (entry,) = book.entries()
        assert entry.figure("settled_v") == pytest.approx(11.78)  # back-filled from the run's record
    with sqlite3.connect(tmp_path / logbook.CATALOG) as db:
        db.execute("UPDATE meta SET value = '99' WHERE key = 'schema_version'")
    res = run_cli("log", "list", "--bench", str(tmp_path))
    assert res.returncode == 1 and "version 99" in res.stderr and "upgrade benchkit" in res.stderr
    with pytest.raises(BenchkitError, match="newer"):
        logbook.Logbook(tmp_path)


def test_a_failed_run_keeps_its_capture_and_says_why(tmp_path):
    bench = tmp_path / "bench"
    res = run_cli("tone", "--sim", "ideal", "--sim-param", "gain=0", "--gain", "1", "--bench", str(bench))
    assert res.returncode == 1
    (run,) = _runs(bench)
    assert run["status"] == "failed" and run["error"] and "capture.wav" in os.listdir(run["folder"])


def test_version_1_results_list_compare_and_reanalyse(tmp_path):
    # version 1 named a stepped-tone result "tone-steps" (the command "tone"):
    # read as version 2, it compares with a version-2 run and reanalyses into one
    bench = tmp_path / "bench"
    for seed in ("1", "2"):
        _json(run_cli("tone", "--sim", "ideal", "--level", "-20dBFS", "--seed", seed, "--bench", str(bench), "--json"))
    before = _json(run_cli("compare", "--last", "2", "--bench", str(bench), "--json"))
    first = _runs(bench)[-1]
    stored = Path(first["folder"]) / "capture.result.json"
    v1 = json.loads(stored.read_text())
    assert v1["kind"] == "tone" and v1["schema_version"] == 2
    v1 = {k: v for k, v in v1.items() if k != "conditions"}  # (version 1 kept them in each step only)
    stored.write_text(json.dumps({**v1, "kind": "tone-steps", "schema_version": 1}))
    assert [r["id"] for r in _runs(bench)][-1] == first["id"]
    after = _json(run_cli("compare", "--last", "2", "--bench", str(bench), "--json"))
    assert after["of"] == before["of"] == "tone" and after["deltas"] == before["deltas"]
    again = _json(run_cli("log", "reanalyse", first["id"], "--bench", str(bench), "--json"))
    assert again["kind"] == "tone" and again["schema_version"] == 2
    assert json.loads(stored.read_text())["schema_version"] == 2


def test_deltas_and_verdicts_follow_the_direction_of_each_figure():
    # plain arithmetic on two documents: lower THD+N is better, a drift's
    # settled value is better nearer its nominal, a level has no direction
    def doc(thdn, vrms):
        return {"kind": "tone", "frequency_hz": 997.0,
                "steps": [{"drive_dbfs": -20.0, "thdn_db": thdn, "thd_db": thdn - 1, "noise_dbfs": -90.0,
                           "fundamental_vrms": vrms, "valid": True, "harmonics": []}]}

    c = compare([doc(-60.0, 1.0), doc(-66.0, 1.001)], ["a", "b"], kind_of("tone").figures)
    d = {x.name: x for x in c.deltas}
    assert d["thdn_db"].changes == (pytest.approx(-6.0),) and d["thdn_db"].verdict(1) == "better"
    assert d["noise_dbfs@-20dBFS"].verdict(1) == "same" and d["level_vrms@-20dBFS"].verdict(1) is None
    drift = [{"kind": "drift", "nominal_v": 12.0, "fit": {"final_v": v}} for v in (12.3, 11.9)]
    assert {x.name: x for x in compare(drift, ["a", "b"], kind_of("drift").figures).deltas}["settled_v"].verdict(1) == "better"


def test_sweeps_compare_and_the_corner_moves_as_the_capacitor_says(tmp_path):
    # circuit theory: a coupling capacitor C into R puts the first-order
    # corner at 1 / (2 pi R C); 1000 uF -> 2200 uF into 8 ohm moves it 2.2x lower
    bench = tmp_path / "bench"
    for c_uf in (1000, 2200):
        _json(run_cli("sweep", "--span", "2:22000", "--duration", "3", "--load", "8", "--sim-param", f"coupling_uf={c_uf}",
                      "--tag", f"C={c_uf}uF", "--bench", str(bench), "--json"))
    comp = _json(run_cli("compare", "--last", "2", "--bench", str(bench), "--json"))
    low = {d["name"]: d for d in comp["deltas"]}["low_3db_hz"]
    assert low["values"][0] / low["values"][1] == pytest.approx(2.2, rel=0.03)
    assert low["verdicts"] == ["better"]  # a lower low corner reaches deeper
    assert (Path(comp["folder"]) / "overlay.png").exists()


def test_drift_logs_compare_on_their_settled_value(tmp_path):
    bench = tmp_path / "bench"
    for bias in ("0.8", "1.2"):
        _json(_drift(bench, "--sim-param", f"bias={bias}", "--nominal", "12", "--tag", f"bias={bias}A"))
    comp = _json(run_cli("compare", "last-1", "last", "--bench", str(bench), "--json"))
    settled = {d["name"]: d for d in comp["deltas"]}["settled_v"]
    assert comp["of"] == "drift" and settled["better"] == "nearer" and len(settled["values"]) == 2
    assert (Path(comp["folder"]) / "overlay.png").read_bytes()[:4] == b"\x89PNG"


def test_log_show_prints_quantities_as_a_person_reads_them(tmp_path):
    # a stored option and a figure through the one quantity formatter: 2.828 Vrms, not 2.8284271247461903;
    # microvolts, not an exponent
    bench = tmp_path / "bench"
    _json(run_cli("noise", "--duration", "1", "--load", "8", "--bench", str(bench), "--json"))
    text = run_cli("log", "show", "last", "--bench", str(bench))
    shown = text.stdout + text.stderr
    assert "reference_vrms=2.828 Vrms" in shown and "bandwidth_hz=[20 Hz, 20 kHz]" in shown
    figure = next(line for line in shown.splitlines() if "noise_a_vrms =" in line)
    assert "uVrms" in figure and "e-0" not in figure


def test_what_was_asked_goes_to_stdout_and_json_alone_with_json(tmp_path):
    # `benchkit log list 2>/dev/null | grep bias` finds the run; a measurement's summary is on stdout,
    # its progress on stderr; with --json stdout holds one JSON document and nothing else
    bench = tmp_path / "bench"
    measured = run_cli("tone", "--level", "-20dBFS", "--tag", "bias=1.2A", "--bench", str(bench))
    assert measured.returncode == 0 and "THD+N" in measured.stdout and "run folder:" in measured.stderr
    assert "run folder:" not in measured.stdout
    listed = run_cli("log", "list", "--bench", str(bench))
    assert any("bias=1.2A" in line for line in listed.stdout.splitlines())
    as_json = run_cli("tone", "--level", "-20dBFS", "--bench", str(bench), "--json")
    assert json.loads(as_json.stdout)["kind"] == "tone" and "THD+N" in as_json.stderr


def _calibrated_tone_runs(tmp_path: Path, *seeds: str) -> Path:
    """A bench whose tone runs were measured with a calibration profile (volts at the stage)."""
    cal, bench = tmp_path / "cal.json", tmp_path / "bench"
    made = run_cli("calibrate", "--reading", "0.14142V", "--pad", "1.8k:200", "--file", str(cal))
    assert made.returncode == 0, made.stderr
    for seed in seeds:
        _json(run_cli("tone", "--level", "-20dBFS", "--load", "8", "--seed", seed, "--calibration", str(cal),
                      "--bench", str(bench), "--json"))
    return bench


def _figure(line: str) -> float:
    """The number of a `log show` figure line ("  figure  noise_vrms = -67.00 dBu (drive ...)")."""
    return float(line.split("=", 1)[1].split()[0])


def test_log_show_and_list_show_levels_in_the_unit_chosen(tmp_path):
    # the run stores its noise in volts RMS; --levels-in reads it in dBu, dBV, and (with the run's scale,
    # volts peak per FS) in dBFS. The dB figures and THD+N (ratios) are left as they are.
    bench = _calibrated_tone_runs(tmp_path, "1")
    record = _json(run_cli("log", "show", "last", "--bench", str(bench), "--json"))
    noise = next(f for f in record["figures"] if f["name"] == "noise_vrms")
    volts = noise["value"]
    result = json.loads((Path(_runs(bench)[0]["folder"]) / record["result_file"]).read_text())
    vpf = result["conditions"]["volts_per_fs"]
    want = {
        "dBu": 20 * math.log10(volts / 0.7746),               # dBu = 20 log10(Vrms / 0.7746 V), 0 dBu = sqrt(0.6) V
        "dBV": 20 * math.log10(volts / 1.0),                  # dBV = 20 log10(Vrms / 1 V)
        "dBFS": 20 * math.log10(math.sqrt(2) * volts / vpf),  # AES17: a sine whose peak reaches FS is 0 dBFS
    }
    plain = run_cli("log", "show", "last", "--bench", str(bench))
    assert plain.returncode == 0, plain.stderr
    line = next(x for x in plain.stdout.splitlines() if "noise_vrms =" in x)
    assert "uVrms" in line  # (without the option: as stored)
    thdn = next(x for x in plain.stdout.splitlines() if "thdn_db =" in x)
    for unit, value in want.items():
        shown = run_cli("log", "show", "last", "--levels-in", unit, "--bench", str(bench))
        assert shown.returncode == 0, shown.stderr
        line = next(x for x in shown.stdout.splitlines() if "noise_vrms =" in x)
        assert f" {unit} " in line and _figure(line) == pytest.approx(value, abs=0.006), line
        assert thdn in shown.stdout.splitlines()  # a ratio: not a level
    listed = run_cli("log", "list", "--levels-in", "dBu", "--bench", str(bench))
    assert listed.returncode == 0, listed.stderr
    assert f"noise {want['dBu']:+.2f} dBu" in listed.stdout


def test_log_compare_shows_levels_in_the_unit_chosen(tmp_path):
    # the delta table's levels (the fundamental, the noise) in dBV read from the volts each run stored; their
    # change in dB; the comparison's files keep the stored units
    bench = _calibrated_tone_runs(tmp_path, "1", "2")
    plain = _json(run_cli("compare", "--last", "2", "--bench", str(bench), "--json"))
    level = next(d for d in plain["deltas"] if d["name"].startswith("level_vrms"))
    assert level["unit"] == "Vrms"
    res = run_cli("compare", "--last", "2", "--levels-in", "dBV", "--bench", str(bench))
    assert res.returncode == 0, res.stderr
    row = next(x for x in res.stdout.splitlines() if x.strip().startswith("level (drive -20 dBFS)"))
    cells = row.split(")", 1)[1].split()
    dbv = [20 * math.log10(v / 1.0) for v in level["values"]]  # dBV = 20 log10(Vrms / 1 V)
    assert cells[0] == "dBV" and [float(c) for c in cells[1:3]] == pytest.approx(dbv, abs=0.006), row
    assert float(cells[3]) == pytest.approx(dbv[1] - dbv[0], abs=1e-5)
    unchanged = next(x for x in res.stdout.splitlines() if x.strip().startswith("THD+N (drive -20 dBFS)"))
    assert " dB " in unchanged
    again = _json(run_cli("compare", "--last", "2", "--levels-in", "dBV", "--bench", str(bench), "--json"))
    assert next(d for d in again["deltas"] if d["name"].startswith("level_vrms"))["unit"] == "Vrms"


def test_a_level_unit_the_logbook_cannot_show_is_one_line(tmp_path):
    bench = _calibrated_tone_runs(tmp_path, "1")
    for args in (("--levels-in", "dBm"), ("--levels-in", "dBu", "--dbr-ref", "1Vrms"), ("--dbr-ref", "loud")):
        res = run_cli("log", "show", "last", *args, "--bench", str(bench))
        assert res.returncode != 0 and "Traceback" not in res.stderr, res.stderr
        assert len(res.stderr.strip().splitlines()) == 1, res.stderr
