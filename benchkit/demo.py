"""The demo: "Test stage B-2" on the virtual bench, before and after a bias
change (the invented scenario of the design notes).

A 24 V single-ended class-A stage with a constant-current pull-up,
capacitor-coupled into an 8 ohm dummy load, measured through a 10:1 pad into
a line input of 2.0 V peak full scale, at 0.8 A and then 1.2 A of bias,
ambient 23 degC. Each bias gets a 997 Hz tone at several levels; the report
folder holds every capture, its analysis and a before/after comparison.
At 1.2 A a synchronized sweep from 2 Hz gives the response (the output
capacitor's corner into the load, the capacitor estimated from it) and
distortion against frequency; at each bias a power run finds the power at
1 %, 0.1 % and 10 % THD+N beside the class-A budget's ceiling. After the
bias change the midpoint is logged as the stage warms (the virtual thermal
model in accelerated time: 25 minutes of it in no time).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Callable

from benchkit.budget import ClassABudget
from benchkit import units
from benchkit.capture.virtual import DEMO_PAD, virtual_bench
from benchkit.power_runs import power_run
from benchkit.report import plots, summary, tables
from benchkit.responses import response_run
from benchkit.runs import StepsResult, compare_steps, tone_run

BIASES_A = (0.8, 1.2)
FREQUENCY_HZ = 997.0
#: Drive at the interface output; with the stage's gain of 10 and a 2 V
#: peak output these give about 0.45, 1.4, 2.8 and 4 Vrms at the load.
DRIVE_DBFS = (-30.0, -20.0, -14.0, -11.0)
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


#: The drift log: 25 minutes of model time, a reading every 10 s of it.
DRIFT_S, DRIFT_STEP_S = 1500.0, 10.0


def _demo_drift(folder: Path, seed: int):
    """The midpoint of B-2 at 1.2 A from cold, against +-0.5 V of half the rail."""
    from benchkit.capture.stages import make_stage
    from benchkit.drift_runs import analyze_drift_csv, log_drift
    from benchkit.meters import VirtualMidpoint

    folder.mkdir(exist_ok=True)
    stage = make_stage("se-class-a", {"bias": BIASES_A[-1], "ambient_c": AMBIENT_C}, seed=seed)
    log = folder / "log.csv"
    log_drift(VirtualMidpoint(stage, accelerated=DRIFT_STEP_S, seed=seed), log, 1.0, DRIFT_S)
    result = analyze_drift_csv(log, limit_v=0.5, band_v=0.01, nominal_v=RAIL_V / 2,
                               info={"source": "virtual se-class-a midpoint", "accelerated": DRIFT_STEP_S})
    files = [log, tables.write_json(result.to_dict(), folder / "log.drift.json"),
             plots.drift_png(result, folder / "log.drift.png", "Test stage B-2, bias 1.2 A: midpoint")]
    return result, files


@dataclass(frozen=True)
class DemoReport:
    folder: Path
    runs: tuple[tuple[str, StepsResult], ...]
    response: object
    files: tuple[Path, ...]
    text: str


def run_demo(out: Path, seed: int = 1, say: Callable[[str], None] = lambda _m: None) -> DemoReport:
    """Run the demo scenario and write its report folder."""
    out.mkdir(parents=True, exist_ok=True)
    runs, powers, files, texts = [], [], [], []
    for i, bias in enumerate(BIASES_A):
        label = f"bias {bias:g} A"
        say(f"virtual bench: stage B-2 at {label}, {FREQUENCY_HZ:g} Hz at {len(DRIVE_DBFS)} levels")
        bench = virtual_bench("se-class-a", {"bias": bias, "ambient_c": AMBIENT_C}, pad=DEMO_PAD, seed=seed + i)
        folder = out / f"b2-bias{bias:g}A"
        folder.mkdir(exist_ok=True)
        steps = tone_run(
            bench, folder, FREQUENCY_HZ, list(DRIVE_DBFS), name="tones", load_ohms=LOAD_OHMS,
            note=f"demo: Test stage B-2 (invented), {label}", traces=True,
        )
        runs.append((label, steps))
        files += [folder / "tones.wav", folder / "tones.json"]
        files.append(tables.write_json(steps.to_dict(), folder / "tones.result.json"))
        files.append(tables.write_steps_csv(steps, folder / "tones.steps.csv"))
        for s in steps.steps:
            stem = f"drive{s.drive_dbfs:+.0f}dBFS"
            title = f"Test stage B-2, {label}, drive {s.drive_dbfs:g} dBFS"
            files.append(plots.spectrum_png(s.result, folder / f"{stem}.spectrum.png", title))
            files.append(plots.residual_png(s.result, folder / f"{stem}.residual.png", title))
            files.append(tables.write_harmonics_csv(s.result, folder / f"{stem}.harmonics.csv"))
        files.append(plots.steps_png([(label, steps)], folder / "tones.thdn.png", f"Test stage B-2, {label}: THD+N"))
        texts.append(summary.steps_summary(steps, f"Test stage B-2, {label}"))
        say(f"virtual bench: stage B-2 at {label}, power run to 10 % THD+N")
        budget = ClassABudget(RAIL_V, bias, LOAD_OHMS, VSAT_V)
        first = units.db_from_ratio(budget.peak_vpk / 20.0) - 40.0
        pw_bench = virtual_bench("se-class-a", {"bias": bias, "ambient_c": AMBIENT_C}, pad=DEMO_PAD, seed=seed + 11 + i)
        pw = power_run(pw_bench, folder, FREQUENCY_HZ, first, -3.0, LOAD_OHMS, ref_channel=pw_bench.reference_input(),
                       supply_v=RAIL_V, supply_a=bias, budget=budget, name="power",
                       note=f"demo: Test stage B-2 (invented), {label}")
        powers.append((label, pw))
        files += [folder / "power.wav", folder / "power.json",
                  tables.write_json(pw.to_dict(), folder / "power.result.json"),
                  tables.write_power_csv(pw, folder / "power.csv"),
                  plots.power_png(pw, folder / "power.png", f"Test stage B-2, {label}")]
        texts.append(summary.power_summary(pw, f"Test stage B-2, {label}: power into {LOAD_OHMS:g} ohm"))
    label = f"bias {BIASES_A[-1]:g} A"
    say(f"virtual bench: stage B-2 at {label}, sweep {SWEEP_SPAN_HZ[0]:g} Hz to {SWEEP_SPAN_HZ[1]:g} Hz")
    bench = virtual_bench("se-class-a", {"bias": BIASES_A[-1], "ambient_c": AMBIENT_C}, pad=DEMO_PAD, seed=seed + 7)
    folder = out / f"b2-bias{BIASES_A[-1]:g}A"
    response = response_run(bench, folder, SWEEP_DBFS, SWEEP_SPAN_HZ, SWEEP_S, ref_channel=bench.reference_input(),
                            load_ohms=LOAD_OHMS, name="sweep", note=f"demo: Test stage B-2 (invented), {label}")
    title = f"Test stage B-2, {label}"
    files += [folder / "sweep.wav", folder / "sweep.json",
              tables.write_json(response.to_dict(), folder / "sweep.response.json"),
              tables.write_response_csv(response, folder / "sweep.response.csv"),
              plots.response_png(response, folder / "sweep.response.png", title, smooth_fraction=None),
              plots.distortion_png(response, folder / "sweep.distortion.png", title)]
    say(f"virtual bench: stage B-2 at {label}, midpoint drift while it warms (accelerated time)")
    drift = _demo_drift(out / "b2-drift", seed)
    files += drift[1]
    (la, a), (lb, b) = runs
    deltas = compare_steps(a, b)
    files.append(tables.write_comparison_csv(deltas, ("0.8A", "1.2A"), out / "comparison.csv"))
    files.append(plots.steps_png(runs, out / "comparison.png", "Test stage B-2: THD+N before and after the bias change"))
    texts.append(f"Before/after ({la} -> {lb}):\n" + summary.comparison_summary(deltas, (la, lb)))
    texts.append(summary.response_summary(response, f"Test stage B-2, {label}: response"))
    texts.append(summary.drift_summary(drift[0], f"Test stage B-2, {label}: midpoint after power-on "
                                                 "(virtual thermal model, accelerated 10x)"))
    text = "\n\n".join(texts)
    (out / "summary.txt").write_text(text + "\n", encoding="utf-8")
    files.append(out / "summary.txt")
    return DemoReport(out, tuple(runs), response, tuple(files), text)
