"""Unit conversions against their definitions.

dBFS: AES17 (a sine whose peaks reach full scale is 0 dBFS; sqrt(2) x RMS).
dBu/dBV: common definitions (0 dBu = 0.7746 Vrms, 0 dBV = 1 Vrms).
Power into a resistor: circuit theory, P = Vrms^2 / R = Vpk^2 / (2 R).
"""

import json
import math

import numpy as np
import pytest

from benchkit import units
from benchkit.errors import BenchkitError


def test_dbfs_of_full_scale_and_half_scale_sines():
    # AES17: a full-scale sine reads 0 dBFS; half the peak reads -6.02 dBFS
    n = np.arange(48000)
    for peak, expect in ((1.0, 0.0), (0.5, -6.0206)):
        x = peak * np.sin(2 * np.pi * 997 * n / 48000)
        rms = float(np.sqrt(np.mean(x**2)))
        assert units.dbfs_from_rms(rms) == pytest.approx(expect, abs=1e-3)
        assert units.dbfs_from_peak(peak) == pytest.approx(expect, abs=1e-3)


def test_dbfs_of_a_square_wave_exceeds_zero():
    # AES17 definition: a full-scale square wave (RMS = 1) reads +3.01 dBFS
    assert units.dbfs_from_rms(1.0) == pytest.approx(3.0103, abs=1e-4)


def test_dbu_and_dbv_references():
    # common definitions: 0 dBu = 0.7746 Vrms, +4 dBu = 1.228 Vrms, 0 dBV = 1 Vrms
    assert units.vrms_from_dbu(0.0) == pytest.approx(0.7746, abs=1e-4)
    assert units.vrms_from_dbu(4.0) == pytest.approx(1.2277, abs=1e-4)
    assert units.dbv_from_vrms(1.0) == pytest.approx(0.0)
    assert units.dbu_from_vrms(1.0) == pytest.approx(2.2185, abs=1e-4)
    assert units.vrms_from_dbv(-6.0) == pytest.approx(0.50119, abs=1e-5)


def test_power_into_a_resistor():
    # circuit theory: 2.83 Vrms into 8 ohm is 1 W; Vpk^2/(2R) gives the same
    assert units.watts_from_vrms(math.sqrt(8.0), 8.0) == pytest.approx(1.0)
    vpk = 4.0
    assert units.watts_from_vrms(units.vrms_from_vpk(vpk), 8.0) == pytest.approx(vpk**2 / 16.0)
    assert units.vrms_from_watts(2.0, 8.0) == pytest.approx(4.0)


def test_floor_keeps_logs_finite():
    assert units.db_from_ratio(0.0) == units.DB_FLOOR
    assert math.isfinite(units.dbfs_from_rms(0.0))


@pytest.mark.parametrize(
    "text, unit, value",
    [
        ("-12 dBFS", "dBFS", -12.0),
        ("0.5 Vrms", "Vrms", 0.5),
        ("300mVrms", "Vrms", 0.3),
        ("-6 dBV", "dBV", -6.0),
        ("+4 dBu", "dBu", 4.0),
        ("2.8 Vpk", "Vpk", 2.8),
        ("5.6 Vpp", "Vpp", 5.6),
    ],
)
def test_parse_level(text, unit, value):
    lvl = units.parse_level(text)
    assert lvl.unit == unit
    assert lvl.value == pytest.approx(value)


def test_parse_power_level_to_volts():
    # circuit theory: 2 W into 8 ohm is 4 Vrms
    lvl = units.parse_level("2 W@8ohm")
    assert (lvl.unit, lvl.load_ohms) == ("W", 8.0)
    assert lvl.to_vrms() == pytest.approx(4.0)
    assert units.parse_level("2 W into 8 ohm").to_vrms() == pytest.approx(4.0)


def test_level_conversions_with_a_scale():
    # a -6.02 dBFS sine on a 2 V-peak input is 1 V peak, 0.7071 Vrms (AES17 dBFS)
    assert units.parse_level("-6.0206 dBFS").to_vrms(volts_per_fs=2.0) == pytest.approx(0.70711, abs=1e-5)
    assert units.parse_level("+4 dBu").to_dbfs(volts_per_fs=2.0) == pytest.approx(
        20 * math.log10(1.2277 * math.sqrt(2) / 2.0), abs=1e-3
    )


@pytest.mark.parametrize("bad", ["", "loud", "-3 dBQ", "2 W", "-1 Vrms", "3 dBFS@8ohm"])
def test_parse_level_rejects(bad):
    with pytest.raises(BenchkitError):
        units.parse_level(bad)


def test_dbfs_level_needs_a_scale_for_volts():
    with pytest.raises(BenchkitError):
        units.parse_level("-12 dBFS").to_vrms()


def test_parse_band():
    assert units.parse_band("20:20k") == (20.0, 20000.0)
    assert units.parse_band("22:22000") == (22.0, 22000.0)
    assert units.parse_band("full") is None
    for bad in ("20", "20000:20", "a:b"):
        with pytest.raises(BenchkitError):
            units.parse_band(bad)


@pytest.mark.parametrize("value, unit, text", [
    (0.0123, "V", "12.3 mV"), (29960.0, "Hz", "29.96 kHz"), (3.279, "mV/min", "3.279 mV/min"),
    (-0.0032, "V/min", "-3.2 mV/min"), (240.0, "s", "240 s"), (0.015, "s", "15 ms"), (1e-7, "Vrms", "100 nVrms"),
    (2.5e6, "ohm", "2.5 Mohm"), (-60.0, "dB", "-60 dB"), (12.5, "%", "12.5 %"), (0.0, "W", "0 W"), (None, "V", "-"),
])
def test_quantities_print_with_si_prefixes_and_no_exponent(value, unit, text):
    # the SI prefixes (k = 1e3, m = 1e-3, u = 1e-6, n = 1e-9, M = 1e6; the
    # SI brochure), four significant digits; a unit given with a prefix
    # (mV/min) is read back to its base first, so no "mmV" can appear
    from benchkit.units import quantity

    assert quantity(value, unit) == text


def test_counts_agree_with_their_number():
    from benchkit.units import count

    assert [count(n, "step") for n in (0, 1, 2)] == ["0 steps", "1 step", "2 steps"]
    assert count(3, "frequency", "frequencies") == "3 frequencies"


@pytest.mark.parametrize("text, ohms", [
    ("8", 8.0), ("200", 200.0), ("1.8k", 1800.0), ("10k", 10e3), ("10K", 10e3), ("4.7M", 4.7e6), ("8 ohm", 8.0),
    ("10 kohm", 10e3),
    # the letter standing for the decimal point, as marked on parts (IEC 60062's code, from memory)
    ("4k7", 4700.0), ("4R7", 4.7), ("2M2", 2.2e6), ("1k8", 1800.0),
])
def test_one_reading_of_a_resistance(text, ohms):
    assert units.parse_resistance(text) == pytest.approx(ohms, rel=1e-12)


@pytest.mark.parametrize("bad", ["", "k", "abc", "nan", "1.5k2", "1e3k5", "10 kHz", "8 V", "50m", "4m7"])
def test_a_resistance_that_cannot_be_read(bad):
    with pytest.raises(BenchkitError, match="resistance"):
        units.parse_resistance(bad)


def test_every_resistance_option_reads_the_same_text(tmp_path):
    # the pad command's input impedance and the pad it checks read "10k" as the logbook's --load reads "8"
    from conftest import run_cli

    plain = run_cli("pad", "--rail", "24", "--input-ohms", "10000", "--check", "1800", "--check", "200", "--json")
    short = run_cli("pad", "--rail", "24", "--input-ohms", "10k", "--check", "1.8k", "--check", "200R", "--json")
    assert plain.returncode == 0 and short.returncode == 0, short.stderr
    assert json.loads(plain.stdout)["pads"] == json.loads(short.stdout)["pads"]


@pytest.fixture
def levels_in():
    """Choose how levels are shown for one test, then back to each screen's own way."""
    yield units.show_levels_in
    units.show_levels_in(None)


@pytest.mark.parametrize("unit, ref, want", [
    ("dBu", None, 4.0),                               # 1.228 Vrms is +4 dBu (common practice, pro line level; rounded: 5e-3 dB)
    ("dBV", None, 20 * math.log10(1.228)),            # +1.78 dBV
    ("dBr", "2.456Vrms", -6.0206),                    # half the voltage of the reference: -6.02 dB
    ("dBr", "-10dBFS", -20.0 + 10.0),                 # re a level in FS: the difference of the dBFS
    ("V", None, 1.228),
    ("W", None, 1.228 ** 2 / 8),                      # Vrms^2 / R into the 8 ohm load
])
def test_a_level_shows_in_the_unit_chosen(levels_in, unit, ref, want):
    # a sine at -20 dBFS that is 1.228 Vrms at the stage (0 dBu = sqrt(0.6) V, 0 dBV = 1 V: common definitions)
    view = levels_in(unit.lower(), ref)
    value, shown = view.value(-20.0, 1.228, 1.228 ** 2 / 8)
    assert value == pytest.approx(want, abs=5e-3) and shown == {"V": "Vrms"}.get(unit, unit)
    # without volts (no calibration) a level in volts falls back to dBFS; a dBr re FS needs none
    assert view.value(-20.0)[1] == ("dBr" if ref == "-10dBFS" else "dBFS")


def test_a_level_unit_it_cannot_show_is_refused(levels_in):
    with pytest.raises(BenchkitError, match="use one of dBFS, dBV, dBu, dBr, V, W"):
        levels_in("dBm")
    with pytest.raises(BenchkitError, match="--dbr-ref"):
        levels_in("dBu", "1Vrms")


def test_a_stored_level_shows_in_the_unit_chosen_or_as_stored(levels_in):
    # a level stored in volts or dBFS, read with a run's scale (volts peak per FS) and load: 1.228 Vrms is
    # +4 dBu (0 dBu = sqrt(0.6) V); with 20 V peak per FS it is 20 log10(sqrt(2) x 1.228 / 20) dBFS (AES17)
    dbfs = 20 * math.log10(math.sqrt(2) * 1.228 / 20.0)
    assert levels_in(None).stored(1.228, "Vrms", 20.0, 8.0) == (1.228, "Vrms")  # nothing chosen: as stored
    view = levels_in("dBu")
    assert view.stored(1.228, "Vrms")[0] == pytest.approx(4.0, abs=5e-3)
    assert view.stored(dbfs, "dBFS", 20.0)[0] == pytest.approx(4.0, abs=5e-3)
    assert view.stored(dbfs, "dBFS") == (dbfs, "dBFS")         # no scale: stays in FS
    assert view.stored(-67.0, "dB") == (-67.0, "dB")           # a ratio is not a level
    assert levels_in("dBFS").stored(1.228, "Vrms", 20.0)[0] == pytest.approx(dbfs)
    assert levels_in("dBFS").stored(1.228, "Vrms") == (1.228, "Vrms")  # no scale: stays in volts
    assert levels_in("W").stored(1.228, "Vrms", None, 8.0)[0] == pytest.approx(1.228 ** 2 / 8)
    assert levels_in("W").stored(0.5, "W") == (0.5, "W")      # a power without its load: only watts
    assert levels_in("V").stored(0.5, "W", None, 8.0)[0] == pytest.approx(2.0)
    assert levels_in("dBr", "-10dBFS").stored(1.228, "Vrms") == (1.228, "Vrms")  # re FS, no scale
    assert levels_in("dBr", "-10dBFS").stored(1.228, "Vrms", 20.0)[0] == pytest.approx(dbfs + 10.0)
    assert levels_in("dBu").stored_text(1.228, "Vrms") == "+4.00 dBu"
