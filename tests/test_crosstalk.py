"""Crosstalk and channel balance of a stereo stage.

References: a first-order high-pass s / (s + wc) far above the band
rises 6 dB an octave through it (circuit theory), evaluated here with
scipy.signal.freqs (a general-purpose reference library); crosstalk is
the undriven channel's output over the driven one's at the driven
frequency, balance the ratio of the two channels' outputs driven alike
(common practice; IEC 60268-3 describes crosstalk, from memory).
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
import scipy.signal

from benchkit.capture.stages import StereoCoupling
from benchkit.capture.virtual import virtual_bench
from benchkit.kinds.crosstalk import crosstalk_run

from conftest import GlitchingBench, run_cli

FREQS = [20.0, 100.0, 997.0, 10000.0, 20000.0]


def _expected_db(f, at_1k_db, flat_db):
    """The coupling as its definition states it, evaluated by scipy: a
    first-order high-pass at 100 kHz scaled to read at_1k_db at 1 kHz,
    plus a flat part."""
    wc = 2 * math.pi * StereoCoupling.CORNER_HZ
    w = 2 * math.pi * np.array([1000.0, f])
    _w, hp = scipy.signal.freqs([1.0, 0.0], [1.0, wc], worN=w)
    k = 10 ** (at_1k_db / 20) / abs(hp[0])
    return 20 * math.log10(abs(10 ** (flat_db / 20) + k * hp[1]))


def test_crosstalk_against_frequency_and_balance(tmp_path):
    bench = virtual_bench("poly", {"crosstalk_1k_db": -70.0, "crosstalk_flat_db": -100.0, "balance_db": 0.2},
                          stereo=True, seed=3)
    result = crosstalk_run(bench, tmp_path, FREQS, -20.0)
    assert len(result.direction("A")) == len(result.direction("B")) == len(FREQS)
    for x in result.leaks:
        assert not x.below_floor
        assert x.crosstalk_db == pytest.approx(_expected_db(x.frequency_hz, -70.0, -100.0), abs=0.5), x
    for _f, b in result.balance():
        assert b == pytest.approx(0.2, abs=0.01)
    d = result.to_dict()
    assert d["crosstalk_db"] == pytest.approx(-70.0, abs=0.3) and d["balance_db"] == pytest.approx(0.2, abs=0.01)


@pytest.mark.parametrize("reported", [True, False], ids=["reported", "unreported"])
def test_a_dropout_while_channel_b_is_driven_is_played_again(tmp_path, reported):
    # 10 ms lost in the first step that drives output B (heard on input 3,
    # B's output): that step alone is played again, with the marker still
    # on output A, and the crosstalk reads as the coupling's definition says
    bench = GlitchingBench(virtual_bench("poly", {"crosstalk_1k_db": -60.0, "crosstalk_flat_db": -160.0},
                                         stereo=True, seed=4), glitched={1}, reported=reported, segment=1, channel=3)
    result = crosstalk_run(bench, tmp_path, [997.0], -20.0)
    assert bench.takes == 2
    side = json.loads((tmp_path / "capture.json").read_text())
    assert [s.get("file") for s in side["stimulus"]["segments"]] == [None, "capture.retry1.wav"]
    for x in result.leaks:
        assert x.crosstalk_db == pytest.approx(_expected_db(997.0, -60.0, -160.0), abs=0.1), x


def test_capacitive_crosstalk_rises_six_db_an_octave(tmp_path):
    bench = virtual_bench("poly", {"crosstalk_1k_db": -60.0, "crosstalk_flat_db": -160.0}, stereo=True, seed=4)
    a = {round(x.frequency_hz): x.crosstalk_db for x in crosstalk_run(bench, tmp_path, [1000.0, 2000.0, 8000.0], -20.0).direction("A")}
    assert a[2000] - a[1000] == pytest.approx(20 * math.log10(2.0), abs=0.1)
    assert a[8000] - a[1000] == pytest.approx(_expected_db(8000.0, -60, -160) - _expected_db(1000.0, -60, -160), abs=0.1)


def test_a_leak_under_the_noise_is_an_upper_bound(tmp_path):
    bench = virtual_bench("poly", {"crosstalk_1k_db": -170.0, "crosstalk_flat_db": -170.0}, stereo=True, seed=5)
    result = crosstalk_run(bench, tmp_path, [997.0], -20.0)
    for x in result.leaks:
        assert x.below_floor and x.crosstalk_db > -170.0
    assert any("upper bound" in w for w in result.warnings)


def test_crosstalk_command_files_and_compares(tmp_path):
    for db in ("-70", "-80"):
        res = run_cli("crosstalk", "--sim", "poly", "--sim-param", f"crosstalk_1k_db={db}", "--freq", "997",
                      "--freq", "10000", "--load", "8", "--tag", f"x={db}", "--json")
        assert res.returncode == 0, res.stderr
    d = json.loads(res.stdout)
    assert d["kind"] == "crosstalk" and d["load_ohms"] == 8.0
    again = run_cli("log", "reanalyse", "last", "--json")
    assert again.returncode == 0, again.stderr
    redone = json.loads(again.stdout)
    assert redone["crosstalk_db"] == pytest.approx(d["crosstalk_db"], abs=1e-9)
    # the load rides in the capture's sidecar: analysed again, the result still carries it
    assert redone["load_ohms"] == redone["conditions"]["load_ohms"] == 8.0
    comp = run_cli("compare", "--last", "2", "--json")
    assert comp.returncode == 0, comp.stderr
    deltas = {x["name"]: x for x in json.loads(comp.stdout)["deltas"]}
    assert deltas["crosstalk_db"]["changes"][0] == pytest.approx(-10.0, abs=0.3)
    assert deltas["crosstalk_db"]["verdicts"][0] == "better"


def test_stereo_parameters_need_a_stereo_stage():
    res = run_cli("tone", "--sim", "poly", "--sim-param", "crosstalk_1k_db=-70")
    assert res.returncode == 1 and "--sim-stereo" in res.stderr and "Traceback" not in res.stderr
    res = run_cli("power", "--sim-stereo", "--load", "8")
    assert res.returncode == 1 and "stereo" in res.stderr and "Traceback" not in res.stderr


def test_crosstalk_at_another_load_does_not_compare_as_like_for_like():
    # a version-1 crosstalk result did not carry its load: the runs' own parameters do,
    # and 8 ohm against 4 ohm is no like-for-like comparison (common practice:
    # channel separation depends on the load through the shared supply and ground)
    from benchkit.analysis.compare import conditions_of, mismatches

    doc = {"kind": "crosstalk", "crosstalk_db": -70.0}
    conds = [conditions_of(doc, {"params": {"load_ohms": r}}) for r in (8.0, 4.0)]
    assert [c["load_ohms"] for c in conds] == [8.0, 4.0]
    assert any("the load differs" in m for m in mismatches(conds, ["a", "b"]))
