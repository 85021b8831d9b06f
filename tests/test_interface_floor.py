"""The interface's own floor in every result: read from the calibration,
its THD+N at a level, and the figures within 6 dB of it marked.

The floor curves here are invented for the tests (round numbers, no
interface's data). The checks against them are hand arithmetic on those
numbers: linear interpolation in dB, and the ratio identity
20 log10(a / b) = 20 log10 a - 20 log10 b (handbook algebra): a residual
of fixed absolute level r dBFS over a fundamental at L dBFS is r - L dB,
so THD+N rises 1 dB for each dB the level falls. The 6 dB margin is
common practice, from memory (benchkit.interface_floor.MARGIN_DB)."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pytest
from hypothesis import given, settings, strategies as st

from benchkit.calibration import load_profile
from benchkit.errors import BenchkitError
from benchkit.interface_floor import MARGIN_DB, floor_of, mark, summary_line

from conftest import run_cli

DEMO_PROFILE = Path(__file__).resolve().parents[1] / "calibration" / "virtual-interface.json"

#: invented: a self-test's residual THD+N at three input levels, and its noise
CURVE = {"levels_dbfs": [-60.0, -40.0, -20.0], "thdn_db": [-70.0, -84.0, -96.0], "noise_dbfs": -110.0,
         "noise_a_dbfs": None, "bandwidth_hz": [20.0, 20000.0], "measured": "2026-12-05T12:30:00+00:00",
         "source": "loopback run 20261205-1230-loopback"}


def _json(res) -> dict:
    assert res.returncode == 0, res.stderr
    return json.loads(res.stdout)


def _profile(tmp_path: Path, name: str, floor: dict | None, loopback: bool = True) -> Path:
    """The demo profile with ``floor`` as its interface_floor (and without
    its loopback floor when ``loopback`` is false)."""
    doc = json.loads(DEMO_PROFILE.read_text())
    if floor is not None:
        doc["interface_floor"] = floor
    if not loopback:
        doc["loopback_floor"] = {}
    path = tmp_path / name
    path.write_text(json.dumps(doc))
    return path


def test_the_curve_is_interpolated_in_db_extrapolated_below_and_held_above():
    floor = floor_of({"interface_floor": CURVE})
    assert floor.field == "interface_floor" and floor.source == CURVE["source"]
    # on its levels, as measured; between them, linear in dB over dBFS
    assert floor.thdn_db_at(-40.0) == pytest.approx(-84.0)
    assert floor.thdn_db_at(-50.0) == pytest.approx((-70.0 + -84.0) / 2)  # halfway
    assert floor.thdn_db_at(-25.0) == pytest.approx(-84.0 + (15 / 20) * (-96.0 + 84.0))  # -93
    # below -60 dBFS: a residual of constant level, -130 dBFS (= -70 + -60)
    assert floor.thdn_db_at(-70.0) == pytest.approx(-60.0)
    assert floor.thdn_db_at(-90.0) == pytest.approx(-40.0)
    # above -20 dBFS: held at its last value
    assert floor.thdn_db_at(-6.0) == pytest.approx(-96.0) == floor.thdn_db_at(0.0)


def test_a_residual_of_fixed_level_rises_one_db_for_each_db_the_level_falls():
    # the calibration's one loopback point: -87 dB at -20 dBFS, a residual at -107 dBFS
    floor = floor_of({"loopback_floor": {"thdn_db": -87.0, "level_dbfs": -20.0, "noise_dbfs": -107.5}, "file": "p.json"})
    assert floor.field == "loopback_floor" and floor.noise_dbfs == -107.5 and "p.json" in floor.source
    for level in (-80.0, -50.0, -20.0, -10.0, -1.0):  # the same rule on both sides of its one point
        assert floor.thdn_db_at(level) + level == pytest.approx(-107.0)
    assert floor.thdn_db_at(-30.0) - floor.thdn_db_at(-20.0) == pytest.approx(10.0)
    # the curve's extrapolation below its lowest level obeys the same identity
    curve = floor_of({"interface_floor": CURVE})
    assert {round(curve.thdn_db_at(L) + L, 9) for L in (-61.0, -75.0, -100.0)} == {-130.0}
    # an interface_floor wins over the loopback point; neither: no floor
    assert floor_of({"interface_floor": CURVE, "loopback_floor": {"thdn_db": -87.0, "level_dbfs": -20.0}}).field == \
        "interface_floor"
    assert floor_of({}) is None and floor_of(None) is None and floor_of({"interface_floor": {}, "loopback_floor": {}}) is None


def test_power_steps_are_compared_at_their_level_at_the_input_and_the_self_test_never():
    # a power step keeps volts and %: 1 Vrms at 20 V peak per FS is 0.05 FS RMS, -23.01 dBFS (AES17:
    # 20 log10(sqrt 2 x 0.05)); 0.1 % is -60 dB; the floor there, between -40 and -20 dBFS, is
    # -84 + (16.99 / 20) x (-12) = -94.19 dB
    doc = {"kind": "power", "schema_version": 2, "calibration": {"interface_floor": CURVE}, "warnings": [],
           "conditions": {"volts_per_fs": 20.0},
           "steps": [{"vrms": 1.0, "thdn_pct": 0.1}, {"vrms": 0.001, "thdn_pct": 10.0}]}
    got = mark(doc)
    assert got["steps"][0]["interface_floor_margin_db"]["thdn_pct"] == pytest.approx(-60.0 + 94.19, abs=0.01)
    # 1 mVrms: -83.01 dBFS, floor -70 + 23.01 = -46.99 dB; 10 % is -20 dB: 26.99 dB over it
    assert got["steps"][1]["interface_floor_margin_db"]["thdn_pct"] == pytest.approx(26.99, abs=0.01)
    assert "near_interface_floor" not in got["steps"][0] and got["interface_floor"]["marked"] == 0
    assert doc["steps"][0] == {"vrms": 1.0, "thdn_pct": 0.1}  # the document given is left as it was
    selftest = {"kind": "loopback", "calibration": {"interface_floor": CURVE}, "thdn_db": -96.0, "fundamental_dbfs": -20.0}
    assert mark(selftest) is selftest


def test_a_damaged_interface_floor_is_refused_in_one_line(tmp_path):
    path = _profile(tmp_path, "bad.json", {**CURVE, "levels_dbfs": [-20.0, -40.0, -60.0]})
    with pytest.raises(BenchkitError, match="interface_floor is damaged .*rise") as got:
        load_profile(path)
    assert "\n" not in str(got.value)
    assert load_profile(_profile(tmp_path, "good.json", CURVE)).interface_floor == CURVE
    # a profile without one reads, saves and hashes as before the field existed
    demo = load_profile(DEMO_PROFILE)
    assert demo.interface_floor == {} and "interface_floor" not in demo.to_dict()


def test_a_tone_run_marks_exactly_the_steps_near_the_floor_and_reanalyse_keeps_them(tmp_path):
    # the virtual se-class-a stage at -40 and -10 dBFS drive reads about -52 and -49 dB THD+N at about
    # -40.2 and -10.2 dBFS in. Invented floor: -60 dB at -30 dBFS, -90 dB at -10 dBFS: at -40.2 dBFS the
    # constant residual gives -49.8 dB (the step is marked), at -10.2 dBFS the line between its two
    # points -89.7 dB (far from it)
    floor = {**CURVE, "levels_dbfs": [-30.0, -10.0], "thdn_db": [-60.0, -90.0], "noise_dbfs": -130.0}
    prof = _profile(tmp_path, "floor.json", floor)
    bench = tmp_path / "bench"
    res = run_cli("tone", "--calibration", str(prof), "--level", "-40dBFS", "--level", "-10dBFS", "--bench", str(bench),
                  "--json")
    doc = _json(res)
    low, high = doc["steps"]
    assert low["near_interface_floor"] == ["thdn_db"] and "near_interface_floor" not in high
    for step in (low, high):  # its margin: THD+N less the floor at its level (constant residual below -30 dBFS)
        L = step["fundamental_dbfs"]
        expected = step["thdn_db"] - ((-60.0 + (-30.0 - L)) if L < -30 else -60.0 + (L + 30.0) / 20 * -30.0)
        assert step["interface_floor_margin_db"]["thdn_db"] == pytest.approx(expected, abs=0.01)
    assert low["interface_floor_margin_db"]["thdn_db"] < MARGIN_DB < high["interface_floor_margin_db"]["thdn_db"]
    assert doc["interface_floor"]["from"] == "interface_floor" and doc["interface_floor"]["marked"] == 1
    assert doc["calibration"]["interface_floor"] == floor  # the sidecar's block, as the capture keeps it
    (warning,) = [w for w in doc["warnings"] if w["code"] == "near-interface-floor"]
    assert warning["text"].startswith("1 figure lies within 6 dB") and floor["source"] in warning["text"]
    assert "interface floor (loopback run 20261205-1230-loopback): THD+N -90.0 dB at -10 dBFS" in res.stderr
    # one figure, one warning: the self-test's floor is judged once (near-interface-floor), not again by
    # the calibration's older 3 dB check (the low step's margin, about -2 dB, lies inside both)
    assert not [w for s in doc["steps"] for w in s["warnings"] if w["code"] == "interface-limited"]
    folder = Path(doc["run"]["folder"])
    stored = json.loads((folder / "capture.result.json").read_text())
    assert stored == {k: v for k, v in doc.items() if k != "run"}  # disk and the --json output agree
    # analysed again: marked again, the same marks on disk and in the logbook
    again = _json(run_cli("log", "reanalyse", doc["run"]["id"], "--bench", str(bench), "--json"))
    assert [s.get("near_interface_floor") for s in again["steps"]] == [["thdn_db"], None]
    assert json.loads((folder / "capture.result.json").read_text())["interface_floor"]["marked"] == 1
    record = json.loads((folder / "run.json").read_text())
    assert json.dumps(record).count("near-interface-floor") >= 1


def test_a_noise_run_is_marked_when_its_noise_lies_near_the_floor(tmp_path):
    # the virtual bench's noise reads about -92 dBFS unweighted: an invented floor of -95 dBFS is within
    # 6 dB of it; the floor states no A-weighted noise, so the A-weighted figure is not compared
    prof = _profile(tmp_path, "noisy.json", {**CURVE, "noise_dbfs": -95.0, "noise_a_dbfs": None})
    res = run_cli("noise", "--calibration", str(prof), "--duration", "1", "--bench", str(tmp_path / "b"), "--json")
    doc = _json(res)
    assert doc["near_interface_floor"] == ["noise_dbfs"]
    assert doc["interface_floor_margin_db"] == {"noise_dbfs": pytest.approx(doc["noise_dbfs"] + 95.0, abs=0.01)}
    assert [w["code"] for w in doc["warnings"]].count("near-interface-floor") == 1
    assert "2 figures" not in res.stderr and "1 figure within 6 dB of it is marked" in res.stderr


def test_analyze_with_a_profile_marks_and_no_floor_changes_nothing(tmp_path):
    bench = tmp_path / "bench"
    bare = _profile(tmp_path, "bare.json", None, loopback=False)  # a profile with no floor at all
    res = run_cli("tone", "--calibration", str(bare), "--level", "-40dBFS", "--level", "-10dBFS", "--bench", str(bench),
                  "--json")
    doc = _json(res)
    folder = Path(doc["run"]["folder"])
    assert "interface_floor" not in res.stdout and "near-interface-floor" not in res.stdout
    assert "interface floor" not in res.stderr
    assert mark(doc) is doc and summary_line(doc) is None
    assert "interface_floor" not in (folder / "capture.json").read_text()
    # the same capture analysed offline with a profile that has a floor: marked, --out's result file too
    capture = tmp_path / "elsewhere" / "capture.wav"
    capture.parent.mkdir()
    shutil.copy(folder / "capture.wav", capture)
    shutil.copy(folder / "capture.json", capture.with_suffix(".json"))
    floor = {**CURVE, "levels_dbfs": [-30.0, -10.0], "thdn_db": [-60.0, -90.0], "noise_dbfs": -130.0}
    out = tmp_path / "out"
    res = run_cli("analyze", str(capture), "--calibration", str(_profile(tmp_path, "floor.json", floor)), "--out",
                  str(out), "--json")
    got = _json(res)
    assert [s.get("near_interface_floor") for s in got["steps"]] == [["thdn_db"], None]
    assert "interface floor (loopback run" in res.stderr
    assert json.loads((out / "capture.result.json").read_text()) == got


# --- the floor's frequency: THD+N judged only near it, noise everywhere ---------------------------------

def _cell(hz: float, thdn_db: float = -65.0, level: float = -50.0, noise: float = -112.0) -> dict:
    """A grid cell of a tone at ``hz``: its THD+N at ``level`` dBFS, its noise (dBFS)."""
    return {"fundamental_hz": hz, "fundamental_dbfs": level, "thdn_db": thdn_db, "noise_dbfs": noise}


def test_thdn_at_other_frequencies_is_not_judged_against_a_floor_read_at_997_hz():
    # CURVE at -50 dBFS: halfway between -70 and -84, -77 dB; a THD+N of -75 dB is 2 dB over it (marked at
    # 997 Hz). A floor stating no flat span is trusted an octave either side of 997 Hz: 498.5 to 1994 Hz
    # (an octave is a frequency ratio of 2, ISO 266's definition). Noise, -112 dBFS against the floor's
    # -110 dBFS: 2 dB under it, marked at every frequency.
    doc = {"kind": "grid", "schema_version": 1, "calibration": {"interface_floor": CURVE}, "warnings": [],
           "steps": [_cell(20.0, -75.0), _cell(997.0, -75.0), _cell(1900.0, -75.0), _cell(10000.0, -75.0)]}
    got = mark(doc)
    margins = [s["interface_floor_margin_db"] for s in got["steps"]]
    assert [m.get("thdn_db") for m in margins] == [None, pytest.approx(2.0), pytest.approx(2.0), None]
    assert all(m["noise_dbfs"] == pytest.approx(-2.0) for m in margins)
    assert [s["near_interface_floor"] for s in got["steps"]] == [["noise_dbfs"], ["thdn_db", "noise_dbfs"],
                                                                 ["thdn_db", "noise_dbfs"], ["noise_dbfs"]]
    used = got["interface_floor"]
    assert used["frequency_hz"] == 997.0 and used["judged_hz"] == [498.5, 1994.0]
    assert used["marked"] == 6 and used["not_judged"] == 2
    line = summary_line(got)
    assert "THD+N judged only at 498.5-1994 Hz (1 octave either side of 997 Hz, assumed)" in line
    assert "2 THD+N figures at other frequencies not judged" in line and "noise at every frequency" in line
    # a self-test's flat span widens the range: 500 Hz to 20 kHz judges 10 kHz, still not 20 Hz
    wide = mark({**doc, "calibration": {"interface_floor": {**CURVE, "frequency_hz": 997.0,
                                                            "flat_hz": [500.0, 20000.0]}}})
    assert [s["interface_floor_margin_db"].get("thdn_db") is not None for s in wide["steps"]] == [False, True, True, True]
    assert wide["interface_floor"]["not_judged"] == 1
    assert "THD+N judged only at 500-2e+04 Hz (where its self-test's THD+N read flat" in summary_line(wide)


def test_a_power_run_takes_its_frequency_from_the_run_it_lies_under():
    # power-bandwidth: a power run at 20 Hz and one at 1 kHz, each step 1 Vrms at 20 V peak per FS
    # (-23.01 dBFS, the floor -94.19 dB there: the first test's arithmetic) with 0.002 % THD+N
    # (-93.98 dB: 20 log10(2e-5)), 0.21 dB over the floor
    def run(hz: float) -> dict:
        return {"frequency_hz": hz, "conditions": {"volts_per_fs": 20.0}, "steps": [{"vrms": 1.0, "thdn_pct": 0.002}]}

    doc = {"kind": "power-bandwidth", "schema_version": 1, "calibration": {"interface_floor": CURVE}, "warnings": [],
           "runs": [run(20.0), run(1000.0)]}
    got = mark(doc)
    low, high = (r["steps"][0] for r in got["runs"])
    assert "interface_floor_margin_db" not in low and high["near_interface_floor"] == ["thdn_pct"]
    assert high["interface_floor_margin_db"]["thdn_pct"] == pytest.approx(0.21, abs=0.01)
    assert got["interface_floor"]["not_judged"] == 1 and got["interface_floor"]["marked"] == 1


def test_the_self_tests_flat_span_is_where_its_thdn_stays_within_3_db():
    from benchkit.analysis.loopback import LoopbackResult, ResponseRow

    # invented readings: within 3 dB of the 1 kHz point's -96 dB from 200 Hz to 10 kHz; 100 Hz and 20 kHz
    # (and 20 Hz, beyond 100 Hz) are not: the span stops at the first frequency outside, each side
    thdn = {20.0: -96.0, 100.0: -90.0, 200.0: -94.0, 1000.0: -96.0, 5000.0: -98.5, 10000.0: -99.0, 20000.0: -99.5}
    rows = tuple(ResponseRow(f, 0.0, thdn_db=v) for f, v in thdn.items())
    result = LoopbackResult(48000.0, (20.0, 20000.0), 1, (), rows, -110.0, -112.0, (480,), 1.0, 0, ())
    assert result.flat_hz(997.0, 3.0) == [200.0, 10000.0]
    assert result.flat_hz(997.0, 10.0) == [20.0, 20000.0]
    floor = result.floor("loopback run x", "2026-12-05T12:30:00+00:00")
    assert floor["frequency_hz"] == 997.0 and floor["flat_hz"] == [200.0, 10000.0]


def test_the_calibrations_older_check_judges_only_near_its_frequency_and_yields_to_a_self_test():
    import numpy as np

    from benchkit.analysis.tone import analyze_tone
    from benchkit.kinds.tone import floor_warning

    # a sine with white noise (numpy's generator) of -80 dBFS at -20 dBFS: THD+N about -60 dB
    # (the noise over the fundamental: -80 - (-20), AES17's ratio)
    t = np.arange(48000) / 48000
    rng = np.random.default_rng(3)
    noise = 1e-4 * rng.standard_normal(t.size)  # 1e-4 RMS: -77 dBFS (AES17: 20 log10(sqrt 2 x 1e-4))
    point = {"loopback_floor": {"thdn_db": -58.0, "level_dbfs": -20.0, "frequency_hz": 997.0}}
    for hz, warned in ((997.0, True), (1500.0, True), (100.0, False), (10000.0, False)):
        r = analyze_tone(0.1 * np.sin(2 * np.pi * hz * t) + noise, 48000, fundamental_hz=hz)
        assert r.thdn_db < -58.0 + 3.0
        assert (floor_warning(r, point) is not None) is warned, hz
        # with a self-test's floor in the block, mark() alone judges it: no second warning
        assert floor_warning(r, {**point, "interface_floor": CURVE}) is None


# --- marking twice marks once ---------------------------------------------------------------------


_figure = st.one_of(st.none(), st.floats(-140.0, 0.0))
_node = st.fixed_dictionaries({}, optional={"thdn_db": _figure, "fundamental_dbfs": _figure, "noise_dbfs": _figure,
                                            "noise_a_dbfs": _figure,
                                            "fundamental_hz": st.sampled_from([20.0, 997.0, 1000.0, 10000.0]),
                                            "vrms": st.floats(1e-4, 30.0), "thdn_pct": st.floats(1e-4, 50.0)})
_floors = st.sampled_from([{"interface_floor": CURVE},
                           {"interface_floor": {**CURVE, "noise_a_dbfs": -115.0, "flat_hz": [200.0, 20000.0]}},
                           {"loopback_floor": {"thdn_db": -87.0, "level_dbfs": -20.0, "noise_dbfs": -100.0,
                                               "frequency_hz": 997.0}}])


@settings(max_examples=60, deadline=None)
@given(steps=st.lists(_node, max_size=5), top=_node, cal=_floors, frequency=st.sampled_from([None, 50.0, 997.0]),
       warnings=st.lists(st.sampled_from([{"code": "clipping", "text": "x"}, "a plain note"]), max_size=2))
def test_marking_a_marked_document_again_changes_nothing(steps, top, cal, frequency, warnings):
    doc = {"kind": "tone", "schema_version": 1, "calibration": cal, "warnings": warnings,
           "conditions": {"volts_per_fs": 20.0}, "steps": steps, **top}
    if frequency is not None:
        doc["frequency_hz"] = frequency
    once = mark(doc)
    assert mark(once) == once
    assert [w.get("code") for w in once["warnings"] if isinstance(w, dict)].count("near-interface-floor") <= 1


def test_a_result_marked_twice_holds_one_warning_and_its_figures_once():
    doc = {"kind": "tone", "schema_version": 1, "calibration": {"interface_floor": CURVE}, "warnings": [],
           "steps": [_cell(997.0, -75.0)]}
    once = mark(doc)
    twice = mark(once)
    assert twice == once and [w["code"] for w in twice["warnings"]] == ["near-interface-floor"]
    assert twice["steps"][0]["near_interface_floor"] == ["thdn_db", "noise_dbfs"]


def test_a_batch_analyze_states_each_results_floor_as_one_file_does(tmp_path):
    # plumbing, no outside figure: the batch prints the line the single file prints, once a result
    bench = tmp_path / "bench"
    bare = _profile(tmp_path, "bare.json", None, loopback=False)
    doc = _json(run_cli("tone", "--calibration", str(bare), "--level", "-40dBFS", "--level", "-10dBFS", "--bench",
                        str(bench), "--json"))
    folder = Path(doc["run"]["folder"])
    captures = []
    for name in ("one", "two"):
        capture = tmp_path / name / "capture.wav"
        capture.parent.mkdir()
        shutil.copy(folder / "capture.wav", capture)
        shutil.copy(folder / "capture.json", capture.with_suffix(".json"))
        captures.append(capture)
    floor = {**CURVE, "levels_dbfs": [-30.0, -10.0], "thdn_db": [-60.0, -90.0], "noise_dbfs": -130.0}
    prof = str(_profile(tmp_path, "floor.json", floor))
    alone = run_cli("analyze", str(captures[0]), "--calibration", prof)
    assert alone.returncode == 0, alone.stderr
    (line,) = [x for x in alone.stdout.splitlines() if x.startswith("interface floor (")]
    assert "1 figure within 6 dB of it is marked" in line and "THD+N judged only at" in line
    batch = run_cli("analyze", *map(str, captures), "--calibration", prof)
    assert batch.returncode == 0, batch.stderr
    assert [x for x in batch.stdout.splitlines() if "interface floor (" in x] == [f"{c}: {line}" for c in captures]
    # with --json the lines go to stderr, and stdout holds the JSON list alone
    as_json = run_cli("analyze", *map(str, captures), "--calibration", prof, "--json")
    assert len(json.loads(as_json.stdout)) == 2 and f"{captures[1]}: {line}" in as_json.stderr
