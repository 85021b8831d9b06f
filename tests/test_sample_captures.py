"""The stored sample captures (invented demo data) stay what their script
makes: regenerated captures analyse to the same figures. Plumbing for the
demo, not a check of the measurements (those use outside references)."""

from __future__ import annotations

import importlib.util
from pathlib import Path

import pytest

from benchkit.recordings import read_capture
from benchkit.kinds.sweep import analyze_response, is_response
from benchkit.kinds.tone import analyze_steps

HERE = Path(__file__).resolve().parents[1] / "sample_captures"


def _load_script():
    spec = importlib.util.spec_from_file_location("make_samples", HERE / "make_samples.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def test_regenerated_captures_analyse_like_the_stored_ones(tmp_path):
    script = _load_script()
    fresh = script.make(tmp_path)
    assert {p.name for p in fresh} == {p.name for p in HERE.glob("*.wav")}
    for path in fresh:
        if is_response(read_capture(path)):
            new_r = analyze_response(read_capture(path), 2, load_ohms=8.0)
            old_r = analyze_response(read_capture(HERE / path.name), 2, load_ohms=8.0)
            assert new_r.corners_3db[0] == pytest.approx(old_r.corners_3db[0], rel=1e-3)
            assert new_r.coupling_capacitor_f == pytest.approx(old_r.coupling_capacitor_f, rel=1e-3)
            continue
        new = analyze_steps(read_capture(path), load_ohms=8.0)
        old = analyze_steps(read_capture(HERE / path.name), load_ohms=8.0)
        assert len(new.steps) == len(old.steps)
        for a, b in zip(new.steps, old.steps):
            assert a.drive_dbfs == b.drive_dbfs
            assert a.result.valid == b.result.valid
            assert a.result.fundamental_vrms == pytest.approx(b.result.fundamental_vrms, rel=1e-3)
            assert a.result.thdn_db == pytest.approx(b.result.thdn_db, abs=0.5)
            assert a.result.harmonics[0].level_dbc == pytest.approx(b.result.harmonics[0].level_dbc, abs=0.3)


def test_samples_show_the_scenario():
    # the invented scenario's story: higher bias, less H2 (textbook class A, REFERENCES.md);
    # the unpadded capture clips the converter
    low = analyze_steps(read_capture(HERE / "b2-bias0.8A-997Hz.wav")).steps[0].result
    high = analyze_steps(read_capture(HERE / "b2-bias1.2A-997Hz.wav")).steps[0].result
    assert high.harmonics[0].level_dbc < low.harmonics[0].level_dbc - 3.0
    assert not analyze_steps(read_capture(HERE / "b2-nopad-997Hz.wav")).steps[0].result.valid
    # the sweep: the 2200 uF output capacitor's corner into 8 ohm, 9.04 Hz (circuit theory)
    sweep = analyze_response(read_capture(HERE / "b2-bias1.2A-sweep.wav"), 2, load_ohms=8.0)
    assert sweep.corners_3db[0] == pytest.approx(9.04, rel=0.03)
    assert sum(p.stat().st_size for p in HERE.iterdir()) < 4_000_000
