"""Kinds of measurement: each one unit, every one reached through this registry.

A kind (tone, sweep, power, imd, noise, gain, zout, crosstalk, drift,
watch) lives in ``benchkit/kinds/NAME.py`` as one :class:`Kind`: its name
(the command, the run record's ``command`` and the result's ``kind``
alike; older results are read through
:func:`benchkit.analysis.documents.upgrade`), its parameters (what a run's
record stores), how it reports a run, how it analyses a run again from its
folder (``log reanalyse`` and a killed run's recovery), how it is
recognised in a capture's sidecar and analysed offline (``analyze``), its
comparable figures (the logbook's headline ones among them) and its
comparison overlay. Modules in this package are found, not listed: adding
a kind edits no dispatcher.

The numerics stay in :mod:`benchkit.analysis`, the plots and tables in
:mod:`benchkit.report`; a kind module imports them where it uses them, so
importing the registry loads neither matplotlib nor typer.
"""

from __future__ import annotations

import importlib
import pkgutil
from dataclasses import dataclass, field, fields
from pathlib import Path
from typing import Any, Callable, ClassVar

from benchkit.errors import BenchkitError


@dataclass(frozen=True)
class RunParams:
    """What a run was asked for, as its record stores it (run.json's
    ``params``) and its kind reads it back to analyse the run again. Each
    kind's own (``NAMEParams``) adds its fields, units in their names."""

    #: the rate the interface ran at (none for a drift log or a result made from runs)
    sample_rate_hz: float | None = None
    #: fields stored under another key (a word Python keeps for itself)
    STORED_AS: ClassVar[dict[str, str]] = {}

    def to_dict(self) -> dict:
        return {self.STORED_AS.get(f.name, f.name): getattr(self, f.name) for f in fields(self)}

    @classmethod
    def from_dict(cls, params: dict | None, strict: bool = False):
        """From a stored record's ``params``: the fields it holds, the
        defaults for those an older record lacks, anything else left out
        (``strict``: refused, a command asking for a field its kind has not)."""
        names = {cls.STORED_AS.get(f.name, f.name): f.name for f in fields(cls)}
        unknown = set(params or {}) - set(names)
        if strict and unknown:
            raise TypeError(f"{cls.__name__} has no field {', '.join(sorted(unknown))}")
        return cls(**{names[k]: v for k, v in (params or {}).items() if k in names})

    @classmethod
    def stored(cls, params: dict) -> dict:
        """What a command files as a run's ``params``: the fields it gave,
        each one its kind's (checked by :meth:`from_dict`)."""
        given = cls.from_dict(params, strict=True).to_dict()
        return {k: v for k, v in given.items() if k in params}

    def band(self) -> tuple[float, float] | None:
        """The measurement band (None: the full band)."""
        band = getattr(self, "bandwidth_hz", None)
        return None if band is None else tuple(band)


@dataclass(frozen=True)
class Offline:
    """What ``analyze`` was asked for, the same for every capture it reads."""

    channel: int = 1
    fundamental_hz: float | None = None
    bandwidth_hz: tuple[float, float] | None = (20.0, 20000.0)
    averages: int = 1
    volts_per_fs: float | None = None
    load_ohms: float | None = None
    out: Path | None = None
    sweep: tuple[float, float, float] | None = None
    ref_channel: int | None = None
    ref_freq_hz: float = 1000.0
    smooth: int | None = None
    power: dict | None = None
    imd_method: str | None = None
    noise: bool = False
    gain: bool = False
    time_col: str = "1"
    value_col: str = "2"
    judge: dict | None = None
    profile: Any = None
    profile_path: Path | None = None

    @classmethod
    def of(cls, o: dict) -> "Offline":
        """``analyze``'s options by key (benchkit.options), checked."""
        from benchkit import units

        one_scale(o)
        from benchkit.calibration import load_profile
        from benchkit.kinds.power import figure_options
        from benchkit.options import JUDGE

        return cls(channel=o["channel"], fundamental_hz=o["fundamental"], bandwidth_hz=units.parse_band(o["bandwidth"]),
                   averages=o["averages"], volts_per_fs=o["volts_per_fs"], load_ohms=o["load"], out=o["out"],
                   sweep=units.parse_sweep_spec(o["sweep"]) if o["sweep"] else None, ref_channel=o["ref_channel"],
                   ref_freq_hz=o["ref_freq"], smooth=o["smooth"],
                   power=figure_options(o) if o["as_kind"] == "power" else None, imd_method=o["imd"],
                   noise=o["as_kind"] == "noise", gain=o["as_kind"] == "gain", time_col=o["time_col"],
                   value_col=o["value_col"], judge={k: o[k] for k in JUDGE},
                   profile=load_profile(o["calibration"]) if o["calibration"] is not None else None,
                   profile_path=o["calibration"])

    def scale(self, rec) -> tuple[float | None, str]:
        """The capture's volts per full scale and where it came from."""
        return (self.volts_per_fs, "given") if self.volts_per_fs is not None else rec.channel_scale()



@dataclass(frozen=True)
class Analysed:
    """A capture analysed offline: the result document, its text summary
    and what writes its report files into a folder (``--out``)."""

    doc: dict
    text: str
    write: Callable[[Path], list[Path]] | None = None


@dataclass(frozen=True)
class Measured:
    """What a kind's live measurement gives :func:`benchkit.bench.measure`:
    its result, the title of its summary, options of its report files, files
    of its own beside them, the run's status and how it ended (None,
    "interrupted" or "device-lost")."""

    result: Any
    title: str = ""
    report: dict = field(default_factory=dict)
    files: tuple = ()
    status: str = "complete"
    ended: str | None = None


@dataclass(frozen=True)
class Live:
    """How a kind measures on a bench; :func:`benchkit.bench.measure` runs
    every kind the same way. Each part takes the options by their keys in
    :mod:`benchkit.options` (``o``) or the :class:`benchkit.bench.Bench`
    under way (``s``).

    Parameters
    ----------
    opens
        ``(o) -> dict``: every option checked that needs no device, and how
        the device opens (:func:`benchkit.bench.live_setup`'s ``ref``,
        ``load``, ``stereo``, ``more``; ``within``: the frequencies played
        or analysed, for :func:`benchkit.bench.check_within`; ``keep``: what
        it worked out from the options, for ``prepare`` and ``measure`` in
        the bench's ``more``).
    prepare
        ``(s) -> params``: the pre-flight with the device open (sets the
        drive and plan), and the run's parameters as its record stores them.
    measure
        ``(s, folder) -> Measured``: record into the run's folder (the
        capture on disk first), then analyse.
    options
        The keys of the options it takes (its command's, a plan's), beyond
        its ``groups`` (benchkit.options: "live", "figures", "filing" ...).
    defaults
        Its own defaults where they differ from the vocabulary's (a list:
        the option repeats; ``...``: it must be given).
    helps
        An option's help worded for this kind.
    about
        Its command's help: what it does, an example, the safety notes.
    other
        ``(o, say, tell) -> Filed | None``: a run made another way when the
        options ask for it (zout --from: two logged runs), else None.
    over_time
        It logs readings over time (drift): ``other`` makes every run,
        and its command stands with the live readouts.
    shows_itself
        It draws its own live display while it measures (power's steps);
        else a terminal shows how long it has been measuring.
    """

    opens: Callable[[dict], dict] | None
    prepare: Callable[[Any], dict] | None
    measure: Callable[[Any, Path], Measured] | None
    options: str = ""
    groups: tuple[str, ...] = ("live", "filing", "takes")
    defaults: dict = field(default_factory=dict)
    helps: dict = field(default_factory=dict)
    about: str = ""
    other: Callable | None = None
    over_time: bool = False
    shows_itself: bool = False


@dataclass(frozen=True)
class Kind:
    """One kind of measurement.

    Parameters
    ----------
    name
        The command, the run record's ``command`` and the result's ``kind``.
    reanalyse
        ``(folder, record, say) -> (result document, report files)``: the
        run analysed again from what its folder holds (the first file is
        the result JSON).
    params
        Its :class:`RunParams`: what a run stores in its record.
    summary
        ``(result, title) -> str``: a run's result on one screen.
    reports
        ``(result, folder, channel) -> [files]``: a run's report files, in
        its folder beside its capture (the first the result JSON).
    figures
        ``(result document) -> [analysis.compare.Figure]``: what compares;
        None for a kind whose runs do not compare.
    overlay
        ``(comparison, docs, entries, out, title) -> [files]``: the plots a
        comparison of its runs draws.
    recognises
        ``(recording) -> bool``: a capture of this kind, by its sidecar.
    chosen
        ``(Offline) -> bool``: ``analyze``'s options ask for this kind.
    analyse
        ``(recording, Offline) -> Analysed``: one capture, offline (a
        path, for a kind that ``reads`` "csv").
    readings
        ``(result document) -> [analysis.zout.Reading]``: the stage's output
        levels its result holds (an output impedance from two logged runs).
    live
        Its :class:`Live`: how it measures on a bench (None: it does not,
        or not through the one path).
    rank
        Where it stands when a capture is recognised: lower first (a
        two-tone capture is also a stepped one).
    reads
        What ``analyze`` hands it: "capture" (a WAV or FLAC with its
        sidecar) or "csv" (a table of readings).
    """

    name: str
    reanalyse: Callable[[Path, dict, Callable[[str], None]], tuple[dict, list[Path]]]
    params: type = RunParams
    summary: Callable[[Any, str], str] | None = None
    reports: Callable[[Any, Path, int], list[Path]] | None = None
    figures: Callable[[dict], list] | None = None
    overlay: Callable[..., list[Path]] | None = None
    recognises: Callable[[Any], bool] | None = None
    chosen: Callable[[Offline], bool] | None = None
    analyse: Callable[[Any, Offline], Analysed] | None = None
    readings: Callable[[dict], list] | None = None
    live: Live | None = None
    rank: int = 50
    reads: str = "capture"


_KINDS: dict[str, Kind] = {}


def names() -> tuple[str, ...]:
    """The name of every kind, from the modules in this package (none
    imported: a kind's module bears its name, a hyphen as an underscore)."""
    return tuple(sorted(info.name.replace("_", "-") for info in pkgutil.iter_modules(__path__)
                        if not info.name.startswith("_")))


def _load() -> dict[str, Kind]:
    if not _KINDS:
        found = {}
        for name in names():
            module = name.replace("-", "_")
            kind = importlib.import_module(f"{__name__}.{module}").KIND
            if kind.name != name:
                raise RuntimeError(f"benchkit/kinds/{module}.py declares a kind named {kind.name!r}")
            found[name] = kind
        _KINDS.update(found)  # all of them, or none: a module that fails to import says so every time
    return _KINDS


def all_kinds() -> list[Kind]:
    """Every kind, in the order captures are recognised."""
    return sorted(_load().values(), key=lambda k: (k.rank, k.name))


def get(name: str) -> Kind:
    """The kind of this name."""
    kinds = _load()
    if name not in kinds:
        raise BenchkitError(f"no kind of measurement is called {name!r}")
    return kinds[name]


def of_result(doc: dict) -> Kind | None:
    """The kind a result document (of any schema version) belongs to, or None."""
    from benchkit.analysis.documents import upgrade

    return _load().get(str(upgrade(doc).get("kind")))


def figures_of(doc: dict) -> list:
    """Every comparable figure of a result document (none for a kind
    without figures)."""
    kind = of_result(doc)
    return [] if kind is None or kind.figures is None else kind.figures(doc)


def batch_rows(docs) -> tuple[list[tuple[str, str]], list[list]]:
    """Results of many captures as rows: file, channel, kind, valid, and
    the headline figures ((label, unit) each, in the order they first
    appear; a run without one leaves it empty; a single tone's: its THD+N,
    THD and noise); an error's row says so."""
    from benchkit.analysis.compare import Figure, finite

    names: dict[str, tuple[str, str]] = {}
    rows = []
    for d in docs:
        heads = {} if d.get("kind") == "error" else {f.name: f for f in figures_of(d) if f.headline}
        if not heads and "thdn_db" in d:  # one tone, analysed alone
            heads = {k: Figure(k, label, finite(d.get(k)), unit) for k, label, unit in
                     (("thdn_db", "THD+N", "dB"), ("thd_db", "THD", "dB"), ("noise_dbfs", "noise", "dBFS"))}
        for f in heads.values():
            names.setdefault(f.name, (f.label, f.unit))
        valid = d.get("valid")
        if valid is None and d.get("steps"):
            valid = all(s.get("valid", True) for s in d["steps"])
        rows.append([d.get("file", ""), d.get("channel", ""), d.get("kind", ""),
                     "error: " + d["error"] if d.get("kind") == "error" else "" if valid is None else "yes" if valid else "NO",
                     {k: f.value for k, f in heads.items()}])
    return list(names.values()), [r[:4] + [r[4].get(k) for k in names] for r in rows]


def headline_figures(doc: dict) -> list[dict]:
    """The figures the logbook indexes: THD+N at the top valid step, noise,
    power at the first limit, the -3 dB points, the settled value ..."""
    return [f.to_dict() for f in figures_of(doc) if f.headline]


def reanalyse(folder: Path, record: dict, say: Callable[[str], None] = lambda _m: None) -> tuple[dict, list[Path]]:
    """The result document and the report files of a logged run, made
    again from its folder by its kind. The first file is the result JSON."""
    command = record.get("command")
    try:
        kind = get(str(command))
    except BenchkitError:
        raise BenchkitError(f"runs of command {command!r} cannot be analysed again") from None
    taken = taken_folders(Path(folder))
    if not taken:
        doc, files = kind.reanalyse(folder, record, say)
    else:
        docs, files = [], []
        for take in taken:  # repeated takes: each again, then their mean
            doc, written = kind.reanalyse(take, record, say)
            docs.append(doc)
            files += written
        doc, files = mean_of_takes(Path(folder), docs, [t.name for t in taken]), [Path(folder) / TAKES_RESULT, *files]
    return near_floor(doc, files, taken[0] if taken else Path(folder), say), files


def near_floor(doc: dict, files: list[Path], folder: Path, say: Callable[[str], None]) -> dict:
    """A run's result with its figures near the interface's floor marked
    (:func:`benchkit.interface_floor.mark`; the floor of the result's
    calibration block, else of the captures' sidecars in ``folder``), its
    result file (the first of ``files``) written again when marked, and
    the floor said through ``say``."""
    from benchkit.interface_floor import mark, summary_line
    from benchkit.recordings import kept_calibration

    marked = mark(doc, None if doc.get("calibration") else kept_calibration(folder))
    if marked is not doc:
        _result_again(marked, files)
        say(summary_line(marked))
    return marked


def _result_again(doc: dict, files: list[Path]) -> list[Path]:
    """Write ``doc`` again over its result file, the first of ``files``
    (a kind's report files: its result JSON first)."""
    from benchkit.report.tables import write_json

    if files and Path(files[0]).suffix == ".json":
        write_json(doc, Path(files[0]))
    return files


def analyse_file(path: Path, options: Offline, say: Callable[[str], None] = lambda _m: None) -> Analysed:
    """One file analysed offline by its kind: a table of readings (CSV) by
    the kind that reads tables; a capture by the kind :func:`recognised`
    finds for it."""
    path = Path(path)
    if path.suffix.lower() == ".csv":
        return next(k for k in all_kinds() if k.analyse is not None and k.reads == "csv").analyse(path, options)
    kind, rec = recognised(path, options, say)
    got = kind.analyse(rec, options)
    from benchkit.interface_floor import mark, summary_line

    doc = mark(got.doc, rec.sidecar.get("calibration"))
    if doc is got.doc:
        return got
    write = None if got.write is None else (lambda out: _result_again(doc, got.write(out)))
    return Analysed(doc, f"{got.text}\n{summary_line(doc)}", write)


def recognised(path: Path, options: Offline, say: Callable[[str], None] = lambda _m: None):
    """A capture read and the kind that analyses it offline, ``(kind,
    recording)``: the first kind, in rank order, that ``analyze``'s options
    ask for or that its sidecar shows (a plain tone when none does), with
    the calibration profile given applied to the capture's scale in this
    one place."""
    from dataclasses import replace

    from benchkit.recordings import read_capture

    path = Path(path)
    rec = read_capture(path, options.channel)
    for w in rec.warnings:  # (an ignored sidecar: the text says so, as the JSON does)
        say(f"warning: {path}: {w}")
    if options.profile is not None and options.volts_per_fs is None:
        from benchkit.record import apply_calibration

        side = dict(rec.sidecar)
        side["channels"] = [c for c in side.get("channels", []) if c.get("number") != options.channel] + [
            {"number": options.channel}]
        apply_calibration(side, options.profile, str(options.profile_path), options.channel)
        rec = replace(rec, sidecar=side)
    if options.load_ohms is not None and options.volts_per_fs is None and rec.channel_scale()[0] is None:
        raise BenchkitError(f"{path}: --load needs a voltage scale (--volts-per-fs, or a sidecar that gives one)")
    for kind in all_kinds():
        if kind.analyse is not None and kind.reads == "capture" and (
                (kind.chosen is not None and kind.chosen(options))
                or (kind.recognises is not None and kind.recognises(rec))):
            return kind, rec
    return get("tone"), rec


# --- what every kind module uses ----------------------------------------------------

#: A take's folder in a run of repeated takes (--repeat), and their mean's result file.
TAKE = "take-{}"
TAKES_RESULT = "takes.result.json"


def taken_folders(folder: Path) -> list[Path]:
    """The take folders a run of repeated takes averaged (its mean's
    ``takes``; a take cut short is not among them), none for a run of one."""
    from benchkit.jsonfile import load_json

    try:
        names = (load_json(folder / TAKES_RESULT).get("takes") or {}).get("folders") or []
    except (OSError, ValueError, AttributeError):
        names = []  # (a run killed before its mean: every whole-numbered take folder)
        numbered = [p for p in folder.glob(TAKE.format("*")) if p.is_dir() and p.name[5:].isdigit()]
        names = [p.name for p in sorted(numbered, key=lambda p: int(p.name[5:]))]
    return [folder / n for n in names if (folder / n).is_dir()]


def mean_of_takes(folder: Path, docs: list[dict], names: list[str] | None = None) -> dict:
    """The mean of a run's takes (benchkit.analysis.repeats) in the folders
    ``names`` (default take-1 ...), written as the run's result file; one
    take's result as it is."""
    from benchkit.analysis.repeats import mean_document
    from benchkit.report.tables import write_json

    if not docs:
        raise BenchkitError("no take of the measurement completed")
    names = names or [TAKE.format(k) for k in range(1, len(docs) + 1)]
    doc = mean_document(docs, names) if len(docs) > 1 else {**docs[0], "takes": {"count": 1, "folders": names[:1]}}
    write_json(doc, folder / TAKES_RESULT)
    return doc

#: The capture a run stores under its folder (``capture.wav`` and its sidecar).
CAPTURE = "capture"
CAPTURE_WAV = f"{CAPTURE}.wav"


def one_scale(o: dict) -> None:
    """Refuse two scales at once: a calibration profile and --volts-per-fs
    both say what one FS is in volts at the stage, and neither may win
    silently."""
    if o.get("calibration") is not None and o.get("volts_per_fs") is not None:
        raise BenchkitError("--calibration and --volts-per-fs both give the volts at the stage: give one (the profile "
                            "holds the interface's scale and the pad; --volts-per-fs is for a bench without one)")


def run_capture(folder: Path, channel: int, say: Callable[[str], None], stem: str = CAPTURE):
    """A run's stored capture, recovered first from its partial recording
    when the run was killed while it played."""
    from benchkit.recordings import read_capture
    from benchkit.record import recover_capture

    path = folder / f"{stem}.wav"
    if not path.exists():
        path = recover_capture(folder, stem)
        say(f"recovered {path.name} from the partial recording")
    return read_capture(path, channel)


def series_from_csv(folder: Path, name: str, xs: str, ys: str):
    """Two columns of a CSV a run left in its folder, as arrays (an
    overlay's curve)."""
    import csv

    import numpy as np

    try:
        with (folder / name).open(encoding="utf-8", newline="") as fh:
            rows = [r for r in csv.DictReader(fh) if r.get(ys)]
    except OSError as exc:
        raise BenchkitError(f"{folder}: cannot read {name} for the overlay ({exc.strerror or exc})") from None
    return np.array([float(r[xs]) for r in rows]), np.array([float(r[ys]) for r in rows])
