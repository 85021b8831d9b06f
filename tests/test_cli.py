"""`benchkit analyze` end to end through the console entry point.

Figures are checked against the power-reduction identities (see
test_tone_reference.py); the rest is plumbing: bad input must give one
clear line and a non-zero exit, never a traceback.
"""

from __future__ import annotations

import csv
import json
import math
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf

from benchkit.recordings import write_capture

from conftest import cosine, run_cli

RATE = 48000
REPO = Path(__file__).resolve().parents[1]


def _stage_tone(path: Path, amp=0.2, a2=0.02, channels=1, sidecar=None):
    # y = x + a2 x^2: H2/H1 = a2 A / 2 (power-reduction identity)
    x = cosine(997.0, RATE, 1.0, amp, 0.3)
    y = x + a2 * x**2
    data = np.stack([y] + [np.zeros_like(y)] * (channels - 1), axis=1)
    write_capture(path, data, RATE, sidecar)
    return path, (20 * math.log10(a2 * amp / 2) if a2 else None)


def _assert_one_line_error(res, needle: str):
    assert res.returncode != 0
    assert "Traceback" not in res.stderr
    lines = [ln for ln in res.stderr.splitlines() if ln.strip()]
    assert any(ln.startswith("benchkit: error:") and needle in ln for ln in lines), res.stderr


def test_json_result_layout_and_values(tmp_path):
    wav, h2_dbc = _stage_tone(tmp_path / "t.wav")
    res = run_cli("analyze", str(wav), "--json")
    assert res.returncode == 0, res.stderr
    doc = json.loads(res.stdout)
    for key in (
        "kind schema_version file sample_rate_hz channel fundamental_hz fundamental_dbfs thd_pct thd_db "
        "thdn_pct thdn_db sinad_db noise_dbfs dc_fs bandwidth_hz harmonics clipped valid warnings scale_source"
    ).split():
        assert key in doc, key
    assert doc["kind"] == "tone" and doc["channel"] == 1 and doc["scale_source"] == "none"
    assert doc["harmonics"][0]["order"] == 2
    assert doc["harmonics"][0]["level_dbc"] == pytest.approx(h2_dbc, abs=0.01)
    assert set(doc["harmonics"][0]) >= {"order", "freq_hz", "level_dbc", "phase_deg"}
    assert doc["sinad_db"] == pytest.approx(-doc["thdn_db"])
    assert doc["bandwidth_hz"] == [20.0, 20000.0]
    assert "fundamental_vrms" not in doc
    assert "reading" in res.stderr  # the summary, on stderr


def test_volts_and_power_with_a_given_scale(tmp_path):
    # 0.2 FS peak at 20 V peak per FS is 4 V peak = 2.828 Vrms; into 8 ohm 1 W
    # (circuit theory: P = Vpk^2 / 2R)
    wav, _ = _stage_tone(tmp_path / "t.wav", a2=0.0)
    res = run_cli("analyze", str(wav), "--json", "--volts-per-fs", "20", "--load", "8")
    doc = json.loads(res.stdout)
    assert doc["scale_source"] == "given"
    assert doc["fundamental_vrms"] == pytest.approx(4 / math.sqrt(2), rel=1e-6)
    assert doc["power_w"] == pytest.approx(1.0, rel=1e-5)


def test_sidecar_scale_and_fundamental(tmp_path):
    side = {"scale_source": "simulation", "channels": [{"number": 1, "volts_per_fs": 10.0}],
            "stimulus": {"kind": "tone", "frequency_hz": 997.0}}
    wav, _ = _stage_tone(tmp_path / "t.wav", sidecar=side)
    doc = json.loads(run_cli("analyze", str(wav), "--json").stdout)
    assert doc["scale_source"] == "simulation"
    assert doc["fundamental_vrms"] == pytest.approx(2.0 / math.sqrt(2), rel=1e-5)


def test_channel_selection(tmp_path):
    wav, _ = _stage_tone(tmp_path / "two.wav", channels=2)
    ok = run_cli("analyze", str(wav), "--channel", "1", "--json")
    assert json.loads(ok.stdout)["channel"] == 1
    _assert_one_line_error(run_cli("analyze", str(wav), "--channel", "2"), "silent")
    _assert_one_line_error(run_cli("analyze", str(wav), "--channel", "3"), "channel 3 does not exist")


def test_reports_written(tmp_path):
    wav, _ = _stage_tone(tmp_path / "t.wav")
    out = tmp_path / "report"
    res = run_cli("analyze", str(wav), "--out", str(out), "--volts-per-fs", "20", "--load", "8", "--json")
    assert res.returncode == 0, res.stderr
    names = sorted(p.name for p in out.iterdir())
    assert names == sorted(
        ["t.result.json", "t.harmonics.csv", "t.spectrum.csv", "t.spectrum.png", "t.residual.png"]
    )
    assert json.loads((out / "t.result.json").read_text()) == json.loads(res.stdout)
    with (out / "t.harmonics.csv").open() as fh:
        rows = list(csv.DictReader(fh))
    assert rows[0]["order"] == "1" and "level_vrms" in rows[0]
    with (out / "t.spectrum.csv").open() as fh:
        assert next(csv.reader(fh)) == ["freq_hz", "level_dbfs"]
    for png in ("t.spectrum.png", "t.residual.png"):
        assert (out / png).read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
        assert (out / png).stat().st_size > 20000


def test_several_files_give_a_list_and_failures_exit_non_zero(tmp_path):
    good, _ = _stage_tone(tmp_path / "good.wav")
    res = run_cli("analyze", str(good), str(tmp_path / "missing.wav"), "--json")
    assert res.returncode != 0
    docs = json.loads(res.stdout)
    assert isinstance(docs, list) and len(docs) == 2
    assert docs[0]["kind"] == "tone"
    assert docs[1]["file"].endswith("missing.wav") and "no such file" in docs[1]["error"]


def _bad_inputs(tmp: Path) -> dict[str, tuple[Path, str]]:
    good, _ = _stage_tone(tmp / "good.wav")
    empty = tmp / "empty.wav"
    empty.write_bytes(b"")
    truncated = tmp / "truncated.wav"
    truncated.write_bytes(good.read_bytes()[:30])
    text = tmp / "notes.wav"
    text.write_text("bias 0.8 A, rail 24 V\n")
    zero_len = tmp / "zero.wav"
    sf.write(zero_len, np.zeros((0, 1)), RATE, subtype="PCM_24")
    zeros = tmp / "zeros.wav"
    sf.write(zeros, np.zeros(RATE), RATE, subtype="PCM_24")
    nan = tmp / "nan.wav"
    y = cosine(997.0, RATE, 1.0, 0.2)
    y[1000] = np.nan
    sf.write(nan, y, RATE, subtype="FLOAT")
    above = tmp / "above.wav"
    sf.write(above, cosine(22000.0, 96000, 1.0, 0.2), 96000, subtype="FLOAT")
    folder = tmp / "a_folder"
    folder.mkdir()
    return {
        "empty file": (empty, "empty"),
        "truncated header": (truncated, "cannot read it as audio"),
        "not audio": (text, "cannot read it as audio"),
        "zero-length audio": (zero_len, "no samples"),
        "all zero": (zeros, "silent"),
        "NaN samples": (nan, "NaN"),
        "a folder": (folder, "folder"),
        "missing": (tmp / "nope.wav", "no such file"),
        "tone above the band": (above, "outside the measurement band"),
    }


def test_bad_input_gives_one_clear_line(tmp_path):
    for case, (path, needle) in _bad_inputs(tmp_path).items():
        res = run_cli("analyze", str(path))
        _assert_one_line_error(res, needle)


def test_bad_options_are_refused(tmp_path):
    wav, _ = _stage_tone(tmp_path / "t.wav")
    _assert_one_line_error(run_cli("analyze", str(wav), "--bandwidth", "20000:20"), "band")
    _assert_one_line_error(run_cli("analyze", str(wav), "--load", "8"), "needs a voltage scale")
    _assert_one_line_error(run_cli("analyze", str(wav), "--averages", "0"), "averages")


def test_clipped_capture_is_reported_invalid_not_refused(tmp_path):
    wav = tmp_path / "clip.wav"
    sf.write(wav, np.clip(cosine(997.0, RATE, 1.0, 1.5), -1, 1), RATE, subtype="FLOAT")
    res = run_cli("analyze", str(wav), "--json")
    assert res.returncode == 0
    doc = json.loads(res.stdout)
    assert doc["clipped"] is True and doc["valid"] is False
    assert any(w["code"] == "input-clipped" and "clipped" in w["text"] for w in doc["warnings"])
    assert "NOT VALID" in res.stderr


def test_stepped_capture_analyses_each_step(tmp_path):
    # a stepped-tone capture from the virtual bench: one result per step
    res = run_cli("analyze", str(REPO / "sample_captures/b2-bias0.8A-997Hz-steps.wav"), "--load", "8", "--json",
                  "--out", str(tmp_path))
    assert res.returncode == 0, res.stderr
    doc = json.loads(res.stdout)
    assert doc["kind"] == "tone" and len(doc["steps"]) == 4
    assert [s["drive_dbfs"] for s in doc["steps"]] == [-30.0, -20.0, -14.0, -9.0]
    assert all(s["kind"] == "tone" and s["scale_source"] == "simulation" for s in doc["steps"])
    # 6 dB more drive, 6 dB more output, while the stage is linear (gain is a ratio)
    v = [s["fundamental_vrms"] for s in doc["steps"]]
    assert 20 * math.log10(v[2] / v[1]) == pytest.approx(6.0, abs=0.05)
    assert (tmp_path / "b2-bias0.8A-997Hz-steps.steps.csv").is_file()


def test_help_has_an_example():
    res = run_cli("analyze", "--help")
    assert res.returncode == 0 and "Example: benchkit analyze" in res.stdout
    assert run_cli("--version").stdout.startswith("benchkit ")


def test_a_stream_written_capture_survives_a_lost_header_update(tmp_path):
    # plumbing: chunks appended after the last header update are recovered
    from benchkit.recordings import WavStreamWriter, repair_wav

    path = tmp_path / "partial.wav"
    w = WavStreamWriter(path, RATE, 2)
    w.write(np.ones((1000, 2)) * 0.25)
    assert sf.info(str(path)).frames == 1000  # readable at every moment
    w._fh.seek(0, 2)
    w._fh.write(np.zeros((500, 2), "<f4").tobytes() + b"\x00\x01")  # a chunk, then a torn frame
    w._fh.flush()
    assert repair_wav(path) == 1500
    data, rate = sf.read(str(path))
    assert rate == RATE and data.shape == (1500, 2) and data[0, 0] == 0.25
    w.close()


def test_shell_completion_completes_commands_and_options():
    # typer's completion (click's protocol: the shell passes the words in COMP_WORDS): a command
    # from its start, an option of it from its start
    exe = Path(sys.executable).with_name("benchkit")
    env = {**os.environ, "_BENCHKIT_COMPLETE": "complete_bash"}
    got = subprocess.run([str(exe)], env={**env, "COMP_WORDS": "benchkit lo", "COMP_CWORD": "1"}, capture_output=True,
                         text=True, timeout=60)
    assert sorted(got.stdout.split()) == ["log", "loopback"]
    got = subprocess.run([str(exe)], env={**env, "COMP_WORDS": "benchkit tone --lo", "COMP_CWORD": "2"},
                         capture_output=True, text=True, timeout=60)
    assert "--load" in got.stdout.split()


def test_analyze_channel_all_reads_every_channel_of_each_file(tmp_path):
    # a two-channel capture: 0.5 FS of 1 kHz, and 0.25 FS with 1 % of 2 kHz (-40 dBc: a plain ratio);
    # --channel all gives a document a channel, each with its own figures
    import json

    import numpy as np
    import soundfile as sf

    t = np.arange(48000) / 48000
    x = np.column_stack([0.5 * np.sin(2 * np.pi * 1000 * t),
                         0.25 * np.sin(2 * np.pi * 1000 * t) + 0.0025 * np.sin(2 * np.pi * 2000 * t)])
    wav = tmp_path / "two.wav"
    sf.write(str(wav), x, 48000, subtype="FLOAT")
    res = run_cli("analyze", str(wav), "--channel", "all", "--json")
    assert res.returncode == 0, res.stderr
    docs = json.loads(res.stdout)
    assert [d["channel"] for d in docs] == [1, 2]
    assert docs[0]["fundamental_dbfs"] == pytest.approx(-6.0206, abs=1e-3)
    assert docs[1]["harmonics"][0]["level_dbc"] == pytest.approx(-40.0, abs=0.01)


def test_analyze_of_many_files_prints_one_table_and_writes_one_summary_csv(tmp_path):
    # three single tones with 1 %, 0.1 % and 0.01 % of H2 (-40, -60, -80 dBc: plain ratios): one table, a
    # row a file, instead of a summary a file; --out writes summary.csv, a row a file, beside the reports
    import csv
    import json

    import numpy as np
    import soundfile as sf

    t = np.arange(48000) / 48000
    files = []
    for k, ratio in enumerate((1e-2, 1e-3, 1e-4)):
        path = tmp_path / f"h2-{k}.wav"
        sf.write(str(path), 0.5 * np.sin(2 * np.pi * 1000 * t) + 0.5 * ratio * np.sin(2 * np.pi * 2000 * t), 48000,
                 subtype="FLOAT")
        files.append(path)
    out = tmp_path / "out"
    res = run_cli("analyze", *map(str, files), "--out", str(out), "--json")
    assert res.returncode == 0, res.stderr
    docs = json.loads(res.stdout)
    assert [round(d["thd_db"]) for d in docs] == [-40, -60, -80]
    table = [line for line in res.stderr.splitlines() if ".wav" in line and "wrote" not in line]
    assert len(table) == 3 and all(line.split()[0] == str(f) for line, f in zip(table, files))
    assert "fundamental" not in res.stderr  # (no per-file summaries)
    with (out / "summary.csv").open() as fh:
        rows = list(csv.DictReader(fh))
    assert [r["file"] for r in rows] == [str(f) for f in files]
    assert [float(r["THD (dB)"]) for r in rows] == pytest.approx([d["thd_db"] for d in docs], abs=1e-4)
