"""Crosstalk: one channel of a stereo pair driven at a time, the leak into
the other at each frequency, and the channels' balance.

A run: a tone a frequency on channel A's output with B's
silent, then the same on B's, both channels' outputs recorded in one
capture, stored, then analysed from disk (:mod:`benchkit.analysis.crosstalk`).
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from pathlib import Path

from benchkit.analysis.crosstalk import crosstalk_figures, CrosstalkResult, leak
from benchkit.analysis.tone import DEFAULT_BAND_HZ
from benchkit.errors import BenchkitError, BenchWarning, read_warnings
from benchkit.kinds import Analysed, CAPTURE_WAV, Kind, Live, Measured, Offline, run_capture, RunParams
from benchkit.recordings import read_capture, Takes


#: The frequencies a run reads by default, Hz: clear of the mains and its
#: harmonics, where hum and ripple would read as crosstalk.
DEFAULT_FREQS_HZ = (20.0, 70.0, 997.0, 10000.0, 20000.0)


def on_mains(frequency_hz: float) -> bool:
    """Whether a tone sits within 2 Hz of 50 or 60 Hz or a harmonic of
    either up to the 10th (where a supply's hum and ripple lie)."""
    return any(abs(frequency_hz - k * m) <= 2.0 for m in (50.0, 60.0) for k in range(1, 11))


def analyze_crosstalk_capture(path: Path, bandwidth_hz=DEFAULT_BAND_HZ) -> CrosstalkResult:
    """Each step of a crosstalk capture: the driven channel's tone and its
    leak into the other, by the wiring its sidecar records."""
    side = read_capture(path).sidecar
    try:
        wiring = side["crosstalk"]
        outputs, inputs = [int(c) for c in wiring["outputs"]], [int(c) for c in wiring["inputs"]]
        segments = side["stimulus"]["segments"]
    except (KeyError, TypeError, ValueError) as exc:
        raise BenchkitError(f"{path}: not a crosstalk capture (its sidecar names no channel wiring)") from exc
    recs = [read_capture(path, ch) for ch in inputs]
    takes = Takes(*recs)
    scales = [r.channel_scale()[0] for r in recs]
    warnings = list(read_warnings(side.get("warnings")))
    if None in scales:
        warnings.append(BenchWarning("no-scale", "an input has no voltage scale: the channels are compared in FS, as if their pads and "
                        "input gains were identical"))
        scales = [None, None]
    leaks = []
    for seg in segments:
        a = outputs.index(int(seg["channel"]))
        x = leak(takes.step(seg, inputs[a]), takes.step(seg, inputs[1 - a]), recs[a].sample_rate_hz,
                 float(seg["frequency_hz"]), scales[a], scales[1 - a], bandwidth_hz, "AB"[a])
        if seg.get("spoiled"):
            x = replace(x, valid=False)
        leaks.append(x)
    hummed = sorted({round(x.frequency_hz) for x in leaks if on_mains(x.frequency_hz)})
    if hummed:
        warnings.append(BenchWarning("hum", f"{', '.join(f'{f} Hz' for f in hummed)} sit(s) on a mains harmonic: the supply's hum and "
                        "ripple there read as crosstalk"))
    if any(x.below_floor for x in leaks):
        warnings.append(BenchWarning("below-noise", "some leaks lie under 10 dB over their noise: their crosstalk is an upper bound"))
    return CrosstalkResult(tuple(leaks), None not in scales, tuple(warnings), recs[0].sample_rate_hz,
                           None if bandwidth_hz is None else tuple(bandwidth_hz), wiring.get("load_ohms"),
                           side.get("calibration"))


def crosstalk_run(backend, folder: Path, frequencies_hz, level_dbfs: float, outputs=(1, 2), inputs=(1, 3),
                  note: str = "", calibration=None, calibration_file: str | None = None,
                  warnings: tuple[str, ...] = (), load_ohms: float | None = None) -> CrosstalkResult:
    """Drive output A with a tone a frequency, then output B, recording
    both channels' outputs (inputs A and B); store the capture with the
    wiring (and the load each output drives) in its sidecar, then analyse
    it from disk."""
    from benchkit.record import record_steps

    freqs = [float(f) for f in frequencies_hz]
    n = len(freqs)
    path = record_steps(backend, folder, freqs * 2, [level_dbfs] * (2 * n), channel=inputs[0], note=note,
                        calibration=calibration, calibration_file=calibration_file, warnings=warnings,
                        step_s=max(0.5, 20.0 / min(freqs)), out_channels=[outputs[0]] * n + [outputs[1]] * n,
                        listen=[inputs[0]] * n + [inputs[1]] * n,
                        extra={"crosstalk": {"outputs": list(outputs), "inputs": list(inputs), "load_ohms": load_ohms}})
    return analyze_crosstalk_capture(path)


@dataclass(frozen=True)
class CrosstalkParams(RunParams):
    """What a crosstalk run plays on which channels (run.json's ``params``)."""

    channel: int = 1
    inputs: tuple[int, int] = (1, 3)
    outputs: tuple[int, int] = (1, 2)
    frequencies_hz: tuple[float, ...] = ()
    level_dbfs: float | None = None
    load_ohms: float | None = None
    bandwidth_hz: tuple[float, float] | None = (20.0, 20000.0)


def summary(result, title: str) -> str:
    from benchkit.report import crosstalk as report

    return report.crosstalk_summary(result.to_dict(), title)


def reports(result, folder: Path, channel: int = 1, **options) -> list[Path]:
    from benchkit.report import crosstalk as report

    return report.crosstalk_reports(result, folder / CAPTURE_WAV, folder)


def reanalyse(folder: Path, record: dict, say) -> tuple[dict, list[Path]]:
    p = CrosstalkParams.from_dict(record.get("params"))
    path = run_capture(folder, int(p.channel or 1), say).path
    result = analyze_crosstalk_capture(path, p.band())
    return result.to_dict(), reports(result, folder)


def analyse(rec, o: Offline) -> Analysed:
    from benchkit.report import crosstalk as report

    path = Path(rec.path)
    result = analyze_crosstalk_capture(path, o.bandwidth_hz)
    doc = {**result.to_dict(), "file": str(path)}
    return Analysed(doc, report.crosstalk_summary(doc, f"{path}: crosstalk"),
                    lambda out: report.crosstalk_reports(result, path, out))


# --- on the bench ----------------------------------------------------------------


def _opens(o: dict) -> dict:
    from benchkit.bench import opens_tones

    return opens_tones(o, o["freq"], ref=None, stereo=True,
                       more=dict(more_inputs=(o["in_channel_b"] or 2,), more_outputs=(o["out_channel_b"],)))


def _channels(s) -> tuple[tuple[int, int], tuple[int, int]]:
    """The inputs and outputs of channels A and B: a stereo virtual bench's
    own, else as given."""
    o, fixed = s.o, s.backend.capabilities.stereo_channels
    if fixed is not None:
        return (fixed[0][0], o["in_channel_b"] or fixed[0][1]), fixed[1]
    return (o["in_channel"], o["in_channel_b"] or 2), (o["out_channel"], o["out_channel_b"])


def _prepare(s) -> dict:
    from benchkit.bench import preflight
    o = s.o
    inputs, outputs = s.more["channels"] = _channels(s)
    if len(set(inputs)) < 2 or len(set(outputs)) < 2:  # (before the pre-flight's probe plays)
        raise BenchkitError("channels A and B need inputs and outputs of their own")
    preflight(s, [o["level"]], 1000.0, o["load"], volts=False)
    return dict(channel=inputs[0], inputs=list(inputs), outputs=list(outputs), frequencies_hz=list(o["freq"]),
                level_dbfs=s.drive[0], load_ohms=o["load"], bandwidth_hz=s.band)


def _measure(s, folder: Path) -> Measured:
    inputs, outputs = s.more["channels"]
    result = crosstalk_run(s.backend, folder, s.o["freq"], s.drive[0], outputs, inputs, s.labels.get("note", ""),
                           s.profile, s.calibration_file, s.warnings, s.o["load"])
    return Measured(result, "crosstalk and balance")


#: the command's help
ABOUT = """Measure a stereo stage's crosstalk both ways, and its channel balance, against frequency.

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

#: how it measures on a bench: the command's options (benchkit.options) and help
ON_BENCH = Live(
    _opens, _prepare, _measure,
    options="level in_channel_b out_channel_b load bandwidth json",
    defaults=dict(freq=list(DEFAULT_FREQS_HZ)),
    about=ABOUT,
)

KIND = Kind("crosstalk", reanalyse, CrosstalkParams, summary, reports, figures=crosstalk_figures, recognises=lambda rec: bool(rec.sidecar.get("crosstalk")),
            analyse=analyse, live=ON_BENCH, rank=30)
