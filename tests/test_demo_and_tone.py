"""`benchkit demo`, `benchkit tone` and device selection, end to end.

Figures are checked against the power-reduction identities and textbook
class-A behaviour; the rest is plumbing (outputs exist and parse).
"""

from __future__ import annotations

import csv
import json
import math
import os
import subprocess
import sys
from pathlib import Path

import pytest

from benchkit import kinds
from benchkit.analysis.documents import Conditions
from benchkit.errors import WARNING_CODES

from conftest import run_cli, run_folders, the_run


def test_demo_runs_and_its_outputs_parse(tmp_path):
    out = tmp_path / "demo"
    res = run_cli("demo", "--out", str(out))
    assert res.returncode == 0, res.stderr
    assert "report:" in res.stderr and str(out.resolve()) in res.stderr
    assert "virtual bench" in res.stderr and (out / "report.html").is_file()
    # the demo's folder is a bench folder: the shipped plan's every run filed in its logbook, twice (two sessions)
    steps = ["tone", "imd", "power", "sweep", "noise", "zout", "crosstalk", "drift"]
    listed = json.loads(run_cli("log", "list", "--bench", str(out), "--json").stdout)
    assert [r["status"] for r in listed["runs"]] == ["complete"] * 16
    by_session = {}
    for r in reversed(listed["runs"]):
        by_session.setdefault(r["session"], []).append(r)
    assert sorted(r[0]["tags"]["bias"] for r in by_session.values()) == ["0.8A", "1.2A"]
    assert all([r["command"] for r in runs] == steps for runs in by_session.values())
    tones = [Path(r["folder"]) for r in listed["runs"] if r["command"] == "tone"]
    for folder in tones:
        side = json.loads((folder / "capture.json").read_text())
        assert side["kind"] == "capture" and side["scale_source"] == "simulation"
        doc = json.loads((folder / "capture.result.json").read_text())
        assert doc["kind"] == "tone" and len(doc["steps"]) == 4
        assert (folder / "capture.wav").stat().st_size > 100_000
        for png in folder.glob("*.png"):
            assert png.read_bytes()[:4] == b"\x89PNG"
    (tones,) = (out / "comparisons").glob("*/01-tone")
    with (tones / "comparison.csv").open() as fh:
        rows = {r["figure"]: r for r in csv.DictReader(fh)}
    # textbook class A: more bias current, less distortion at the top level
    assert float(rows["thdn_db@-11dBFS"]["change [1]-[0]"]) < -3.0
    assert rows["thdn_db@-11dBFS"]["verdict [1]"] == "better"
    assert (tones / "spectra.png").exists() and (tones / "overlay.png").exists()
    assert (out / "summary.txt").read_text().count("bias") >= 4
    # and less intermodulation at every level (the same curvature, less of it)
    (imd,) = (out / "comparisons").glob("*/02-imd")
    with (imd / "comparison.csv").open() as fh:
        rows = {r["figure"]: r for r in csv.DictReader(fh)}
    assert all(rows[f"imd_db@{d:+g}dBFS"]["verdict [1]"] == "better" for d in (-30, -20, -14))
    # every result, whatever its kind, named as its command and with the same conditions
    keys = set(Conditions().to_dict())
    codes = set()
    for folder in run_folders(out):
        record = json.loads((folder / "run.json").read_text())
        doc = json.loads((folder / record["result_file"]).read_text())
        under = doc["conditions"]
        assert doc["kind"] == record["command"] and doc["schema_version"] == 2 and keys <= set(under), folder.name
        # the record's params are its kind's fields, read back as stored
        params = kinds.get(record["command"]).params.from_dict(record["params"], strict=True).to_dict()
        assert {k: params[k] for k in record["params"]} == record["params"]
        if (folder / "capture.json").exists():  # the rate the capture was made at
            assert under["sample_rate_hz"] == json.loads((folder / "capture.json").read_text())["sample_rate_hz"]
        if record["command"] in ("tone", "imd", "power", "zout"):  # run into the demo's 8 ohm
            assert under["load_ohms"] == 8.0, folder.name
        # every warning, the result's and its steps', has its code (none only a text)
        for part in (doc, *doc.get("steps", ())):
            for w in part.get("warnings", ()):
                assert w["code"] in WARNING_CODES and w["code"] != "unclassified" and w["text"], (folder.name, w)
                codes.add(w["code"])
    assert codes  # (the demo's runs do warn)


def test_tone_on_the_poly_model(tmp_path):
    # identities: y = g x + a2 x^2 gives H2/H1 = a2 A / (2 g) for input peak A
    g, a2, drive = 10.0, 0.1, -20.0
    amp = 2.0 * 10 ** (drive / 20)
    res = run_cli("tone", "--sim", "poly", "--sim-param", f"gain={g}", "--sim-param", f"a2={a2}",
                  "--level", f"{drive}dBFS", "--bench", str(tmp_path / "run"), "--json")
    assert res.returncode == 0, res.stderr
    doc = json.loads(res.stdout)
    step = doc["steps"][0]
    assert step["harmonics"][0]["level_dbc"] == pytest.approx(20 * math.log10(a2 * amp / (2 * g)), abs=0.05)
    run = the_run(tmp_path / "run")
    assert (run / "capture.wav").is_file() and (run / "capture.json").is_file()
    assert "device: virtual bench" in res.stderr


def test_capture_is_on_disk_even_when_analysis_refuses(tmp_path):
    # a silent stage (a gain given: the probe step hears nothing back, less
    # than the gain given, so the run goes on): the analysis finds no tone,
    # but the capture is kept
    res = run_cli("tone", "--sim", "ideal", "--sim-param", "gain=0", "--gain", "1", "--bench", str(tmp_path / "run"))
    assert res.returncode != 0 and "Traceback" not in res.stderr
    assert (the_run(tmp_path / "run") / "capture.wav").is_file()


def test_real_device_names_are_refused_clearly(tmp_path):
    env = {**os.environ, "BENCHKIT_DEVICE": "Studio Interface 2"}
    res = subprocess.run([sys.executable, "-m", "benchkit", "tone", "--bench", str(tmp_path / "r")],
                         capture_output=True, text=True, env=env, timeout=120)
    assert res.returncode != 0 and "Traceback" not in res.stderr
    assert "Studio Interface 2" in res.stderr and "benchkit devices" in res.stderr
    ok = subprocess.run([sys.executable, "-m", "benchkit", "tone", "--device", "virtual", "--bench", str(tmp_path / "v")],
                        capture_output=True, text=True, env=env, timeout=120)
    assert ok.returncode == 0, ok.stderr


@pytest.mark.parametrize("args, needle", [
    (["--sim", "nonesuch"], "unknown stage model"),
    (["--sim-param", "bias"], "key=value"),
    (["--sim-param", "bais=1"], "no parameter"),
    (["--sim-pad", "1k"], "R1:R2"),
    (["--level", "+3 dBFS"], "above"),
    (["--level", "loud"], "cannot read level"),
    (["--level", "2 Vrms"], "above"),  # 2 Vrms is 2.83 V peak: over a 2 V-peak output
])
def test_tone_bad_options(tmp_path, args, needle):
    res = run_cli("tone", "--bench", str(tmp_path / "r"), *args)
    assert res.returncode != 0 and "Traceback" not in res.stderr
    assert needle in res.stderr


@pytest.mark.parametrize("gain", ["0", "-20", "nan", "inf", "-0.5"])
def test_a_given_gain_cannot_switch_the_preflight_off(tmp_path, gain):
    # no pad and -20 dBFS into a gain-10 stage: the pre-flight refuses it
    # (the top step would reach the input's full scale); a gain of zero, a
    # negative or a non-number must not make it play: one line, nothing filed
    base = ["tone", "--sim-pad", "none", "--level", "-20dBFS", "--load", "8", "--bench", str(tmp_path / "r")]
    assert run_cli(*base).returncode != 0
    res = run_cli(*base, "--gain", gain)
    assert res.returncode != 0 and "Traceback" not in res.stderr
    assert "--gain" in res.stderr and len(res.stderr.strip().splitlines()) == 1, res.stderr
    assert not list((tmp_path / "r").glob("runs/*/capture.wav"))


def test_models_lists_parameters_with_units():
    res = run_cli("models")
    assert res.returncode == 0
    for name in ("ideal", "poly", "hard-clip", "se-class-a", "bias [A] = 0.8", "coupling_uf [uF]"):
        assert name in res.stdout


def test_a_run_that_stops_early_files_its_steps_and_says_so_in_its_exit_code(tmp_path):
    # y = x + 5000 x^3 (x in volts): 2 V peak per FS out, so -40 and -30 dBFS
    # (0.02 and 0.063 V) stay clear while -20 dBFS (0.2 V) makes 40 V peak,
    # 4 V after the 10:1 pad, twice the input's full scale: the input clips
    # in the last step, which is not measured; exit 4 (the README's exit codes)
    res = run_cli("tone", "--sim", "poly", "--sim-param", "gain=1", "--sim-param", "a3=5000", "--level", "-40dBFS",
                  "--level", "-30dBFS", "--level", "-20dBFS", "--bench", str(tmp_path), "--json")
    assert res.returncode == 4, res.stderr
    assert res.stderr.strip().splitlines()[-1].startswith("benchkit: stopped early: the input clipped")
    doc = json.loads(res.stdout)
    assert [s["drive_dbfs"] for s in doc["steps"]] == [-40.0, -30.0]
    listed = json.loads(run_cli("log", "list", "--bench", str(tmp_path), "--json").stdout)["runs"]
    assert [r["status"] for r in listed] == ["complete"]


def test_a_tone_steps_length_and_averages_are_the_users_and_survive_reanalysis(tmp_path):
    # --step-duration 2 at 48 kHz analyses 96000 samples a step (after it settles), in --averages 4 blocks;
    # analysing the run again from its folder keeps both (plumbing: no outside source applies)
    import json

    from conftest import run_cli, the_run

    bench = tmp_path / "bench"
    res = run_cli("tone", "--level", "-20dBFS", "--step-duration", "2", "--averages", "4", "--bench", str(bench), "--json")
    assert res.returncode == 0, res.stderr
    step = json.loads(res.stdout)["steps"][0]
    assert step["n_samples"] == 96000 and step["conditions"]["averages"] == 4
    folder = the_run(bench)
    again = run_cli("log", "reanalyse", folder.name, "--bench", str(bench))
    assert again.returncode == 0, again.stderr
    redone = json.loads((folder / "capture.result.json").read_text())["steps"][0]
    assert redone["conditions"]["averages"] == 4 and redone["thdn_db"] == pytest.approx(step["thdn_db"], abs=1e-9)
