"""IMD: a pair of tones at each level (the modulation or the difference
method), the intermodulation products and their sum.

A run: a pair of tones at one or more levels (the
stepped-level machinery of tone runs, retries and recovery included),
stored, then each step analysed from disk (:mod:`benchkit.analysis.imd`).
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from pathlib import Path

from benchkit.analysis.documents import document
from benchkit.analysis import uncertainty as ua
from benchkit.analysis.imd import analyze_imd, imd_figures, ImdResult, method_tones
from benchkit.errors import BenchkitError, BenchWarning
from benchkit.kinds import Analysed, CAPTURE_WAV, Kind, Live, Measured, Offline, run_capture, RunParams
from benchkit.record import SPOILED
from benchkit.recordings import read_capture, Recording, Takes
from benchkit.signals import TwinTone


#: Below this rate the difference method's tones sit at the converters'
#: band edge (a 48 kHz interface is flat to about 20 kHz).
DIFFERENCE_MIN_RATE_HZ = 88200.0


def twin_tone(method: str, f1_hz: float | None = None, f2_hz: float | None = None,
              ratio: float | None = None) -> TwinTone:
    """The pair a method plays, its standard tones and ratio unless given."""
    d1, d2, dr = method_tones(method)
    return TwinTone(method, float(f1_hz or d1), float(f2_hz or d2), float(ratio or dr))


@dataclass(frozen=True)
class ImdStep:
    drive_dbfs: float | None  # None: a capture made elsewhere
    result: ImdResult

    def to_dict(self) -> dict:
        """The step's record document, its uncertainty block left to the run's (``steps.KEY``)."""
        d = self.result.to_dict()
        d.pop("kind"), d.pop("schema_version"), d.pop("uncertainty", None)
        return {"drive_dbfs": self.drive_dbfs, **d}


@dataclass(frozen=True)
class ImdSteps:
    """Every step of a two-tone capture: IMD against level."""

    file: str
    channel: int
    twin: TwinTone
    steps: tuple[ImdStep, ...]
    warnings: tuple[str, ...] = ()
    device: str | None = None
    calibration: dict | None = None

    def top(self) -> ImdStep | None:
        """The highest valid step."""
        valid = [s for s in self.steps if s.result.valid]
        return max(valid, key=lambda s: s.drive_dbfs or 0.0) if valid else None

    def to_dict(self) -> dict:
        first = self.steps[0].result
        return document("imd", {
            "file": self.file, "channel": self.channel,
            "method": self.twin.method, "tones_hz": [self.twin.f1_hz, self.twin.f2_hz], "tone_ratio": self.twin.ratio,
            "frequency_hz": self.twin.f2_hz, "sample_rate_hz": first.sample_rate_hz,
            "load_ohms": first.load_ohms, "scale_source": first.scale_source, "device": self.device,
            "calibration": self.calibration, "warnings": list(self.warnings),
            "steps": [s.to_dict() for s in self.steps],
            "uncertainty": ua.stacked("steps", [s.result.uncertainty for s in self.steps]),
        }, first.conditions().calibrated(self.calibration))


def is_imd(rec: Recording) -> bool:
    return (rec.sidecar.get("stimulus") or {}).get("kind") == "stepped-twin-tones"


def analyze_imd_steps(rec: Recording, volts_per_fs: float | None = None, load_ohms: float | None = None,
                      spectrum: bool = False) -> ImdSteps:
    """Analyse each settled step of a two-tone capture benchkit wrote."""
    stim = rec.sidecar["stimulus"]
    try:
        t = stim["twin"]
        twin = TwinTone(str(t["method"]), float(t["f1_hz"]), float(t["f2_hz"]), float(t["ratio"]))
        segments = [(s, float(s["level_dbfs"]), bool(s.get("spoiled"))) for s in stim["segments"]]
    except (KeyError, TypeError, ValueError) as exc:
        raise BenchkitError(f"{rec.path}: the sidecar's two-tone steps are damaged") from exc
    scale, source = (volts_per_fs, "given") if volts_per_fs is not None else rec.channel_scale()
    takes = Takes(rec)
    steps = []
    for seg, drive, spoiled in segments:
        r = analyze_imd(takes.step(seg), rec.sample_rate_hz, method=twin.method, f1_hz=twin.f1_hz, f2_hz=twin.f2_hz,
                        volts_per_fs=scale, scale_source=source, load_ohms=load_ohms, spectrum=spectrum)
        if spoiled:
            r = replace(r, valid=False, warnings=r.warnings + (SPOILED,))
        steps.append(ImdStep(drive, r))
    warnings = list(rec.all_warnings())
    if twin.method == "difference" and rec.sample_rate_hz < DIFFERENCE_MIN_RATE_HZ and twin.f2_hz > 15000:
        warnings.append(BenchWarning("outside-band", f"at {rec.sample_rate_hz:g} Hz the tones at {twin.f1_hz:g} and {twin.f2_hz:g} Hz sit at the "
                        "converters' band edge and 2f2-f1 beyond it: measure at 96 kHz (--rate 96000)"))
    return ImdSteps(str(rec.path), rec.channel, twin, tuple(steps), tuple(warnings), rec.sidecar.get("device"),
                    rec.sidecar.get("calibration"))


def imd_run(backend, folder: Path, twin: TwinTone, levels_dbfs: list[float], channel: int = 1,
            load_ohms: float | None = None, note: str = "", calibration=None, calibration_file: str | None = None,
            warnings: tuple[str, ...] = (), step_s: float = 1.0, spectrum: bool = False) -> ImdSteps:
    """Play the pair at each level, store the capture, analyse each step."""
    from benchkit.record import record_steps

    path = record_steps(backend, folder, twin.f2_hz, levels_dbfs, channel=channel, note=note, calibration=calibration,
                        calibration_file=calibration_file, warnings=warnings, step_s=step_s, twin=twin)
    return analyze_imd_steps(read_capture(path, channel), load_ohms=load_ohms, spectrum=spectrum)


@dataclass(frozen=True)
class ImdParams(RunParams):
    """What an IMD run plays (its pair of tones, as a dict) and into what (run.json's ``params``)."""

    channel: int = 1
    twin: dict | None = None
    levels_dbfs: tuple[float, ...] = ()
    load_ohms: float | None = None
    step_s: float | None = None


def summary(result, title: str) -> str:
    from benchkit.report import imd as report

    return report.imd_summary(result.to_dict(), title)


def reports(result, folder: Path, channel: int = 1, **options) -> list[Path]:
    from benchkit.report import imd as report

    return report.imd_reports(result, folder / CAPTURE_WAV, channel, folder)


def reanalyse(folder: Path, record: dict, say) -> tuple[dict, list[Path]]:
    p = ImdParams.from_dict(record.get("params"))
    rec = run_capture(folder, int(p.channel or 1), say)
    result = analyze_imd_steps(rec, load_ohms=p.load_ohms, spectrum=True)
    return result.to_dict(), reports(result, folder, rec.channel)


def overlay(comparison, docs: list[dict], entries, out: Path, title: str) -> list[Path]:
    from benchkit.report import imd as report

    return [report.imd_png(docs, comparison.labels, out / "overlay.png", title, comparison.warnings)]


def recognises(rec) -> bool:

    return is_imd(rec)


def analyse(rec, o: Offline) -> Analysed:
    """A two-tone capture: benchkit's own (its sidecar lists the steps), or
    (``--imd METHOD[:F1:F2]``) one made elsewhere, analysed whole."""
    from benchkit import units
    from benchkit.report import imd as report

    if is_imd(rec) and o.imd_method is None:
        result = analyze_imd_steps(rec, o.volts_per_fs, o.load_ohms, spectrum=o.out is not None)
    else:
        method, _sep, tones = o.imd_method.partition(":")
        twin = twin_tone(method, *(units.parse_tones(tones) if tones else (None, None)))
        scale, source = o.scale(rec)
        r = analyze_imd(rec.samples, rec.sample_rate_hz, method=twin.method, f1_hz=twin.f1_hz, f2_hz=twin.f2_hz,
                        volts_per_fs=scale, scale_source=source, load_ohms=o.load_ohms, spectrum=o.out is not None)
        result = ImdSteps(str(rec.path), rec.channel, twin, (ImdStep(None, r),), rec.warnings)
    doc = result.to_dict()
    return Analysed(doc, report.imd_summary(doc, f"{rec.path} channel {rec.channel}: intermodulation"),
                    lambda out: report.imd_reports(result, Path(rec.path), rec.channel, out))


# --- on the bench ----------------------------------------------------------------


def _opens(o: dict) -> dict:
    from benchkit.analysis.imd import shortest_record_s
    from benchkit.units import parse_tones

    twin = twin_tone(o["method"], *(parse_tones(o["tones"]) if o["tones"] else (None, None)), o["ratio"])
    shortest = shortest_record_s(twin.method, twin.f1_hz, twin.f2_hz)
    if o["step_duration"] < shortest:
        raise BenchkitError(f"--step-duration {o['step_duration']:g} s is too short to separate the products of "
                            f"{twin.f1_hz:g} and {twin.f2_hz:g} Hz: it needs {shortest:.3g} s (16 periods of their spacing)")
    return dict(ref=o["ref_channel"], load=o["load"], within=(("--tones", (twin.f1_hz, twin.f2_hz), None),),
                keep=dict(twin=twin))


def _prepare(s) -> dict:
    from benchkit.bench import preflight

    o, twin = s.o, s.more["twin"]
    preflight(s, o["level"], twin.f1_hz, o["load"])  # probed at the stronger tone (f1 at 4:1; either at 1:1)
    return dict(channel=s.channel, twin=twin.to_dict(), levels_dbfs=s.drive, load_ohms=o["load"],
                step_s=o["step_duration"])


def _measure(s, folder: Path) -> Measured:
    o = s.o
    result = imd_run(s.backend, folder, s.more["twin"], s.drive, s.channel, o["load"], s.labels.get("note", ""), s.profile,
                     s.calibration_file, s.warnings, o["step_duration"], spectrum=True)
    return Measured(result, f"intermodulation, {len(s.drive)} level(s)")


#: the command's help
ABOUT = """Measure intermodulation distortion with a pair of tones, at one level or stepped.

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

#: how it measures on a bench: the command's options (benchkit.options) and help
ON_BENCH = Live(
    _opens, _prepare, _measure,
    options="method tones ratio load step_duration ref_channel json",
    defaults=dict(level=["-20 dBFS"]),
    helps=dict(level="Drive, the composite's peak at the interface output, e.g. -20dBFS (repeat for IMD against level)."),
    about=ABOUT,
)

KIND = Kind("imd", reanalyse, ImdParams, summary, reports, figures=imd_figures, overlay=overlay, recognises=recognises,
            chosen=lambda o: o.imd_method is not None, analyse=analyse, live=ON_BENCH, rank=20)
