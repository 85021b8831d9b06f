"""Captures made elsewhere, filed in the logbook (`benchkit log file`) and
compared like measured runs.

Outside references: the sox program writes the tones nobody in this
project wrote (an independent generator, REFERENCES.md); the RMS of a sine
is its peak over sqrt(2), and the THD of a sine plus one harmonic at
amplitude ratio a is 20 log10(a) (handbook identities: Fourier series and
the definition of THD); a file's SHA-256 is hashlib's.
"""

from __future__ import annotations

import hashlib
import json
import math
import subprocess
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf

from conftest import run_cli, run_folders

PROFILE = Path(__file__).resolve().parents[1] / "calibration" / "virtual-interface.json"
RATE = 48000


def _json(res):
    assert res.returncode == 0, res.stderr
    return json.loads(res.stdout)


def _sox_tone(sox_path, path: Path, volume: float = 0.1) -> Path:
    subprocess.run([sox_path, "-D", "-n", "-r", str(RATE), "-b", "24", str(path), "synth", "1", "sine", "997",
                    "vol", str(volume)], check=True, capture_output=True, timeout=60)
    return path


def _tone_with_h2(path: Path, peak: float, h2_ratio: float) -> Path:
    """A 997 Hz sine of ``peak`` FS plus its 2nd harmonic at ``h2_ratio`` of it, 1 s, float WAV."""
    t = np.arange(RATE) / RATE
    x = peak * (np.sin(2 * np.pi * 997 * t) + h2_ratio * np.sin(2 * np.pi * 2 * 997 * t))
    sf.write(str(path), x, RATE, subtype="FLOAT")
    return path


def _figures(bench: Path, run: str) -> dict:
    record = _json(run_cli("log", "show", run, "--bench", str(bench), "--json"))
    return {f["name"]: f["value"] for f in record["figures"]}


def test_a_sox_tone_is_filed_with_its_scale_stage_and_tags_and_analyses_again_alike(sox_path, tmp_path):
    bench = tmp_path / "bench"
    wav = _sox_tone(sox_path, tmp_path / "elsewhere.wav")  # peak 0.1 FS (sox's vol: a linear factor, from memory)
    doc = _json(run_cli("log", "file", str(wav), "--volts-per-fs", "20", "--level", "-20dBFS", "--stage-info",
                        "name=B-2", "--tag", "bias=1.2A", "--note", "captured on the other bench", "--bench", str(bench),
                        "--json"))
    assert doc["kind"] == "tone" and doc["run"]["status"] == "complete"
    (step,) = doc["steps"]
    # the RMS of a sine is its peak over sqrt(2): 0.1 FS x 20 V per FS
    assert step["fundamental_vrms"] == pytest.approx(0.1 * 20 / math.sqrt(2), rel=1e-3)
    assert step["fundamental_hz"] == pytest.approx(997.0, abs=1e-3)
    assert step["drive_dbfs"] == -20.0

    (folder,) = run_folders(bench)
    record = _json(run_cli("log", "show", "last", "--bench", str(bench), "--json"))
    assert record["device"] == "file" and record["command"] == "tone" and record["calibration"] is None
    assert record["filed"]["from"] == str(wav.resolve())
    assert record["filed"]["sha256"] == hashlib.sha256(wav.read_bytes()).hexdigest()  # hashlib's
    assert record["filed"]["volts_per_fs"] == 20.0 and record["filed"]["scale_source"] == "given"
    assert record["stage"] == {"name": "B-2"} and record["tags"] == {"bias": "1.2A"}
    assert record["note"] == "captured on the other bench"
    assert record["params"]["levels_dbfs"] == [-20.0] and record["params"]["channel"] == 1
    assert (folder / "capture.wav").read_bytes() == wav.read_bytes()  # a copy, byte for byte
    side = json.loads((folder / "capture.json").read_text())
    assert side["channels"] == [{"number": 1, "volts_per_fs": 20.0}] and side["scale_source"] == "given"
    assert not (bench / "bench.json").exists()  # the bench's remembered stage is left alone

    listed = run_cli("log", "list", "--bench", str(bench))
    assert listed.returncode == 0, listed.stderr
    assert "tone (filed)" in listed.stdout and "bias=1.2A" in listed.stdout and "stage B-2" in listed.stdout

    before = _figures(bench, "last")
    again = run_cli("log", "reanalyse", "last", "--bench", str(bench))
    assert again.returncode == 0, again.stderr
    after = _figures(bench, "last")
    assert after.keys() == before.keys() and before
    for name, value in before.items():
        assert after[name] == pytest.approx(value, rel=1e-9), name


def test_filed_runs_compare_with_a_measured_run_and_with_each_other(tmp_path):
    bench = tmp_path / "bench"
    a = _tone_with_h2(tmp_path / "a.wav", 0.3, 0.01)  # H2 at -40 dBc
    b = _tone_with_h2(tmp_path / "b.wav", 0.3, 0.001)  # H2 at -60 dBc
    filed = _json(run_cli("log", "file", str(a), str(b), "--calibration", str(PROFILE), "--level", "-20dBFS",
                          "--stage-info", "name=B-2", "--bench", str(bench), "--json"))
    assert [d["run"]["status"] for d in filed] == ["complete", "complete"]
    measured = _json(run_cli("tone", "--device", "virtual", "--calibration", str(PROFILE), "--level", "-20dBFS",
                             "--step-duration", "0.5", "--bench", str(bench), "--json"))
    ids = [d["run"]["id"] for d in filed] + [measured["run"]["id"]]
    record = _json(run_cli("log", "show", ids[0], "--bench", str(bench), "--json"))
    profile = json.loads(PROFILE.read_text())
    assert record["calibration"]["file"] == str(PROFILE) and record["filed"]["scale_source"] == "profile"

    comp = _json(run_cli("compare", ids[2], ids[0], "--bench", str(bench), "--json"))  # measured, then filed
    assert comp["comparable"] is True
    deltas = {d["name"]: d for d in comp["deltas"]}
    thd = deltas["thd_db@-20dBFS"]
    # THD of a sine plus one harmonic at ratio a: 20 log10(a) (Fourier series, the definition of THD)
    assert thd["values"][1] == pytest.approx(-40.0, abs=0.02)
    assert thd["changes"][0] == pytest.approx(-40.0 - thd["values"][0], abs=0.02)
    level = deltas["level_vrms@-20dBFS"]
    # volts at the stage per FS: the input's scale over the pad's ratio (a voltage divider, circuit theory),
    # and the RMS of a sine is its peak over sqrt(2)
    stage_vpk = profile["input_vpk_per_fs"] / profile["pad"]["ratio"]
    assert record["filed"]["volts_per_fs"] == pytest.approx(stage_vpk, rel=1e-9)
    assert level["values"][1] == pytest.approx(0.3 * stage_vpk / math.sqrt(2), rel=1e-3)
    assert level["changes"][0] == pytest.approx(level["values"][1] - level["values"][0], rel=1e-9)

    two = _json(run_cli("compare", ids[0], ids[1], "--bench", str(bench), "--json"))
    thd = {d["name"]: d for d in two["deltas"]}["thd_db@-20dBFS"]
    assert thd["changes"][0] == pytest.approx(-20.0, abs=0.05)  # -60 dBc against -40 dBc


BAD = [
    (["missing.wav", "--volts-per-fs", "20", "--level", "-20dBFS", "--stage-info", "name=B"], "no such file"),
    (["text.wav", "--volts-per-fs", "20", "--level", "-20dBFS", "--stage-info", "name=B"], "cannot read it as audio"),
    (["tone.wav", "--volts-per-fs", "20", "--level", "-20dBFS", "--stage", "no-such-stage.txt"], "stage description"),
    (["tone.wav", "--volts-per-fs", "20", "--level", "-20dBFS"], "which stage"),
    (["tone.wav", "--volts-per-fs", "20", "--calibration", str(PROFILE), "--level", "-20dBFS", "--stage-info", "name=B"],
     "--calibration and --volts-per-fs"),
    (["tone.wav", "--level", "-20dBFS", "--stage-info", "name=B"], "no scale"),
    (["tone.wav", "--volts-per-fs", "20", "--stage-info", "name=B"], "--level"),
    (["noise.wav", "--volts-per-fs", "20", "--level", "-20dBFS", "--stage-info", "name=B"], "--as"),
]


@pytest.mark.parametrize("args, why", BAD, ids=[w for _a, w in BAD])
def test_bad_input_is_refused_in_one_line_and_nothing_is_filed(args, why, tmp_path):
    t = np.arange(RATE // 4) / RATE
    sf.write(str(tmp_path / "tone.wav"), 0.1 * np.sin(2 * np.pi * 997 * t), RATE, subtype="FLOAT")
    # white noise (numpy's generator): no line stands out of it
    sf.write(str(tmp_path / "noise.wav"), 0.1 * np.random.default_rng(1).standard_normal(RATE // 4), RATE,
             subtype="FLOAT")
    (tmp_path / "text.wav").write_text("not audio\n")
    bench = tmp_path / "bench"
    res = run_cli("log", "file", *args, "--bench", str(bench), cwd=tmp_path)
    lines = res.stderr.strip().splitlines()
    assert res.returncode == 1 and len(lines) == 1 and lines[0].startswith("benchkit: error:"), res.stderr
    assert why in lines[0] and "Traceback" not in res.stderr
    assert run_folders(bench) == []


def test_a_failure_while_filing_marks_the_run_failed(tmp_path, monkeypatch):
    from benchkit import kinds, logbook
    from benchkit.errors import BenchkitError
    from benchkit.filing import file_captures
    from benchkit.options import defaults

    wav = _tone_with_h2(tmp_path / "a.wav", 0.3, 0.01)

    def broken(*_a, **_k):
        raise BenchkitError("the analysis broke")

    monkeypatch.setattr(kinds, "reanalyse", broken)
    o = {**defaults("channel fundamental bandwidth averages volts_per_fs load calibration ref_channel ref_freq smooth "
                    "as_kind rail json", "figures", "filing"), "level": "-20dBFS", "volts_per_fs": 20.0,
         "stage_info": ["name=B-2"], "bench": tmp_path / "bench"}
    done, refused = file_captures([wav], o, lambda _m: None, lambda _m: None)
    assert done == [] and refused == [(wav, "the analysis broke")]
    with logbook.Logbook(tmp_path / "bench") as book:
        (entry,) = book.entries()
    assert entry.status == "failed" and entry.error == "the analysis broke" and entry.device == "file"


def test_a_stepped_capture_benchkit_wrote_files_with_the_figures_analyze_gives(tmp_path):
    # plumbing, no outside source: a filed capture's figures are analyze's (the demo capture is invented data)
    sample = Path(__file__).resolve().parents[1] / "sample_captures" / "b2-bias0.8A-997Hz-steps.wav"
    bench = tmp_path / "bench"
    analysed = _json(run_cli("analyze", str(sample), "--load", "8", "--json"))
    filed = _json(run_cli("log", "file", str(sample), "--load", "8", "--stage-info", "name=B-2", "--bench", str(bench),
                          "--json"))
    assert [s["drive_dbfs"] for s in filed["steps"]] == [s["drive_dbfs"] for s in analysed["steps"]]
    for mine, theirs in zip(filed["steps"], analysed["steps"]):
        for key in ("thdn_db", "thd_db", "fundamental_vrms", "power_w"):
            assert mine[key] == pytest.approx(theirs[key], rel=1e-9), key
    record = _json(run_cli("log", "show", "last", "--bench", str(bench), "--json"))
    assert record["filed"]["scale_source"] == "simulation" and record["params"]["load_ohms"] == 8.0


def _file_options(tmp_path: Path) -> dict:
    from benchkit.options import defaults

    return {**defaults("channel fundamental bandwidth averages volts_per_fs load calibration ref_channel ref_freq smooth "
                       "as_kind rail json", "figures", "filing"), "level": "-20dBFS", "volts_per_fs": 20.0,
            "stage_info": ["name=B-2"], "bench": tmp_path / "bench"}


def test_a_file_system_error_on_one_capture_leaves_the_others_filed(tmp_path, monkeypatch):
    from typer.testing import CliRunner

    from benchkit import filing
    from benchkit.cli import app

    files = [_tone_with_h2(tmp_path / f"{name}.wav", 0.3, 0.01) for name in ("a", "b", "c")]
    real = filing.copy_capture

    def disk_full_on_b(source, folder, sidecar, sha256=None):
        if source.name == "b.wav":
            raise OSError(28, "No space left on device", str(folder / "capture.wav"))
        return real(source, folder, sidecar, *([sha256] if sha256 else []))

    monkeypatch.setattr(filing, "copy_capture", disk_full_on_b)
    done, refused = filing.file_captures(files, _file_options(tmp_path), lambda _m: None, lambda _m: None)
    assert [d.status for d in done] == ["complete", "complete"]
    ((path, why),) = refused
    assert path == files[1] and why.startswith(f"{files[1]}: cannot file it: No space left on device (")
    # the command: each failure in one line, the others filed, a non-zero exit, no traceback
    res = CliRunner().invoke(app, ["log", "file", *map(str, files), "--volts-per-fs", "20", "--level", "-20dBFS",
                                   "--stage-info", "name=B-2", "--bench", str(tmp_path / "bench2")])
    assert res.exit_code == 1 and "Traceback" not in res.output
    (error,) = [line for line in res.output.splitlines() if line.startswith("benchkit: error:")]
    assert error.startswith(f"benchkit: error: {files[1]}: cannot file it: No space left on device (")
    assert len(run_folders(tmp_path / "bench2")) == 3  # a, c complete; b's run failed, as a live run's would


def test_the_hash_recorded_is_the_stored_copys_and_a_changed_original_is_not_filed(tmp_path, monkeypatch):
    from benchkit import filing, logbook

    wav = _tone_with_h2(tmp_path / "a.wav", 0.3, 0.01)
    flac = tmp_path / "b.flac"
    sf.write(str(flac), sf.read(str(wav))[0], RATE, subtype="PCM_24")
    done, refused = filing.file_captures([wav, flac], _file_options(tmp_path), lambda _m: None, lambda _m: None)
    assert refused == [] and len(done) == 2
    for filed, original in zip(done, (wav, flac)):
        record = filed.run.record["filed"]
        stored = (filed.run.folder / "capture.wav").read_bytes()
        assert record["copy_sha256"] == hashlib.sha256(stored).hexdigest()  # hashlib's, of the bytes on disk
        assert record["sha256"] == hashlib.sha256(original.read_bytes()).hexdigest()
    assert done[0].run.record["filed"]["copy_sha256"] == done[0].run.record["filed"]["sha256"]  # a WAV: byte for byte
    # the FLAC rewritten as a float WAV holds its samples (24-bit integers are exact in float32)
    assert np.array_equal(sf.read(str(done[1].run.folder / "capture.wav"))[0], sf.read(str(flac))[0])

    # the original changed between its analysis and its copy: the copy is not the file analysed, the run fails
    real = filing.prepare

    def then_changed(path, *a, **k):
        ready = real(path, *a, **k)
        x = sf.read(str(path))[0]
        sf.write(str(path), 0.5 * x, RATE, subtype="FLOAT")
        return ready

    monkeypatch.setattr(filing, "prepare", then_changed)
    o = {**_file_options(tmp_path), "bench": tmp_path / "bench3"}
    done, refused = filing.file_captures([wav], o, lambda _m: None, lambda _m: None)
    ((_path, why),) = refused
    assert done == [] and "changed after it was analysed" in why and "\n" not in why
    with logbook.Logbook(tmp_path / "bench3") as book:
        (entry,) = book.entries()
    assert entry.status == "failed" and "changed after it was analysed" in entry.error
    # and its folder keeps no copy of a file that is not the one analysed
    assert not list(Path(entry.folder).glob("capture.*"))
