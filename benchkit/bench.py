"""One path for every live measurement.

:func:`measure` runs a kind (``benchkit.kinds``, its :class:`~benchkit.kinds.Live`
part) the same way whoever asks, the command line or a plan: every option
checked (nothing needs the device for that) -> the bench's logbook opened
-> the device opened with its calibration profile -> the pre-flight (the
kind's) -> the run filed -> recorded and analysed (the kind's, the capture
on disk before it is analysed) -> its report files -> the run completed.
Options arrive by their keys in the vocabulary (:mod:`benchkit.options`);
``say`` takes the human text, ``ask`` waits for the user at a wiring step.
"""

from __future__ import annotations

import contextlib
import sys
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

from benchkit import kinds, units
from benchkit.errors import BenchkitError
from benchkit.logbook import CATALOG
from benchkit.report.live import Measuring
from benchkit.units import quantity

#: the lowest tone a step can analyse with the band 'full' (five periods in the pre-flight's probe)
LOWEST_TONE_HZ = 20.0


@dataclass
class Bench:
    """A live measurement under way: its options (by key), where its text
    goes, and what the path has set up so far."""

    o: dict
    say: Callable[[str], None]
    ask: Callable[[str], None]
    labels: dict = field(default_factory=dict)
    backend: Any = None
    profile: Any = None
    #: the reference input, the drive levels (dBFS) and the pre-flight's plan (record.Plan)
    ref_channel: int | None = None
    drive: list = field(default_factory=list)
    plan: Any = None
    #: what a kind keeps from its options and pre-flight for its measurement
    more: dict = field(default_factory=dict)
    #: the bench's logbook (what a kind reads of earlier runs)
    book: Any = None

    @property
    def channel(self) -> int:
        return self.o["in_channel"]

    @property
    def band(self) -> tuple[float, float] | None:
        """The band its --bandwidth gives (None: 'full')."""
        return units.parse_band(self.o["bandwidth"])

    @property
    def stage_volts_per_fs(self) -> float | None:
        """Volts peak at the stage per FS at the measured input: the
        profile's, else the input's own (--volts-per-fs, the virtual
        bench's), else None."""
        if self.profile is not None:
            return self.profile.stage_volts_per_fs
        return self.backend.inputs()[self.channel - 1].volts_per_fs

    @property
    def calibration_file(self) -> str | None:
        return None if self.o.get("calibration") is None else str(self.o["calibration"])

    @property
    def warnings(self) -> tuple:
        return tuple(self.plan.warnings) if self.plan is not None else ()

    def stored(self) -> dict:
        """What every capture's sidecar keeps of the set-up: the profile, its file, the note, the warnings."""
        return dict(calibration=self.profile, calibration_file=self.calibration_file, note=self.labels.get("note", ""),
                    warnings=self.warnings)


@dataclass(frozen=True)
class Filed:
    """A run measured and filed: its logbook run, result document, files
    and how it ended (``ended``: None, "interrupted" or "device-lost";
    ``early``: why a capture stopped before its last step)."""

    run: Any
    doc: dict
    files: list
    status: str = "complete"
    ended: str | None = None
    early: list = field(default_factory=list)


def measure(kind_name: str, o: dict, say: Callable[[str], None], ask: Callable[[str], None],
            tell: Callable[[str], None] | None = None) -> Filed:
    """Measure one kind on the bench its options describe, and file it:
    progress and notes through ``say``, its result's summary through
    ``tell`` (default ``say``)."""
    tell = tell or say
    kind = kinds.get(kind_name)
    if kind.live is None:
        raise BenchkitError(f"{kind_name} is not measured this way")
    repeat = o.get("repeat") or 1
    if repeat > 1 and o.get("from_runs"):
        raise BenchkitError(f"--repeat {repeat}: a run made from logged runs measures nothing to repeat")
    made = kind.live.other(o, say, tell) if kind.live.other is not None else None
    if made is not None or kind.live.over_time:
        return made
    opening = dict(kind.live.opens(o))
    check_within(o["rate"], opening.pop("within", ()))
    with bench_logbook(o) as (book, labels):
        s = Bench(o, say, ask, labels, more=opening.pop("keep", {}), book=book)
        s.backend, s.profile = live_setup(o, say, **opening)
        params = kind.live.prepare(s)
        with start_run(book, labels, kind_name, s.backend, s.profile, o.get("calibration"), params, say) as run:
            if repeat > 1:
                return takes(run, kind, s, repeat, say, tell)
            with Measuring(kind_name, shown=not kind.live.shows_itself and sys.stderr.isatty()):
                got = kind.live.measure(s, run.folder)
            return finish(run, kind, got, say, channel=s.channel, tell=tell)


def takes(run, kind, s: "Bench", n: int, say, tell=None) -> Filed:
    """``n`` takes of one measurement in one run, each in a folder of its
    own (``take-1`` ...) with its capture and report files; the run's
    result is their mean, their scatter its type-A uncertainty
    (benchkit.analysis.repeats). A take cut short ends the takes: the
    mean is of those complete (one: that take's result)."""
    docs, files, status, ended, partial = [], [], "complete", None, None
    for k in range(1, n + 1):
        folder = run.folder / kinds.TAKE.format(k)
        folder.mkdir(parents=True, exist_ok=True)
        say(f"take {k} of {n}")
        with Measuring(f"{kind.name}, take {k} of {n}", shown=not kind.live.shows_itself and sys.stderr.isatty()):
            got = kind.live.measure(s, folder)
        (tell or say)(kind.summary(got.result, f"{got.title} (take {k} of {n})".strip()))
        files += kind.reports(got.result, folder, s.channel, **got.report) + list(got.files)
        if got.status == "complete" and got.ended is None:
            docs.append(got.result.to_dict())
        else:  # a take cut short ends the takes; alone, what it measured is the run's result
            status, ended, partial = ("interrupted" if docs else got.status), got.ended, got.result.to_dict()
            break
    doc = kinds.mean_of_takes(run.folder, docs or [partial])
    (tell or say)(takes_summary(doc, kind.figures))
    written = [run.folder / kinds.TAKES_RESULT, *files]
    doc = kinds.near_floor(doc, written, run.folder / kinds.TAKE.format(1), tell or say)
    return complete(run, doc, written, say, status, ended)


def takes_summary(doc: dict, figures_of) -> str:
    """The mean of repeated takes on one screen: its figures that have an
    uncertainty, each ``value +- U`` (k = 2) and what dominates it."""
    from benchkit.report.summary import figure_name, figure_shown

    n = (doc.get("takes") or {}).get("count", 1)
    lines = [f"mean of {n} takes (+- is the expanded uncertainty, k = 2: their scatter or their own noise, whichever "
             "is larger)"]
    figures = [f for f in (figures_of(doc) if figures_of else []) if f.u is not None and f.value is not None]
    for f in ([f for f in figures if f.headline] + [f for f in figures if not f.headline])[:14]:
        lines.append(f"  {figure_name(f)}: {figure_shown(f)}")
    return "\n".join(lines)


def finish(run, kind, got, say, channel: int = 1, played: bool = True, tell=None) -> Filed:
    """A run's result on one screen (through ``tell``, default ``say``) and
    in its report files (its kind's), its figures near the interface's
    floor marked (:func:`benchkit.kinds.near_floor`), and the run completed."""
    (tell or say)(kind.summary(got.result, got.title))
    written = kind.reports(got.result, run.folder, channel, **got.report) + list(got.files)
    doc = kinds.near_floor(got.result.to_dict(), written, run.folder, tell or say)
    return complete(run, doc, written, say, got.status, got.ended, played)


def complete(run, doc: dict, written: list[Path], say, status: str = "complete", ended: str | None = None,
             played: bool = True) -> Filed:
    """Complete the run in the logbook (its files are on disk) and say
    where it is. A run that ``played`` and whose capture stopped before
    its last step (the input clipped) says why in ``early``."""
    from benchkit.recordings import stopped_early

    run.complete(doc, written, written[0] if written else None, status=status, figures=kinds.headline_figures(doc))
    for path in written:
        say(f"  wrote        {path}")
    say(f"run folder: {run.folder}")
    return Filed(run, doc, written, status, ended, stopped_early(run.folder) if played else [])


# --- the device ----------------------------------------------------------------


def open_backend(device: str | None, sim: str, sim_params: list[str], sim_pad: str, seed: int, say,
                 real: dict | None = None, stereo: bool = False, load: float | None = None):
    """The capture backend asked for; says which. ``load``: the load the
    virtual stage drives (ohms), where the model takes one and
    ``sim_params`` do not set it."""
    from benchkit import pads
    from benchkit.capture import resolve_device
    from benchkit.capture.stages import model_params, parse_params
    from benchkit.capture.virtual import DEMO_PAD, virtual_bench

    name = resolve_device(device)
    if name != "virtual":
        from benchkit.capture.portaudio import PortAudioBackend

        backend = PortAudioBackend(name, **(real or {}))
        say(f"device: {backend.name}; drive capped at {backend.drive_cap_dbfs:g} dBFS; output {backend.out_channel} "
            f"drives the stage, input {backend.in_channel} measures it"
            + (f", input {backend.ref_channel} is the reference" if backend.ref_channel else ""))
        return backend
    pad = DEMO_PAD if sim_pad == "demo" else pads.parse_pad(sim_pad)
    params = parse_params(sim_params)
    if load is not None and any(p.name == "load" for p in model_params(sim)):
        params["load"] = load
    bench = virtual_bench(sim, params, pad=pad, seed=seed, stereo=stereo,
                          sample_rate_hz=(real or {}).get("sample_rate", 48000.0))
    pad_text = "no pad" if pad is None else f"pad {pad.r1_ohms:g}:{pad.r2_ohms:g} ohm ({1 / bench.pad_ratio():.2f}:1)"
    say(f"device: virtual bench (simulated interface, {'stereo ' if stereo else ''}stage {sim}, {pad_text}); "
        "nothing is played")
    return bench


def given_band(text: str) -> tuple[float, ...]:
    """The band a command was given, for :func:`check_within`: none when it
    is the default (20 Hz to 20 kHz, or to half the rate below 40 kHz: the
    analysis narrows it itself)."""
    from benchkit.options import BAND

    band = units.parse_band(text)
    return () if text == BAND or band is None else band


def check_within(rate: float, within: tuple) -> None:
    """``within`` holds (flag, frequencies) a kind plays or analyses: each
    must lie below half the sample rate; (flag, frequencies, band) for
    tones, which must also lie inside the band they are analysed in (band
    None: 'full', from LOWEST_TONE_HZ)."""
    half = rate / 2
    for flag, freqs, *band in within:
        for f in freqs:
            if f >= half:
                raise BenchkitError(f"{flag} (as given, or its default) reaches {f:g} Hz, at or above half the sample "
                                    f"rate ({half:g} Hz at {rate:g} Hz): lower it, or raise --rate")
            lo, hi = (band[0] or (LOWEST_TONE_HZ, half)) if band else (0.0, half)
            if band and not lo <= f <= hi:
                raise BenchkitError(f"{flag} {f:g} Hz lies outside the band its tone is analysed in ({lo:g} to "
                                    f"{hi:g} Hz; --bandwidth sets it where a command takes one)" if band[0] else
                                    f"{flag} {f:g} Hz is below {LOWEST_TONE_HZ:g} Hz, too low to analyse in a step")


def opens_tones(o: dict, freqs, **more) -> dict:
    """How a kind that plays tones at ``freqs`` (its --freq), analysed in
    its --bandwidth, opens the device (:attr:`benchkit.kinds.Live.opens`);
    ``more`` adds to it or replaces."""
    band = units.parse_band(o["bandwidth"])
    return {"ref": o.get("ref_channel"), "load": o.get("load"),
            "within": (("--freq", list(freqs), band), ("--bandwidth", given_band(o["bandwidth"]))), **more}


def at_most(o: dict, key: str, high: float, what: str) -> None:
    """Refuse a duration option longer than ``what`` may be, seconds."""
    from benchkit.options import OPTIONS

    if o[key] is not None and o[key] > high:
        raise BenchkitError(f"{OPTIONS[key].flag} {o[key]:g} s is longer than {what} may be: at most {high:g} s")


def live_setup(o: dict, say, ref: int | None = None, stereo: bool = False, more: dict | None = None,
               load: float | None = None):
    """Open the backend the options ask for, with its profile: says what it
    uses and warns of an overridden drive cap. ``ref`` is the reference
    input asked for; ``stereo`` makes the virtual stage stereo whatever
    --sim-stereo says; ``more`` goes to a real interface (further inputs and
    outputs). The profile's rate and the channel numbers are checked
    against the device before anything plays. On the virtual bench the
    stage drives ``load`` (the command's --load) unless --sim-load or
    --sim-param load=... says otherwise: one load, the one the figures are
    worked out for."""
    from benchkit.calibration import load_profile

    kinds.one_scale(o)
    calibration = o["calibration"]
    if o["override_drive_cap"]:
        say("WARNING: the drive cap is overridden: full-scale drive can overload the stage, the pad, the "
            "interface input and any speaker. Keep a dummy load on the output.")
    real = dict(sample_rate=o["rate"], in_channel=o["in_channel"], out_channel=o["out_channel"], ref_channel=ref,
                blocksize=o["blocksize"], latency=o["latency"],
                drive_cap_dbfs=-0.5 if o["override_drive_cap"] else o["drive_cap"], volts_per_fs=o["volts_per_fs"],
                in_device=o["in_device"], input_max_vpk=o["input_max"], **(more or {}))
    profile = load_profile(calibration) if calibration is not None else None
    if profile is not None:
        if abs(profile.sample_rate_hz - o["rate"]) > 0.5:
            raise BenchkitError(f"calibration profile {calibration} was made at {profile.sample_rate_hz:g} Hz, this run "
                                f"asks for {o['rate']:g} Hz: an interface's scale can differ between rates; "
                                f"calibrate at {o['rate']:g} Hz, or give --rate {profile.sample_rate_hz:g}")
        real["volts_per_fs"] = profile.stage_volts_per_fs
    sim_load = o["sim_load"]  # ohms, "off" or None (options.values.SIM_LOAD)
    told = any(item.partition("=")[0].strip() == "load" for item in o["sim_param"])
    if sim_load is not None:
        wanted, switch = (None if sim_load == "off" else sim_load), True
    else:
        wanted, switch = (None if told else load), load is not None and not told
    backend = open_backend(o["device"], o["sim"], o["sim_param"], o["sim_pad"], o["seed"], say, real,
                           stereo or o["sim_stereo"], wanted)
    n_in, n_out = len(backend.inputs()), backend.n_outputs
    asked = [("--in-channel", o["in_channel"], n_in, "input"), ("--ref-channel", ref, n_in, "input"),
             ("--out-channel", o["out_channel"], n_out, "output")]
    asked += [("--in-channel-b", n, n_in, "input") for n in (more or {}).get("more_inputs", ())]
    asked += [("--out-channel-b", n, n_out, "output") for n in (more or {}).get("more_outputs", ())]
    for flag, number, count, what in asked:
        if number is not None and number > count:
            raise BenchkitError(f"{flag} {number}: {backend.name} has {count} {what}s (numbered from 1)")
    if ref is not None and ref == o["in_channel"]:
        raise BenchkitError(f"--ref-channel {ref} is the stage's own input (--in-channel): the reference "
                            "is the input wired straight from the driven output")
    can = backend.capabilities
    if can.switchable_load and switch:
        backend.connect_load(wanted)
    if can.simulated and o["input_max"] is not None:  # the simulated input as the user states it
        from dataclasses import replace

        backend.spec = replace(backend.spec, input_max_vpk=o["input_max"])
    if profile is not None:
        if not can.simulated:  # a simulated bench knows its own output
            backend.output_vpk_per_fs = profile.output_vpk_per_fs
        say(f"calibration: {calibration} ({profile.interface}, {quantity(profile.stage_volts_per_fs, 'V', 4)} peak "
            "per FS at the stage)")
    elif not can.simulated:
        say("no calibration profile: figures stay in dBFS (benchkit calibrate makes one)")
    return backend, profile


def preflight(s: Bench, levels: list[str], frequency: float, load: float | None, volts: bool = True) -> None:
    """The drive levels (dBFS, from the texts given: a level in volts is
    at the interface output, whose scale the device knows) and the
    pre-flight of a kind that plays tones, probing at ``frequency`` (a
    level above the drive cap is refused before the probe plays): sets
    ``s.drive`` and ``s.plan`` and says the plan's warnings. ``volts=False``:
    the kind compares ratios and needs no scale, so its load is not checked
    against one."""
    from benchkit import record
    from benchkit.signals import check_level

    o, backend = s.o, s.backend
    s.drive = [units.parse_level(text).to_dbfs(backend.output_vpk_per_fs) for text in levels]
    for d in s.drive:
        check_level(d)
        if d > backend.drive_cap_dbfs + 1e-9:  # refused before the probe plays, not when the run would
            raise BenchkitError(f"--level {d:.1f} dBFS is above the drive cap of {backend.drive_cap_dbfs:g} dBFS; "
                                "lower it, or raise the cap knowingly (--drive-cap)")
    scaled = backend.capabilities.simulated or s.profile is not None or o["volts_per_fs"] is not None
    checked = load if volts or scaled else None  # without a scale the load cannot be checked, and need not be
    s.plan = record.plan_run(backend, s.profile, s.drive, frequency, s.channel, o["gain"], o["margin"], o["rail"],
                             o["pad_rating"], checked, o["btl"], say=s.say)
    for w in s.plan.warnings:
        if checked is not None or load is None or w.code != "no-load":
            s.say(f"warning: {w}")


# --- the logbook ---------------------------------------------------------------


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
def bench_logbook(o: dict, remembered: bool = True):
    """The bench's logbook, opened (and checked writable) before anything
    plays, with the run's labels: tags, note and the stage description
    (a --stage file or --stage-info fields update the remembered one;
    ``remembered=False``: the stage is what they give alone, and the
    bench's stays as it is). A bench without a catalog yet is checked
    writable and opened when a run is filed in it."""
    from benchkit import logbook

    tags = logbook.parse_tags(o["tag"])
    fields = logbook.parse_tags(o["stage_info"], "--stage-info is key=value, e.g. rail=24V")
    root = logbook.resolve_bench(o["bench"])
    with contextlib.ExitStack() as stack:
        if (root / CATALOG).exists():
            book = stack.enter_context(logbook.Logbook(root))
        else:
            logbook.check_writable(root)
            book = _BenchLater(root, stack)
        stage = (logbook.read_settings(root).get("stage") or {}) if remembered else {}
        if o["stage"] is not None:
            stage = logbook.read_stage(o["stage"])
        changed = o["stage"] is not None or bool(fields)
        if changed:
            stage = {**stage, **fields}
        # the bench remembers a changed stage once a run is filed with it (start_run), not on a refusal
        labels = dict(tags=tags, note=o["note"], stage=stage, remember=changed and remembered)
        if o.get("session"):  # a plan's step (benchkit.session sets it; no command line does)
            labels["session"] = o["session"]
        yield book, labels


def start_run(book, labels: dict, command: str, backend, profile, calibration: Path | None, params: dict, say,
              filed: dict | None = None):
    """File the run in the logbook as running; its folder is where it writes;
    ``params`` as its kind's :class:`benchkit.kinds.RunParams` stores them.
    ``backend`` is the capture backend, or the name of a source (a drift
    log's, the logbook's, "file" for a capture made elsewhere: ``filed``
    says which, benchkit.filing)."""
    cal = None if profile is None else {"file": str(calibration), "hash": profile.digest()}
    labels = dict(labels)
    if labels.pop("remember", False):
        book.remember_stage(labels["stage"])
    if isinstance(backend, str):
        device = backend
    else:
        device, params = backend.name, {**params, "sample_rate_hz": backend.sample_rate_hz}
    run = book.start(command, device=device, calibration=cal, params=kinds.get(command).params.stored(params), filed=filed,
                     **labels)
    say(f"run {run.id} (logbook {book.root / CATALOG})")
    return run
