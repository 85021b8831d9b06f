"""The commands that read over time: watch (live) and drift (a DC log)."""

from __future__ import annotations

import contextlib
import sys
from pathlib import Path
from typing import List, Optional

import typer

from benchkit import units
from benchkit.cli import values as V
from benchkit.calibration import load_profile
from benchkit.errors import BenchkitError, BenchWarning
from benchkit.cli.common import (
    app, BAND, bench_logbook, bench_options, err, EXIT_BAD_INPUT, EXIT_INTERRUPTED, EXIT_STOPPED_EARLY, given_band,
    judge_options, LIVE, live_options, live_run, live_setup, open_backend, report_run, start_run,
)


@app.command()
@live_options
@bench_options
def watch(
    frequency: float = typer.Option(997.0, "--freq", parser=V.hertz, help="Tone frequency, Hz."),
    level: str = typer.Option("-20 dBFS", "--level", parser=V.checked(units.parse_level), help="Drive level at the interface output, e.g. -20dBFS or 0.1Vrms."),
    load: Optional[float] = typer.Option(None, "--load", parser=V.ohms, help="Load resistance, ohms: adds power in W."),
    bandwidth: str = typer.Option(BAND, "--bandwidth", parser=V.checked(units.parse_band), help="Measurement band LO:HI in Hz, or 'full'."),
    duration: Optional[float] = typer.Option(None, "--duration", parser=V.SESSION_S, help="Stop after this many seconds (default: until q or Ctrl-C)."),
    plain: bool = typer.Option(False, "--plain", help="One plain line a reading on stdout (also when stdout is not a terminal)."),
    json_lines: bool = typer.Option(False, "--json-lines", help="One JSON object a reading on stdout."),
    record: bool = typer.Option(False, "--record", help="Keep the readings as a run in the bench's logbook (readings.csv)."),
    record_audio: bool = typer.Option(False, "--record-audio", help="With --record: keep the raw audio too (audio.wav)."),
    dc_source: Optional[str] = typer.Option(None, "--dc-source", parser=V.one_of("meter", "input", "virtual"), help="Also show DC: meter (SCPI, --meter), input (the measuring input, DC coupled per --calibration) or virtual (the se-class-a midpoint)."),
    dc_resource: Optional[str] = typer.Option(None, "--meter", help="The DC meter's VISA resource, e.g. TCPIP::192.168.1.50::5025::SOCKET or ASRL/dev/ttyUSB0::INSTR."),
    ref_channel: Optional[int] = typer.Option(None, "--ref-channel", parser=V.CHANNEL, help="Input wired straight from the driven output (real devices)."),
    live: dict = None,
    filing: dict = None,
) -> None:
    """Play a steady tone and show its figures live while you adjust the stage.

    Five times a second: level (V and W with a scale and --load), THD+N,
    THD, H2, H3, noise and, with --dc-source, DC; each with its minimum,
    maximum and trend since the start. Keys: h holds the display, r resets
    min/max, q stops. Marks a clipped input or a lost tone.

    Example: benchkit watch --level -20dBFS --load 8 --sim-param bias=1.2 --record --tag trim=R7

    Safety: the tone ramps in from silence and fades out on q, Ctrl-C or
    any error; the drive cap holds; the watch stops if the input clips.
    Adjust a live stage with insulated tools, one hand, and mind hot parts
    and the supply's stored charge.
    """
    from benchkit import record
    from benchkit.signals import check_level
    from benchkit.kinds.watch import check_dc_source, dc_reader, SteadyTone, watch_session

    code = 0
    with live_run(), (bench_logbook(filing) if record else contextlib.nullcontext((None, None))) as (book, labels):
        if record_audio and not record:
            raise BenchkitError("--record-audio goes with --record")
        band = units.parse_band(bandwidth)
        backend, profile = live_setup(live, ref_channel, load=load,
                                       within=(("--freq", [frequency], band), ("--bandwidth", given_band(bandwidth))))
        in_channel, calibration = live["in_channel"], live["calibration"]
        drive = units.parse_level(level).to_dbfs(backend.output_vpk_per_fs)
        check_level(drive)
        if drive > backend.drive_cap_dbfs + 1e-9:
            raise BenchkitError(f"--level {drive:.1f} dBFS is above the drive cap of {backend.drive_cap_dbfs:g} dBFS; "
                                "lower it, or raise the cap knowingly (--drive-cap)")
        check_dc_source(dc_source, dc_resource, backend, profile)
        plan = record.plan_run(backend, profile, [drive], frequency, in_channel, live["gain"], live["margin"],
                             live["rail"], live["pad_rating"], load, live["btl"], say=err)
        for w in plan.warnings:
            err(f"warning: {w}")
        scale = profile.stage_volts_per_fs if profile is not None else backend.inputs()[in_channel - 1].volts_per_fs
        dc, dc_scale, meter = dc_reader(dc_source, dc_resource, backend, profile)
        try:
            tone = SteadyTone(frequency, drive, backend.sample_rate_hz, None, in_channel,
                              getattr(backend, "drive_output", 1), backend.n_outputs, scale, load, band, dc=dc,
                              dc_scale=dc_scale)
            params = dict(channel=in_channel, frequency_hz=frequency, level_dbfs=drive, load_ohms=load,
                          bandwidth_hz=band)
            run = start_run(book, labels, "watch", backend, profile, calibration, params) if record else None
            with run if run is not None else contextlib.nullcontext():
                mode = "json" if json_lines else "plain" if plain or not sys.stdout.isatty() else "live"
                end = watch_session(backend, tone, run, record_audio, duration, mode, err)
                code = EXIT_STOPPED_EARLY if end.clipped else EXIT_INTERRUPTED if end.interrupted else 0
        finally:
            if meter is not None:
                meter.close()
    if code:
        raise typer.Exit(code)


@app.command()
@judge_options
@bench_options
def drift(
    source: str = typer.Option("virtual", "--dc-source", parser=V.one_of("virtual", "meter", "input"), help="Where the DC is read: virtual (the se-class-a midpoint, accelerated), meter (SCPI over pyvisa, --meter) or input (the measuring input, DC coupled per --calibration)."),
    resource: Optional[str] = typer.Option(None, "--meter", help="The DC meter's VISA resource, e.g. TCPIP::192.168.1.50::5025::SOCKET or ASRL/dev/ttyUSB0::INSTR."),
    current_resource: Optional[str] = typer.Option(None, "--current-meter", help="A meter reading the supply's DC current (its VISA resource), logged beside the volts."),
    interval: float = typer.Option(1.0, "--interval", parser=V.number(0.01, 3600.0, unit="s", hint="a reading at most every 10 ms"), help="Seconds between readings."),
    duration: Optional[float] = typer.Option(None, "--duration", parser=V.SESSION_S, help="Log this long, seconds."),
    until_settled: bool = typer.Option(False, "--until-settled", help="Stop once settled within --settle-band."),
    accelerate: float = typer.Option(60.0, "--accelerate", parser=V.number(0.0, 1e6, above=True), help="Virtual source: model seconds per second of interval."),
    device: Optional[str] = LIVE["device"][1](),
    in_channel: int = LIVE["in_channel"][1](),
    calibration: Optional[Path] = LIVE["calibration"][1](),
    sim_param: List[str] = LIVE["sim_param"][1](),
    seed: int = LIVE["seed"][1](),
    as_json: bool = typer.Option(False, "--json", help="Print the result as JSON on stdout."),
    judge: dict = None,
    filing: dict = None,
) -> None:
    """Log the DC operating point as the stage warms: offset, drift rate, settling fit, verdict.

    Every reading goes to log.csv as it comes (Ctrl-C or a crash keeps them
    all); a live line shows the latest value, the rate and the estimated
    time to settle. The virtual source is the se-class-a stage's midpoint,
    its thermal model in accelerated time.

    Example: benchkit drift --dc-source meter --meter TCPIP::192.168.1.50::5025::SOCKET --interval 2 --until-settled --dc-limit 0.05

    Safety: probe a live, hot stage with one hand, with insulated probes,
    and mind the supply's stored charge; follow local codes for anything
    mains-powered.
    """
    from benchkit import meters
    from benchkit.kinds.drift import analyze_drift_csv, log_drift

    with live_run(), bench_logbook(filing) as (book, labels):
        step = interval * (accelerate if source == "virtual" else 1.0)  # the source's own seconds between readings
        if duration is not None and duration < 2 * step:
            raise BenchkitError(f"--duration {duration:g} s holds fewer than two readings {step:g} s apart"
                                + (f" (--interval {interval:g} s x --accelerate {accelerate:g} on the virtual source)"
                                   if source == "virtual" else "") + ": lengthen it or shorten --interval")
        profile = load_profile(calibration) if calibration is not None else None
        if source == "virtual":
            from benchkit.capture.stages import make_stage, parse_params

            reader = meters.VirtualMidpoint(make_stage("se-class-a", parse_params(sim_param), seed=seed), accelerate, seed)
        elif source == "meter":
            if not resource:
                raise BenchkitError("--dc-source meter needs --meter (the meter's VISA address)")
            reader = meters.ScpiMeter(resource)
        elif source == "input":
            backend = open_backend(device, "ideal", [], "demo", seed, dict(in_channel=in_channel))
            reader = meters.InterfaceDc(backend, profile, in_channel)
        else:
            raise BenchkitError(f"--dc-source is virtual, meter or input, got {source!r}")
        dc_limit, nominal, window = judge["dc_limit"], judge["nominal"], judge["window"]
        band = judge["settle_band"] if judge["settle_band"] is not None else (dc_limit / 10 if dc_limit else 1e-3)
        params = dict(source=source, limit_v=dc_limit, band_v=band, window_s=window, nominal_v=nominal,
                      interval_s=interval, accelerated=getattr(reader, "accelerated", 0.0) or None)
        with start_run(book, labels, "drift", reader.name, profile if source == "input" else None, calibration,
                        params) as run:
            log = run.folder / "log.csv"
            amps = meters.ScpiMeter(current_resource, quantity="amps") if current_resource else None
            err(f"source: {reader.name}; logging to {log}" + (f"; supply current: {amps.name}" if amps else ""))
            try:
                end = log_drift(reader, log, interval, duration, until_settled, band, window, say=err, current=amps)
            finally:
                reader.close()
                if amps is not None:
                    amps.close()
            notes = () if end.how in ("duration", "settled") else (BenchWarning("interrupted", f"the log stopped early: {end.message}"),)
            if end.how == "lost":
                err(f"benchkit: {end.message}: the log stopped; every reading so far is in {log}")
            result = analyze_drift_csv(log, limit_v=dc_limit, band_v=band, window_s=window,
                                       info={"source": reader.name, "ended": end.how,
                                             "accelerated": params["accelerated"]},
                                       warnings=notes, nominal_v=nominal)
            report_run(run, "drift", result, f"{reader.name}: {end.how}", as_json,
                        status="complete" if end.how in ("duration", "settled") else "interrupted")
    if end.how != "duration" and end.how != "settled":
        raise typer.Exit(EXIT_INTERRUPTED if end.how == "interrupted" else EXIT_BAD_INPUT)
