"""Tone: stepped tones at one frequency, THD, THD+N and the harmonics at
each level (offline, a single tone too).

A run records through :mod:`benchkit.record` (the capture and its sidecar
on disk before anything is analysed), then analyses the stored capture.
Analysing a stored stepped-tone capture again (offline, or
after a crash) goes through the same :func:`analyze_steps`.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from pathlib import Path

from benchkit import capture, units
from benchkit.analysis.documents import Conditions, document
from benchkit.analysis.tone import analyze_tone, DEFAULT_BAND_HZ, step_figures, step_readings, ToneResult
from benchkit.errors import BenchkitError, BenchWarning, warning_docs
from benchkit.kinds import Analysed, CAPTURE_WAV, Kind, Live, Measured, Offline, run_capture, RunParams
from benchkit.analysis import uncertainty as ua
from benchkit.record import SPOILED, record_steps
from benchkit.recordings import read_capture, Recording, Takes


@dataclass(frozen=True)
class StepResult:
    """One step of a stepped-tone run: the drive and the analysis."""

    drive_dbfs: float
    result: ToneResult

    def to_dict(self) -> dict:
        """The step's tone document, its uncertainty block left to the run's (``steps.KEY``)."""
        d = {"drive_dbfs": self.drive_dbfs, **self.result.to_dict()}
        d.pop("uncertainty", None)
        return d


@dataclass(frozen=True)
class StepsResult:
    """Every step of a stepped-tone capture."""

    file: str
    channel: int
    frequency_hz: float
    steps: tuple[StepResult, ...]
    warnings: tuple[str, ...] = ()
    device: str | None = None
    latency_samples: int | None = None
    clock_offset_ppm: float | None = None
    calibration: dict | None = None

    def to_dict(self) -> dict:
        return document("tone", {
            "file": self.file,
            "channel": self.channel,
            "frequency_hz": self.frequency_hz,
            "device": self.device,
            "latency_samples": self.latency_samples,
            "clock_offset_ppm": self.clock_offset_ppm,
            "calibration": self.calibration,
            "warnings": list(self.warnings),
            "steps": [s.to_dict() for s in self.steps],
            "uncertainty": ua.stacked("steps", [s.result.uncertainty for s in self.steps]),
        }, (self.steps[0].result.conditions() if self.steps else Conditions()).calibrated(self.calibration))


def _first_frequency(value) -> float:
    if isinstance(value, (list, tuple)):
        value = value[0] if value else 0.0
    return float(value or 0.0)


def is_stepped(rec: Recording) -> bool:
    stim = rec.sidecar.get("stimulus") or {}
    return isinstance(stim, dict) and stim.get("kind") == "stepped-tones" and bool(stim.get("segments"))


def analyze_steps(
    rec: Recording,
    bandwidth_hz: tuple[float, float] | None = DEFAULT_BAND_HZ,
    load_ohms: float | None = None,
    volts_per_fs: float | None = None,
    traces: bool = False,
    fundamental_hz: float | None = None,
    averages: int = 1,
) -> StepsResult:
    """Analyse each settled step of a stepped-tone capture on disk (at the
    frequency each step played, unless ``fundamental_hz`` says otherwise)."""
    stim = rec.sidecar["stimulus"]
    scale, source = (volts_per_fs, "given") if volts_per_fs is not None else rec.channel_scale()
    takes = Takes(rec)
    chain = rec.chain()
    steps = []
    for seg in stim["segments"]:
        x = takes.step(seg)
        try:
            drive = float(seg["level_dbfs"])
        except (KeyError, TypeError, ValueError) as exc:
            raise BenchkitError(f"{rec.path}: the sidecar's step list is damaged") from exc
        f0 = fundamental_hz if fundamental_hz is not None else float(seg["frequency_hz"])
        result = analyze_tone(x, rec.sample_rate_hz, fundamental_hz=f0, bandwidth_hz=bandwidth_hz, averages=averages,
                              volts_per_fs=scale, scale_source=source, load_ohms=load_ohms, traces=traces,
                              check_dropouts=True, chain=chain)
        if seg.get("spoiled"):
            result = replace(result, valid=False, warnings=result.warnings + (SPOILED,))
        cal = rec.sidecar.get("calibration") or {}
        notes = [floor_warning(result, cal), dc_warning(result, cal.get("dc_coupled"))]
        if any(notes):
            result = replace(result, warnings=result.warnings + tuple(n for n in notes if n))
        steps.append(StepResult(drive, result))
    side = rec.sidecar
    return StepsResult(
        str(rec.path), rec.channel, _first_frequency(stim.get("frequency_hz")), tuple(steps),
        rec.all_warnings(),
        device=side.get("device"), latency_samples=side.get("latency_samples"),
        clock_offset_ppm=side.get("clock_offset_ppm"),
        calibration=side.get("calibration"),
    )


#: A step this close to the interface's own floor is limited by it.
FLOOR_MARGIN_DB = 3.0


def floor_warning(result: ToneResult, calibration: dict | None) -> str | None:
    """A warning when a THD+N lies within FLOOR_MARGIN_DB of the
    calibration's one loopback point (``loopback_floor``) at its level
    (the interface, not the stage), its THD+N at this level as
    :meth:`benchkit.interface_floor.Floor.thdn_db_at` reads it, and only
    at a fundamental that floor judges (:meth:`~benchkit.interface_floor.Floor.judges`).

    None when the calibration holds a self-test's floor
    (``interface_floor``): :func:`benchkit.interface_floor.mark` judges
    every figure against that one and warns once, so the figure is not
    warned about twice."""
    from benchkit.interface_floor import floor_of

    floor = floor_of(calibration)
    if floor is None or floor.field != "loopback_floor" or not floor.judges(result.fundamental_hz):
        return None
    limit = floor.thdn_db_at(result.fundamental_dbfs)
    if limit is None:
        return None
    if result.thdn_db < limit + FLOOR_MARGIN_DB:
        return BenchWarning("interface-limited", f"THD+N {result.thdn_db:.1f} dB is within {FLOOR_MARGIN_DB:g} dB of the "
                            f"interface's own floor ({limit:.1f} dB at this level): limited by the interface, not the stage")
    return None


#: DC at a stage's output worth a warning, volts (common practice: keep a
#: speaker output within a few tens of mV; often quoted, under 50 mV).
DC_WARN_V = 0.05


def dc_warning(result: ToneResult, dc_coupled: bool | None) -> str | None:
    """A warning when a DC-coupled input shows DC at the stage's output."""
    if not dc_coupled or result.volts_per_fs is None:
        return None
    dc_v = result.dc_fs * result.volts_per_fs
    if abs(dc_v) > DC_WARN_V:
        return BenchWarning("safety", f"{dc_v * 1000:+.0f} mV of DC at the stage's output: check the offset before a "
                            "speaker goes on it")
    return None


def tone_run(
    backend: capture.Backend,
    folder: Path,
    frequency_hz: float,
    levels_dbfs: list[float],
    load_ohms: float | None = None,
    bandwidth_hz: tuple[float, float] | None = DEFAULT_BAND_HZ,
    traces: bool = False,
    averages: int = 1,
    **record,
) -> StepsResult:
    """Play stepped tones, store the capture (:func:`record_steps`, which
    takes ``record``: name, channel, note, calibration, step lengths ...),
    then analyse every step of the stored capture (each in ``averages``
    blocks, averaged)."""
    path = record_steps(backend, folder, frequency_hz, levels_dbfs, **record)
    return analyze_steps(read_capture(path, record.get("channel", 1)), bandwidth_hz, load_ohms, traces=traces,
                         averages=averages)


@dataclass(frozen=True)
class ToneParams(RunParams):
    """What a tone run plays and how it is analysed (run.json's ``params``)."""

    channel: int = 1
    frequency_hz: float | None = None
    levels_dbfs: tuple[float, ...] = ()
    load_ohms: float | None = None
    bandwidth_hz: tuple[float, float] | None = (20.0, 20000.0)
    step_s: float = 1.0
    averages: int = 1


def summary(steps: StepsResult, title: str) -> str:
    from benchkit.report import tone as report

    return report.steps_summary(steps, title)


def reports(steps: StepsResult, folder: Path, channel: int = 1, **options) -> list[Path]:
    from benchkit.report import tone as report

    return report.steps_reports(steps, folder / CAPTURE_WAV, channel, folder)


def reanalyse(folder: Path, record: dict, say) -> tuple[dict, list[Path]]:
    p = ToneParams.from_dict(record.get("params"))
    rec = run_capture(folder, int(p.channel or 1), say)
    steps = analyze_steps(rec, p.band(), p.load_ohms, traces=True, averages=int(p.averages or 1))
    return steps.to_dict(), reports(steps, folder, rec.channel)


def overlay(comparison, docs: list[dict], entries, out: Path, title: str) -> list[Path]:
    """THD+N against power (or level), and the spectra of the highest drive
    level the runs share."""
    from benchkit.report import overlays

    return [overlays.distortion_png(docs, comparison.labels, out / "overlay.png", f"{title}: THD+N",
                                    comparison.warnings),
            *_spectra(entries, docs, comparison.labels, out, title, comparison.warnings)]


def _spectra(entries, docs, labels, folder: Path, title: str, warnings) -> list[Path]:
    from benchkit.report import tone as report

    shared = set.intersection(*({s["drive_dbfs"] for s in d.get("steps") or []} for d in docs))
    if not shared:
        return []
    drive = max(shared)
    results = []
    for entry, doc in zip(entries, docs):
        capture = Path(doc.get("file") or entry.folder / "capture.wav")
        if not capture.is_absolute() or not capture.exists():
            capture = entry.folder / capture.name
        if not capture.exists():
            return []
        steps = analyze_steps(read_capture(capture, int(doc.get("channel") or 1)),
                              tuple(doc["steps"][0].get("bandwidth_hz") or (20.0, 20000.0)), traces=True)
        results.append(next(s.result for s in steps.steps if s.drive_dbfs == drive))
    path = folder / "spectra.png"
    return [report.spectra_png(results, labels, path, f"{title}: spectra at drive {drive:g} dBFS", warnings)]


def recognises(rec) -> bool:

    return is_stepped(rec)


def analyse(rec, o: Offline) -> Analysed:
    """Each step of a stepped capture benchkit wrote; else the capture as
    one tone."""
    from benchkit import units
    from benchkit.report import tone as report

    path, channel = Path(rec.path), rec.channel
    if is_stepped(rec):
        steps = analyze_steps(rec, o.bandwidth_hz, o.load_ohms, o.volts_per_fs, o.out is not None, o.fundamental_hz,
                              o.averages)
        text = report.steps_summary(steps, f"{path} channel {channel} ({units.count(len(steps.steps), 'step')})")
        return Analysed(steps.to_dict(), text, lambda out: report.steps_reports(steps, path, channel, out))
    scale, source = o.scale(rec)
    result = analyze_tone(rec.samples, rec.sample_rate_hz,
                          fundamental_hz=o.fundamental_hz if o.fundamental_hz is not None else rec.stimulus_frequency_hz,
                          bandwidth_hz=o.bandwidth_hz, averages=o.averages, volts_per_fs=scale, scale_source=source,
                          load_ohms=o.load_ohms, traces=o.out is not None,
                          chain=o.profile.chain() if o.profile is not None else rec.chain())
    cal = rec.sidecar.get("calibration")
    note = floor_warning(result, cal)
    if note:
        result = replace(result, warnings=result.warnings + (note,))
    d = result.to_dict()
    doc = {"kind": d.pop("kind"), "schema_version": d.pop("schema_version"), "file": str(path), "channel": channel, **d}
    doc["warnings"] = warning_docs(rec.warnings) + doc["warnings"]
    if cal:
        doc["calibration"] = cal
        doc["conditions"] = result.conditions().calibrated(cal).to_dict()
    return Analysed(doc, report.tone_summary(result, str(path), channel),
                    lambda out: report.tone_reports(result, doc, path, channel, out))


# --- on the bench ----------------------------------------------------------------


def _opens(o: dict) -> dict:
    from benchkit.bench import opens_tones

    return opens_tones(o, [o["freq"]])


def _prepare(s) -> dict:
    from benchkit.bench import preflight

    o = s.o
    preflight(s, o["level"], o["freq"], o["load"])
    return dict(channel=s.channel, frequency_hz=o["freq"], levels_dbfs=s.drive, load_ohms=o["load"],
                bandwidth_hz=s.band, step_s=o["step_duration"], averages=o["averages"])


def _measure(s, folder: Path) -> Measured:
    o = s.o
    steps = tone_run(s.backend, folder, o["freq"], s.drive, load_ohms=o["load"], bandwidth_hz=s.band, channel=s.channel,
                     traces=True, averages=o["averages"], step_s=o["step_duration"], **s.stored())
    return Measured(steps, f"{o['freq']:g} Hz, {units.count(len(s.drive), 'step')}, latency "
                           f"{steps.latency_samples} samples")


#: the command's help
ABOUT = """Play stepped tones into the stage, capture through the pad, analyse each step.

    The whole run is one stream; the raw recording goes to disk as it
    arrives and the aligned capture is written before it is analysed.

    The run is filed in the bench folder's logbook (runs/<time>-<name>/).

    Example: benchkit tone --level -30dBFS --level -20dBFS --level -14dBFS --load 8 --sim-param bias=1.2 --tag bias=1.2A

    Safety: on a real bench, start low, measure through a pad into a dummy
    load, and keep speakers off the output. Ctrl-C fades the output to
    silence and keeps the partial capture.
    """

#: how it measures on a bench: the command's options (benchkit.options) and help
ON_BENCH = Live(
    _opens, _prepare, _measure,
    options="load bandwidth ref_channel step_duration averages json",
    defaults=dict(freq=997.0, level=["-20 dBFS"]),
    about=ABOUT,
)

KIND = Kind("tone", reanalyse, ToneParams, summary, reports, figures=step_figures, overlay=overlay, recognises=recognises, analyse=analyse,
            readings=step_readings, live=ON_BENCH, rank=90)
