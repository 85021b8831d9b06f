"""The bench's tools: devices, calibrate, pad, budget, demo, models."""

from __future__ import annotations

from pathlib import Path

from benchkit.cli.common import answer, app, ask, err, one_line, takes
from benchkit.errors import BenchkitError


@app.command()
@takes(helps=dict(json="Print the list as JSON on stdout."), json=False)
def devices(o: dict) -> None:
    """List the interfaces PortAudio sees, and the virtual bench.

    Example: benchkit devices --json
    """
    entries = [{"index": None, "name": "virtual", "host_api": "benchkit virtual bench", "max_input_channels": 2,
                "max_output_channels": 2, "default_sample_rate_hz": 48000.0}]
    note = None
    try:
        from benchkit.capture.portaudio import list_devices

        entries += list_devices()
    except BenchkitError as exc:
        note = str(exc)
    if o["json"]:
        from benchkit.report.tables import dumps

        print(dumps({"kind": "devices", "schema_version": 1, "devices": entries, "note": note}))
    else:
        for d in entries:
            idx = "-" if d["index"] is None else d["index"]
            answer(f"  {idx:>3}  {d['name']}  [{d['host_api']}]  in {d['max_input_channels']}, out "
                   f"{d['max_output_channels']}, {d['default_sample_rate_hz']:g} Hz")
    if note:
        err(f"benchkit: {note}")


@app.command()
@takes("reading level voltmeter_pct pad pad_tolerance load_tolerance input_ohms measure_pad note yes device in_channel out_channel ref_channel rate "
       "seed", file=...)
def calibrate(o: dict) -> None:
    """Calibrate an interface: output and input scale, pad, floor, response, polarity, DC coupling.

    With --reading the output scale comes from that voltmeter reading (the
    tone at --level, 997 Hz); without it a real interface plays the tone and
    asks, and the virtual bench reads its own output. Writes the profile
    that --calibration takes.

    Example: benchkit calibrate --reading 0.1414V --pad 1.8k:200 --file calibration/my-interface.json

    Safety: calibrate with the stage disconnected, into the interface only.
    """
    from benchkit.calibrate import calibrate_bench
    from benchkit.report.summary import profile_lines

    with one_line():
        profile = calibrate_bench(o, err, ask)
    for line in profile_lines(profile, o["file"]):
        answer(line)
    err(f"the interface's whole floor (residual against level, noise, response, round trip, dropouts) goes into the "
        f"profile with: benchkit loopback --calibration {o['file']}")


@app.command()
@takes("stage_vpk rail input_fs input_max input_ohms headroom series input_noise check btl json")
def pad(o: dict) -> None:
    """Design an attenuator pad for the stage's output, or check one you have.

    Proposes divider pairs from a preferred series whose ratio, with the
    input's impedance loading it, puts the stage's normal swing (--stage-vpk,
    or half of --rail) the headroom below full scale; says where a fault
    putting the whole rail on the output lands, against --input-max; shows
    each resistor's power held at the worst of the two with a rating of at
    least twice it, and the highest stage voltage the pad is safe for. The
    rule is the pre-flight's (docs/safety.md).

    Example: benchkit pad --rail 24 --input-fs 2.0 --input-ohms 10k

    Cautions: an unbalanced input's ground joins the stage's ground: a
    bridged (BTL) output, whose minus terminal is not at ground, must not
    go into it, and two grounds make a hum loop. Balanced inputs take the
    pad on both legs. Never connect a speaker output straight to a line input.
    """
    from benchkit.pads import pads_for
    from benchkit.report.pads import pads_lines

    with one_line():
        normal, reports = pads_for(o)
    for line in pads_lines(reports, normal, o["rail"], o["input_fs"], o["input_ohms"], o["input_max"], o["headroom"],
                           o["input_noise"]):
        answer(line, o["json"])
    if o["json"]:
        from benchkit.report.tables import dumps

        print(dumps({"kind": "pads", "schema_version": 2, "normal_stage_vpk": normal, "rail_v": o["rail"],
                     "input_fs_vpk": o["input_fs"], "input_max_vpk": o["input_max"], "input_ohms": o["input_ohms"],
                     "headroom_db": o["headroom"], "pads": [r.to_dict() for r in reports]}))


@app.command()
@takes("vsat target_power limit_current vbe json", rail=..., bias=..., load=8.0)
def budget(o: dict) -> None:
    """Expected ceilings of a single-ended class-A stage from its design numbers.

    The current-limited (I x R) and rail-limited (rail/2 - Vsat) peak
    swings, the largest clean sine, the supply draw (all heat at idle), the
    efficiency (at most 25 %), the bias and rail a target power needs, and
    a current limiter's sense resistor.

    Example: benchkit budget --rail 24 --bias 1.2 --load 8 --target-power 4 --limit-current 1.5

    Safety: a class-A stage dissipates its full supply power at idle: size
    the heat sink for that, and mind the mains side; follow local codes.
    """
    from benchkit.budget import ClassABudget
    from benchkit.report import summary

    with one_line():
        doc = ClassABudget(o["rail"], o["bias"], o["load"], o["vsat"]).to_dict(o["target_power"], o["limit_current"],
                                                                             o["vbe"])
    answer(summary.budget_summary(doc), o["json"])
    if o["json"]:
        from benchkit.report.tables import dumps

        print(dumps(doc))


@app.command()
@takes("seed", out=Path("benchkit-demo"),
       helps=dict(out="The demo's bench folder: its runs, logbook, comparisons and summary."))
def demo(o: dict) -> None:
    """Run the demo on the virtual bench: Test stage B-2 at 0.8 A and 1.2 A bias, compared.

    The shipped plan ('benchkit plan new' copies it) measured as two
    sessions, compared, and one HTML report. No hardware and no options
    needed; writes captures, PNG, CSV, JSON, a summary and the report into
    the report folder and prints where it is.

    Example: benchkit demo --out demo-report
    """
    from benchkit.demo import run_demo
    from benchkit.report.files import report_folder

    with one_line():
        report_folder(o["out"])
        report = run_demo(o["out"], seed=o["seed"], say=err)
    err(report.text)
    err(f"HTML report: {report.report.resolve()}")
    err(f"report: {report.folder.resolve()} (a bench folder: 'benchkit log list --bench {o['out']}')")


@app.command()
def models() -> None:
    """List the virtual bench's stage models with their parameters and units.

    Example: benchkit models
    """
    from benchkit.capture.stages import models_help

    print(models_help())
