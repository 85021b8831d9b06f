"""The option vocabulary: every option of every command, declared once.

An option name means one thing, in one unit, wherever it is taken
(docs/options.md lists them with their commands; tests/test_options.py
checks both). Each :class:`Option` holds its flag, what it means, the
parser that refuses a value it cannot take (:mod:`benchkit.options.values`)
and its usual default; a command takes options by their keys here, giving
its own default where it differs. The command line builds its options from
this table, and a plan names them by the same keys.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable

from benchkit import kinds, units
from benchkit.analysis.power import DEFAULT_LIMITS_PCT, ONSET_DB
from benchkit.logbook import STATUSES
from benchkit.options import values as V

#: the default measurement band (the analysis narrows it to half a low rate itself)
BAND = "20:20000"


@dataclass(frozen=True)
class Option:
    """One option: its flag, meaning, parser and usual default."""

    flag: str
    help: str
    parse: Callable | None = None
    default: Any = None
    #: what a value is when no parser reads it: str, bool (a switch) or Path
    kind: type = str
    #: another, one-letter flag
    short: str | None = None


def _o(flag, help, parse=None, default=None, kind=str, short=None) -> Option:
    return Option(flag, help, parse, default, bool if default is False else kind, short)


def _level(text) -> Any:
    return V.checked(units.parse_level)(text)


_BAND = V.checked(units.parse_band)
_VISA = "its VISA resource, e.g. TCPIP::192.168.1.50::5025::SOCKET or ASRL/dev/ttyUSB0::INSTR"

OPTIONS: dict[str, Option] = {
    # what a measurement plays and reads
    "freq": _o("--freq", "Tone frequency, Hz (997 Hz keeps harmonics off sub-multiples of the rate); repeat where a command reads several.", V.hertz, 997.0),
    "level": _o("--level", "Drive level at the interface output, e.g. -20dBFS or 0.1Vrms (volts with a calibration); repeat where a command steps.", _level, "-20 dBFS"),
    "load": _o("--load", "Load resistance, ohms: power in W, and what the figures are worked out for.", V.ohms),
    "bandwidth": _o("--bandwidth", "Measurement band LO:HI in Hz, or 'full'.", _BAND, BAND),
    "ref_channel": _o("--ref-channel", "Input wired straight from the driven output (the stage's input): the reference a capture is aligned on and a gain or response is read against (the virtual bench's is 2).", V.CHANNEL),
    "duration": _o("--duration", "How long, seconds: a sweep, a noise record, a log, a live session.", V.SESSION_S),
    "ref_power": _o("--ref-power", "With --load: the output power the SNR is referred to, W (1 W is common for small amplifiers; give the rated power to quote that).", V.WATTS, 1.0),
    "ref_vrms": _o("--ref-vrms", "Or refer the SNR to this output, Vrms.", V.VOLTS),
    "yes": _o("--yes", "Do not ask at a wiring step (terminating the input, switching the load, looping the output): it is done already (scripted use).", default=False),
    "method": _o("--method", "modulation: 60 Hz + 7 kHz at 4:1, sidebands of f2 (SMPTE RP120, IEC 60268-3); difference: 19 kHz + 20 kHz at 1:1, products at f2-f1 and 2f1-f2, 2f2-f1 (IEC 60268-3).", V.one_of("modulation", "difference"), "modulation"),
    "tones": _o("--tones", "The pair F1:F2 in Hz instead of the method's, e.g. 50:7000 or 13000:14000.", V.checked(units.parse_tones)),
    "ratio": _o("--ratio", "Amplitude of F1 over F2 instead of the method's (4 or 1).", V.number(0.0, 100.0, above=True)),
    "step_duration": _o("--step-duration", "Seconds analysed at each level (after it settles).", V.seconds(60.0), 1.0),
    "open_load": _o("--open-load", "What the pad and input present to the unloaded stage, ohms (default: from the calibration's pad, or the virtual bench's; else taken as open).", V.ohms),
    "from_runs": _o("--from", "Two logged runs instead of measuring: the unloaded one, then the loaded one (tone, gain or sweep runs).", default=[]),
    "in_channel_b": _o("--in-channel-b", "Input carrying channel B's output through its pad (default 2; the virtual bench's is 3).", V.CHANNEL),
    "out_channel_b": _o("--out-channel-b", "Output driving channel B.", V.CHANNEL, 2),
    "span": _o("--span", "Frequencies F1:F2 in Hz (the response is reported past the fades).", V.checked(units.parse_span), "10:22000"),
    "stepped": _o("--stepped", "Stepped sines instead of a sweep: slower, the reference method, with THD+N.", default=False),
    "per_octave": _o("--per-octave", "Stepped sines: frequencies per octave over the span.", V.number(1, 48, integer=True), 3),
    "at": _o("--at", "Stepped sines at these frequencies, Hz (repeatable) instead.", V.hertz, []),
    "ref_freq": _o("--ref-freq", "Frequency whose level a response is referred to without volts, Hz.", V.hertz, 1000.0),
    "smooth": _o("--smooth", "Smooth the plotted magnitude over 1/N octave (CSV and JSON stay raw).", V.number(1, 96, integer=True)),
    "start": _o("--start", "First drive level, dBFS (default: 40 dB below the expected maximum).", V.number(-120.0, 0.0, unit="dBFS")),
    "step_db": _o("--step-db", "Step while THD+N rises slowly, dB (a quarter of it once it rises fast).", V.number(0.0, 6.0, above=True, unit="dB"), 1.0),
    "fine_db": _o("--fine-db", "Bisect until each limit lies between steps this close, dB.", V.number(0.0, 6.0, above=True, unit="dB"), 0.1),
    "current_meter": _o("--current-meter", f"A meter reading the supply's DC current, {_VISA}; needs --supply-volts in a power run."),
    "at_power": _o("--at-power", "Levels as output powers into --load, W (repeatable): each one's drive comes from the stage's measured gain.", V.WATTS, []),
    "rated_power": _o("--rated-power", "The claimed power, W: say whether the power at the first limit reaches it.", V.WATTS),
    "precondition": _o("--precondition", "First hold 1/8 of --rated-power for an hour (16 CFR 432 manner).", default=False),
    "precondition_s": _o("--precondition-s", "Shorten (or lengthen) the preconditioning, seconds: the report says so.", V.number(0.0, 7200.0, unit="s")),
    "channels": _o("--channels", "How many channels the amplifier has (benchkit drives one; the report says so).", V.number(1, 64, integer=True), 1),
    "json": _o("--json", "Print the result as JSON on stdout, and nothing else there.", default=False),
    # the interface, the stage and the pre-flight (every live measurement)
    "device": _o("--device", "'virtual', or a real interface by index or part of its name; default 'virtual' unless BENCHKIT_DEVICE names one."),
    "in_device": _o("--in-device", "A separate input interface (its clock offset is measured on the reference)."),
    "in_channel": _o("--in-channel", "Input carrying the stage output (through the pad), from 1.", V.CHANNEL, 1),
    "out_channel": _o("--out-channel", "Output driving the stage, from 1 (real devices).", V.CHANNEL, 1),
    "rate": _o("--rate", "Sample rate, Hz.", V.RATE, 48000.0),
    "blocksize": _o("--blocksize", "Frames per audio callback (real devices; on a JACK server its period rules).", V.number(16, 16384, integer=True), 1024),
    "latency": _o("--latency", "Stream latency: low, high, or seconds (real devices).", V.LATENCY, "high"),
    "drive_cap": _o("--drive-cap", "Highest drive a real device may get, dBFS peak.", V.number(-120.0, -0.5, unit="dBFS", hint="more drive needs --override-drive-cap"), -12.0),
    "override_drive_cap": _o("--override-drive-cap", "Allow up to -0.5 dBFS on a real device: can overload a stage, a pad or a speaker.", default=False),
    "volts_per_fs": _o("--volts-per-fs", "Volts peak at the stage per full scale of the input (overrides a capture's sidecar).", V.VOLTS),
    "calibration": _o("--calibration", "Calibration profile (from 'benchkit calibrate'): results in volts at the stage.", kind=Path),
    "gain": _o("--gain", "Expected voltage gain of the stage (V/V); without it a low-level step measures it first.", V.number(0.0, above=True, unit="V/V", hint="the gain as a magnitude (an inverting stage by its magnitude); a gain in dB converts as 10^(dB/20): 20 dB is 10")),
    "margin": _o("--margin", "Headroom the top step must keep below the input's full scale, dB.", V.number(0.0, 40.0, unit="dB"), 3.0),
    "rail": _o("--rail", "The stage's supply, rail to rail, V: its normal swing (half of it) through the pad must stay below full scale; a fault's whole rail is checked against the input's maximum (docs/safety.md); with --bias it describes the stage.", V.VOLTS),
    "input_max": _o("--input-max", "The most the interface's input takes without damage, V peak, as its manual states it: checked against a full-rail fault through the pad (with --rail).", V.VOLTS),
    "pad_rating": _o("--pad-rating", "Power rating of the pad resistors, W.", V.WATTS),
    "btl": _o("--btl", "The stage has a bridged (BTL) output: neither terminal is at ground, and its normal swing is the whole rail.", default=False),
    "sim": _o("--sim", "Simulated stage for --device virtual: ideal, poly, hard-clip, se-class-a (see 'benchkit models').", default="se-class-a"),
    "sim_param": _o("--sim-param", "Stage parameter key=value (repeatable), e.g. bias=1.2.", default=[]),
    "sim_pad": _o("--sim-pad", "Simulated pad R1:R2 in ohms, 'none', or 'demo' (1.8k:200).", V.SIM_PAD, "demo"),
    "seed": _o("--seed", "Seed of the virtual bench (latency, noise).", V.SEED, 1),
    "sim_stereo": _o("--sim-stereo", "The virtual stage is stereo: output 2 drives channel B, read on input 3 (input 4 its reference); --sim-param crosstalk_1k_db, crosstalk_flat_db, balance_db set what couples them.", default=False),
    "sim_load": _o("--sim-load", "The virtual stage's dummy load: ohms, or 'off' (the pad alone loads it); default the command's --load, else the model's own (8 ohm).", V.SIM_LOAD),
    # how power figures are read from stepped levels
    "limit": _o("--limit", "Distortion limits, percent (repeatable; the first is the rated point; a power run stops past the highest).", V.PERCENT, list(DEFAULT_LIMITS_PCT)),
    "metric": _o("--metric", "What the limits apply to: thdn or thd.", V.one_of("thdn", "thd"), "thdn"),
    "onset_db": _o("--onset-db", "Clipping onset: THD+N this far over its low-level trend, dB.", V.number(0.0, 40.0, above=True, unit="dB"), ONSET_DB),
    "supply_volts": _o("--supply-volts", "The stage's supply voltage: efficiency and dissipation.", V.VOLTS),
    "supply_amps": _o("--supply-amps", "Its supply current (class A: about the bias).", V.AMPS),
    "bias": _o("--bias", "The stage's bias (quiescent) current, A: with --rail it describes the stage and shows the expected ceiling.", V.AMPS),
    "vsat": _o("--vsat", "The stage's saturation voltage at the negative swing, V.", V.number(0.0, unit="V"), 1.0),
    # how a drift log is judged
    "dc_limit": _o("--dc-limit", "Drift: verdict, within this of --nominal, V (e.g. 0.05 for a speaker output's offset, common practice).", V.VOLTS),
    "nominal": _o("--nominal", "Drift: the value the limit is about, V: 0 for an output offset, the design midpoint (about half the rail) for a capacitor-coupled stage.", V.number(unit="V"), 0.0),
    "settle_band": _o("--settle-band", "Drift: settled within this of the final value, V (default: a tenth of --dc-limit, else 1 mV).", V.VOLTS),
    "window": _o("--window", "Drift: the rate over the last this many seconds.", V.SESSION_S, 60.0),
    # where a run is filed, and how it is labelled
    "bench": _o("--bench", "Bench folder: its runs/ and logbook (default: BENCHKIT_BENCH, else the current folder).", kind=Path),
    "tag": _o("--tag", "Label the run key=value (repeatable), e.g. --tag bias=1.2A --tag rail=24V; in log list, only runs with it.", default=[]),
    "note": _o("--note", "A note kept with the run (or the profile).", default=""),
    "stage": _o("--stage", "The stage under test: a JSON object or 'key: value' lines; the bench folder remembers it for later runs.", kind=Path),
    "stage_info": _o("--stage-info", "Set one field of the remembered stage description, key=value (repeatable).", default=[]),
    # live readings over time
    "plain": _o("--plain", "One plain line a reading on stdout (also when stdout is not a terminal).", default=False),
    "json_lines": _o("--json-lines", "One JSON object a reading on stdout.", default=False),
    "record": _o("--record", "Keep the readings as a run in the bench's logbook (readings.csv).", default=False),
    "record_audio": _o("--record-audio", "With --record: keep the raw audio too (audio.wav).", default=False),
    "dc_source": _o("--dc-source", "Where DC is read: virtual (the se-class-a midpoint), meter (SCPI over pyvisa, --meter) or input (the measuring input, DC coupled per --calibration).", V.one_of("virtual", "meter", "input")),
    "meter": _o("--meter", f"The DC meter, {_VISA}."),
    "interval": _o("--interval", "Seconds between readings.", V.number(0.01, 3600.0, unit="s", hint="a reading at most every 10 ms"), 1.0),
    "until_settled": _o("--until-settled", "Stop once settled within --settle-band.", default=False),
    "accelerate": _o("--accelerate", "Virtual source: model seconds per second of interval.", V.number(0.0, 1e6, above=True), 60.0),
    # offline analysis
    "channel": _o("--channel", "Channel to analyse, numbered from 1, or 'all' (each channel of each file).", V.channel_or_all, 1, short="-c"),
    "fundamental": _o("--fundamental", "Look for the fundamental near this frequency (Hz); default: the sidecar's, else the strongest line.", V.hertz),
    "averages": _o("--averages", "Split each capture (each step, when it steps) into N blocks and average.", V.number(1, 1000, integer=True), 1),
    "out": _o("--out", "A folder the reports are written in.", V.out_folder, kind=Path),
    "sweep": _o("--sweep", "The capture holds a synchronized sweep F1:F2:SECONDS of unit amplitude made elsewhere, after unknown silence.", V.checked(units.parse_sweep_spec)),
    "time_col": _o("--time-col", "Drift CSVs: the time column, by name or number from 1 (units in the header are applied).", default="1"),
    "value_col": _o("--value-col", "Drift CSVs: the value column, by name or number.", default="2"),
    "as_kind": _o("--as", "Analyse as: gain (a tone capture benchkit wrote: the stage's voltage gain over --ref-channel, default the sidecar's reference input, or over the calibrated drive), noise (the stage's noise, input terminated: unweighted, A-weighted, hum; benchkit noise captures are recognised) or power (stepped captures: power at the distortion limits, clipping onset and half; needs --load and volts).", V.one_of("gain", "noise", "power")),
    "zout": _o("--zout", "Two captures, the stage unloaded then loaded with this many ohms: its output impedance and damping factor (with --open-load, what loaded the 'open' output).", V.ohms),
    "imd": _o("--imd", "The capture holds a two-tone test made elsewhere: modulation or difference, optionally with its tones, e.g. modulation:50:7000 (benchkit imd captures are recognised)."),
    # tools
    "file": _o("--file", "A file to write: the profile (calibrate), the CSV (log export; default stdout).", V.out_file, kind=Path),
    "reading": _o("--reading", "Voltmeter reading at the output jack while the calibration tone plays, e.g. 0.1414V (Vrms).", _level),
    "voltmeter_pct": _o("--voltmeter-pct", "Voltmeter accuracy at the tone's frequency, +-%.", V.number(0.0, 50.0, unit="%"), 1.0),
    "pad": _o("--pad", "The pad's resistors R1:R2 in ohms (e.g. 1.8k:200).", V.PAD),
    "pad_tolerance": _o("--pad-tolerance", "The pad resistors' tolerance, +-% (their part of the volts' uncertainty; a measured pad replaces it).", V.number(0.0, 50.0, unit="%"), 1.0),
    "load_tolerance": _o("--load-tolerance", "The dummy load's tolerance, +-%, or your meter's accuracy if you measured it (its part of the watts' uncertainty).", V.number(0.0, 50.0, unit="%"), 5.0),
    "input_ohms": _o("--input-ohms", "The interface input's impedance, ohms (loads the pad).", V.ohms, 10e3),
    "measure_pad": _o("--measure-pad", "Measure the pad's ratio with the pad in place instead.", default=False),
    "stage_vpk": _o("--stage-vpk", "The stage's highest output in normal work, volts peak.", V.VOLTS),
    "input_fs": _o("--input-fs", "The interface input's full scale, volts peak.", V.VOLTS, 2.0),
    "headroom": _o("--headroom", "How far below full scale the normal swing must land, dB.", V.number(0.0, 60.0, unit="dB"), 6.0),
    "series": _o("--series", "Preferred values: E12, E24 or E96 (IEC 60063).", V.one_of("e12", "e24", "e96"), "E24"),
    "input_noise": _o("--input-noise", "The input's own noise floor, dBFS, to refer to the stage.", V.number(-200.0, 0.0, unit="dBFS"), -110.0),
    "check": _o("--check", "Judge a pad you have: --check R1 --check R2 (ohms, k/M allowed).", V.ohms, []),
    "target_power": _o("--target-power", "Power wanted into the load, W: the bias and rail it needs.", V.WATTS),
    "limit_current": _o("--limit-current", "Current a base-emitter limiter should hold, A: its sense resistor.", V.AMPS),
    "vbe": _o("--vbe", "The limiter transistor's V_BE, V (about 0.6-0.7 V, falling about 2 mV per degC).", V.number(0.0, 2.0, above=True, unit="V"), 0.65),
    # the logbook
    "command": _o("--command", f"Only runs of this command: {', '.join(kinds.names())}.", V.one_of(*kinds.names())),
    "since": _o("--since", "Only runs started on or after this date (YYYY-MM-DD) or time.", V.when),
    "until": _o("--until", "Only runs started on or before this date or time.", V.when),
    "status": _o("--status", f"Only runs in this state: {', '.join(STATUSES)}.", V.one_of(*STATUSES)),
    "last": _o("--last", "The newest this many runs (compare: the newest N complete runs, of --command or else of the newest run's command, oldest first).", V.COUNT),
    "anyway": _o("--anyway", "Compare runs whose conditions differ (load, frequency, band, calibration, sample rate), with a loud warning.", default=False),
    "append": _o("--append", "Add a line to the note instead of replacing it.", default=False),
    "remove": _o("--remove", "Take this tag off (repeatable).", default=[]),
    "session": _o("--session", "Only runs of this session (a plan's: its id, a unique start of it, or 'last')."),
    # plans and sessions
    "starts": _o("--starts", "Start the stream this many times and compare the round trip each start finds.", V.COUNT, 5),
    "repeat": _o("--repeat", "Measure this many takes in one run: its figures are their mean, and their scatter counts in each figure's uncertainty.", V.COUNT, 1),
    # how levels are shown
    "levels_in": _o("--levels-in", "Show levels in dBFS, dBV, dBu, dBr (against --dbr-ref), V or W (into the load): summaries, tables, live displays, the spectra's second axis, the logbook's figures and comparisons.",
                    V.one_of(*(u.lower() for u in units.LEVEL_UNITS))),
    "dbr_ref": _o("--dbr-ref", "The level dBr is read against, e.g. 2.83Vrms or -20dBFS (levels then show in dBr).", _level),
    "set_stage": _o("--set", "Change a value of the plan's stage for this session, key=value (repeatable), e.g. --set bias=1.2.", default=[]),
}

#: the options every live measurement takes
LIVE = ("device", "in_device", "in_channel", "out_channel", "rate", "blocksize", "latency", "drive_cap",
        "override_drive_cap", "volts_per_fs", "calibration", "gain", "margin", "rail", "input_max", "pad_rating",
        "btl", "sim", "sim_param", "sim_pad", "seed", "sim_stereo", "sim_load")
#: how power figures are read from stepped levels (analyze --as power, power)
FIGURES = ("limit", "metric", "onset_db", "supply_volts", "supply_amps", "bias", "vsat")
#: how a drift log is judged (analyze of a CSV, drift)
JUDGE = ("dc_limit", "nominal", "settle_band", "window")
#: where a measuring command files its run, and how it is labelled
FILING = ("bench", "tag", "note", "stage", "stage_info")
#: repeated takes of one measurement in one run
TAKES = ("repeat",)
#: how a command that shows levels shows them
SHOWN = ("levels_in", "dbr_ref")


#: the groups by name (a kind's ``groups``)
GROUPS = {"live": LIVE, "figures": FIGURES, "judge": JUDGE, "filing": FILING, "takes": TAKES, "shown": SHOWN}


def defaults(*groups) -> dict:
    """The usual values of the options in ``groups`` (tuples of keys, a
    string of keys, or a group's name), by key."""
    keys = [k for g in groups for k in (GROUPS.get(g) or g.split() if isinstance(g, str) else g)]
    return {k: OPTIONS[k].default for k in keys}
