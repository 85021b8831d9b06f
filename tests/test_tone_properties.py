"""Invariants of the tone analysis (property tests, hypothesis).

The expected behaviour follows from the definitions: dBFS is 20 log10 of a
level (AES17), so scaling by g shifts it by 20 log10 g; dBc figures are
ratios to the fundamental and do not move; phases phi_k - k phi_1 do not
depend on where the record starts (trigonometric identities).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from benchkit import analyze_tone
from benchkit.recordings import read_capture, write_capture

from conftest import cosine

RATE = 48000
SETTINGS = dict(deadline=None, max_examples=25)


def _stage_like(f, amp, phase, h2, h3, n, start=0):
    """A band-limited tone with H2 and H3 (each only where it lies clear of
    fs/2, as in a capture through an anti-alias filter)."""
    t = np.arange(start, start + n)
    th = 2 * np.pi * f * t / RATE + phase
    room = RATE / 2 - 50.0
    h2 = h2 if 2 * f < room else 0.0
    h3 = h3 if 3 * f < room else 0.0
    return amp * (np.cos(th) + h2 * np.cos(2 * th + 0.4) + h3 * np.cos(3 * th - 1.2))


tones = dict(
    f=st.floats(50.0, 15000.0),
    phase=st.floats(0.0, 2 * math.pi),
    h2=st.floats(1e-5, 1e-1),
    h3=st.floats(1e-5, 1e-1),
)


@settings(**SETTINGS)
@given(gain=st.floats(0.01, 1.5), **tones)
def test_level_invariance(gain, f, phase, h2, h3):
    x = _stage_like(f, 0.5, phase, h2, h3, RATE // 2)
    a, b = analyze_tone(x, RATE), analyze_tone(gain * x, RATE)
    assert math.isclose(b.fundamental_dbfs - a.fundamental_dbfs, 20 * math.log10(gain), abs_tol=1e-6)
    assert math.isclose(a.thd_db, b.thd_db, abs_tol=1e-6)
    if a.thdn_db > -150.0:  # below that it is the float64 rounding floor, not a figure
        assert math.isclose(a.thdn_db, b.thdn_db, abs_tol=1e-3)
    for ha, hb in zip(a.harmonics[:2], b.harmonics[:2]):  # H2, H3 as built; the rest is float noise
        assert math.isclose(ha.level_dbc, hb.level_dbc, abs_tol=1e-4)


@settings(**SETTINGS)
@given(shift=st.integers(1, 20000), **tones)
def test_time_shift_invariance(shift, f, phase, h2, h3):
    n = RATE // 2
    a = analyze_tone(_stage_like(f, 0.5, phase, h2, h3, n), RATE)
    b = analyze_tone(_stage_like(f, 0.5, phase, h2, h3, n, start=shift), RATE)
    assert math.isclose(a.fundamental_fs, b.fundamental_fs, rel_tol=1e-9)
    assert math.isclose(a.thd_db, b.thd_db, abs_tol=1e-6)
    for ha, hb in zip(a.harmonics[:2], b.harmonics[:2]):
        assert math.isclose(ha.level_dbc, hb.level_dbc, abs_tol=1e-4)
        d = (ha.phase_deg - hb.phase_deg + 180.0) % 360.0 - 180.0
        assert abs(d) < 0.01
    # and the phases are the ones built in: +0.4 rad on H2, -1.2 rad on H3
    if a.harmonics:
        assert math.isclose(a.harmonics[0].phase_deg, math.degrees(0.4), abs_tol=0.5)


@settings(deadline=None, max_examples=10)
@given(other=st.sampled_from(["noise", "tone", "clipped", "silent"]), seed=st.integers(0, 1000))
def test_channel_independence(tmp_path_factory, other, seed):
    # what lies on channel 2 must not change the figures of channel 1
    rng = np.random.default_rng(seed)
    ch1 = _stage_like(997.0, 0.3, 0.5, 1e-3, 1e-4, RATE)
    ch2 = {
        "noise": 0.3 * rng.standard_normal(RATE),
        "tone": _stage_like(50.0, 0.9, 0.0, 0.1, 0.1, RATE),
        "clipped": np.clip(3 * _stage_like(1234.0, 1.0, 0.0, 0.0, 0.0, RATE), -1, 1),
        "silent": np.zeros(RATE),
    }[other]
    folder = tmp_path_factory.mktemp("chan")
    write_capture(folder / "two.wav", np.stack([ch1, ch2], axis=1), RATE)
    write_capture(folder / "one.wav", ch1[:, None], RATE)
    two = analyze_tone(read_capture(folder / "two.wav", 1).samples, RATE)
    one = analyze_tone(read_capture(folder / "one.wav", 1).samples, RATE)
    assert two.to_dict() == one.to_dict()


@settings(**SETTINGS)
@given(offset=st.floats(-0.3, 0.3), **tones)
def test_dc_offset_is_measured_and_leaves_the_ac_figures(offset, f, phase, h2, h3):
    x = _stage_like(f, 0.4, phase, h2, h3, RATE // 2)
    a, b = analyze_tone(x, RATE), analyze_tone(x + offset, RATE)
    assert math.isclose(b.dc_fs - a.dc_fs, offset, abs_tol=1e-9)
    assert math.isclose(a.thd_db, b.thd_db, abs_tol=1e-6)
    assert math.isclose(a.fundamental_fs, b.fundamental_fs, rel_tol=1e-9)


@pytest.mark.parametrize("f0", [20.0, 50.0, 100.0, 997.0])
def test_a_clean_tone_has_no_dropouts(f0):
    # whatever the number of periods in a chunk of the check, a steady sine
    # in a little noise is not a broken capture
    rate = 48000.0
    x = cosine(f0, rate, 1.0, 0.3) + 1e-6 * np.random.default_rng(2).standard_normal(48000)
    r = analyze_tone(x, rate, fundamental_hz=f0, check_dropouts=True)
    assert r.valid and not any("dropout" in w for w in r.warnings)


@pytest.mark.parametrize("f0", [50.0, 997.0])
@pytest.mark.parametrize("fault", ["gap", "skip"])
def test_a_gap_or_a_skipped_block_is_found(f0, fault):
    # a 5 ms gap (the stream delivered zeros), or 256 samples lost (a block
    # skipped: the phase jumps)
    rate = 48000.0
    x = cosine(f0, rate, 1.2, 0.3)
    if fault == "gap":
        x[24000:24240] = 0.0
    else:
        x = np.concatenate([x[:24000], x[24256:]])
    r = analyze_tone(x[:48000], rate, fundamental_hz=f0, check_dropouts=True)
    assert not r.valid
    assert any("dropouts" in w for w in r.warnings)


@settings(max_examples=200, deadline=None)
@given(size=st.integers(20, 5000), frac=st.floats(0.0, 0.7), count=st.integers(1, 60))
def test_noise_runs_are_the_bins_outside_every_lobe(size, frac, count):
    # the floor pools' noise bins, kept as runs between lobes, against the
    # definition spelt out bin by bin: all bins but DC's lobe (0..lobe) and
    # centre +- lobe of each multiple of nu1 (a lobe past the end takes the
    # last bin)
    from benchkit.analysis import spectrum as sp
    from benchkit.analysis.tone import _noise_bin, _noise_gaps

    lobe = sp.MAIN_LOBE_BINS + 1
    nu1 = 2 * lobe + 2 + frac * size
    noise = np.ones(size, dtype=bool)
    noise[: lobe + 1] = False
    for k in range(1, count + 1):
        c = int(np.rint(k * nu1))
        noise[np.clip(np.arange(c - lobe, c + lobe + 1), 0, size - 1)] = False
    starts, lengths = _noise_gaps(size, nu1, count, lobe)
    ends = np.cumsum(lengths)
    assert int(ends[-1]) == int(np.count_nonzero(noise))
    assert np.array_equal(_noise_bin(np.arange(int(ends[-1])), starts, lengths, ends), np.flatnonzero(noise))
