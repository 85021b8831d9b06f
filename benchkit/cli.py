"""The benchkit command line: thin; parses, calls the layers, prints.

Human text goes to stderr, ``--json`` documents to stdout. Bad input ends
with a one-line reason and a non-zero exit, never a traceback (set
BENCHKIT_DEBUG=1 to see one).
"""

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
from benchkit import cli_values as V
from benchkit.analysis.power import DEFAULT_LIMITS_PCT, ONSET_DB
from benchkit import kinds
from benchkit.kinds import headline_figures
from benchkit.analysis.documents import document
from benchkit.analysis.tone import DEFAULT_BAND_HZ
from benchkit.calibration import load_profile
from benchkit.errors import BenchkitError, BenchWarning
from benchkit.units import quantity
from benchkit.logbook import CATALOG, STATUSES
from benchkit.report import logbook as logbook_text
from benchkit.kinds.crosstalk import DEFAULT_FREQS_HZ as DEFAULT_CROSSTALK_FREQS
from benchkit.kinds.zout import DEFAULT_FREQS_HZ as DEFAULT_ZOUT_FREQS

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


def _err(text: str) -> None:
    print(text, file=sys.stderr)


def _progress(items: list, what: str):
    """Iterate with a progress bar on stderr when there are several items
    and stderr is a terminal; plainly otherwise."""
    if len(items) < 2 or not sys.stderr.isatty():
        return items
    from rich.console import Console
    from rich.progress import track

    return track(items, description=what, console=Console(stderr=True), transient=True)


def _files():
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
_LIVE = {
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


_live_options = _option_group("live", _LIVE)

# how power figures are read from stepped levels (analyze --as power, power)
#: the default measurement band (the analysis narrows it to half a low rate itself)
_BAND = "20:20000"
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
_figure_options = _option_group("figures", _FIGURES)

# how a drift log is judged (analyze of a CSV, drift)
_JUDGE = {
    "dc_limit": (Optional[float], lambda: typer.Option(None, "--dc-limit", parser=V.VOLTS, help="Drift: verdict, within this of --nominal, V (e.g. 0.05 for a speaker output's offset, common practice).")),
    "nominal": (float, lambda: typer.Option(0.0, "--nominal", parser=V.number(unit="V"), help="Drift: the value the limit is about, V: 0 for an output offset, the design midpoint (about half the rail) for a capacitor-coupled stage.")),
    "settle_band": (Optional[float], lambda: typer.Option(None, "--settle-band", parser=V.VOLTS, help="Drift: settled within this of the final value, V (default: a tenth of --dc-limit, else 1 mV).")),
    "window": (float, lambda: typer.Option(60.0, "--window", parser=V.SESSION_S, help="Drift: the rate over the last this many seconds.")),
}
_judge_options = _option_group("judge", _JUDGE)

# where a measuring command files its run, and how it is labelled
_BENCH = {
    "bench": (Optional[Path], lambda: typer.Option(None, "--bench", help="Bench folder: the run goes to its runs/ and logbook (default: BENCHKIT_BENCH, else the current folder).")),
    "tags": (List[str], lambda: typer.Option([], "--tag", help="Label the run key=value (repeatable), e.g. --tag bias=1.2A --tag rail=24V.")),
    "note": (str, lambda: typer.Option("", "--note", help="A note kept with the run.")),
    "stage": (Optional[Path], lambda: typer.Option(None, "--stage", help="The stage under test: a JSON object or 'key: value' lines; the bench folder remembers it for later runs.")),
    "stage_info": (List[str], lambda: typer.Option([], "--stage-info", help="Set one field of the remembered stage description, key=value (repeatable).")),
}
_bench_options = _option_group("filing", _BENCH)


@app.command()
@_figure_options
@_judge_options
def analyze(
    files: List[Path] = typer.Argument(..., help="WAV or FLAC captures.", show_default=False),
    channel: int = typer.Option(1, "--channel", "-c", parser=V.CHANNEL, help="Channel to analyse, numbered from 1."),
    fundamental: Optional[float] = typer.Option(
        None, "--fundamental", parser=V.hertz, help="Look for the fundamental near this frequency (Hz); default: the sidecar's, else the strongest line."
    ),
    bandwidth: str = typer.Option(_BAND, "--bandwidth", parser=V.checked(units.parse_band), help="Measurement band LO:HI in Hz, or 'full'."),
    averages: int = typer.Option(1, "--averages", parser=V.number(1, 1000, integer=True), help="Split each capture into N blocks and average."),
    volts_per_fs: Optional[float] = typer.Option(
        None, "--volts-per-fs", parser=V.VOLTS, help="Volts peak at the measured point per full scale (overrides the sidecar)."
    ),
    load: Optional[float] = typer.Option(None, "--load", parser=V.ohms, help="Load resistance in ohms: adds power in W."),
    calibration: Optional[Path] = typer.Option(None, "--calibration", help="Calibration profile: volts at the stage from its scale and pad."),
    out: Optional[Path] = typer.Option(None, "--out", parser=V.out_folder, help="Write spectrum/residual PNG, CSV and JSON here."),
    sweep: Optional[str] = typer.Option(None, "--sweep", parser=V.checked(units.parse_sweep_spec), help="The capture holds a synchronized sweep F1:F2:SECONDS of unit amplitude made elsewhere, after unknown silence."),
    ref_channel: Optional[int] = typer.Option(None, "--ref-channel", parser=V.CHANNEL, help="Response captures: the reference input (default: the sidecar's)."),
    ref_freq: float = typer.Option(1000.0, "--ref-freq", parser=V.hertz, help="Response captures: the frequency the level is referred to, Hz."),
    smooth: Optional[int] = typer.Option(None, "--smooth", parser=V.number(1, 96, integer=True), help="Response captures: smooth the plotted magnitude over 1/N octave."),
    time_col: str = typer.Option("1", "--time-col", help="Drift CSVs: the time column, by name or number from 1 (units in the header are applied)."),
    value_col: str = typer.Option("2", "--value-col", help="Drift CSVs: the value column, by name or number."),
    as_kind: Optional[str] = typer.Option(None, "--as", parser=V.one_of("gain", "noise", "power"), help="Analyse as: gain (a tone capture benchkit wrote: the stage's voltage gain over --ref-channel, default the sidecar's reference input, or over the calibrated drive), noise (the stage's noise, input terminated: unweighted, A-weighted, hum; benchkit noise captures are recognised) or power (stepped captures: power at the distortion limits, clipping onset and half; needs --load and volts)."),
    zout_load: Optional[float] = typer.Option(None, "--zout", parser=V.ohms, help="Two captures, the stage unloaded then loaded with this many ohms: its output impedance and damping factor (with --open-load, what loaded the 'open' output)."),
    open_load: Optional[float] = typer.Option(None, "--open-load", parser=V.ohms, help="With --zout: what the pad and input present to the unloaded stage, ohms."),
    imd_method: Optional[str] = typer.Option(None, "--imd", help="The capture holds a two-tone test made elsewhere: modulation or difference, optionally with its tones, e.g. modulation:50:7000 (benchkit imd captures are recognised)."),
    rail: Optional[float] = typer.Option(None, "--rail", parser=V.VOLTS, help="Describe the stage (se-class-a): its rail, V, for the expected ceiling."),
    as_json: bool = typer.Option(False, "--json", help="Print the result as JSON on stdout."),
    figures: dict = None,
    judge: dict = None,
) -> None:
    """Analyse recorded captures offline: tones, responses, IMD, noise, gain, output impedance, crosstalk.

    A capture that benchkit wrote (stepped tones, a sweep or stepped
    sines, a two-tone, noise or crosstalk run) is recognised from its
    sidecar; --sweep, --imd, --as noise and --zout analyse ones made
    elsewhere.

    Example: benchkit analyze sample_captures/b2-bias0.8A-997Hz-steps.wav --load 8 --out report/
    """
    power, voltage_gain, noise = (as_kind == k for k in ("power", "gain", "noise"))
    try:
        band = units.parse_band(bandwidth)
        sweep_spec = units.parse_sweep_spec(sweep) if sweep else None
        profile = load_profile(calibration) if calibration is not None else None
        power_opts = _power_options(power, load, rail, **figures) if power else None
    except BenchkitError as exc:
        _err(f"benchkit: error: {exc}")
        raise typer.Exit(EXIT_BAD_INPUT)
    if zout_load is not None:
        from benchkit.kinds.zout import analyse_pair
        from benchkit.report.tables import dumps

        with _one_line():
            if len(files) != 2:
                raise BenchkitError("--zout takes two captures: the stage unloaded, then loaded")
            got = analyse_pair(files[0], files[1], channel, ref_channel, band, zout_load, open_load)
            _err(got.text)
            for written in got.write(out) if out is not None else ():
                _err(f"  wrote        {written}")
        if as_json:
            print(dumps(got.doc))
        return

    options = kinds.Offline(channel=channel, fundamental_hz=fundamental, bandwidth_hz=band, averages=averages,
                            volts_per_fs=volts_per_fs, load_ohms=load, out=out, sweep=sweep_spec, ref_channel=ref_channel,
                            ref_freq_hz=ref_freq, smooth=smooth, power=power_opts, imd_method=imd_method, noise=noise,
                            gain=voltage_gain, time_col=time_col, value_col=value_col, judge=judge, profile=profile,
                            profile_path=calibration)
    docs, failed = [], 0
    for path in _progress(files, "analysing"):
        try:
            got = kinds.analyse_file(Path(path), options, say=_err)
            _err(got.text)
            for written in got.write(out) if got.write is not None and out is not None else ():
                _err(f"  wrote        {written}")
        except BenchkitError as exc:
            failed += 1
            _err(f"benchkit: error: {exc}")
            docs.append(document("error", {"file": str(path), "error": str(exc)}))
            continue
        docs.append(got.doc)
    if as_json:
        from benchkit.report.tables import dumps

        print(dumps(docs[0] if len(docs) == 1 else docs))
    if failed:
        raise typer.Exit(EXIT_BAD_INPUT)


@contextlib.contextmanager
def _one_line():
    """Bad input as one line and exit 1."""
    try:
        yield
    except BenchkitError as exc:
        _err(f"benchkit: error: {exc}")
        raise typer.Exit(EXIT_BAD_INPUT)


def _power_options(power, load, rail, limits, metric, onset_db, supply_volts, supply_amps, bias, vsat) -> dict:
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



def _open_backend(device: Optional[str], sim: str, sim_params: List[str], sim_pad: str, seed: int, real: dict | None = None,
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
        _err(f"device: {backend.name}; drive capped at {cap:g} dBFS; output {backend.out_channel} drives the stage, "
             f"input {backend.in_channel} measures it" + (f", input {backend.ref_channel} is the reference" if backend.ref_channel else ""))
        return backend
    pad = DEMO_PAD if sim_pad == "demo" else pads.parse_pad(sim_pad)
    rate = (real or {}).get("sample_rate", 48000.0)
    params = parse_params(sim_params)
    if load is not None and any(p.name == "load" for p in model_params(sim)):
        params["load"] = load
    bench = virtual_bench(sim, params, pad=pad, seed=seed, stereo=stereo, sample_rate_hz=rate)
    pad_text = "no pad" if pad is None else f"pad {pad.r1_ohms:g}:{pad.r2_ohms:g} ohm ({1 / bench.pad_ratio():.2f}:1)"
    _err(f"device: virtual bench (simulated interface, {'stereo ' if stereo else ''}stage {sim}, {pad_text}); "
         "nothing is played")
    return bench


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
            _err(f"  {idx:>3}  {d['name']}  [{d['host_api']}]  in {d['max_input_channels']}, out "
                 f"{d['max_output_channels']}, {d['default_sample_rate_hz']:g} Hz")
    if note:
        _err(f"benchkit: {note}")




def _given_band(text: str) -> tuple[float, ...]:
    """The band a command was given, for :func:`_live_setup`'s check: none
    when it is the default (20 Hz to 20 kHz, or to half the rate below
    40 kHz: the analysis narrows it itself)."""
    band = units.parse_band(text)
    return () if text == _BAND or band is None else band


def _live_setup(live: dict, ref_channel: int | None, stereo: bool = False, more: dict | None = None,
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
    lat = latency  # "low", "high" or seconds (cli_values.LATENCY)
    if override_drive_cap:
        _err("WARNING: the drive cap is overridden: full-scale drive can overload the stage, the pad, the "
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
    sim_load = live["sim_load"]  # ohms, "off" or None (cli_values.SIM_LOAD)
    told = any(item.partition("=")[0].strip() == "load" for item in live["sim_param"])
    if sim_load is not None:
        wanted, switch = (None if sim_load == "off" else sim_load), True
    else:
        wanted, switch = (None if told else load), load is not None and not told
    backend = _open_backend(live["device"], live["sim"], live["sim_param"], live["sim_pad"], live["seed"], real,
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
        _err(f"calibration: {calibration} ({profile.interface}, {quantity(profile.stage_volts_per_fs, 'V', 4)} peak per FS at the stage)")
    elif not can.simulated:
        _err("no calibration profile: figures stay in dBFS (benchkit calibrate makes one)")
    return backend, profile


@contextlib.contextmanager
def _live_run():
    """How a live command ends on bad input, Ctrl-C or a lost device: one
    line and a non-zero exit (the output has faded; the partial capture is
    on disk)."""
    from benchkit.capture.portaudio import CaptureInterrupted

    try:
        yield
    except CaptureInterrupted as exc:
        _err(f"benchkit: stopped: {exc}")
        if exc.device_lost:
            # PortAudio can hang for good shutting down a dead server's
            # client; everything is on disk, so leave without it
            sys.stdout.flush()
            sys.stderr.flush()
            os._exit(EXIT_BAD_INPUT)
        raise typer.Exit(EXIT_INTERRUPTED if str(exc).startswith("interrupted") else EXIT_BAD_INPUT)
    except BenchkitError as exc:
        _err(f"benchkit: error: {exc}")
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
def _logbook(bench: dict):
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
        # the bench remembers a changed stage once a run is filed with it (_start_run), not on a refusal
        yield book, dict(tags=tags, note=bench["note"], stage=stage, remember=changed)


def _start_run(book, labels: dict, command: str, backend, profile, calibration: Optional[Path], params: dict):
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
    _err(f"run {run.id} (logbook {book.root / CATALOG})")
    return run


def _report_run(run, kind: str, result, title: str, as_json: bool, channel: int = 1, status: str = "complete",
                **options) -> None:
    """A run's result on one screen and in its report files (its kind's),
    and the run completed (:func:`_finish_run`)."""
    measured = kinds.get(kind)
    _err(measured.summary(result, title))
    _finish_run(measured.reports(result, run.folder, channel, **options), run, result.to_dict(), as_json, status)


def _finish_run(written: list[Path], run, doc: dict, as_json: bool, status: str = "complete", played: bool = True) -> None:
    """Complete the run in the logbook (its files are on disk), say where
    it is, and print the result with the run's id and folder. A run that
    ``played`` and whose capture stopped before its last step (the input
    clipped) ends with EXIT_STOPPED_EARLY: what it measured is filed, but
    not all it was asked."""
    from benchkit.recordings import stopped_early

    run.complete(doc, written, written[0] if written else None, status=status, figures=headline_figures(doc))
    for path in written:
        _err(f"  wrote        {path}")
    _err(f"run folder: {run.folder}")
    if as_json:
        from benchkit.report.tables import dumps

        print(dumps({**doc, "run": {"id": run.id, "folder": str(run.folder), "status": status}}))
    early = stopped_early(run.folder) if played else []
    if early:
        _err(f"benchkit: stopped early: {early[0]}")
        raise typer.Exit(EXIT_STOPPED_EARLY)


@app.command()
@_live_options
@_bench_options
def tone(
    frequency: float = typer.Option(997.0, "--freq", parser=V.hertz, help="Tone frequency, Hz (997 Hz keeps harmonics off sub-multiples of the rate)."),
    levels: List[str] = typer.Option(["-20 dBFS"], "--level", parser=V.checked(units.parse_level), help="Drive level at the interface output, e.g. -20dBFS or 0.1Vrms (repeat for steps)."),
    load: Optional[float] = typer.Option(None, "--load", parser=V.ohms, help="Load resistance, ohms: adds power in W."),
    bandwidth: str = typer.Option(_BAND, "--bandwidth", parser=V.checked(units.parse_band), help="Measurement band LO:HI in Hz, or 'full'."),
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

    with _live_run(), _logbook(filing) as (book, labels):
        band = units.parse_band(bandwidth)
        backend, profile = _live_setup(live, ref_channel, load=load,
                                       within=(("--freq", [frequency], band), ("--bandwidth", _given_band(bandwidth))))
        in_channel, calibration = live["in_channel"], live["calibration"]
        preflight = dict(gain=live["gain"], margin_db=live["margin"], rail_v=live["rail"],
                         pad_rating_w=live["pad_rating"], bridged=live["btl"])
        # a level in volts is at the interface output, whose scale the device knows
        drive = [units.parse_level(text).to_dbfs(backend.output_vpk_per_fs) for text in levels]
        for d in drive:
            check_level(d)
        channel = in_channel
        plan = record.plan_run(backend, profile, drive, frequency, channel, load_ohms=load, say=_err, **preflight)
        for w in plan.warnings:
            _err(f"warning: {w}")
        params = dict(channel=channel, frequency_hz=frequency, levels_dbfs=drive, load_ohms=load, bandwidth_hz=band)
        with _start_run(book, labels, "tone", backend, profile, calibration, params) as run:
            steps = tone_run(backend, run.folder, frequency, drive, load_ohms=load, bandwidth_hz=band,
                                  channel=channel, traces=True, calibration=profile,
                                  calibration_file=None if calibration is None else str(calibration),
                                  warnings=plan.warnings, note=labels["note"])
            _report_run(run, "tone", steps, f"{frequency:g} Hz, {units.count(len(drive), 'step')}, latency "
                        f"{steps.latency_samples} samples", as_json, channel)


@app.command()
@_live_options
@_bench_options
def watch(
    frequency: float = typer.Option(997.0, "--freq", parser=V.hertz, help="Tone frequency, Hz."),
    level: str = typer.Option("-20 dBFS", "--level", parser=V.checked(units.parse_level), help="Drive level at the interface output, e.g. -20dBFS or 0.1Vrms."),
    load: Optional[float] = typer.Option(None, "--load", parser=V.ohms, help="Load resistance, ohms: adds power in W."),
    bandwidth: str = typer.Option(_BAND, "--bandwidth", parser=V.checked(units.parse_band), help="Measurement band LO:HI in Hz, or 'full'."),
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
    with _live_run(), (_logbook(filing) if record else contextlib.nullcontext((None, None))) as (book, labels):
        if record_audio and not record:
            raise BenchkitError("--record-audio goes with --record")
        band = units.parse_band(bandwidth)
        backend, profile = _live_setup(live, ref_channel, load=load,
                                       within=(("--freq", [frequency], band), ("--bandwidth", _given_band(bandwidth))))
        in_channel, calibration = live["in_channel"], live["calibration"]
        drive = units.parse_level(level).to_dbfs(backend.output_vpk_per_fs)
        check_level(drive)
        if drive > backend.drive_cap_dbfs + 1e-9:
            raise BenchkitError(f"--level {drive:.1f} dBFS is above the drive cap of {backend.drive_cap_dbfs:g} dBFS; "
                                "lower it, or raise the cap knowingly (--drive-cap)")
        check_dc_source(dc_source, dc_resource, backend, profile)
        plan = record.plan_run(backend, profile, [drive], frequency, in_channel, live["gain"], live["margin"],
                             live["rail"], live["pad_rating"], load, live["btl"], say=_err)
        for w in plan.warnings:
            _err(f"warning: {w}")
        scale = profile.stage_volts_per_fs if profile is not None else backend.inputs()[in_channel - 1].volts_per_fs
        dc, dc_scale, meter = dc_reader(dc_source, dc_resource, backend, profile)
        try:
            tone = SteadyTone(frequency, drive, backend.sample_rate_hz, None, in_channel,
                              getattr(backend, "drive_output", 1), backend.n_outputs, scale, load, band, dc=dc,
                              dc_scale=dc_scale)
            params = dict(channel=in_channel, frequency_hz=frequency, level_dbfs=drive, load_ohms=load,
                          bandwidth_hz=band)
            run = _start_run(book, labels, "watch", backend, profile, calibration, params) if record else None
            with run if run is not None else contextlib.nullcontext():
                mode = "json" if json_lines else "plain" if plain or not sys.stdout.isatty() else "live"
                end = watch_session(backend, tone, run, record_audio, duration, mode, _err)
                code = EXIT_INTERRUPTED if end.interrupted else EXIT_STOPPED_EARLY if end.clipped else 0
        finally:
            if meter is not None:
                meter.close()
    if code:
        raise typer.Exit(code)


@app.command()
@_live_options
@_bench_options
def noise(
    length: float = typer.Option(5.0, "--duration", parser=V.seconds(600.0), help="Seconds of noise to record (after half a second of settling)."),
    load: Optional[float] = typer.Option(None, "--load", parser=V.ohms, help="Load resistance, ohms: the SNR is referred to --ref-power into it."),
    ref_power: float = typer.Option(1.0, "--ref-power", parser=V.WATTS, help="With --load: the output power the SNR is referred to, W (1 W is common for small amplifiers; give the rated power to quote that)."),
    ref_vrms: Optional[float] = typer.Option(None, "--ref-vrms", parser=V.VOLTS, help="Or refer the SNR to this output, Vrms."),
    bandwidth: str = typer.Option(_BAND, "--bandwidth", parser=V.checked(units.parse_band), help="Band integrated, LO:HI in Hz."),
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

    with _live_run(), _logbook(filing) as (book, labels):
        band = units.parse_band(bandwidth) or (20.0, 20000.0)
        backend, profile = _live_setup(live, None, load=load, within=(("--bandwidth", _given_band(bandwidth)),))
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
        with _start_run(book, labels, "noise", backend, profile, calibration, params) as run:
            result = noise_run(backend, run.folder, length, in_channel, band, reference_vrms, reference,
                               labels["note"], profile, None if calibration is None else str(calibration))
            _report_run(run, "noise", result, f"noise of {backend.name} input {in_channel}, {length:g} s", as_json,
                        in_channel)


@app.command()
@_live_options
@_bench_options
def gain(
    frequency: float = typer.Option(997.0, "--freq", parser=V.hertz, help="Tone frequency, Hz."),
    level: str = typer.Option("-30 dBFS", "--level", parser=V.checked(units.parse_level), help="Drive level at the interface output, e.g. -30dBFS or 0.05Vrms."),
    ref_channel: Optional[int] = typer.Option(None, "--ref-channel", parser=V.CHANNEL, help="Input wired to the stage's input (the virtual bench's is 2); without one, the drive at the calibrated output scale."),
    load: Optional[float] = typer.Option(None, "--load", parser=V.ohms, help="Load resistance, ohms (recorded with the gain: it depends on it)."),
    bandwidth: str = typer.Option(_BAND, "--bandwidth", parser=V.checked(units.parse_band), help="Measurement band LO:HI in Hz, or 'full'."),
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

    with _live_run(), _logbook(filing) as (book, labels):
        band = units.parse_band(bandwidth)
        backend, profile, ref_channel, drive, plan = _one_level(live, ref_channel, level, frequency, load,
            within=(("--freq", [frequency], band), ("--bandwidth", _given_band(bandwidth))))
        in_channel, calibration = live["in_channel"], live["calibration"]
        params = dict(channel=in_channel, ref_channel=ref_channel, frequency_hz=frequency, level_dbfs=drive,
                      load_ohms=load, bandwidth_hz=band)
        with _start_run(book, labels, "gain", backend, profile, calibration, params) as run:
            path = record_steps(backend, run.folder, frequency, [drive], channel=in_channel, calibration=profile,
                                note=labels["note"], warnings=plan.warnings,
                                calibration_file=None if calibration is None else str(calibration))
            _report_run(run, "gain", gain_of_capture(path, in_channel, ref_channel, band, load), "", as_json, in_channel)


@app.command()
@_live_options
@_bench_options
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

    with _live_run(), _logbook(filing) as (book, labels):
        twin = twin_tone(method, *(units.parse_tones(tones) if tones else (None, None)), ratio)
        if step < shortest_record_s(twin.method, twin.f1_hz, twin.f2_hz):
            raise BenchkitError(f"--step-duration {step:g} s is too short to separate the products of {twin.f1_hz:g} and "
                                f"{twin.f2_hz:g} Hz: it needs {shortest_record_s(twin.method, twin.f1_hz, twin.f2_hz):.3g} s "
                                "(16 periods of their spacing)")
        backend, profile = _live_setup(live, ref_channel, load=load,
                                       within=(("--tones", (twin.f1_hz, twin.f2_hz), None),))
        in_channel, calibration = live["in_channel"], live["calibration"]
        drive = [units.parse_level(text).to_dbfs(backend.output_vpk_per_fs) for text in levels]
        for d in drive:
            check_level(d)
        # the pre-flight probes at the stronger tone (f1 at 4:1; either at 1:1)
        plan = record.plan_run(backend, profile, drive, twin.f1_hz, in_channel, live["gain"], live["margin"], live["rail"],
                             live["pad_rating"], load, live["btl"], say=_err)
        for w in plan.warnings:
            _err(f"warning: {w}")
        params = dict(channel=in_channel, twin=twin.to_dict(), levels_dbfs=drive, load_ohms=load, step_s=step)
        with _start_run(book, labels, "imd", backend, profile, calibration, params) as run:
            result = imd_run(backend, run.folder, twin, drive, in_channel, load, labels["note"], profile,
                             None if calibration is None else str(calibration), plan.warnings, step, spectrum=True)
            _report_run(run, "imd", result, f"intermodulation, {len(drive)} level(s)", as_json, in_channel)


@app.command()
@_live_options
@_bench_options
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

    with _live_run(), _logbook(filing) as (book, labels):
        if from_runs:
            _zout_from_runs(book, labels, from_runs, load, open_load, as_json)
            return
        backend, profile, ref_channel, drive, plan = _one_level(live, ref_channel, level, 1000.0, load, volts=False,
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
        with _start_run(book, labels, "zout", backend, profile, calibration, params) as run:
            result = zout_run(backend, run.folder, load, freqs, drive, switch, open_load, in_channel, ref_channel,
                              labels["note"], profile, None if calibration is None else str(calibration), plan.warnings)
            _report_run(run, "zout", result, "output impedance", as_json, in_channel)


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
    with _start_run(book, labels, "zout", "logbook", None, None, params) as run:
        copies = [write_json(d, run.folder / f"{state}.result.json") for d, state in zip(docs, ("open", "loaded"))]
        measured = kinds.get("zout")
        _err(measured.summary(result, f"output impedance from {entries[0].id} (open) and {entries[1].id} (loaded)"))
        _finish_run(measured.reports(result, run.folder) + copies, run, result.to_dict(), as_json)


@app.command()
@_live_options
@_bench_options
def crosstalk(
    freqs: List[float] = typer.Option(list(DEFAULT_CROSSTALK_FREQS), "--freq", parser=V.hertz, help="Frequencies read, Hz (repeatable)."),
    level: str = typer.Option("-20 dBFS", "--level", parser=V.checked(units.parse_level), help="Drive level of the driven channel at the interface output."),
    in_channel_b: Optional[int] = typer.Option(None, "--in-channel-b", parser=V.CHANNEL, help="Input carrying channel B's output through its pad (default 2; the virtual bench's is 3)."),
    out_channel_b: int = typer.Option(2, "--out-channel-b", parser=V.CHANNEL, help="Output driving channel B."),
    load: Optional[float] = typer.Option(None, "--load", parser=V.ohms, help="The load on each channel, ohms (recorded with the result)."),
    bandwidth: str = typer.Option(_BAND, "--bandwidth", parser=V.checked(units.parse_band), help="Band of the driven channel's analysis, LO:HI in Hz."),
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

    with _live_run(), _logbook(filing) as (book, labels):
        band = units.parse_band(bandwidth)
        in_a, out_a = live["in_channel"], live["out_channel"]
        real_b = in_channel_b or 2
        backend, profile, _ref, drive, plan = _one_level(live, None, level, 1000.0, load, volts=False, stereo=True,
                                                         more=dict(more_inputs=(real_b,), more_outputs=(out_channel_b,)),
                                                         within=(("--freq", freqs, band), ("--bandwidth", _given_band(bandwidth))))
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
        with _start_run(book, labels, "crosstalk", backend, profile, calibration, params) as run:
            result = crosstalk_run(backend, run.folder, freqs, drive, outputs, inputs, labels["note"], profile,
                                   None if calibration is None else str(calibration), plan.warnings, load)
            _report_run(run, "crosstalk", result, "crosstalk and balance", as_json)


def _one_level(live: dict, ref_channel: Optional[int], level: str, frequency: float, load: Optional[float],
               volts: bool = True, **setup):
    """The backend, profile, reference input (the virtual bench's own by
    default), drive and pre-flight of a command that plays one level
    (``setup`` goes to :func:`_live_setup`). ``volts=False``: the command
    compares ratios and needs no scale, so its load is not checked against
    one."""
    from benchkit import record
    from benchkit.signals import check_level

    backend, profile = _live_setup(live, ref_channel, load=load, **setup)
    if ref_channel is None:
        ref_channel = backend.reference_input()
    drive = units.parse_level(level).to_dbfs(backend.output_vpk_per_fs)
    check_level(drive)
    scaled = backend.capabilities.simulated or profile is not None or live["volts_per_fs"] is not None
    checked = load if volts or scaled else None  # without a scale the load cannot be checked, and need not be
    plan = record.plan_run(backend, profile, [drive], frequency, live["in_channel"], live["gain"], live["margin"],
                         live["rail"], live["pad_rating"], checked, live["btl"], say=_err)
    for w in plan.warnings:
        if checked is not None or load is None or w.code != "no-load":
            _err(f"warning: {w}")
    return backend, profile, ref_channel, drive, plan


@app.command()
@_live_options
@_bench_options
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
    bandwidth: str = typer.Option(_BAND, "--bandwidth", parser=V.checked(units.parse_band), help="Band for ripple and harmonics LO:HI in Hz, or 'full'."),
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

    with _live_run(), _logbook(filing) as (book, labels):
        band = units.parse_band(bandwidth)
        f1, f2 = units.parse_band(span)
        backend, profile = _live_setup(live, ref_channel, load=load,
            within=(("--span", (f1, f2)), ("--at", freqs), ("--bandwidth", _given_band(bandwidth))))
        if not stepped:  # the sweep it will play, designed before anything plays (too short for F1 ...)
            SyncSweep.design(f1, f2, length, live["rate"])
        in_channel, calibration = live["in_channel"], live["calibration"]
        preflight = dict(gain=live["gain"], margin_db=live["margin"], rail_v=live["rail"],
                         pad_rating_w=live["pad_rating"], bridged=live["btl"])
        if ref_channel is None:
            ref_channel = backend.reference_input() or (profile.ref_channel if profile else None)
        drive = units.parse_level(level).to_dbfs(backend.output_vpk_per_fs)
        check_level(drive)
        plan = record.plan_run(backend, profile, [drive], ref_freq, in_channel, load_ohms=load, say=_err, **preflight)
        for w in plan.warnings:
            _err(f"warning: {w}")
        params = dict(channel=in_channel, ref_channel=ref_channel, ref_freq_hz=ref_freq, load_ohms=load,
                      bandwidth_hz=band, smooth=smooth, span_hz=[f1, f2], level_dbfs=drive, stepped=stepped)
        with _start_run(book, labels, "sweep", backend, profile, calibration, params) as run:
            result = response_run(
                backend, run.folder, drive, (f1, f2), length, stepped, per_octave, [float(f) for f in freqs] or None,
                in_channel, ref_channel, load, band, ref_freq, profile, None if calibration is None else str(calibration),
                note=labels["note"], warnings=plan.warnings)
            _report_run(run, "sweep", result, f"{result.method} response, {f1:g} to {f2:g} Hz at {drive:g} dBFS", as_json,
                        in_channel, smooth=smooth)


@app.command()
@_live_options
@_figure_options
@_bench_options
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

    with _live_run(), _logbook(filing) as (book, labels):
        opts = _power_options(True, load, live["rail"], **figures)
        if supply_meter and figures["supply_volts"] is None:
            raise BenchkitError("--current-meter needs --supply-volts (efficiency is P / (V I))")
        if precondition_run and rated_power is None:
            raise BenchkitError("--precondition needs --rated-power (it holds 1/8 of it)")
        if precondition_s is not None and not precondition_run:
            raise BenchkitError("--precondition-s goes with --precondition")
        backend, profile = _live_setup(live, ref_channel, load=load, within=(("--freq", [frequency], DEFAULT_BAND_HZ),))
        in_channel, calibration = live["in_channel"], live["calibration"]
        if ref_channel is None:
            ref_channel = backend.reference_input()
        budget = opts["budget"]
        plan, first, top, scale = plan_power(backend, profile, frequency, in_channel, live["margin"], live["rail"],
                                             live["pad_rating"], load, live["btl"], budget, start, say=_err)
        for w in plan.warnings:
            _err(f"warning: {w}")
        params = dict(channel=in_channel, ref_channel=ref_channel, frequency_hz=frequency, load_ohms=load,
                      metric=opts["metric"], limits_pct=list(opts["limits_pct"]), onset_db=opts["onset_db"],
                      supply_v=opts["supply_v"], supply_a=opts["supply_a"], rail_v=live["rail"],
                      bias_a=figures["bias"], vsat_v=figures["vsat"], rated_w=rated_power)
        with _start_run(book, labels, "power", backend, profile, calibration, params) as run:
            conditions = None
            if precondition_run:
                from benchkit.kinds.power import PRECONDITION_S, precondition

                if not scale:
                    raise BenchkitError("--precondition needs volts at the stage: give --calibration or --volts-per-fs")
                conditions = precondition(backend, frequency, rated_power, load, scale,
                                          precondition_s or PRECONDITION_S, channels, say=_err)
            _err(f"steps from {first:.1f} dBFS, at most {top:.1f} dBFS (the input's margin or the drive cap)")
            amps_meter = None
            if supply_meter:
                from benchkit.meters import ScpiMeter

                amps_meter = ScpiMeter(supply_meter, quantity="amps")
                _err(f"supply current: {amps_meter.name}")
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
            _report_run(run, "power", result, f"{frequency:g} Hz into {load:g} ohm: "
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


@app.command()
@_judge_options
@_bench_options
def drift(
    source: str = typer.Option("virtual", "--dc-source", parser=V.one_of("virtual", "meter", "input"), help="Where the DC is read: virtual (the se-class-a midpoint, accelerated), meter (SCPI over pyvisa, --meter) or input (the measuring input, DC coupled per --calibration)."),
    resource: Optional[str] = typer.Option(None, "--meter", help="The DC meter's VISA resource, e.g. TCPIP::192.168.1.50::5025::SOCKET or ASRL/dev/ttyUSB0::INSTR."),
    current_resource: Optional[str] = typer.Option(None, "--current-meter", help="A meter reading the supply's DC current (its VISA resource), logged beside the volts."),
    interval: float = typer.Option(1.0, "--interval", parser=V.number(0.01, 3600.0, unit="s", hint="a reading at most every 10 ms"), help="Seconds between readings."),
    duration: Optional[float] = typer.Option(None, "--duration", parser=V.SESSION_S, help="Log this long, seconds."),
    until_settled: bool = typer.Option(False, "--until-settled", help="Stop once settled within --settle-band."),
    accelerate: float = typer.Option(60.0, "--accelerate", parser=V.number(0.0, 1e6, above=True), help="Virtual source: model seconds per second of interval."),
    device: Optional[str] = _LIVE["device"][1](),
    in_channel: int = _LIVE["in_channel"][1](),
    calibration: Optional[Path] = _LIVE["calibration"][1](),
    sim_param: List[str] = _LIVE["sim_param"][1](),
    seed: int = _LIVE["seed"][1](),
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

    with _live_run(), _logbook(filing) as (book, labels):
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
            backend = _open_backend(device, "ideal", [], "demo", seed, dict(in_channel=in_channel))
            reader = meters.InterfaceDc(backend, profile, in_channel)
        else:
            raise BenchkitError(f"--dc-source is virtual, meter or input, got {source!r}")
        dc_limit, nominal, window = judge["dc_limit"], judge["nominal"], judge["window"]
        band = judge["settle_band"] if judge["settle_band"] is not None else (dc_limit / 10 if dc_limit else 1e-3)
        params = dict(source=source, limit_v=dc_limit, band_v=band, window_s=window, nominal_v=nominal,
                      interval_s=interval, accelerated=getattr(reader, "accelerated", 0.0) or None)
        with _start_run(book, labels, "drift", reader.name, profile if source == "input" else None, calibration,
                        params) as run:
            log = run.folder / "log.csv"
            amps = meters.ScpiMeter(current_resource, quantity="amps") if current_resource else None
            _err(f"source: {reader.name}; logging to {log}" + (f"; supply current: {amps.name}" if amps else ""))
            try:
                end = log_drift(reader, log, interval, duration, until_settled, band, window, say=_err, current=amps)
            finally:
                reader.close()
                if amps is not None:
                    amps.close()
            notes = () if end.how in ("duration", "settled") else (BenchWarning("interrupted", f"the log stopped early: {end.message}"),)
            if end.how == "lost":
                _err(f"benchkit: {end.message}: the log stopped; every reading so far is in {log}")
            result = analyze_drift_csv(log, limit_v=dc_limit, band_v=band, window_s=window,
                                       info={"source": reader.name, "ended": end.how,
                                             "accelerated": params["accelerated"]},
                                       warnings=notes, nominal_v=nominal)
            _report_run(run, "drift", result, f"{reader.name}: {end.how}", as_json,
                        status="complete" if end.how in ("duration", "settled") else "interrupted")
    if end.how != "duration" and end.how != "settled":
        raise typer.Exit(EXIT_INTERRUPTED if end.how == "interrupted" else EXIT_BAD_INPUT)


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
        backend = _open_backend(device, "ideal", [], "demo", seed, real)
        virtual = backend.capabilities.simulated
        if reading is not None:
            volts = units.parse_level(reading).to_vrms()
        elif virtual:
            volts = backend.output_vrms(lvl)
            _err(f"virtual bench: the voltmeter reads {quantity(volts, 'Vrms', 5)} at the output")
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
        _err(f"benchkit: error: {exc}")
        raise typer.Exit(EXIT_BAD_INPUT)
    u = profile.uncertainty
    _err(f"output {quantity(profile.output_vpk_per_fs, 'V', 5)} peak per FS, input {quantity(profile.input_vpk_per_fs, 'V', 5)} peak per FS, "
         f"pad ratio {profile.pad_ratio:.5g}: {quantity(profile.stage_volts_per_fs, 'V', 5)} peak per FS at the stage")
    _err(f"loopback floor THD+N {profile.loopback_floor['thdn_db']:.1f} dB at {profile.loopback_floor['level_dbfs']:.1f} dBFS; "
         f"{'inverting' if profile.polarity_inverts else 'non-inverting'}; "
         f"{'DC coupled' if profile.dc_coupled else f'AC coupled ({profile.ac_corner_hz:.2g} Hz)'}; latency {profile.latency_samples} samples")
    _err(f"uncertainty of the volts: +-{u['total_db']:.3f} dB (voltmeter +-{u['voltmeter_pct']:g} %, repeatability {u['repeatability_db']:.4f} dB)")
    _err(f"profile: {out} (hash {profile.digest()})")


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
        _err(f"benchkit: error: {exc}")
        raise typer.Exit(EXIT_BAD_INPUT)
    for line in pads_lines(reports, normal, rail, input_fs_vpk, input_ohms, input_max_vpk, headroom_db,
                           input_noise_dbfs):
        _err(line)
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
        _err(f"benchkit: error: {exc}")
        raise typer.Exit(EXIT_BAD_INPUT)
    _err(summary.budget_summary(doc))
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
        _files().report_folder(out)
        report = run_demo(out, seed=seed, say=_err)
    except BenchkitError as exc:
        _err(f"benchkit: error: {exc}")
        raise typer.Exit(EXIT_BAD_INPUT)
    _err(report.text)
    _err(f"report: {report.folder.resolve()} ({len(report.files)} files)")


@app.command()
def models() -> None:
    """List the virtual bench's stage models with their parameters and units.

    Example: benchkit models
    """
    from benchkit.capture.stages import models_help

    print(models_help())


# --- the logbook --------------------------------------------------------------------

log_app = typer.Typer(no_args_is_help=True, help="The bench logbook: list, show, label, export, rebuild, analyse again and remove runs.")
app.add_typer(log_app, name="log")


def _bench_option():
    return typer.Option(None, "--bench", help="Bench folder (default: BENCHKIT_BENCH, else the current folder).")


def _run_argument():
    return typer.Argument(..., help="Run id, a unique start of it, 'last' or 'last-N'.")


@contextlib.contextmanager
def _book(bench: Optional[Path], write: bool = False):
    """The bench's logbook for a log command: one line and exit 1 when it
    cannot be opened, or on a BenchkitError inside the block; a bench that
    cannot be written is read as it stands unless ``write``."""
    from benchkit import logbook

    root = logbook.resolve_bench(bench)
    try:
        if not (root / logbook.CATALOG).exists() and not write:
            raise BenchkitError(f"{root} holds no logbook ({logbook.CATALOG}): run a measurement there, or give --bench")
        try:
            book = logbook.Logbook(root)
        except BenchkitError as exc:
            if write or not str(exc).startswith("cannot write"):
                raise
            book = logbook.Logbook(root, readonly=True)
        with book:
            yield book
    except BenchkitError as exc:
        _err(f"benchkit: error: {exc}")
        raise typer.Exit(EXIT_BAD_INPUT)


@log_app.command("list")
def log_list(
    tags: List[str] = typer.Option([], "--tag", help="Only runs with this tag, key=value (repeatable: all must match)."),
    command: Optional[str] = typer.Option(None, "--command", parser=V.one_of(*kinds.names()), help=f"Only runs of this command: {', '.join(kinds.names())}."),
    since: Optional[str] = typer.Option(None, "--since", parser=V.when, help="Only runs started on or after this date (YYYY-MM-DD) or time."),
    until: Optional[str] = typer.Option(None, "--until", parser=V.when, help="Only runs started on or before this date or time."),
    status: Optional[str] = typer.Option(None, "--status", parser=V.one_of(*STATUSES), help="Only runs in this state: complete, interrupted, failed, incomplete, running."),
    limit: Optional[int] = typer.Option(None, "--last", parser=V.COUNT, help="The newest this many runs."),
    bench: Optional[Path] = _bench_option(),
    as_json: bool = typer.Option(False, "--json", help="Print the runs as JSON on stdout."),
) -> None:
    """List the logged runs, newest first, with their headline figures.

    Example: benchkit log list --tag bias=1.2A --command power
    """
    from benchkit import logbook

    with _book(bench) as book:
        entries = book.entries(logbook.parse_tags(tags), command, status, since, until, limit)
    if as_json:
        from benchkit.report.tables import dumps

        print(dumps({"kind": "runs", "schema_version": 1, "bench": str(book.root),
                     "runs": [logbook_text.entry_doc(e) for e in entries]}))
        return
    if not entries:
        _err(f"no runs in {book.root} match")
        return
    for line in logbook_text.runs_lines(entries):
        _err(line)


@log_app.command("show")
def log_show(
    run: str = _run_argument(),
    bench: Optional[Path] = _bench_option(),
    as_json: bool = typer.Option(False, "--json", help="Print the run's record as JSON on stdout."),
) -> None:
    """Show one run: when, what, with which device and calibration, its tags, note, figures, warnings and files.

    Example: benchkit log show last
    """
    with _book(bench) as book:
        entry = book.entry(run)
        record = book.read_record(entry.id)
    if as_json:
        from benchkit.report.tables import dumps

        print(dumps({**record, "status": entry.status, "folder": str(entry.folder)}))
        return
    for line in logbook_text.run_lines(entry, record):
        _err(line)


@log_app.command("note")
def log_note(
    run: str = _run_argument(),
    text: str = typer.Argument(..., help="The note."),
    append: bool = typer.Option(False, "--append", help="Add a line to the note instead of replacing it."),
    bench: Optional[Path] = _bench_option(),
) -> None:
    """Set (or add to) a run's note.

    Example: benchkit log note last "swapped the 2200 uF output capacitor"
    """
    with _book(bench, write=True) as book:
        record = book.set_note(book.entry(run).id, text, append)
    _err(f"run {record['id']}: note: {record['note']}")


@log_app.command("tag")
def log_tag(
    run: str = _run_argument(),
    tags: List[str] = typer.Argument(None, help="Tags key=value to set."),
    remove: List[str] = typer.Option([], "--remove", help="Take this tag off (repeatable)."),
    bench: Optional[Path] = _bench_option(),
) -> None:
    """Set or remove a run's tags.

    Example: benchkit log tag last bias=1.2A rail=24V
    """
    from benchkit import logbook

    with _book(bench, write=True) as book:
        if not tags and not remove:
            raise BenchkitError("give tags key=value to set, or --remove KEY")
        record = book.set_tags(book.entry(run).id, logbook.parse_tags(tags or []), remove)
    _err(f"run {record['id']}: tags: " + (" ".join(f"{k}={v}" for k, v in record["tags"].items()) or "none"))


@log_app.command("export")
def log_export(
    out: Optional[Path] = typer.Option(None, "--file", parser=V.out_file, help="Write the CSV to this file (default: stdout)."),
    bench: Optional[Path] = _bench_option(),
) -> None:
    """Export the catalog as CSV: a row a run, its tags and headline figures in columns.

    Example: benchkit log export --file logbook.csv
    """
    from benchkit.report.tables import write_catalog_csv

    with _book(bench) as book:
        entries = book.entries()
        try:
            if out is None:
                write_catalog_csv(entries, sys.stdout)
            else:
                with out.open("w", newline="", encoding="utf-8") as fh:
                    write_catalog_csv(entries, fh)
                _err(f"{units.count(len(entries), 'run')}: {out}")
        except OSError as exc:
            _err(f"benchkit: error: cannot write {out}: {exc.strerror or exc}")
            raise typer.Exit(EXIT_BAD_INPUT)


@log_app.command("rebuild")
def log_rebuild(bench: Optional[Path] = _bench_option()) -> None:
    """Index every run folder afresh, when the catalog is lost or damaged (a damaged one is moved aside first).

    Example: benchkit log rebuild --bench ~/bench/b2
    """
    from datetime import datetime

    from benchkit import logbook

    root = logbook.resolve_bench(bench)
    catalog = root / logbook.CATALOG
    try:
        try:
            book = logbook.Logbook(root)
        except BenchkitError as exc:
            if "not a benchkit catalog" not in str(exc) and "cannot open the catalog" not in str(exc):
                raise
            aside = catalog.with_name(f"{catalog.name}.damaged-{datetime.now():%Y%m%d-%H%M%S}")
            catalog.rename(aside)
            for extra in ("-wal", "-shm"):
                catalog.with_name(catalog.name + extra).unlink(missing_ok=True)
            _err(f"the catalog was damaged: moved aside to {aside.name}")
            book = logbook.Logbook(root)
        with book:
            count, skipped = book.rebuild()
    except BenchkitError as exc:
        _err(f"benchkit: error: {exc}")
        raise typer.Exit(EXIT_BAD_INPUT)
    for why in skipped:
        _err(f"warning: skipped: {why}")
    _err(f"indexed {units.count(count, 'run')} from {root / logbook.RUNS}")


@log_app.command("reanalyse")
def log_reanalyse(
    run: str = _run_argument(),
    bench: Optional[Path] = _bench_option(),
    as_json: bool = typer.Option(False, "--json", help="Print the new result as JSON on stdout."),
) -> None:
    """Analyse a run again from its stored captures with the current analysis, and write its reports anew.

    A tone, sweep or power run killed while it played is recovered from
    its partial recording first (the steps recorded whole).

    Example: benchkit log reanalyse 20261202-101500-tone-bias-1.2A
    """
    from benchkit import logbook
    from benchkit.kinds import reanalyse

    with _book(bench, write=True) as book:
        entry = book.entry(run)
        with book.resume(entry.id) as taken:
            doc, written = reanalyse(taken.folder, taken.record, say=_err)
            taken.record["reanalysed"] = logbook.now_iso()
            _finish_run(written, taken, doc, as_json, played=False)
        done = book.entry(entry.id)
    _err(f"run {done.id}: {done.status}; {logbook_text.headline_text(done)}")


@log_app.command("remove")
def log_remove(
    runs: List[str] = typer.Argument(..., help="Runs to move to the trash folder."),
    bench: Optional[Path] = _bench_option(),
) -> None:
    """Move runs to the bench's trash/ folder and out of the catalog (nothing is deleted).

    Example: benchkit log remove 20261202-101500-tone
    """
    with _book(bench, write=True) as book:
        for ref in runs:
            dest = book.remove(book.entry(ref).id)
            _err(f"moved {ref} to {dest}")


@app.command()
def compare(
    runs: List[str] = typer.Argument(None, help="Runs to compare (ids, unique starts, 'last', 'last-N'); the first is the baseline."),
    last: Optional[int] = typer.Option(None, "--last", parser=V.number(2, 10000, integer=True), help="Compare the newest N complete runs (of --command, else of the newest run's command), oldest first."),
    command: Optional[str] = typer.Option(None, "--command", parser=V.one_of(*kinds.names()), help="With --last: of this command."),
    anyway: bool = typer.Option(False, "--anyway", help="Compare runs whose conditions differ (load, frequency, band, calibration, sample rate), with a loud warning."),
    out: Optional[Path] = typer.Option(None, "--out", parser=V.out_folder, help="Comparison folder (default: comparisons/<time>-<runs> in the bench folder)."),
    bench: Optional[Path] = _bench_option(),
    as_json: bool = typer.Option(False, "--json", help="Print the comparison as JSON on stdout."),
) -> None:
    """Compare logged runs of one kind: overlay plots, a delta table with units and direction, a summary.

    Tone runs pair their steps by drive level and overlay THD+N against
    power and the spectra; power runs compare the power at each limit;
    sweeps the response; drift logs the settled value and rate. Runs
    measured under different conditions are refused unless --anyway.

    Example: benchkit compare --last 2 --command power
    """
    from benchkit.compare_runs import compare_runs

    with _book(bench, write=True) as book:
        refs = list(runs or [])
        if last is not None:
            if refs:
                raise BenchkitError("give runs or --last N, not both")
            if command is None:
                newest = book.entries(status="complete", limit=1)
                command = newest[0].command if newest else None
            chosen = book.entries(command=command, status="complete", limit=last)
            if len(chosen) < last:
                raise BenchkitError(f"the logbook has {len(chosen)} complete {command or ''} run(s), not {last}")
            refs = [e.id for e in reversed(chosen)]
        if len(refs) < 2:
            raise BenchkitError("name two or more runs to compare, or --last 2")
        report = compare_runs(book, refs, anyway=anyway, out=out)
    _err(report.text)
    for path in report.files:
        _err(f"  wrote        {path}")
    if as_json:
        from benchkit.report.tables import dumps

        print(dumps({**report.comparison.to_dict(), "run_ids": [e.id for e in report.entries],
                     "folder": str(report.folder)}))


#: click's errors for a command line it cannot read (typer keeps its own copy of click: found where BadParameter lives)
_CLICK = sys.modules[typer.BadParameter.__module__]


def main() -> None:
    """Console entry point: the typer app with a last guard against
    tracebacks. Bad input (a value out of its range, a file that cannot be
    used) is one line and exit 1; a command line of unknown words (an
    unknown option, a missing argument) one line and exit 2; a bug one line
    and exit 3. An option's old name (docs/options.md) is rewritten to
    its new one first, with a notice."""
    from benchkit.cli_vocabulary import modernise

    sys.argv[1:] = modernise(sys.argv[1:], _err)
    try:
        code = app(standalone_mode=False)
    except _CLICK.UsageError as exc:
        text, ctx = " ".join(exc.format_message().split()), getattr(exc, "ctx", None)
        if text:  # (none when a group was given no command: its help is the answer)
            _err(f"benchkit: error: {text}" + (f" (see '{ctx.command_path} --help')" if ctx is not None else ""))
        # a value out of its range is bad input like any other; a command line of unknown words is a usage error
        bad_value = isinstance(exc, typer.BadParameter) and not isinstance(exc, _CLICK.MissingParameter)
        sys.exit(EXIT_BAD_INPUT if bad_value else EXIT_USAGE)
    except BenchkitError as exc:
        _err(f"benchkit: error: {exc}")
        sys.exit(EXIT_BAD_INPUT)
    except KeyboardInterrupt:
        _err("benchkit: interrupted")
        sys.exit(EXIT_INTERRUPTED)
    except typer.Abort:  # a prompt that got no answer: stdin closed, or Ctrl-C at the prompt
        _err("benchkit: error: no answer at the prompt (for scripted use, wire first and give --yes)")
        sys.exit(EXIT_BAD_INPUT)
    except Exception as exc:  # noqa: BLE001 - the one place that turns bugs into one line
        if os.environ.get("BENCHKIT_DEBUG"):
            raise
        _err(f"benchkit: internal error: {type(exc).__name__}: {exc} (set BENCHKIT_DEBUG=1 for details)")
        sys.exit(EXIT_INTERNAL)
    sys.exit(code or 0)


if __name__ == "__main__":
    main()
