"""The measuring commands: tone, noise, gain, imd, zout, crosstalk, sweep, power."""

from __future__ import annotations

import os
import sys
from typing import List, Optional

import typer

from benchkit import units
from benchkit.cli import values as V
from benchkit import kinds
from benchkit.analysis.tone import DEFAULT_BAND_HZ
from benchkit.errors import BenchkitError
from benchkit.kinds.crosstalk import DEFAULT_FREQS_HZ as DEFAULT_CROSSTALK_FREQS
from benchkit.kinds.zout import DEFAULT_FREQS_HZ as DEFAULT_ZOUT_FREQS
from benchkit.cli.common import (
    app, BAND, bench_logbook, bench_options, err, EXIT_BAD_INPUT, EXIT_INTERRUPTED, figure_options, finish_run,
    given_band, live_options, live_run, live_setup, one_level, power_options, report_run, start_run,
)


@app.command()
@live_options
@bench_options
def tone(
    frequency: float = typer.Option(997.0, "--freq", parser=V.hertz, help="Tone frequency, Hz (997 Hz keeps harmonics off sub-multiples of the rate)."),
    levels: List[str] = typer.Option(["-20 dBFS"], "--level", parser=V.checked(units.parse_level), help="Drive level at the interface output, e.g. -20dBFS or 0.1Vrms (repeat for steps)."),
    load: Optional[float] = typer.Option(None, "--load", parser=V.ohms, help="Load resistance, ohms: adds power in W."),
    bandwidth: str = typer.Option(BAND, "--bandwidth", parser=V.checked(units.parse_band), help="Measurement band LO:HI in Hz, or 'full'."),
    ref_channel: Optional[int] = typer.Option(None, "--ref-channel", parser=V.CHANNEL, help="Input wired straight from the driven output (real devices)."),
    as_json: bool = typer.Option(False, "--json", help="Print the result as JSON on stdout."),
    live: dict = None,
    filing: dict = None,
) -> None:
    """Play stepped tones into the stage, capture through the pad, analyse each step.

    The whole run is one stream; the raw recording goes to disk as it
    arrives and the aligned capture is written before it is analysed.

    The run is filed in the bench folder's logbook (runs/<time>-<name>/).

    Example: benchkit tone --level -30dBFS --level -20dBFS --level -14dBFS --load 8 --sim-param bias=1.2 --tag bias=1.2A

    Safety: on a real bench, start low, measure through a pad into a dummy
    load, and keep speakers off the output. Ctrl-C fades the output to
    silence and keeps the partial capture.
    """
    from benchkit import record
    from benchkit.kinds.tone import tone_run
    from benchkit.signals import check_level

    with live_run(), bench_logbook(filing) as (book, labels):
        band = units.parse_band(bandwidth)
        backend, profile = live_setup(live, ref_channel, load=load,
                                       within=(("--freq", [frequency], band), ("--bandwidth", given_band(bandwidth))))
        in_channel, calibration = live["in_channel"], live["calibration"]
        preflight = dict(gain=live["gain"], margin_db=live["margin"], rail_v=live["rail"],
                         pad_rating_w=live["pad_rating"], bridged=live["btl"])
        # a level in volts is at the interface output, whose scale the device knows
        drive = [units.parse_level(text).to_dbfs(backend.output_vpk_per_fs) for text in levels]
        for d in drive:
            check_level(d)
        channel = in_channel
        plan = record.plan_run(backend, profile, drive, frequency, channel, load_ohms=load, say=err, **preflight)
        for w in plan.warnings:
            err(f"warning: {w}")
        params = dict(channel=channel, frequency_hz=frequency, levels_dbfs=drive, load_ohms=load, bandwidth_hz=band)
        with start_run(book, labels, "tone", backend, profile, calibration, params) as run:
            steps = tone_run(backend, run.folder, frequency, drive, load_ohms=load, bandwidth_hz=band,
                                  channel=channel, traces=True, calibration=profile,
                                  calibration_file=None if calibration is None else str(calibration),
                                  warnings=plan.warnings, note=labels["note"])
            report_run(run, "tone", steps, f"{frequency:g} Hz, {units.count(len(drive), 'step')}, latency "
                        f"{steps.latency_samples} samples", as_json, channel)


@app.command()
@live_options
@bench_options
def noise(
    length: float = typer.Option(5.0, "--duration", parser=V.seconds(600.0), help="Seconds of noise to record (after half a second of settling)."),
    load: Optional[float] = typer.Option(None, "--load", parser=V.ohms, help="Load resistance, ohms: the SNR is referred to --ref-power into it."),
    ref_power: float = typer.Option(1.0, "--ref-power", parser=V.WATTS, help="With --load: the output power the SNR is referred to, W (1 W is common for small amplifiers; give the rated power to quote that)."),
    ref_vrms: Optional[float] = typer.Option(None, "--ref-vrms", parser=V.VOLTS, help="Or refer the SNR to this output, Vrms."),
    bandwidth: str = typer.Option(BAND, "--bandwidth", parser=V.checked(units.parse_band), help="Band integrated, LO:HI in Hz."),
    yes: bool = typer.Option(False, "--yes", help="Do not ask: the stage's input is already terminated (scripted use)."),
    as_json: bool = typer.Option(False, "--json", help="Print the result as JSON on stdout."),
    live: dict = None,
    filing: dict = None,
) -> None:
    """Measure the stage's output noise with its input terminated: unweighted and A-weighted, SNR, hum lines.

    Nothing is played. Short the stage's input, or terminate it in the
    source impedance it is specified with, before the run; the noise is
    integrated over the band as it stands and A-weighted (IEC 61672-1),
    in uV and dBV with a scale, and the SNR referred to --ref-power into
    --load (or --ref-vrms). Hum at 50 or 60 Hz and its harmonics is
    listed with its levels.

    Example: benchkit noise --duration 10 --load 8 --ref-power 1 --tag bias=1.2A

    Safety: terminate the input with the stage switched off; mind the hot
    parts of a class-A stage while you do.
    """
    from benchkit.kinds.noise import noise_run

    with live_run(), bench_logbook(filing) as (book, labels):
        band = units.parse_band(bandwidth) or (20.0, 20000.0)
        backend, profile = live_setup(live, None, load=load, within=(("--bandwidth", given_band(bandwidth)),))
        in_channel, calibration = live["in_channel"], live["calibration"]
        reference_vrms, reference = None, None
        if ref_vrms is not None:
            reference_vrms, reference = ref_vrms, f"{ref_vrms:g} Vrms"
        elif load is not None:
            reference_vrms, reference = units.vrms_from_watts(ref_power, load), f"{ref_power:g} W into {load:g} ohm"
        if not backend.capabilities.simulated and not yes:
            typer.prompt("short or terminate the stage's input, then press Enter", default="", show_default=False, err=True)
        params = dict(channel=in_channel, bandwidth_hz=band, reference_vrms=reference_vrms, reference=reference,
                      length_s=length)
        with start_run(book, labels, "noise", backend, profile, calibration, params) as run:
            result = noise_run(backend, run.folder, length, in_channel, band, reference_vrms, reference,
                               labels["note"], profile, None if calibration is None else str(calibration))
            report_run(run, "noise", result, f"noise of {backend.name} input {in_channel}, {length:g} s", as_json,
                        in_channel)


@app.command()
@live_options
@bench_options
def gain(
    frequency: float = typer.Option(997.0, "--freq", parser=V.hertz, help="Tone frequency, Hz."),
    level: str = typer.Option("-30 dBFS", "--level", parser=V.checked(units.parse_level), help="Drive level at the interface output, e.g. -30dBFS or 0.05Vrms."),
    ref_channel: Optional[int] = typer.Option(None, "--ref-channel", parser=V.CHANNEL, help="Input wired to the stage's input (the virtual bench's is 2); without one, the drive at the calibrated output scale."),
    load: Optional[float] = typer.Option(None, "--load", parser=V.ohms, help="Load resistance, ohms (recorded with the gain: it depends on it)."),
    bandwidth: str = typer.Option(BAND, "--bandwidth", parser=V.checked(units.parse_band), help="Measurement band LO:HI in Hz, or 'full'."),
    as_json: bool = typer.Option(False, "--json", help="Print the result as JSON on stdout."),
    live: dict = None,
    filing: dict = None,
) -> None:
    """Measure the stage's voltage gain at a frequency and level, in V/V and dB, with its phase.

    The input is measured on --ref-channel (wired to the stage's input)
    or taken from the drive at the calibrated output scale; the output
    through the pad at its calibrated scale.

    Example: benchkit gain --freq 1000 --level -30dBFS --load 8 --tag bias=1.2A

    Safety: a gain run is one short tone; start low on an unknown stage,
    into a dummy load through a pad.
    """
    from benchkit.kinds.gain import gain_of_capture
    from benchkit.record import record_steps

    with live_run(), bench_logbook(filing) as (book, labels):
        band = units.parse_band(bandwidth)
        backend, profile, ref_channel, drive, plan = one_level(live, ref_channel, level, frequency, load,
            within=(("--freq", [frequency], band), ("--bandwidth", given_band(bandwidth))))
        in_channel, calibration = live["in_channel"], live["calibration"]
        params = dict(channel=in_channel, ref_channel=ref_channel, frequency_hz=frequency, level_dbfs=drive,
                      load_ohms=load, bandwidth_hz=band)
        with start_run(book, labels, "gain", backend, profile, calibration, params) as run:
            path = record_steps(backend, run.folder, frequency, [drive], channel=in_channel, calibration=profile,
                                note=labels["note"], warnings=plan.warnings,
                                calibration_file=None if calibration is None else str(calibration))
            report_run(run, "gain", gain_of_capture(path, in_channel, ref_channel, band, load), "", as_json, in_channel)


@app.command()
@live_options
@bench_options
def imd(
    method: str = typer.Option("modulation", "--method", parser=V.one_of("modulation", "difference"), help="modulation: 60 Hz + 7 kHz at 4:1, sidebands of f2 (SMPTE RP120, IEC 60268-3); difference: 19 kHz + 20 kHz at 1:1, products at f2-f1 and 2f1-f2, 2f2-f1 (IEC 60268-3)."),
    tones: Optional[str] = typer.Option(None, "--tones", parser=V.checked(units.parse_tones), help="The pair F1:F2 in Hz instead of the method's, e.g. 50:7000 or 13000:14000."),
    ratio: Optional[float] = typer.Option(None, "--ratio", parser=V.number(0.0, 100.0, above=True), help="Amplitude of F1 over F2 instead of the method's (4 or 1)."),
    levels: List[str] = typer.Option(["-20 dBFS"], "--level", parser=V.checked(units.parse_level), help="Drive, the composite's peak at the interface output, e.g. -20dBFS (repeat for IMD against level)."),
    load: Optional[float] = typer.Option(None, "--load", parser=V.ohms, help="Load resistance, ohms: levels also as the equivalent sine power."),
    step: float = typer.Option(1.0, "--step-duration", parser=V.seconds(60.0), help="Seconds analysed at each level."),
    ref_channel: Optional[int] = typer.Option(None, "--ref-channel", parser=V.CHANNEL, help="Input wired straight from the driven output (real devices): the capture is aligned on it."),
    as_json: bool = typer.Option(False, "--json", help="Print the result as JSON on stdout."),
    live: dict = None,
    filing: dict = None,
) -> None:
    """Measure intermodulation distortion with a pair of tones, at one level or stepped.

    Each level plays the pair with the composite's peak at that level
    (the same peak as one tone at the level). The products m f1 + n f2
    up to order 5 are listed with their levels; the method's figure is
    the root sum of its orders (modulation: the sideband pairs over f2;
    difference: d2 and d3 over the sum of the tones). The difference
    method wants a 96 kHz rate (--rate 96000): at 48 kHz its tones sit at
    the converters' band edge.

    Example: benchkit imd --method modulation --level -30dBFS --level -20dBFS --level -14dBFS --load 8 --tag bias=1.2A

    Safety: two tones at a composite peak load the stage like one tone of
    that peak, but 19 and 20 kHz at high level heat a tweeter and a
    stage's compensation quickly: into a dummy load only, start low.
    """
    from benchkit import record
    from benchkit.analysis.imd import shortest_record_s
    from benchkit.kinds.imd import imd_run, twin_tone
    from benchkit.signals import check_level

    with live_run(), bench_logbook(filing) as (book, labels):
        twin = twin_tone(method, *(units.parse_tones(tones) if tones else (None, None)), ratio)
        if step < shortest_record_s(twin.method, twin.f1_hz, twin.f2_hz):
            raise BenchkitError(f"--step-duration {step:g} s is too short to separate the products of {twin.f1_hz:g} and "
                                f"{twin.f2_hz:g} Hz: it needs {shortest_record_s(twin.method, twin.f1_hz, twin.f2_hz):.3g} s "
                                "(16 periods of their spacing)")
        backend, profile = live_setup(live, ref_channel, load=load,
                                       within=(("--tones", (twin.f1_hz, twin.f2_hz), None),))
        in_channel, calibration = live["in_channel"], live["calibration"]
        drive = [units.parse_level(text).to_dbfs(backend.output_vpk_per_fs) for text in levels]
        for d in drive:
            check_level(d)
        # the pre-flight probes at the stronger tone (f1 at 4:1; either at 1:1)
        plan = record.plan_run(backend, profile, drive, twin.f1_hz, in_channel, live["gain"], live["margin"], live["rail"],
                             live["pad_rating"], load, live["btl"], say=err)
        for w in plan.warnings:
            err(f"warning: {w}")
        params = dict(channel=in_channel, twin=twin.to_dict(), levels_dbfs=drive, load_ohms=load, step_s=step)
        with start_run(book, labels, "imd", backend, profile, calibration, params) as run:
            result = imd_run(backend, run.folder, twin, drive, in_channel, load, labels["note"], profile,
                             None if calibration is None else str(calibration), plan.warnings, step, spectrum=True)
            report_run(run, "imd", result, f"intermodulation, {len(drive)} level(s)", as_json, in_channel)


@app.command()
@live_options
@bench_options
def zout(
    load: float = typer.Option(..., "--load", parser=V.ohms, help="The dummy load switched on for the loaded reading, ohms (the damping factor is quoted against it).", show_default=False),
    freqs: List[float] = typer.Option(list(DEFAULT_ZOUT_FREQS), "--freq", parser=V.hertz, help="Frequencies read, Hz (repeatable)."),
    level: str = typer.Option("-20 dBFS", "--level", parser=V.checked(units.parse_level), help="Drive level at the interface output, e.g. -20dBFS (the same for both readings)."),
    ref_channel: Optional[int] = typer.Option(None, "--ref-channel", parser=V.CHANNEL, help="Input wired to the stage's input (the virtual bench's is 2): the readings become complex gains, so a reactive Zout (a coupling capacitor) is read right."),
    open_load: Optional[float] = typer.Option(None, "--open-load", parser=V.ohms, help="What the pad and input present to the stage while unloaded, ohms (default: from the calibration's pad, or the virtual bench's; else taken as open)."),
    from_runs: List[str] = typer.Option([], "--from", help="Two logged runs instead of measuring: the unloaded one, then the loaded one (tone, gain or sweep runs)."),
    yes: bool = typer.Option(False, "--yes", help="Do not ask before switching the load (scripted use on a real interface)."),
    as_json: bool = typer.Option(False, "--json", help="Print the result as JSON on stdout."),
    live: dict = None,
    filing: dict = None,
) -> None:
    """Measure the stage's output impedance and damping factor: the output unloaded, then loaded.

    The same tones (one a --freq) play twice at one level: with the load
    disconnected, then connected; Zout = R (V_open / V_loaded - 1), with
    the pad's own loading of the "open" output taken into account when it
    is known, and the damping factor R / |Zout|. With a reference input
    the readings are complex, so a capacitor's reactance at low
    frequencies shows as such. --from takes two logged runs instead (two
    sweeps give Zout across frequency).

    Example: benchkit zout --load 8 --tag bias=1.2A

    Safety: switch the load only while no tone plays (benchkit waits for
    you between the two readings). A stage with an output transformer
    (valve amplifiers) must not run unloaded: do not use this on one.
    """
    from benchkit.kinds.zout import zout_run

    with live_run(), bench_logbook(filing) as (book, labels):
        if from_runs:
            _zout_from_runs(book, labels, from_runs, load, open_load, as_json)
            return
        backend, profile, ref_channel, drive, plan = one_level(live, ref_channel, level, 1000.0, load, volts=False,
            within=(("--freq", freqs, DEFAULT_BAND_HZ),))
        in_channel, calibration = live["in_channel"], live["calibration"]
        if open_load is None:
            open_load = backend.pad_input_ohms()
            if open_load is None and profile is not None and profile.pad is not None and profile.pad.pad() is not None:
                open_load = profile.pad.pad().input_impedance(profile.pad.input_ohms or float("inf"))

        def switch(ohms):
            if backend.capabilities.switchable_load:
                backend.connect_load(ohms)
            elif not yes:
                what = "disconnect the load" if ohms is None else f"connect the {ohms:g} ohm load"
                typer.prompt(f"{what} (no tone is playing), then press Enter", default="", show_default=False, err=True)

        params = dict(channel=in_channel, ref_channel=ref_channel, load_ohms=load, open_load_ohms=open_load,
                      frequencies_hz=list(freqs), level_dbfs=drive)
        with start_run(book, labels, "zout", backend, profile, calibration, params) as run:
            result = zout_run(backend, run.folder, load, freqs, drive, switch, open_load, in_channel, ref_channel,
                              labels["note"], profile, None if calibration is None else str(calibration), plan.warnings)
            report_run(run, "zout", result, "output impedance", as_json, in_channel)


def _zout_from_runs(book, labels, refs: list[str], load: float, open_load: Optional[float], as_json: bool) -> None:
    """The output impedance from two logged runs' stored results, filed as
    a run of its own (with copies of the two results, for reanalysis)."""
    from benchkit.analysis.zout import analyze_zout
    from benchkit.compare_runs import stored_result
    from benchkit.report.tables import write_json
    from benchkit.kinds.zout import readings_of_result

    if len(refs) != 2:
        raise BenchkitError("--from takes two runs: the unloaded one, then the loaded one")
    entries = [book.entry(r) for r in refs]
    docs = [stored_result(book, e)[1] for e in entries]
    result = analyze_zout(*(readings_of_result(d) for d in docs), load_ohms=load, open_load_ohms=open_load)
    params = {"from": [e.id for e in entries], "load_ohms": load, "open_load_ohms": open_load}
    with start_run(book, labels, "zout", "logbook", None, None, params) as run:
        copies = [write_json(d, run.folder / f"{state}.result.json") for d, state in zip(docs, ("open", "loaded"))]
        measured = kinds.get("zout")
        err(measured.summary(result, f"output impedance from {entries[0].id} (open) and {entries[1].id} (loaded)"))
        finish_run(measured.reports(result, run.folder) + copies, run, result.to_dict(), as_json)


@app.command()
@live_options
@bench_options
def crosstalk(
    freqs: List[float] = typer.Option(list(DEFAULT_CROSSTALK_FREQS), "--freq", parser=V.hertz, help="Frequencies read, Hz (repeatable)."),
    level: str = typer.Option("-20 dBFS", "--level", parser=V.checked(units.parse_level), help="Drive level of the driven channel at the interface output."),
    in_channel_b: Optional[int] = typer.Option(None, "--in-channel-b", parser=V.CHANNEL, help="Input carrying channel B's output through its pad (default 2; the virtual bench's is 3)."),
    out_channel_b: int = typer.Option(2, "--out-channel-b", parser=V.CHANNEL, help="Output driving channel B."),
    load: Optional[float] = typer.Option(None, "--load", parser=V.ohms, help="The load on each channel, ohms (recorded with the result)."),
    bandwidth: str = typer.Option(BAND, "--bandwidth", parser=V.checked(units.parse_band), help="Band of the driven channel's analysis, LO:HI in Hz."),
    as_json: bool = typer.Option(False, "--json", help="Print the result as JSON on stdout."),
    live: dict = None,
    filing: dict = None,
) -> None:
    """Measure a stereo stage's crosstalk both ways, and its channel balance, against frequency.

    A tone a --freq plays into channel A with channel B's input silent
    (terminate it) and its output loaded, then the same into B. The leak
    is read at the driven tone's exact frequency, so it is measured below
    the broadband noise (marked '<' where it does not stand clear of it:
    an upper bound). The balance is B's output over A's, each driven
    alike. Both inputs need the same pad (the ratio of their scales is
    what the figures assume).

    Example: benchkit crosstalk --load 8 --tag bias=1.2A

    Safety: both channels loaded with dummy loads, both pads sized for
    the stage's full output.
    """
    from benchkit.kinds.crosstalk import crosstalk_run

    with live_run(), bench_logbook(filing) as (book, labels):
        band = units.parse_band(bandwidth)
        in_a, out_a = live["in_channel"], live["out_channel"]
        real_b = in_channel_b or 2
        backend, profile, _ref, drive, plan = one_level(live, None, level, 1000.0, load, volts=False, stereo=True,
                                                         more=dict(more_inputs=(real_b,), more_outputs=(out_channel_b,)),
                                                         within=(("--freq", freqs, band), ("--bandwidth", given_band(bandwidth))))
        calibration = live["calibration"]
        fixed = backend.capabilities.stereo_channels
        if fixed is not None:
            inputs, outputs = (fixed[0][0], in_channel_b or fixed[0][1]), fixed[1]
        else:
            inputs, outputs = (in_a, real_b), (out_a, out_channel_b)
        if len(set(inputs)) < 2 or len(set(outputs)) < 2:
            raise BenchkitError("channels A and B need inputs and outputs of their own")
        params = dict(channel=inputs[0], inputs=list(inputs), outputs=list(outputs), frequencies_hz=list(freqs),
                      level_dbfs=drive, load_ohms=load, bandwidth_hz=band)
        with start_run(book, labels, "crosstalk", backend, profile, calibration, params) as run:
            result = crosstalk_run(backend, run.folder, freqs, drive, outputs, inputs, labels["note"], profile,
                                   None if calibration is None else str(calibration), plan.warnings, load)
            report_run(run, "crosstalk", result, "crosstalk and balance", as_json)


@app.command()
@live_options
@bench_options
def sweep(
    span: str = typer.Option("10:22000", "--span", parser=V.checked(units.parse_span), help="Frequencies F1:F2 in Hz (the response is reported past the fades)."),
    length: float = typer.Option(5.0, "--duration", parser=V.seconds(120.0), help="The sweep's duration, seconds (rounded so its harmonics line up)."),
    level: str = typer.Option("-20 dBFS", "--level", parser=V.checked(units.parse_level), help="Drive level at the interface output, e.g. -20dBFS or 0.1Vrms."),
    stepped: bool = typer.Option(False, "--stepped", help="Stepped sines instead of a sweep: slower, the reference method, with THD+N."),
    per_octave: int = typer.Option(3, "--per-octave", parser=V.number(1, 48, integer=True), help="Stepped sines: frequencies per octave over the span."),
    freqs: List[float] = typer.Option([], "--at", parser=V.hertz, help="Stepped sines at these frequencies, Hz (repeatable) instead."),
    ref_channel: Optional[int] = typer.Option(None, "--ref-channel", parser=V.CHANNEL, help="Input wired straight from the driven output: response = output / reference (the virtual bench's is 2)."),
    ref_freq: float = typer.Option(1000.0, "--ref-freq", parser=V.hertz, help="Frequency whose level the response is referred to without volts, Hz."),
    load: Optional[float] = typer.Option(None, "--load", parser=V.ohms, help="Load resistance, ohms: estimates the coupling capacitor."),
    bandwidth: str = typer.Option(BAND, "--bandwidth", parser=V.checked(units.parse_band), help="Band for ripple and harmonics LO:HI in Hz, or 'full'."),
    smooth: Optional[int] = typer.Option(None, "--smooth", parser=V.number(1, 96, integer=True), help="Smooth the plotted magnitude over 1/N octave (CSV and JSON stay raw)."),
    as_json: bool = typer.Option(False, "--json", help="Print the result as JSON on stdout."),
    live: dict = None,
    filing: dict = None,
) -> None:
    """Measure frequency response and distortion against frequency: a synchronized sweep, or stepped sines.

    Gives magnitude, phase and group delay, the -3 dB and -1 dB points,
    passband ripple, the levels at 20 Hz and 20 kHz, the coupling capacitor
    when the low corner is first order (with --load), and THD, H2 and H3
    against frequency. The capture is on disk before it is analysed.

    Example: benchkit sweep --span 2:22000 --duration 10 --load 8 --tag bias=1.2A

    Safety: a sweep puts full level at every frequency, the highest too:
    measure into a dummy load, never a speaker (tweeters burn first), and
    keep the level low until the stage's gain is known. Ctrl-C fades the
    output to silence and keeps the partial capture.
    """
    from benchkit import record
    from benchkit.kinds.sweep import response_run
    from benchkit.analysis.sweep import SyncSweep
    from benchkit.signals import check_level

    with live_run(), bench_logbook(filing) as (book, labels):
        band = units.parse_band(bandwidth)
        f1, f2 = units.parse_band(span)
        backend, profile = live_setup(live, ref_channel, load=load,
            within=(("--span", (f1, f2)), ("--at", freqs), ("--bandwidth", given_band(bandwidth))))
        if not stepped:  # the sweep it will play, designed before anything plays (too short for F1 ...)
            SyncSweep.design(f1, f2, length, live["rate"])
        in_channel, calibration = live["in_channel"], live["calibration"]
        preflight = dict(gain=live["gain"], margin_db=live["margin"], rail_v=live["rail"],
                         pad_rating_w=live["pad_rating"], bridged=live["btl"])
        if ref_channel is None:
            ref_channel = backend.reference_input() or (profile.ref_channel if profile else None)
        drive = units.parse_level(level).to_dbfs(backend.output_vpk_per_fs)
        check_level(drive)
        plan = record.plan_run(backend, profile, [drive], ref_freq, in_channel, load_ohms=load, say=err, **preflight)
        for w in plan.warnings:
            err(f"warning: {w}")
        params = dict(channel=in_channel, ref_channel=ref_channel, ref_freq_hz=ref_freq, load_ohms=load,
                      bandwidth_hz=band, smooth=smooth, span_hz=[f1, f2], level_dbfs=drive, stepped=stepped)
        with start_run(book, labels, "sweep", backend, profile, calibration, params) as run:
            result = response_run(
                backend, run.folder, drive, (f1, f2), length, stepped, per_octave, [float(f) for f in freqs] or None,
                in_channel, ref_channel, load, band, ref_freq, profile, None if calibration is None else str(calibration),
                note=labels["note"], warnings=plan.warnings)
            report_run(run, "sweep", result, f"{result.method} response, {f1:g} to {f2:g} Hz at {drive:g} dBFS", as_json,
                        in_channel, smooth=smooth)


@app.command()
@live_options
@figure_options
@bench_options
def power(
    load: float = typer.Option(..., "--load", parser=V.ohms, help="Load resistance, ohms (a dummy load of the right rating)."),
    frequency: float = typer.Option(997.0, "--freq", parser=V.hertz, help="Tone frequency, Hz."),
    start: Optional[float] = typer.Option(None, "--start", parser=V.number(-120.0, 0.0, unit="dBFS"), help="First drive level, dBFS (default: 40 dB below the expected maximum)."),
    step_db: float = typer.Option(1.0, "--step-db", parser=V.number(0.0, 6.0, above=True, unit="dB"), help="Step while THD+N rises slowly, dB (a quarter of it once it rises fast)."),
    fine_db: float = typer.Option(0.1, "--fine-db", parser=V.number(0.0, 6.0, above=True, unit="dB"), help="Bisect until each limit lies between steps this close, dB."),
    supply_meter: Optional[str] = typer.Option(None, "--current-meter", help="A meter reading the supply's DC current (its VISA resource), read during every step; needs --supply-volts."),
    rated_power: Optional[float] = typer.Option(None, "--rated-power", parser=V.WATTS, help="The claimed power, W: say whether the power at the first limit reaches it."),
    precondition_run: bool = typer.Option(False, "--precondition", help="First hold 1/8 of --rated-power for an hour (16 CFR 432 manner)."),
    precondition_s: Optional[float] = typer.Option(None, "--precondition-s", parser=V.number(0.0, 7200.0, unit="s"), help="Shorten (or lengthen) the preconditioning, seconds: the report says so."),
    channels: int = typer.Option(1, "--channels", parser=V.number(1, 64, integer=True), help="How many channels the amplifier has (benchkit drives one; the report says so)."),
    ref_channel: Optional[int] = typer.Option(None, "--ref-channel", parser=V.CHANNEL, help="Input wired straight from the driven output (real devices)."),
    as_json: bool = typer.Option(False, "--json", help="Print the result as JSON on stdout."),
    live: dict = None,
    figures: dict = None,
    filing: dict = None,
) -> None:
    """Measure the power at set distortion limits: one stream of rising steps, each next level chosen from the last.

    Reports the power where THD+N (or THD) crosses each limit (1 %, 0.1 %
    and 10 % by default), interpolated on log axes between the bracketing
    steps, the clipping onset, which half clips first, and with the supply
    known the efficiency and idle dissipation; beside the expected ceiling
    when --rail and --bias describe the stage.

    Example: benchkit power --load 8 --rail 24 --bias 0.8 --supply-volts 24 --supply-amps 0.8

    Safety: this drives the stage into clipping at full power. Use a dummy
    load rated for the power (never a speaker), mind the heat sink and the
    load's temperature, and keep the pad rated for the highest output.
    Ctrl-C fades the output to silence and reports the completed steps.
    """
    from benchkit.kinds.power import plan_power, power_run

    with live_run(), bench_logbook(filing) as (book, labels):
        opts = power_options(True, load, live["rail"], **figures)
        if supply_meter and figures["supply_volts"] is None:
            raise BenchkitError("--current-meter needs --supply-volts (efficiency is P / (V I))")
        if precondition_run and rated_power is None:
            raise BenchkitError("--precondition needs --rated-power (it holds 1/8 of it)")
        if precondition_s is not None and not precondition_run:
            raise BenchkitError("--precondition-s goes with --precondition")
        backend, profile = live_setup(live, ref_channel, load=load, within=(("--freq", [frequency], DEFAULT_BAND_HZ),))
        in_channel, calibration = live["in_channel"], live["calibration"]
        if ref_channel is None:
            ref_channel = backend.reference_input()
        budget = opts["budget"]
        plan, first, top, scale = plan_power(backend, profile, frequency, in_channel, live["margin"], live["rail"],
                                             live["pad_rating"], load, live["btl"], budget, start, say=err)
        for w in plan.warnings:
            err(f"warning: {w}")
        params = dict(channel=in_channel, ref_channel=ref_channel, frequency_hz=frequency, load_ohms=load,
                      metric=opts["metric"], limits_pct=list(opts["limits_pct"]), onset_db=opts["onset_db"],
                      supply_v=opts["supply_v"], supply_a=opts["supply_a"], rail_v=live["rail"],
                      bias_a=figures["bias"], vsat_v=figures["vsat"], rated_w=rated_power)
        with start_run(book, labels, "power", backend, profile, calibration, params) as run:
            conditions = None
            if precondition_run:
                from benchkit.kinds.power import PRECONDITION_S, precondition

                if not scale:
                    raise BenchkitError("--precondition needs volts at the stage: give --calibration or --volts-per-fs")
                conditions = precondition(backend, frequency, rated_power, load, scale,
                                          precondition_s or PRECONDITION_S, channels, say=err)
            err(f"steps from {first:.1f} dBFS, at most {top:.1f} dBFS (the input's margin or the drive cap)")
            amps_meter = None
            if supply_meter:
                from benchkit.meters import ScpiMeter

                amps_meter = ScpiMeter(supply_meter, quantity="amps")
                err(f"supply current: {amps_meter.name}")
            try:
                result = power_run(backend, run.folder, frequency, first, top, load, in_channel, ref_channel,
                                   opts["metric"], opts["limits_pct"], opts["onset_db"], opts["supply_v"],
                                   opts["supply_a"], budget, profile, None if calibration is None else str(calibration),
                                   step_db=step_db, fine_db=fine_db, warnings=plan.warnings, note=labels["note"],
                                   input_margin_db=live["margin"], rated_w=rated_power, conditions=conditions,
                                   supply_meter=amps_meter)
            finally:
                if amps_meter is not None:
                    amps_meter.close()
            info = result.info or {}
            report_run(run, "power", result, f"{frequency:g} Hz into {load:g} ohm: "
                        f"{units.count(info.get('steps_played') or 0, 'step')}, {info.get('stimulus_s', 0):.1f} s; "
                        f"stopped: {info.get('stop_reason')}", as_json, in_channel,
                        "interrupted" if info.get("interrupted") else "complete")
    if info.get("device_lost"):
        # everything is on disk; PortAudio can hang for good shutting down a dead server's client
        sys.stdout.flush()
        sys.stderr.flush()
        os._exit(EXIT_BAD_INPUT)
    if info.get("interrupted"):
        raise typer.Exit(EXIT_INTERRUPTED)
