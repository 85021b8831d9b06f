"""What every command shares: the app, exit codes, the option groups, opening
the interface, the pre-flight set-up, filing a run and reporting it."""

from __future__ import annotations

import contextlib
import functools
import inspect
import os
import sys
from pathlib import Path
from typing import List, Optional

import typer

from benchkit import __version__, units
from benchkit.cli import values as V
from benchkit.analysis.power import DEFAULT_LIMITS_PCT, ONSET_DB
from benchkit import kinds
from benchkit.kinds import headline_figures
from benchkit.calibration import load_profile
from benchkit.errors import BenchkitError
from benchkit.units import quantity
from benchkit.logbook import CATALOG


app = typer.Typer(
    add_completion=False,
    no_args_is_help=True,
    pretty_exceptions_enable=False,
    help="benchkit: a calibrated bench analyzer for audio amplifier stages.",
)

#: exit codes (listed in the README): bad input or a failed check; a command line of unknown words;
#: a bug; a run that stopped before its last step (what it measured is filed); interrupted (Ctrl-C)
EXIT_BAD_INPUT = 1
EXIT_USAGE = 2
EXIT_INTERNAL = 3
EXIT_STOPPED_EARLY = 4
EXIT_INTERRUPTED = 130


def err(text: str) -> None:
    print(text, file=sys.stderr)


def progress(items: list, what: str):
    """Iterate with a progress bar on stderr when there are several items
    and stderr is a terminal; plainly otherwise."""
    if len(items) < 2 or not sys.stderr.isatty():
        return items
    from rich.console import Console
    from rich.progress import track

    return track(items, description=what, console=Console(stderr=True), transient=True)


def report_files():
    """The shared report files module (imported when needed: matplotlib is slow to load)."""
    from benchkit.report import files

    return files


def _version(value: bool) -> None:
    if value:
        print(f"benchkit {__version__}")
        raise typer.Exit()


@app.callback()
def _root(
    version: bool = typer.Option(False, "--version", callback=_version, is_eager=True, help="Print the version."),
) -> None:
    """benchkit: a calibrated bench analyzer for audio amplifier stages.

    Safety: amplifier stages run from mains-derived supplies and get hot;
    an unpadded output can overload an interface input and a test tone can
    damage a speaker. Measure into a dummy load through a pad, and follow
    local codes and licensed practice for anything mains-powered.
    """


_SIM_HELP = "Simulated stage for --device virtual: ideal, poly, hard-clip, se-class-a (see 'benchkit models')."

# options every live measurement takes: (type, option) by parameter name
LIVE = {
    "device": (Optional[str], lambda: typer.Option(None, "--device", help="'virtual', or a real interface by index or part of its name; default 'virtual' unless BENCHKIT_DEVICE names one.")),
    "in_device": (Optional[str], lambda: typer.Option(None, "--in-device", help="A separate input interface (its clock offset is measured on the reference).")),
    "in_channel": (int, lambda: typer.Option(1, "--in-channel", parser=V.CHANNEL, help="Input carrying the stage output (through the pad), from 1.")),
    "out_channel": (int, lambda: typer.Option(1, "--out-channel", parser=V.CHANNEL, help="Output driving the stage, from 1 (real devices).")),
    "rate": (float, lambda: typer.Option(48000.0, "--rate", parser=V.RATE, help="Sample rate, Hz.")),
    "blocksize": (int, lambda: typer.Option(1024, "--blocksize", parser=V.number(16, 16384, integer=True), help="Frames per audio callback (real devices; on a JACK server its period rules).")),
    "latency": (str, lambda: typer.Option("high", "--latency", parser=V.LATENCY, help="Stream latency: low, high, or seconds (real devices).")),
    "drive_cap": (float, lambda: typer.Option(-12.0, "--drive-cap", parser=V.number(-120.0, -0.5, unit="dBFS", hint="more drive needs --override-drive-cap"), help="Highest drive a real device may get, dBFS peak.")),
    "override_drive_cap": (bool, lambda: typer.Option(False, "--override-drive-cap", help="Allow up to -0.5 dBFS on a real device: can overload a stage, a pad or a speaker.")),
    "volts_per_fs": (Optional[float], lambda: typer.Option(None, "--volts-per-fs", parser=V.VOLTS, help="Volts peak at the stage per full scale of the input (real devices).")),
    "calibration": (Optional[Path], lambda: typer.Option(None, "--calibration", help="Calibration profile (from 'benchkit calibrate'): results in volts at the stage.")),
    "gain": (Optional[float], lambda: typer.Option(None, "--gain", parser=V.number(0.0, above=True, unit="V/V", hint="the gain as a magnitude (an inverting stage by its magnitude); a gain in dB converts as 10^(dB/20): 20 dB is 10"), help="Expected voltage gain of the stage (V/V); without it a low-level step measures it first.")),
    "margin": (float, lambda: typer.Option(3.0, "--margin", parser=V.number(0.0, 40.0, unit="dB"), help="Headroom the top step must keep below the input's full scale, dB.")),
    "rail": (Optional[float], lambda: typer.Option(None, "--rail", parser=V.VOLTS, help="The stage's supply, rail to rail, V: its normal swing (half of it) through the pad must stay --margin below full scale; a fault's whole rail is checked against the input's maximum (docs/safety.md).")),
    "input_max": (Optional[float], lambda: typer.Option(None, "--input-max", parser=V.VOLTS, help="The most the interface's input takes without damage, V peak, as its manual states it: checked against a full-rail fault through the pad (with --rail).")),
    "pad_rating": (Optional[float], lambda: typer.Option(None, "--pad-rating", parser=V.WATTS, help="Power rating of the pad resistors, W.")),
    "btl": (bool, lambda: typer.Option(False, "--btl", help="The stage has a bridged (BTL) output.")),
    "sim": (str, lambda: typer.Option("se-class-a", "--sim", help=_SIM_HELP)),
    "sim_param": (List[str], lambda: typer.Option([], "--sim-param", help="Stage parameter key=value (repeatable), e.g. bias=1.2.")),
    "sim_pad": (str, lambda: typer.Option("demo", "--sim-pad", parser=V.SIM_PAD, help="Simulated pad R1:R2 in ohms, 'none', or 'demo' (1.8k:200).")),
    "seed": (int, lambda: typer.Option(1, "--seed", parser=V.SEED, help="Seed of the virtual bench (latency, noise).")),
    "sim_stereo": (bool, lambda: typer.Option(False, "--sim-stereo", help="The virtual stage is stereo: output 2 drives channel B, read on input 3 (input 4 its reference); --sim-param crosstalk_1k_db, crosstalk_flat_db, balance_db set what couples them.")),
    "sim_load": (Optional[str], lambda: typer.Option(None, "--sim-load", parser=V.SIM_LOAD, help="The virtual stage's dummy load: ohms, or 'off' (the pad alone loads it); default the command's --load, else the model's own (8 ohm).")),
}


def _option_group(name: str, spec: dict):
    """A decorator giving a command a group of options, ``spec`` (type
    and option by parameter name); they reach it as one dict, ``name``,
    after its own options."""

    def decorate(command):
        own = [p for p in inspect.signature(command, eval_str=True).parameters.values() if p.name != name]
        extra = [inspect.Parameter(key, inspect.Parameter.KEYWORD_ONLY, default=make(), annotation=kind)
                 for key, (kind, make) in spec.items()]

        @functools.wraps(command)
        def wrapper(**kwargs):
            return command(**{name: {key: kwargs.pop(key) for key in spec}}, **kwargs)

        wrapper.__signature__ = inspect.Signature(
            [p.replace(kind=inspect.Parameter.KEYWORD_ONLY) for p in own] + extra)
        del wrapper.__wrapped__  # typer must read the new signature, not the command's
        return wrapper

    return decorate


live_options = _option_group("live", LIVE)

# how power figures are read from stepped levels (analyze --as power, power)
#: the default measurement band (the analysis narrows it to half a low rate itself)
BAND = "20:20000"
#: the lowest tone a step can analyse with the band 'full' (five periods in the pre-flight's probe)
LOWEST_TONE_HZ = 20.0

_FIGURES = {
    "limits": (List[float], lambda: typer.Option(list(DEFAULT_LIMITS_PCT), "--limit", parser=V.PERCENT, help="Distortion limits, percent (repeatable; the first is the rated point; a power run stops past the highest).")),
    "metric": (str, lambda: typer.Option("thdn", "--metric", parser=V.one_of("thdn", "thd"), help="What the limits apply to: thdn or thd.")),
    "onset_db": (float, lambda: typer.Option(ONSET_DB, "--onset-db", parser=V.number(0.0, 40.0, above=True, unit="dB"), help="Clipping onset: THD+N this far over its low-level trend, dB.")),
    "supply_volts": (Optional[float], lambda: typer.Option(None, "--supply-volts", parser=V.VOLTS, help="The stage's supply voltage: efficiency and dissipation.")),
    "supply_amps": (Optional[float], lambda: typer.Option(None, "--supply-amps", parser=V.AMPS, help="Its supply current (class A: about the bias).")),
    "bias": (Optional[float], lambda: typer.Option(None, "--bias", parser=V.AMPS, help="Describe the stage (se-class-a, with --rail): its bias, A; shows the expected ceiling.")),
    "vsat": (float, lambda: typer.Option(1.0, "--vsat", parser=V.number(0.0, unit="V"), help="Describe the stage: its saturation voltage, V.")),
}
figure_options = _option_group("figures", _FIGURES)

# how a drift log is judged (analyze of a CSV, drift)
_JUDGE = {
    "dc_limit": (Optional[float], lambda: typer.Option(None, "--dc-limit", parser=V.VOLTS, help="Drift: verdict, within this of --nominal, V (e.g. 0.05 for a speaker output's offset, common practice).")),
    "nominal": (float, lambda: typer.Option(0.0, "--nominal", parser=V.number(unit="V"), help="Drift: the value the limit is about, V: 0 for an output offset, the design midpoint (about half the rail) for a capacitor-coupled stage.")),
    "settle_band": (Optional[float], lambda: typer.Option(None, "--settle-band", parser=V.VOLTS, help="Drift: settled within this of the final value, V (default: a tenth of --dc-limit, else 1 mV).")),
    "window": (float, lambda: typer.Option(60.0, "--window", parser=V.SESSION_S, help="Drift: the rate over the last this many seconds.")),
}
judge_options = _option_group("judge", _JUDGE)

# where a measuring command files its run, and how it is labelled
_BENCH = {
    "bench": (Optional[Path], lambda: typer.Option(None, "--bench", help="Bench folder: the run goes to its runs/ and logbook (default: BENCHKIT_BENCH, else the current folder).")),
    "tags": (List[str], lambda: typer.Option([], "--tag", help="Label the run key=value (repeatable), e.g. --tag bias=1.2A --tag rail=24V.")),
    "note": (str, lambda: typer.Option("", "--note", help="A note kept with the run.")),
    "stage": (Optional[Path], lambda: typer.Option(None, "--stage", help="The stage under test: a JSON object or 'key: value' lines; the bench folder remembers it for later runs.")),
    "stage_info": (List[str], lambda: typer.Option([], "--stage-info", help="Set one field of the remembered stage description, key=value (repeatable).")),
}
bench_options = _option_group("filing", _BENCH)


@contextlib.contextmanager
def one_line():
    """Bad input as one line and exit 1."""
    try:
        yield
    except BenchkitError as exc:
        err(f"benchkit: error: {exc}")
        raise typer.Exit(EXIT_BAD_INPUT)


def power_options(power, load, rail, limits, metric, onset_db, supply_volts, supply_amps, bias, vsat) -> dict:
    """The checked options of a power analysis."""
    from benchkit.budget import ClassABudget

    if load is None:
        raise BenchkitError("--as power needs --load (ohms)")
    if supply_amps is not None and supply_volts is None:
        raise BenchkitError("--supply-amps needs --supply-volts")
    if bias is not None and rail is None:
        raise BenchkitError("--bias describes the stage with --rail: give both for the expected ceiling")
    # --rail alone is the pre-flight's; with --bias it describes the stage for the budget too
    budget = ClassABudget(rail, bias, load, vsat) if bias is not None else None
    return dict(load_ohms=load, metric=metric, limits_pct=tuple(limits), onset_db=onset_db,
                supply_v=supply_volts, supply_a=supply_amps, budget=budget)


# --- live measurements ---------------------------------------------------------


def open_backend(device: Optional[str], sim: str, sim_params: List[str], sim_pad: str, seed: int, real: dict | None = None,
                  stereo: bool = False, load: float | None = None):
    """The capture backend a command asked for; says on stderr which.
    ``load``: the load the virtual stage drives (ohms), where the model
    takes one and --sim-param does not set it."""
    from benchkit import pads
    from benchkit.capture import resolve_device
    from benchkit.capture.stages import model_params, parse_params
    from benchkit.capture.virtual import DEMO_PAD, virtual_bench

    name = resolve_device(device)
    if name != "virtual":
        from benchkit.capture.portaudio import PortAudioBackend

        backend = PortAudioBackend(name, **(real or {}))
        cap = backend.drive_cap_dbfs
        err(f"device: {backend.name}; drive capped at {cap:g} dBFS; output {backend.out_channel} drives the stage, "
             f"input {backend.in_channel} measures it" + (f", input {backend.ref_channel} is the reference" if backend.ref_channel else ""))
        return backend
    pad = DEMO_PAD if sim_pad == "demo" else pads.parse_pad(sim_pad)
    rate = (real or {}).get("sample_rate", 48000.0)
    params = parse_params(sim_params)
    if load is not None and any(p.name == "load" for p in model_params(sim)):
        params["load"] = load
    bench = virtual_bench(sim, params, pad=pad, seed=seed, stereo=stereo, sample_rate_hz=rate)
    pad_text = "no pad" if pad is None else f"pad {pad.r1_ohms:g}:{pad.r2_ohms:g} ohm ({1 / bench.pad_ratio():.2f}:1)"
    err(f"device: virtual bench (simulated interface, {'stereo ' if stereo else ''}stage {sim}, {pad_text}); "
         "nothing is played")
    return bench


def given_band(text: str) -> tuple[float, ...]:
    """The band a command was given, for :func:`live_setup`'s check: none
    when it is the default (20 Hz to 20 kHz, or to half the rate below
    40 kHz: the analysis narrows it itself)."""
    band = units.parse_band(text)
    return () if text == BAND or band is None else band


def live_setup(live: dict, ref_channel: int | None, stereo: bool = False, more: dict | None = None,
                within: tuple = (), load: float | None = None):
    """Open the backend a live command asked for, with its profile: says
    on stderr what it uses and warns of an overridden drive cap. ``stereo``
    makes the virtual stage stereo whatever --sim-stereo says; ``more``
    goes to a real interface (further inputs and outputs). ``within``
    holds (flag, frequencies) the command plays or analyses: each must lie
    below half the sample rate; (flag, frequencies, band) for tones, which
    must also lie inside the band they are analysed in (band None: 'full',
    from LOWEST_TONE_HZ). Everything is checked before anything
    plays: the frequencies, the profile's rate, the channel numbers
    against the device. On the virtual bench the stage drives ``load`` (the
    command's --load) unless --sim-load or --sim-param load=... says
    otherwise: one load, the one the figures are worked out for."""
    half = live["rate"] / 2
    for flag, freqs, *band in within:
        for f in freqs:
            if f >= half:
                raise BenchkitError(f"{flag} (as given, or its default) reaches {f:g} Hz, at or above half the sample "
                                    f"rate ({half:g} Hz at {live['rate']:g} Hz): lower it, or raise --rate")
            lo, hi = (band[0] or (LOWEST_TONE_HZ, half)) if band else (0.0, half)
            if band and not lo <= f <= hi:
                raise BenchkitError(f"{flag} {f:g} Hz lies outside the band its tone is analysed in ({lo:g} to "
                                    f"{hi:g} Hz; --bandwidth sets it where a command takes one)" if band[0] else
                                    f"{flag} {f:g} Hz is below {LOWEST_TONE_HZ:g} Hz, too low to analyse in a step")
    latency, override_drive_cap, calibration = live["latency"], live["override_drive_cap"], live["calibration"]
    lat = latency  # "low", "high" or seconds (cli.values.LATENCY)
    if override_drive_cap:
        err("WARNING: the drive cap is overridden: full-scale drive can overload the stage, the pad, the "
             "interface input and any speaker. Keep a dummy load on the output.")
    real = dict(sample_rate=live["rate"], in_channel=live["in_channel"], out_channel=live["out_channel"],
                ref_channel=ref_channel, blocksize=live["blocksize"], latency=lat,
                drive_cap_dbfs=-0.5 if override_drive_cap else live["drive_cap"],
                volts_per_fs=live["volts_per_fs"], in_device=live["in_device"], input_max_vpk=live["input_max"],
                **(more or {}))
    profile = load_profile(calibration) if calibration is not None else None
    if profile is not None:
        if abs(profile.sample_rate_hz - live["rate"]) > 0.5:
            raise BenchkitError(f"calibration profile {calibration} was made at {profile.sample_rate_hz:g} Hz, this run "
                                f"asks for {live['rate']:g} Hz: an interface's scale can differ between rates; "
                                f"calibrate at {live['rate']:g} Hz, or give --rate {profile.sample_rate_hz:g}")
        real["volts_per_fs"] = profile.stage_volts_per_fs
    sim_load = live["sim_load"]  # ohms, "off" or None (cli.values.SIM_LOAD)
    told = any(item.partition("=")[0].strip() == "load" for item in live["sim_param"])
    if sim_load is not None:
        wanted, switch = (None if sim_load == "off" else sim_load), True
    else:
        wanted, switch = (None if told else load), load is not None and not told
    backend = open_backend(live["device"], live["sim"], live["sim_param"], live["sim_pad"], live["seed"], real,
                            stereo or live["sim_stereo"], wanted)
    n_in, n_out = len(backend.inputs()), backend.n_outputs
    asked = [("--in-channel", live["in_channel"], n_in, "input"), ("--ref-channel", ref_channel, n_in, "input"),
              ("--out-channel", live["out_channel"], n_out, "output")]
    asked += [("--in-channel-b", n, n_in, "input") for n in (more or {}).get("more_inputs", ())]
    asked += [("--out-channel-b", n, n_out, "output") for n in (more or {}).get("more_outputs", ())]
    for flag, number, count, what in asked:
        if number is not None and number > count:
            raise BenchkitError(f"{flag} {number}: {backend.name} has {count} {what}s (numbered from 1)")
    if ref_channel is not None and ref_channel == live["in_channel"]:
        raise BenchkitError(f"--ref-channel {ref_channel} is the stage's own input (--in-channel): the reference "
                            "is the input wired straight from the driven output")
    can = backend.capabilities
    if can.switchable_load and switch:
        backend.connect_load(wanted)
    if can.simulated and live["input_max"] is not None:  # the simulated input as the user states it
        from dataclasses import replace

        backend.spec = replace(backend.spec, input_max_vpk=live["input_max"])  # a model without a load of its own: its output resistance meets this one
    if profile is not None:
        if not can.simulated:  # a simulated bench knows its own output
            backend.output_vpk_per_fs = profile.output_vpk_per_fs
        err(f"calibration: {calibration} ({profile.interface}, {quantity(profile.stage_volts_per_fs, 'V', 4)} peak per FS at the stage)")
    elif not can.simulated:
        err("no calibration profile: figures stay in dBFS (benchkit calibrate makes one)")
    return backend, profile


@contextlib.contextmanager
def live_run():
    """How a live command ends on bad input, Ctrl-C or a lost device: one
    line and a non-zero exit (the output has faded; the partial capture is
    on disk)."""
    from benchkit.capture.portaudio import CaptureInterrupted

    try:
        yield
    except CaptureInterrupted as exc:
        err(f"benchkit: stopped: {exc}")
        if exc.device_lost:
            # PortAudio can hang for good shutting down a dead server's
            # client; everything is on disk, so leave without it
            sys.stdout.flush()
            sys.stderr.flush()
            os._exit(EXIT_BAD_INPUT)
        raise typer.Exit(EXIT_INTERRUPTED if str(exc).startswith("interrupted") else EXIT_BAD_INPUT)
    except BenchkitError as exc:
        err(f"benchkit: error: {exc}")
        raise typer.Exit(EXIT_BAD_INPUT)


class _BenchLater:
    """A bench's logbook that opens on first use: a bench folder used for
    the first time is made only when a run is filed in it, not by a
    command refused before that."""

    def __init__(self, root: Path, stack: contextlib.ExitStack):
        self.root, self._stack, self._book = root, stack, None

    def __getattr__(self, name):
        from benchkit import logbook

        if self._book is None:
            self._book = self._stack.enter_context(logbook.Logbook(self.root))
        return getattr(self._book, name)


@contextlib.contextmanager
def bench_logbook(bench: dict):
    """The bench's logbook, opened (and checked writable) before anything
    plays, with the run's labels: tags, note and the stage description
    (a --stage file or --stage-info fields update the remembered one). A
    bench without a catalog yet is checked writable and opened when a run
    is filed in it."""
    from benchkit import logbook

    tags = logbook.parse_tags(bench["tags"])
    fields = logbook.parse_tags(bench["stage_info"], "--stage-info is key=value, e.g. rail=24V")
    root = logbook.resolve_bench(bench["bench"])
    with contextlib.ExitStack() as stack:
        if (root / CATALOG).exists():
            book = stack.enter_context(logbook.Logbook(root))
        else:
            logbook.check_writable(root)
            book = _BenchLater(root, stack)
        stage = logbook.read_settings(root).get("stage") or {}
        if bench["stage"] is not None:
            stage = logbook.read_stage(bench["stage"])
        changed = bench["stage"] is not None or bool(fields)
        if changed:
            stage = {**stage, **fields}
        # the bench remembers a changed stage once a run is filed with it (start_run), not on a refusal
        yield book, dict(tags=tags, note=bench["note"], stage=stage, remember=changed)


def start_run(book, labels: dict, command: str, backend, profile, calibration: Optional[Path], params: dict):
    """File the run in the logbook as running; its folder is where it writes;
    ``params`` as its kind's :class:`benchkit.kinds.RunParams` stores them.
    ``backend`` is the capture backend, or the name of a drift log's source."""
    cal = None if profile is None else {"file": str(calibration), "hash": profile.digest()}
    labels = dict(labels)
    if labels.pop("remember", False):
        book.remember_stage(labels["stage"])
    if isinstance(backend, str):
        device = backend
    else:
        device, params = backend.name, {**params, "sample_rate_hz": backend.sample_rate_hz}
    run = book.start(command, device=device, calibration=cal, params=kinds.get(command).params.stored(params), **labels)
    err(f"run {run.id} (logbook {book.root / CATALOG})")
    return run


def report_run(run, kind: str, result, title: str, as_json: bool, channel: int = 1, status: str = "complete",
                **options) -> None:
    """A run's result on one screen and in its report files (its kind's),
    and the run completed (:func:`finish_run`)."""
    measured = kinds.get(kind)
    err(measured.summary(result, title))
    finish_run(measured.reports(result, run.folder, channel, **options), run, result.to_dict(), as_json, status)


def finish_run(written: list[Path], run, doc: dict, as_json: bool, status: str = "complete", played: bool = True) -> None:
    """Complete the run in the logbook (its files are on disk), say where
    it is, and print the result with the run's id and folder. A run that
    ``played`` and whose capture stopped before its last step (the input
    clipped) ends with EXIT_STOPPED_EARLY: what it measured is filed, but
    not all it was asked."""
    from benchkit.recordings import stopped_early

    run.complete(doc, written, written[0] if written else None, status=status, figures=headline_figures(doc))
    for path in written:
        err(f"  wrote        {path}")
    err(f"run folder: {run.folder}")
    if as_json:
        from benchkit.report.tables import dumps

        print(dumps({**doc, "run": {"id": run.id, "folder": str(run.folder), "status": status}}))
    early = stopped_early(run.folder) if played else []
    if early:
        err(f"benchkit: stopped early: {early[0]}")
        raise typer.Exit(EXIT_STOPPED_EARLY)


def one_level(live: dict, ref_channel: Optional[int], level: str, frequency: float, load: Optional[float],
               volts: bool = True, **setup):
    """The backend, profile, reference input (the virtual bench's own by
    default), drive and pre-flight of a command that plays one level
    (``setup`` goes to :func:`live_setup`). ``volts=False``: the command
    compares ratios and needs no scale, so its load is not checked against
    one."""
    from benchkit import record
    from benchkit.signals import check_level

    backend, profile = live_setup(live, ref_channel, load=load, **setup)
    if ref_channel is None:
        ref_channel = backend.reference_input()
    drive = units.parse_level(level).to_dbfs(backend.output_vpk_per_fs)
    check_level(drive)
    scaled = backend.capabilities.simulated or profile is not None or live["volts_per_fs"] is not None
    checked = load if volts or scaled else None  # without a scale the load cannot be checked, and need not be
    plan = record.plan_run(backend, profile, [drive], frequency, live["in_channel"], live["gain"], live["margin"],
                         live["rail"], live["pad_rating"], checked, live["btl"], say=err)
    for w in plan.warnings:
        if checked is not None or load is None or w.code != "no-load":
            err(f"warning: {w}")
    return backend, profile, ref_channel, drive, plan
