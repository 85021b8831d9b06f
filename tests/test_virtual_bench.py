"""The virtual bench against analytic answers (REFERENCES.md).

Stage models: power-reduction identities (poly), a direct Fourier
computation of a clipped sine (hard-clip), circuit theory for the coupling
capacitor and the pad, textbook class-A analysis for the se-class-a stage.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from benchkit import analyze_tone
from benchkit.capture import run
from benchkit.capture.stages import make_stage, parse_params
from benchkit.capture.virtual import OVERSAMPLE, InterfaceSpec, VirtualBench, virtual_bench
from benchkit.errors import BenchkitError
from benchkit.pads import Pad, parse_pad
from benchkit.kinds.tone import tone_run
from benchkit.signals import stepped_tones
from conftest import GlitchingBench, run_cli

RATE = 48000
HI = RATE * OVERSAMPLE


def _cos(amp, f=997.0, rate=HI, seconds=0.5):
    return amp * np.cos(2 * np.pi * f * np.arange(int(rate * seconds)) / rate)


# --- stage models ----------------------------------------------------------------


def test_poly_harmonics_match_the_identities():
    # x = A cos: x^2 = A^2 (1 + cos 2)/2, x^3 = A^3 (3 cos + cos 3)/4,
    # x^4 = A^4 (3/8 + cos 2/2 + cos 4/8), x^5 = A^5 (10 cos + 5 cos 3 + cos 5)/16
    g, a2, a3, a4, a5, amp = 10.0, 0.3, -0.2, 0.05, 0.02, 0.4
    stage = make_stage("poly", dict(gain=g, a2=a2, a3=a3, a4=a4, a5=a5))
    y = stage.process(_cos(amp, rate=RATE, seconds=1.0), RATE)
    h1 = g * amp + 3 * a3 * amp**3 / 4 + 10 * a5 * amp**5 / 16
    expect = {
        2: a2 * amp**2 / 2 + a4 * amp**4 / 2,
        3: a3 * amp**3 / 4 + 5 * a5 * amp**5 / 16,
        4: a4 * amp**4 / 8,
        5: a5 * amp**5 / 16,
    }
    r = analyze_tone(y / 10.0, RATE)
    assert r.fundamental_fs * 10 == pytest.approx(h1, rel=1e-9)
    for h in r.harmonics[:4]:
        assert h.level_dbc == pytest.approx(20 * math.log10(abs(expect[h.order]) / h1), abs=0.01)


def _clipped_sine_thd(ratio: float, orders: int) -> float:
    """THD of a sine of peak 1 clipped at +-ratio, by direct Fourier
    computation over one finely sampled period (numpy FFT)."""
    n = 1 << 16
    wave = np.clip(np.sin(2 * np.pi * np.arange(n) / n), -ratio, ratio)
    c = np.abs(np.fft.rfft(wave)) * 2 / n
    return math.sqrt(float(np.sum(c[2 : orders + 1] ** 2))) / c[1]


def test_hard_clip_through_the_virtual_interface_matches_fourier(tmp_path):
    # a 997 Hz sine clipped at 62.5 % of its peak, measured end to end
    bench = virtual_bench("hard-clip", dict(gain=10.0, vclip=5.0), pad=Pad(1800.0, 200.0), seed=3)
    drive_dbfs = 20 * math.log10(0.8 / 2.0)  # 0.8 V peak from a 2 V-peak output -> 8 V peak demanded
    steps = tone_run(bench, tmp_path, 997.0, [drive_dbfs])
    r = steps.steps[0].result
    orders = int(20000 // 997)
    assert r.thd_db == pytest.approx(20 * math.log10(_clipped_sine_thd(5.0 / 8.0, orders)), abs=0.05)
    # a symmetric clipper makes no even harmonics (Fourier series: half-wave symmetry)
    assert r.harmonics[0].order == 2 and r.harmonics[0].level_dbc < -90.0
    assert r.harmonic_profile in ("odd-order", "high-order-tail")


def test_a_gap_the_stream_did_not_report_is_heard_and_the_step_played_again(tmp_path):
    # 10 ms lost mid-step with no word from the stream (a late client on an
    # audio server): the tone shows the gap, the step is played again, and
    # the retake's H2 is the identity's (x + a2 x^2 at peak A: H2 = a2 A / 2,
    # power-reduction identity); a gap in every take is reported, not hidden
    a2, drive = 0.05, -10.0
    stage = dict(gain=1.0, a2=a2)
    flaky = GlitchingBench(virtual_bench("poly", stage, seed=2), glitched={1}, reported=False)
    want_dbc = 20 * math.log10(a2 * flaky.output_vrms(drive) * math.sqrt(2) / 2)
    got = tone_run(flaky, tmp_path / "flaky", 997.0, [drive])
    side = json.loads((tmp_path / "flaky" / "capture.json").read_text())
    assert side["stimulus"]["segments"][0]["file"] == "capture.retry1.wav"
    r = got.steps[0].result
    assert r.valid and not r.dropouts_s
    assert r.harmonics[0].level_dbc == pytest.approx(want_dbc, abs=0.01)
    hopeless = GlitchingBench(virtual_bench("poly", stage, seed=2), glitched={1, 2, 3}, reported=False)
    bad = tone_run(hopeless, tmp_path / "hopeless", 997.0, [drive])
    assert hopeless.takes == 3
    assert not bad.steps[0].result.valid and bad.steps[0].result.dropouts_s
    assert any("gaps or clicks in every take" in w for w in bad.warnings)


def test_a_retaken_step_keeps_its_own_length_and_settling(tmp_path):
    # steps of their own lengths (a grid's: 20 periods or more at each frequency): the take of the one a
    # stream fault spoiled plays that step alone, at its own length and settling
    from benchkit.record import record_steps

    flaky = GlitchingBench(virtual_bench("ideal", {}, seed=2), glitched={1}, segment=1)
    path = record_steps(flaky, tmp_path, [100.0, 1000.0, 5000.0], [-30.0] * 3, step_s=[0.2, 0.3, 0.4],
                        settle_s=[0.1, 0.15, 0.05])
    segs = json.loads(path.with_suffix(".json").read_text())["stimulus"]["segments"]
    assert flaky.takes == 2 and segs[1]["file"] == "capture.retry1.wav" and "file" not in segs[0]
    retake = json.loads((tmp_path / "capture.retry1.json").read_text())["stimulus"]["segments"]
    rate = flaky.sample_rate_hz
    assert len(retake) == 1 and retake[0]["frequency_hz"] == 1000.0
    assert retake[0]["end"] - retake[0]["settled"] == round(0.3 * rate)
    first = json.loads(path.with_suffix(".json").read_text())["stimulus"]["segments"][0]
    # each step's settling as given: the retake's 0.15 s against the first step's 0.1 s
    assert (retake[0]["settled"] - retake[0]["start"]) - (first["settled"] - first["start"]) == round(0.05 * rate)


def test_coupling_capacitor_corner():
    # circuit theory: C into R is a first-order high-pass at 1/(2 pi R C);
    # 2200 uF into 8 ohm: 9.04 Hz, where the response is -3.01 dB
    stage = make_stage("se-class-a", dict(noise_uv=0.0, ripple_mv=0.0))
    fc = 1 / (2 * math.pi * 8.0 * 2200e-6)
    assert fc == pytest.approx(9.04, abs=0.01)
    assert stage.operating_point()["coupling_corner_hz"] == pytest.approx(fc)
    levels = {}
    for f in (fc, 1000.0):
        stage.reset()
        y = stage.process(_cos(0.01, f, rate=RATE, seconds=12.0), RATE)
        levels[f] = analyze_tone(y[6 * RATE :], RATE, bandwidth_hz=(1.0, 20000.0)).fundamental_fs
    assert 20 * math.log10(levels[fc] / levels[1000.0]) == pytest.approx(-3.0103, abs=0.02)


@pytest.mark.parametrize("bias", [0.8, 1.2])
def test_se_class_a_clips_first_on_the_current_limited_half(bias):
    # textbook class A: the positive swing ends at I_bias x R_load, the
    # negative one at the rail (half the supply less saturation)
    stage = make_stage("se-class-a", dict(bias=bias, noise_uv=0.0, ripple_mv=0.0))
    limit = bias * 8.0
    y = stage.process(_cos(1.1 * limit / 10.0, f=200.0, rate=HI, seconds=1.0), HI)[HI // 2 :]
    assert y.max() == pytest.approx(limit, rel=0.01)  # flat at the current limit
    assert y.min() < -1.09 * limit  # the negative half still swings freely
    assert -y.min() < 24.0 / 2 - 1.0


def test_se_class_a_efficiency_at_clipping_onset_never_exceeds_25_percent():
    # textbook class A with a constant-current pull-up: P_max = min(I R, V/2)^2/(2R)
    # against a supply draw of V I; at most 25 % (at I = V/(2R))
    for bias in (0.5, 0.8, 1.2, 1.5, 2.0):
        stage = make_stage("se-class-a", dict(bias=bias, noise_uv=0.0, ripple_mv=0.0))
        op = stage.operating_point()
        assert op["supply_current_a"] == bias and op["supply_watts"] == pytest.approx(24.0 * bias)
        p_onset = 0.0
        for peak in np.linspace(1.0, 14.0, 53):
            stage.reset()
            y = stage.process(_cos(peak / 10.0, rate=HI, seconds=0.05), HI)[HI // 100 :]
            r = analyze_tone(y[: HI // 50] / 20.0, HI, fundamental_hz=997.0)
            if r.thd_ratio > 0.01:  # onset of clipping: 1 % THD
                break
            p_onset = r.fundamental_fs**2 * 400.0 / (2 * 8.0)
        assert 0.0 < p_onset / op["supply_watts"] <= 0.25
        # at 1 % THD the fundamental of a just-clipped sine stands a few per
        # cent above the clip level (Fourier series of a clipped sine)
        textbook = min(bias * 8.0, 12.0) ** 2 / (2 * 8.0)
        assert p_onset <= 1.06 * textbook


def test_se_class_a_h2_grows_with_level_and_falls_with_bias():
    # textbook class A: the device's exponential law makes H2 dominant,
    # growing with level; more bias current straightens it
    def h2(bias, peak):
        stage = make_stage("se-class-a", dict(bias=bias, noise_uv=0.0, ripple_mv=0.0))
        y = stage.process(_cos(peak / 10.0, rate=HI, seconds=0.2), HI)[HI // 10 :]
        return analyze_tone(y / 20.0, HI).harmonics[0]

    low, high, biased = h2(0.8, 1.0), h2(0.8, 4.0), h2(1.2, 4.0)
    assert low.order == 2 and high.level_dbc > low.level_dbc + 10.0
    assert biased.level_dbc < high.level_dbc - 3.0


def test_midpoint_drifts_as_the_device_warms():
    # first-order thermal model (common practice): after one time constant
    # the junction has made 1 - 1/e of its rise; V_BE moves about -2 mV/degC
    stage = make_stage("se-class-a", dict(bias=1.0, rth=1.5, tau_s=200.0, mid_tc_mv=-10.0))
    start = stage.midpoint_v()
    rise = 1.5 * 12.0 * 1.0  # R_th x P_device at idle
    stage.advance(200.0)
    assert stage.operating_point()["junction_c"] - 23.0 == pytest.approx(rise * (1 - math.exp(-1)), rel=1e-9)
    stage.advance(5000.0)
    assert stage.midpoint_v() - start == pytest.approx(-10e-3 * rise, rel=1e-6)


def test_stage_parameters_are_checked():
    with pytest.raises(BenchkitError, match="no parameter"):
        make_stage("ideal", dict(bais=1.0))
    with pytest.raises(BenchkitError, match="unknown stage model"):
        make_stage("push-pull-x")
    with pytest.raises(BenchkitError, match="positive"):
        make_stage("se-class-a", dict(bias=-1.0))
    assert parse_params(["bias=1.2", "gain = 10"]) == {"bias": 1.2, "gain": 10.0}
    with pytest.raises(BenchkitError):
        parse_params(["bias"])


# --- pad ------------------------------------------------------------------------------


def test_loaded_pad_ratio_and_resistor_power():
    # circuit theory: Vout/Vin = (R2 || Rin) / (R1 + R2 || Rin); P = V^2 / R
    pad = Pad(1800.0, 200.0)
    shunt = 200.0 * 10e3 / (200.0 + 10e3)
    assert pad.ratio(10e3) == pytest.approx(shunt / (1800.0 + shunt))
    p1, p2 = pad.resistor_watts(10.0, 10e3)
    vout = 10.0 * pad.ratio(10e3)
    assert p1 == pytest.approx((10.0 - vout) ** 2 / 1800.0)
    assert p2 == pytest.approx(vout**2 / 200.0)
    assert parse_pad("1.8k:200") == pad and parse_pad("none") is None


# --- the interface and the capture path -------------------------------------------------


@pytest.mark.parametrize("seed", [1, 2, 3, 4, 5])
def test_latency_is_found_and_removed(seed):
    bench = virtual_bench("ideal", dict(gain=1.0), seed=seed)
    stim = stepped_tones(997.0, [-20.0], RATE, step_s=0.2)
    cap = run(bench, stim)
    assert cap.latency_samples == bench.last_latency_samples
    seg = stim.segments[0]
    # aligned: the reference input follows the stimulus sample for sample
    ref = cap.channel(2)[seg.settled : seg.end]
    played = stim.samples[seg.settled : seg.end, 0]
    assert np.corrcoef(ref, played)[0, 1] > 0.9999


def test_poly_end_to_end_within_the_interface_floor(tmp_path):
    # identities as above, through DAC, stage, pad and ADC; the voltage at
    # the stage follows from the scales (2 V peak out per FS, gain 10)
    g, a2, a3 = 10.0, 0.05, -0.02
    bench = virtual_bench("poly", dict(gain=g, a2=a2, a3=a3), seed=7)
    drive = -12.0
    amp = 2.0 * 10 ** (drive / 20)  # volts peak into the stage
    steps = tone_run(bench, tmp_path, 997.0, [drive], load_ohms=8.0)
    r = steps.steps[0].result
    h1 = g * amp + 3 * a3 * amp**3 / 4
    assert r.scale_source == "simulation"
    assert r.fundamental_vrms == pytest.approx(h1 / math.sqrt(2), rel=2e-3)
    assert r.power_w == pytest.approx((h1 / math.sqrt(2)) ** 2 / 8.0, rel=4e-3)
    by_order = {h.order: h.level_dbc for h in r.harmonics}
    assert by_order[2] == pytest.approx(20 * math.log10(a2 * amp**2 / 2 / h1), abs=0.05)
    assert by_order[3] == pytest.approx(20 * math.log10(abs(a3) * amp**3 / 4 / h1), abs=0.05)
    # the interface floor: about -110 dBFS over the band at each converter
    assert r.noise_dbfs < -100.0


def test_no_pad_clips_the_converter(tmp_path):
    # 2.83 V peak at the stage into a 2 V peak input: the ADC clips, and a
    # run whose first step clips has nothing to measure
    bench = virtual_bench("ideal", dict(gain=10.0), pad=None, seed=2)
    with pytest.raises(BenchkitError, match="input clipped"):
        tone_run(bench, tmp_path, 997.0, [20 * math.log10(0.283 / 2.0)])
    assert (tmp_path / "capture.wav").is_file()  # the capture is kept all the same


def test_clock_offset_shifts_the_frequency(tmp_path):
    # an ADC clock running 100 ppm fast sees 997 Hz as 997 / (1 + 1e-4)
    bench = VirtualBench(make_stage("ideal", dict(gain=1.0)), None, InterfaceSpec(clock_ppm=100.0), seed=1)
    steps = tone_run(bench, tmp_path, 997.0, [-20.0])
    r = steps.steps[0].result
    assert bench.effective_clock_ppm == pytest.approx(100.0, abs=0.01)
    assert r.fundamental_hz == pytest.approx(997.0 / (1 + 100e-6), abs=2e-4)
    # measured on the reference input, and warned about
    assert steps.clock_offset_ppm == pytest.approx(100.0, abs=0.5)
    assert any("ppm" in w for w in steps.warnings)


def test_interface_floor_on_the_loopback():
    # the default interface: about -110 dBFS of noise from each converter
    # over 20 Hz-20 kHz, so about -107 dBFS on the loopback
    bench = virtual_bench("ideal", seed=4)
    stim = stepped_tones(997.0, [-20.0], RATE)
    cap = run(bench, stim)
    seg = stim.segments[0]
    r = analyze_tone(cap.channel(2)[seg.settled : seg.end], RATE)
    assert r.noise_dbfs == pytest.approx(10 * math.log10(2 * 10 ** (-110 / 10)), abs=1.0)
    assert r.fundamental_dbfs == pytest.approx(-20.0, abs=0.01)


def test_hum_joins_at_the_input(tmp_path):
    # mains hum at 50 Hz and its third harmonic (common practice: hum shows
    # at the mains frequency and its harmonics) raises the noise to its level
    bench = VirtualBench(make_stage("ideal", dict(gain=1.0)), None, InterfaceSpec(hum_hz=50.0, hum_dbfs=-70.0), seed=1)
    r = tone_run(bench, tmp_path, 997.0, [-20.0]).steps[0].result
    hum_rms = 10 ** (-70 / 20) * math.sqrt((1 + 0.3**2) / 2)
    assert r.noise_dbfs == pytest.approx(20 * math.log10(math.sqrt(2) * hum_rms), abs=0.3)


def test_dc_coupled_input_passes_dc(tmp_path):
    # the converters' own curvature makes DC (x^2 has a mean a2 A^2/2:
    # identities). AC coupling (a first-order high-pass before the ADC,
    # circuit theory) blocks the DAC's share; a DC-coupled input keeps both
    def dc(coupling):
        spec = InterfaceSpec(ac_coupling_hz=coupling, residual_h2_dbc=-40.0, adc_noise_dbfs=-140.0, dac_noise_dbfs=-140.0)
        bench = VirtualBench(make_stage("ideal", dict(gain=1.0)), None, spec, seed=1)
        return tone_run(bench, tmp_path / str(coupling), 997.0, [-6.0]).steps[0].result.dc_fs

    a, a2 = 10 ** (-6 / 20), 2 * 10 ** (-40 / 20)
    one_share = a2 * a**2 / 2
    assert dc(3.0) == pytest.approx(one_share, rel=0.02)
    assert dc(None) == pytest.approx(2 * one_share, rel=0.02)


def test_a_run_stops_stepping_up_once_the_input_clips(tmp_path):
    # no pad, gain 10: 0.283 V peak out becomes 2.83 V peak at a 2 V-peak
    # input; the steps after the one that clips are not played
    bench = virtual_bench("ideal", dict(gain=10.0), pad=None, seed=2)
    steps = tone_run(bench, tmp_path, 997.0, [-40.0, -30.0, -17.0, -10.0, -6.0])
    assert [s.drive_dbfs for s in steps.steps] == [-40.0, -30.0]
    assert all(s.result.valid for s in steps.steps)
    assert any("stopped stepping up" in w and "-17 dBFS step" in w and "3 step(s)" in w for w in steps.warnings)


@pytest.mark.parametrize("args, clips", [
    (("--load", "4"), True),  # the stage drives the load stated: its swing ends at I R = 0.8 A x 4 ohm = 3.2 V
    (("--load", "8"), False),  # I R = 6.4 V: 4.5 V peak is clear of it
    (("--load", "4", "--sim-param", "load=8"), False),  # told otherwise: the model keeps its 8 ohm
    (("--load", "8", "--sim-load", "4"), True),  # --sim-load is the simulated load itself
])
def test_the_virtual_stage_drives_the_load_the_command_states(tmp_path, args, clips):
    # se-class-a at 0.8 A bias (circuit theory: a constant-current pull-up
    # lifts the load no higher than I_bias x R_L): -13 dBFS is 0.448 V peak
    # in, 4.48 V peak out at gain 10; into 4 ohm the positive half clips
    res = run_cli("tone", "--level", "-13dBFS", *args, "--bench", str(tmp_path), "--json")
    assert res.returncode == 0, res.stderr
    thdn = json.loads(res.stdout)["steps"][0]["thdn_pct"]
    assert (thdn > 3.0) if clips else (thdn < 1.0), thdn


@pytest.mark.parametrize("n", [1, 7, 8, 1000, 48_001])
def test_the_fast_decimation_is_scipys_resample_poly(n):
    # the converters' decimation by FFT convolution gives scipy's polyphase
    # resampler's samples (scipy.signal.resample_poly, the reference), to rounding
    import scipy.signal

    from benchkit.capture.virtual import OVERSAMPLE, _decimate, _lowpass

    h = _lowpass(0.46)
    v = np.random.default_rng(n).standard_normal(n * OVERSAMPLE + 3)
    want = scipy.signal.resample_poly(v, 1, OVERSAMPLE, window=h)
    got = _decimate(v, h)
    assert got.shape == want.shape and np.max(np.abs(got - want)) < 1e-12
