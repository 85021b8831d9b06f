"""The demo: "Test stage B-2" on the virtual bench, before and after a bias
change (the invented scenario of the design notes).

A 24 V single-ended class-A stage with a constant-current pull-up,
capacitor-coupled into an 8 ohm dummy load, measured through a 10:1 pad into
a line input of 2.0 V peak full scale, at 0.8 A and then 1.2 A of bias,
ambient 23 degC. The report folder is a bench folder: every run is filed in
its logbook (runs/ and logbook.sqlite), as the measuring commands file
theirs. Each bias gets a 997 Hz tone at several levels, an intermodulation
run (60 Hz + 7 kHz at 4:1, stepped) and a power run
(the power at 1 %, 0.1 % and 10 % THD+N beside the class-A budget's
ceiling); at 1.2 A a synchronized sweep from 2 Hz gives the response (the
output capacitor's corner into the load, the capacitor estimated from it)
and distortion against frequency, the voltage gain is read at 1 kHz, the
output noise is measured with the
input terminated (unweighted, A-weighted, SNR re 1 W, the supply's hum),
the output impedance is read with the load off and then on (the loop's
output resistance, and the coupling capacitor's reactance at low
frequencies), a stereo pair of the stage gives its crosstalk both ways
and its channel balance, and the midpoint is logged as the stage warms (the virtual thermal model in accelerated time: 25 minutes of it in
no time). The before/after comparisons are made by benchkit.compare_runs,
as 'benchkit compare' makes them, into comparisons/.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Callable

from benchkit import units
from benchkit import kinds
from benchkit.kinds import headline_figures
from benchkit.budget import ClassABudget
from benchkit.capture.virtual import DEMO_PAD, virtual_bench
from benchkit.compare_runs import compare_runs
from benchkit.kinds.imd import imd_run, twin_tone
from benchkit.logbook import Logbook
from benchkit.kinds.power import power_run
from benchkit.kinds.sweep import response_run
from benchkit.kinds.tone import StepsResult, tone_run

BIASES_A = (0.8, 1.2)
FREQUENCY_HZ = 997.0
#: Drive at the interface output; with the stage's gain of 10 and a 2 V
#: peak output these give about 0.45, 1.4, 2.8 and 4 Vrms at the load.
DRIVE_DBFS = (-30.0, -20.0, -14.0, -11.0)
#: The intermodulation steps (modulation method), composite peak.
IMD_DBFS = (-30.0, -20.0, -14.0)
LOAD_OHMS = 8.0
AMBIENT_C = 23.0
#: The sweep: from 2 Hz (two octaves below the expected 9 Hz corner) to
#: 22 kHz in about 9 s (L = 1 s), at the -20 dBFS step's level.
SWEEP_SPAN_HZ = (2.0, 22000.0)
SWEEP_S = 10.0
SWEEP_DBFS = -20.0
#: The stage as designed: 24 V rail, 1 V saturation; gain 10 and 2 V peak
#: per FS at the interface output put the drive for a stage peak V at
#: 20 log10(V / 20) dBFS.
RAIL_V, VSAT_V = 24.0, 1.0


#: The gain run's drive at 1 kHz (about 1.4 Vrms at the load).
GAIN_DBFS = -20.0
#: The noise run: seconds recorded with nothing played.
NOISE_S = 3.0
#: The drift log: 25 minutes of model time, a reading every 10 s of it.
DRIFT_S, DRIFT_STEP_S = 1500.0, 10.0
#: What the logbook remembers of the stage.
STAGE = {"name": "Test stage B-2 (invented)", "topology": "single-ended class A, constant-current pull-up",
         "rail_v": RAIL_V, "load_ohms": LOAD_OHMS, "pad": "1.8k:200 (10:1)", "ambient_c": AMBIENT_C}
NOTE = "demo: Test stage B-2 (invented)"


def _demo_drift(folder: Path, seed: int):
    """The midpoint of B-2 at 1.2 A from cold, against +-0.5 V of half the rail."""
    from benchkit.capture.stages import make_stage
    from benchkit.kinds.drift import analyze_drift_csv, log_drift
    from benchkit.meters import VirtualMidpoint

    stage = make_stage("se-class-a", {"bias": BIASES_A[-1], "ambient_c": AMBIENT_C}, seed=seed)
    log = folder / "log.csv"
    log_drift(VirtualMidpoint(stage, accelerated=DRIFT_STEP_S, seed=seed), log, 1.0, DRIFT_S)
    result = analyze_drift_csv(log, limit_v=0.5, band_v=0.01, nominal_v=RAIL_V / 2,
                               info={"source": "virtual se-class-a midpoint", "accelerated": DRIFT_STEP_S})
    return result


@dataclass(frozen=True)
class DemoReport:
    folder: Path
    runs: tuple[tuple[str, StepsResult], ...]
    response: object
    files: tuple[Path, ...]
    text: str


def _logged(book: Logbook, command: str, bias: float, params: dict, measure) -> tuple[object, list[Path]]:
    """One run filed in the logbook: ``measure(folder)`` makes the result
    there, and its kind writes its report files beside it."""
    with book.start(command, tags={"bias": f"{bias:g}A"}, note=NOTE, stage=STAGE, device="virtual",
                    params=kinds.get(command).params.stored(params), argv=["demo"]) as run:
        result = measure(run.folder)
        written = kinds.get(command).reports(result, run.folder, 1)
        doc = result.to_dict()
        run.complete(doc, written, written[0], figures=headline_figures(doc))
    return result, written


def run_demo(out: Path, seed: int = 1, say: Callable[[str], None] = lambda _m: None) -> DemoReport:
    """Run the demo scenario into the bench folder ``out``."""
    out.mkdir(parents=True, exist_ok=True)
    with Logbook(out) as book:
        book.remember_stage(STAGE)
        return _demo(book, out, seed, say)


def _demo(book: Logbook, out: Path, seed: int, say) -> DemoReport:
    band = (20.0, 20000.0)
    tones, powers, files, texts = [], [], [], []
    for i, bias in enumerate(BIASES_A):
        label = f"bias {bias:g} A"
        stage = {"bias": bias, "ambient_c": AMBIENT_C}
        say(f"virtual bench: stage B-2 at {label}, {FREQUENCY_HZ:g} Hz at {len(DRIVE_DBFS)} levels")
        bench = virtual_bench("se-class-a", stage, pad=DEMO_PAD, seed=seed + i)

        def tones_in(folder, bench=bench):
            return tone_run(bench, folder, FREQUENCY_HZ, list(DRIVE_DBFS), load_ohms=LOAD_OHMS, note=NOTE,
                            traces=True)

        steps, written = _logged(book, "tone", bias, dict(channel=1, frequency_hz=FREQUENCY_HZ, levels_dbfs=list(DRIVE_DBFS),
                                                          load_ohms=LOAD_OHMS, bandwidth_hz=band,
                                                          sample_rate_hz=bench.sample_rate_hz), tones_in)
        tones.append((label, steps))
        files += written
        texts.append(kinds.get("tone").summary(steps, f"Test stage B-2, {label}"))
        say(f"virtual bench: stage B-2 at {label}, intermodulation (60 Hz + 7 kHz, 4:1) at {len(IMD_DBFS)} levels")
        im_bench = virtual_bench("se-class-a", stage, pad=DEMO_PAD, seed=seed + 21 + i)

        def imd_in(folder, im_bench=im_bench):
            return imd_run(im_bench, folder, twin_tone("modulation"), list(IMD_DBFS), load_ohms=LOAD_OHMS, note=NOTE,
                           spectrum=True)

        im, written = _logged(book, "imd", bias, dict(channel=1, twin=twin_tone("modulation").to_dict(),
                                                      levels_dbfs=list(IMD_DBFS), load_ohms=LOAD_OHMS,
                                                      sample_rate_hz=im_bench.sample_rate_hz), imd_in)
        files += written
        texts.append(kinds.get("imd").summary(im, f"Test stage B-2, {label}: intermodulation"))
        say(f"virtual bench: stage B-2 at {label}, power run to 10 % THD+N")
        budget = ClassABudget(RAIL_V, bias, LOAD_OHMS, VSAT_V)
        first = units.db_from_ratio(budget.peak_vpk / 20.0) - 40.0
        pw_bench = virtual_bench("se-class-a", stage, pad=DEMO_PAD, seed=seed + 11 + i)

        def power_in(folder, pw_bench=pw_bench, budget=budget, first=first, bias=bias):
            return power_run(pw_bench, folder, FREQUENCY_HZ, first, -3.0, LOAD_OHMS, ref_channel=pw_bench.reference_input(),
                             supply_v=RAIL_V, supply_a=bias, budget=budget, note=NOTE)

        params = dict(channel=1, ref_channel=pw_bench.reference_input(), frequency_hz=FREQUENCY_HZ, load_ohms=LOAD_OHMS,
                      supply_v=RAIL_V, supply_a=bias, rail_v=RAIL_V, bias_a=bias, vsat_v=VSAT_V,
                      sample_rate_hz=pw_bench.sample_rate_hz)
        pw, written = _logged(book, "power", bias, params, power_in)
        powers.append((label, pw))
        files += written
        texts.append(kinds.get("power").summary(pw, f"Test stage B-2, {label}: power into {LOAD_OHMS:g} ohm"))
    bias = BIASES_A[-1]
    label = f"bias {bias:g} A"
    say(f"virtual bench: stage B-2 at {label}, sweep {SWEEP_SPAN_HZ[0]:g} Hz to {SWEEP_SPAN_HZ[1]:g} Hz")
    bench = virtual_bench("se-class-a", {"bias": bias, "ambient_c": AMBIENT_C}, pad=DEMO_PAD, seed=seed + 7)

    def sweep_in(folder):
        return response_run(bench, folder, SWEEP_DBFS, SWEEP_SPAN_HZ, SWEEP_S, ref_channel=bench.reference_input(),
                            load_ohms=LOAD_OHMS, note=NOTE)

    response, written = _logged(book, "sweep", bias, dict(channel=1, ref_channel=bench.reference_input(),
                                                          load_ohms=LOAD_OHMS, bandwidth_hz=band,
                                                          span_hz=list(SWEEP_SPAN_HZ), level_dbfs=SWEEP_DBFS,
                                                          sample_rate_hz=bench.sample_rate_hz), sweep_in)
    files += written
    say(f"virtual bench: stage B-2 at {label}, voltage gain at 1 kHz")
    from benchkit.kinds.gain import gain_of_capture
    from benchkit.record import record_steps

    g_bench = virtual_bench("se-class-a", {"bias": bias, "ambient_c": AMBIENT_C}, pad=DEMO_PAD, seed=seed + 19)

    def gain_in(folder):
        path = record_steps(g_bench, folder, 1000.0, [GAIN_DBFS], note=NOTE)
        r = gain_of_capture(path, 1, g_bench.reference_input(), band, LOAD_OHMS)
        return r

    gain, written = _logged(book, "gain", bias, dict(channel=1, ref_channel=g_bench.reference_input(), frequency_hz=1000.0,
                                                     level_dbfs=GAIN_DBFS, load_ohms=LOAD_OHMS, bandwidth_hz=band,
                                                     sample_rate_hz=g_bench.sample_rate_hz), gain_in)
    files += written
    say(f"virtual bench: stage B-2 at {label}, output noise with the input terminated")
    from benchkit.kinds.noise import noise_run

    nz_bench = virtual_bench("se-class-a", {"bias": bias, "ambient_c": AMBIENT_C}, pad=DEMO_PAD, seed=seed + 9)
    one_watt = units.vrms_from_watts(1.0, LOAD_OHMS)

    def noise_in(folder):
        return noise_run(nz_bench, folder, NOISE_S, reference_vrms=one_watt, reference=f"1 W into {LOAD_OHMS:g} ohm",
                         note=NOTE)

    noise, written = _logged(book, "noise", bias, dict(channel=1, bandwidth_hz=band, reference_vrms=one_watt,
                                                       reference=f"1 W into {LOAD_OHMS:g} ohm", length_s=NOISE_S,
                                                       sample_rate_hz=nz_bench.sample_rate_hz), noise_in)
    files += written
    say(f"virtual bench: stage B-2 at {label}, output impedance (the load off, then on)")
    from benchkit.kinds.zout import DEFAULT_FREQS_HZ, zout_run

    z_bench = virtual_bench("se-class-a", {"bias": bias, "ambient_c": AMBIENT_C}, pad=DEMO_PAD, seed=seed + 13)

    def zout_in(folder):
        return zout_run(z_bench, folder, LOAD_OHMS, DEFAULT_FREQS_HZ, SWEEP_DBFS, z_bench.connect_load,
                        z_bench.pad_input_ohms(), ref_channel=z_bench.reference_input(), note=NOTE)

    zout, written = _logged(book, "zout", bias, dict(channel=1, ref_channel=z_bench.reference_input(), load_ohms=LOAD_OHMS,
                                                     open_load_ohms=z_bench.pad_input_ohms(),
                                                     frequencies_hz=list(DEFAULT_FREQS_HZ), level_dbfs=SWEEP_DBFS,
                                                     sample_rate_hz=z_bench.sample_rate_hz), zout_in)
    files += written
    say(f"virtual bench: a stereo pair of B-2 at {label}, crosstalk both ways and the channels' balance")
    from benchkit.kinds.crosstalk import DEFAULT_FREQS_HZ as XTALK_FREQS
    from benchkit.kinds.crosstalk import crosstalk_run

    x_bench = virtual_bench("se-class-a", {"bias": bias, "ambient_c": AMBIENT_C}, pad=DEMO_PAD, seed=seed + 17,
                            stereo=True)

    def crosstalk_in(folder):
        return crosstalk_run(x_bench, folder, XTALK_FREQS, SWEEP_DBFS, note=NOTE, load_ohms=LOAD_OHMS)

    xtalk, written = _logged(book, "crosstalk", bias, dict(channel=1, inputs=[1, 3], outputs=[1, 2],
                                                           frequencies_hz=list(XTALK_FREQS), level_dbfs=SWEEP_DBFS,
                                                           load_ohms=LOAD_OHMS, bandwidth_hz=band,
                                                           sample_rate_hz=x_bench.sample_rate_hz), crosstalk_in)
    files += written
    say(f"virtual bench: stage B-2 at {label}, midpoint drift while it warms (accelerated time)")
    drift, written = _logged(book, "drift", bias, dict(source="virtual", limit_v=0.5, band_v=0.01, window_s=60.0,
                                                       nominal_v=RAIL_V / 2, accelerated=DRIFT_STEP_S),
                             lambda folder: _demo_drift(folder, seed))
    files += written
    comparisons = []
    for command in ("tone", "imd", "power"):
        got = book.entries(command=command, status="complete", limit=2)
        report = compare_runs(book, [e.id for e in reversed(got)],
                              title=f"Test stage B-2, {command} runs before and after the bias change")
        comparisons.append(report)
        files += report.files
    (la, _a), (lb, _b) = tones
    texts.append(f"Before/after ({la} -> {lb}), 'benchkit compare':\n" + "\n\n".join(r.text for r in comparisons))
    texts.append(kinds.get("sweep").summary(response, f"Test stage B-2, {label}: response"))
    texts.append(kinds.get("gain").summary(gain, f"Test stage B-2, {label}: voltage gain"))
    texts.append(kinds.get("noise").summary(noise, f"Test stage B-2, {label}: output noise, input terminated"))
    texts.append(kinds.get("zout").summary(zout, f"Test stage B-2, {label}: output impedance into {LOAD_OHMS:g} ohm"))
    texts.append(kinds.get("crosstalk").summary(xtalk, f"Test stage B-2 as a stereo pair, {label}: crosstalk"))
    texts.append(kinds.get("drift").summary(drift, f"Test stage B-2, {label}: midpoint after power-on "
                                              "(virtual thermal model, accelerated 10x)"))
    text = "\n\n".join(texts)
    from benchkit.recordings import write_text_atomic

    files.append(write_text_atomic(out / "summary.txt", text + "\n"))
    return DemoReport(out, tuple(tones), response, tuple(files), text)
