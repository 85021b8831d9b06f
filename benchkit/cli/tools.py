"""The bench's tools: devices, calibrate, pad, budget, demo, models."""

from __future__ import annotations

from pathlib import Path
from typing import List, Optional

import typer

from benchkit import units
from benchkit.cli import values as V
from benchkit.errors import BenchkitError
from benchkit.units import quantity
from benchkit.cli.common import app, err, EXIT_BAD_INPUT, open_backend, report_files


@app.command()
def devices(as_json: bool = typer.Option(False, "--json", help="Print the list as JSON on stdout.")) -> None:
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
    if as_json:
        from benchkit.report.tables import dumps

        print(dumps({"kind": "devices", "schema_version": 1, "devices": entries, "note": note}))
    else:
        for d in entries:
            idx = "-" if d["index"] is None else d["index"]
            err(f"  {idx:>3}  {d['name']}  [{d['host_api']}]  in {d['max_input_channels']}, out "
                 f"{d['max_output_channels']}, {d['default_sample_rate_hz']:g} Hz")
    if note:
        err(f"benchkit: {note}")


@app.command()
def calibrate(
    out: Path = typer.Option(..., "--file", parser=V.out_file, help="Where to write the profile (JSON)."),
    reading: Optional[str] = typer.Option(None, "--reading", parser=V.checked(units.parse_level), help="Voltmeter reading at the output jack while the calibration tone plays, e.g. 0.1414V (Vrms)."),
    level: str = typer.Option("-20 dBFS", "--level", parser=V.checked(units.parse_level), help="Level of the calibration tone, dBFS."),
    voltmeter_pct: float = typer.Option(1.0, "--voltmeter-pct", parser=V.number(0.0, 50.0, unit="%"), help="Voltmeter accuracy at the tone's frequency, +-%."),
    pad: Optional[str] = typer.Option(None, "--pad", parser=V.PAD, help="The pad's resistors R1:R2 in ohms (e.g. 1.8k:200)."),
    input_ohms: float = typer.Option(10e3, "--input-ohms", parser=V.ohms, help="The interface input's impedance, ohms (loads the pad)."),
    measure_pad: bool = typer.Option(False, "--measure-pad", help="Measure the pad's ratio with the pad in place instead."),
    note: str = typer.Option("", "--note", help="Free note kept in the profile."),
    yes: bool = typer.Option(False, "--yes", help="Do not ask for the wiring: the output is already looped to the input (scripted use)."),
    device: Optional[str] = typer.Option(None, "--device", help="'virtual', or a real interface by index or part of its name."),
    in_channel: int = typer.Option(1, "--in-channel", parser=V.CHANNEL, help="Input to calibrate, from 1."),
    out_channel: int = typer.Option(1, "--out-channel", parser=V.CHANNEL, help="Output to calibrate, from 1."),
    ref_channel: Optional[int] = typer.Option(None, "--ref-channel", parser=V.CHANNEL, help="Loopback reference input, if wired."),
    rate: float = typer.Option(48000.0, "--rate", parser=V.RATE, help="Sample rate, Hz."),
    seed: int = typer.Option(1, "--seed", parser=V.SEED, help="Seed of the virtual bench."),
) -> None:
    """Calibrate an interface: output and input scale, pad, floor, response, polarity, DC coupling.

    With --reading the output scale comes from that voltmeter reading (the
    tone at --level, 997 Hz); without it a real interface plays the tone and
    asks, and the virtual bench reads its own output. Writes the profile
    that --calibration takes.

    Example: benchkit calibrate --reading 0.1414V --pad 1.8k:200 --file calibration/my-interface.json

    Safety: calibrate with the stage disconnected, into the interface only.
    """
    from benchkit import pads
    from benchkit.calibrate import calibrate as run_calibration
    from benchkit.calibration import save_profile

    try:
        lvl = units.parse_level(level).to_dbfs()
        real = dict(sample_rate=rate, in_channel=in_channel, out_channel=out_channel, ref_channel=ref_channel)
        backend = open_backend(device, "ideal", [], "demo", seed, real)
        virtual = backend.capabilities.simulated
        if reading is not None:
            volts = units.parse_level(reading).to_vrms()
        elif virtual:
            volts = backend.output_vrms(lvl)
            err(f"virtual bench: the voltmeter reads {quantity(volts, 'Vrms', 5)} at the output")
        else:
            volts = _ask_reading(backend, lvl)
        resistors = pads.parse_pad(pad) if pad else None

        def wire(step: str) -> None:
            if virtual:
                backend.wiring = step
            elif step != "stage" and not yes:
                what = {"loopback": "a cable from the output straight to the input",
                        "pad": "the output through the pad into the input"}[step]
                typer.prompt(f"wire {what}, then press Enter", default="", show_default=False, err=True)

        profile = run_calibration(backend, volts, lvl, voltmeter_pct, resistors, input_ohms if resistors else None,
                                  measure_pad, in_channel, wire, note=note)
        save_profile(profile, out)
    except BenchkitError as exc:
        err(f"benchkit: error: {exc}")
        raise typer.Exit(EXIT_BAD_INPUT)
    u = profile.uncertainty
    err(f"output {quantity(profile.output_vpk_per_fs, 'V', 5)} peak per FS, input {quantity(profile.input_vpk_per_fs, 'V', 5)} peak per FS, "
         f"pad ratio {profile.pad_ratio:.5g}: {quantity(profile.stage_volts_per_fs, 'V', 5)} peak per FS at the stage")
    err(f"loopback floor THD+N {profile.loopback_floor['thdn_db']:.1f} dB at {profile.loopback_floor['level_dbfs']:.1f} dBFS; "
         f"{'inverting' if profile.polarity_inverts else 'non-inverting'}; "
         f"{'DC coupled' if profile.dc_coupled else f'AC coupled ({profile.ac_corner_hz:.2g} Hz)'}; latency {profile.latency_samples} samples")
    err(f"uncertainty of the volts: +-{u['total_db']:.3f} dB (voltmeter +-{u['voltmeter_pct']:g} %, repeatability {u['repeatability_db']:.4f} dB)")
    err(f"profile: {out} (hash {profile.digest()})")


def _ask_reading(backend, level_dbfs: float) -> float:
    """Play a steady tone on a real interface until the user types the
    voltmeter reading; the tone fades out when the answer comes."""
    import threading

    from benchkit.signals import stepped_tones

    stim = stepped_tones(997.0, [level_dbfs], backend.sample_rate_hz, step_s=120.0, settle_s=0.0,
                         out_channel=backend.drive_output, n_out=backend.n_outputs, lead_s=0.1)
    result = {}

    def play():
        try:
            backend.play_record(stim)
        except BenchkitError as exc:  # the abort that ends the tone lands here
            result["stopped"] = str(exc)

    t = threading.Thread(target=play, daemon=True)
    t.start()
    try:
        text = typer.prompt("a 997 Hz tone plays: voltmeter reading at the output (e.g. 0.1414V)", err=True)
    finally:
        backend.request_abort()
        t.join(5.0)
    return units.parse_level(text).to_vrms()


@app.command()
def pad(
    stage_vpk: Optional[float] = typer.Option(None, "--stage-vpk", parser=V.VOLTS, help="The stage's highest output in normal work, volts peak."),
    rail: Optional[float] = typer.Option(None, "--rail", parser=V.VOLTS, help="Or its supply, rail to rail, volts: its normal swing is taken as half of it, and a fault as the whole rail."),
    input_fs_vpk: float = typer.Option(2.0, "--input-fs", parser=V.VOLTS, help="The interface input's full scale, volts peak."),
    input_max_vpk: Optional[float] = typer.Option(None, "--input-max", parser=V.VOLTS, help="The most the input takes without damage, volts peak (its manual's rating): a rail fault is checked against it."),
    input_ohms: float = typer.Option(10e3, "--input-ohms", parser=V.ohms, help="The interface input's impedance, ohms."),
    headroom_db: float = typer.Option(6.0, "--headroom", parser=V.number(0.0, 60.0, unit="dB"), help="How far below full scale the normal swing must land, dB."),
    series: str = typer.Option("E24", "--series", parser=V.one_of("e12", "e24", "e96"), help="Preferred values: E12, E24 or E96 (IEC 60063)."),
    input_noise_dbfs: float = typer.Option(-110.0, "--input-noise", parser=V.number(-200.0, 0.0, unit="dBFS"), help="The input's own noise floor, dBFS, to refer to the stage."),
    check: Optional[List[str]] = typer.Option(None, "--check", parser=V.ohms, help="Judge a pad you have: --check R1 --check R2 (ohms, k/M allowed)."),
    btl: bool = typer.Option(False, "--btl", help="The stage has a bridged (BTL) output: its normal swing is the whole rail."),
    as_json: bool = typer.Option(False, "--json", help="Print the pads as JSON on stdout."),
) -> None:
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
    from benchkit import pads as padlib
    from benchkit.preflight import normal_swing_vpk
    from benchkit.report.pads import pads_lines

    try:
        if check and len(check) != 2:
            raise BenchkitError("--check takes two resistances: --check R1 --check R2")
        if stage_vpk is None and rail is None:
            raise BenchkitError("give --stage-vpk (the stage's highest output, V peak) or --rail (its supply, V)")
        # the pre-flight's rule (docs/safety.md): the larger of the swing given and the rail's
        normal = max(v for v in (stage_vpk, None if rail is None else normal_swing_vpk(rail, btl)) if v is not None)
        if check:
            reports = [padlib.judge(padlib.Pad(*check), normal, input_fs_vpk, input_ohms, rail)]
        else:
            reports = padlib.design(normal, input_fs_vpk, input_ohms, headroom_db, series, fault_v=rail)
    except BenchkitError as exc:
        err(f"benchkit: error: {exc}")
        raise typer.Exit(EXIT_BAD_INPUT)
    for line in pads_lines(reports, normal, rail, input_fs_vpk, input_ohms, input_max_vpk, headroom_db,
                           input_noise_dbfs):
        err(line)
    if as_json:
        from benchkit.report.tables import dumps

        print(dumps({"kind": "pads", "schema_version": 2, "normal_stage_vpk": normal, "rail_v": rail,
                     "input_fs_vpk": input_fs_vpk, "input_max_vpk": input_max_vpk, "input_ohms": input_ohms,
                     "headroom_db": headroom_db, "pads": [r.to_dict() for r in reports]}))


@app.command()
def budget(
    rail: float = typer.Option(..., "--rail", parser=V.VOLTS, help="Supply rail, V."),
    bias: float = typer.Option(..., "--bias", parser=V.AMPS, help="Bias current of the constant-current pull-up, A."),
    vsat: float = typer.Option(1.0, "--vsat", parser=V.number(0.0, unit="V"), help="Saturation voltage at the negative swing, V."),
    load: float = typer.Option(8.0, "--load", parser=V.ohms, help="Load resistance, ohms."),
    target_power: Optional[float] = typer.Option(None, "--target-power", parser=V.WATTS, help="Power wanted into the load, W: the bias and rail it needs."),
    limit_current: Optional[float] = typer.Option(None, "--limit-current", parser=V.AMPS, help="Current a base-emitter limiter should hold, A: its sense resistor."),
    vbe: float = typer.Option(0.65, "--vbe", parser=V.number(0.0, 2.0, above=True, unit="V"), help="The limiter transistor's V_BE, V (about 0.6-0.7 V, falling about 2 mV per degC)."),
    as_json: bool = typer.Option(False, "--json", help="Print the budget as JSON on stdout."),
) -> None:
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

    try:
        b = ClassABudget(rail, bias, load, vsat)
        doc = b.to_dict(target_power, limit_current, vbe)
    except BenchkitError as exc:
        err(f"benchkit: error: {exc}")
        raise typer.Exit(EXIT_BAD_INPUT)
    err(summary.budget_summary(doc))
    if as_json:
        from benchkit.report.tables import dumps

        print(dumps(doc))


@app.command()
def demo(
    out: Path = typer.Option(Path("benchkit-demo"), "--out", parser=V.out_folder, help="The demo's bench folder: its runs, logbook, comparisons and summary."),
    seed: int = typer.Option(1, "--seed", parser=V.SEED, help="Seed of the virtual bench."),
) -> None:
    """Run the demo on the virtual bench: Test stage B-2 at 0.8 A and 1.2 A bias, compared.

    No hardware and no options needed; writes captures, PNG, CSV, JSON and a
    summary into the report folder and prints where it is.

    Example: benchkit demo --out demo-report
    """
    from benchkit.demo import run_demo

    try:
        report_files().report_folder(out)
        report = run_demo(out, seed=seed, say=err)
    except BenchkitError as exc:
        err(f"benchkit: error: {exc}")
        raise typer.Exit(EXIT_BAD_INPUT)
    err(report.text)
    err(f"report: {report.folder.resolve()} ({len(report.files)} files)")


@app.command()
def models() -> None:
    """List the virtual bench's stage models with their parameters and units.

    Example: benchkit models
    """
    from benchkit.capture.stages import models_help

    print(models_help())
