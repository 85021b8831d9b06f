"""Gain: the stage's voltage gain and phase at one tone, over a reference
input or the calibrated drive.

A run: one tone step, the stage's output and its input measured in
the same capture (or the input taken from the calibrated drive), stored,
then analysed from disk.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from pathlib import Path

from benchkit.analysis.gain import analyze_gain, gain_figures, gain_readings, GainResult
from benchkit.analysis.tone import analyze_tone, DEFAULT_BAND_HZ
from benchkit.errors import BenchkitError
from benchkit.kinds import Analysed, CAPTURE, Kind, Live, Measured, Offline, run_capture, RunParams
from benchkit.recordings import read_capture, Takes


def gain_of_capture(path: Path, channel: int = 1, ref_channel: int | None = None, bandwidth_hz=DEFAULT_BAND_HZ,
                    load_ohms: float | None = None) -> GainResult:
    """The gain of a one-step tone capture written by benchkit: the
    measuring channel over ``ref_channel`` (the sidecar's reference input
    by default), else over the drive at the calibrated output scale."""
    return step_gains(path, channel, ref_channel, bandwidth_hz, load_ohms)[-1]


def step_gains(path: Path, channel: int = 1, ref_channel: int | None = None, bandwidth_hz=DEFAULT_BAND_HZ,
               load_ohms: float | None = None) -> list[GainResult]:
    """The gain at every step of a stepped-tone capture written by benchkit
    (each at its own frequency and level), as :func:`gain_of_capture`."""
    from benchkit.kinds.tone import analyze_steps, is_stepped

    rec = read_capture(path, channel)
    if not is_stepped(rec):
        raise BenchkitError(f"{path}: gain needs a tone capture that benchkit wrote (its sidecar lists the step)")
    steps = analyze_steps(rec, bandwidth_hz, load_ohms)
    if steps.steps[0].result.fundamental_vrms is None:
        raise BenchkitError(f"{path}: the output has no voltage scale: give --calibration (or --volts-per-fs)")
    side = rec.sidecar
    cal = side.get("calibration") or {}
    if ref_channel is None:
        ref_channel = next((c["number"] for c in side.get("channels") or []
                            if str(c.get("role", "")).startswith("reference")), None)
    if ref_channel is not None:
        ref = read_capture(path, ref_channel)
        scale, _source = ref.channel_scale()
        scale = scale or cal.get("input_vpk_per_fs")
        if not scale:
            raise BenchkitError(f"{path}: the reference input {ref_channel} has no voltage scale: calibrate the interface")
        out = []
        takes = Takes(ref)
        for seg, step in zip(side["stimulus"]["segments"], steps.steps):
            r = analyze_tone(takes.step(seg), rec.sample_rate_hz,
                             fundamental_hz=float(seg["frequency_hz"]), bandwidth_hz=bandwidth_hz, volts_per_fs=scale)
            g = analyze_gain(step.result, drive_dbfs=step.drive_dbfs, reference=r, load_ohms=load_ohms)
            out.append(replace(g, calibration=cal or None))
        return out
    out_scale = cal.get("output_vpk_per_fs") or side.get("output_vpk_per_fs")
    if not out_scale:
        raise BenchkitError(f"{path}: no reference input and no calibrated output scale: wire a reference input "
                            "(--ref-channel) or give --calibration")
    return [replace(analyze_gain(step.result, drive_dbfs=step.drive_dbfs, output_vpk_per_fs=float(out_scale),
                                 load_ohms=load_ohms),
                    calibration=cal or None)
            for step in steps.steps]


@dataclass(frozen=True)
class GainParams(RunParams):
    """What a gain run plays and how it is analysed (run.json's ``params``)."""

    channel: int = 1
    ref_channel: int | None = None
    frequency_hz: float | None = None
    level_dbfs: float | None = None
    load_ohms: float | None = None
    bandwidth_hz: tuple[float, float] | None = (20.0, 20000.0)


def summary(result: GainResult, title: str) -> str:
    from benchkit.report import gain as report

    return report.gain_summary(result.to_dict(), title)


def reports(result: GainResult, folder: Path, channel: int = 1, **options) -> list[Path]:
    """The result alone (``capture.gain.json``): one number needs no plot."""
    from benchkit.report.tables import write_json

    return [write_json(result.to_dict(), folder / f"{CAPTURE}.gain.json")]


def reanalyse(folder: Path, record: dict, say) -> tuple[dict, list[Path]]:
    p = GainParams.from_dict(record.get("params"))
    channel = int(p.channel or 1)
    path = run_capture(folder, channel, say).path
    result = gain_of_capture(path, channel, p.ref_channel, p.band(), p.load_ohms)
    return result.to_dict(), reports(result, folder, channel)


def analyse(rec, o: Offline) -> Analysed:
    """A tone capture benchkit wrote (``--as gain``)."""
    from benchkit.report import gain as report

    path = Path(rec.path)
    doc = {**gain_of_capture(path, rec.channel, o.ref_channel, o.bandwidth_hz, o.load_ohms).to_dict(), "file": str(path)}
    return Analysed(doc, report.gain_summary(doc, f"{path} channel {rec.channel}: gain"))


# --- on the bench ----------------------------------------------------------------


def _opens(o: dict) -> dict:
    from benchkit.bench import opens_tones

    return opens_tones(o, [o["freq"]])


def _prepare(s) -> dict:
    from benchkit.bench import preflight
    o = s.o
    s.ref_channel = o["ref_channel"] if o["ref_channel"] is not None else s.backend.reference_input()
    preflight(s, [o["level"]], o["freq"], o["load"])
    return dict(channel=s.channel, ref_channel=s.ref_channel, frequency_hz=o["freq"], level_dbfs=s.drive[0],
                load_ohms=o["load"], bandwidth_hz=s.band)


def _measure(s, folder: Path) -> Measured:
    from benchkit.record import record_steps
    o = s.o
    path = record_steps(s.backend, folder, o["freq"], s.drive, channel=s.channel, **s.stored())
    return Measured(gain_of_capture(path, s.channel, s.ref_channel, s.band, o["load"]))


#: the command's help
ABOUT = """Measure the stage's voltage gain at a frequency and level, in V/V and dB, with its phase.

    The input is measured on --ref-channel (wired to the stage's input)
    or taken from the drive at the calibrated output scale; the output
    through the pad at its calibrated scale.

    Example: benchkit gain --freq 1000 --level -30dBFS --load 8 --tag bias=1.2A

    Safety: a gain run is one short tone; start low on an unknown stage,
    into a dummy load through a pad.
    """

#: how it measures on a bench: the command's options (benchkit.options) and help
ON_BENCH = Live(
    _opens, _prepare, _measure,
    options="freq ref_channel load bandwidth json",
    defaults=dict(level="-30 dBFS"),
    about=ABOUT,
)

KIND = Kind("gain", reanalyse, GainParams, summary, reports, figures=gain_figures, chosen=lambda o: o.gain, analyse=analyse, readings=gain_readings,
            live=ON_BENCH, rank=10)
