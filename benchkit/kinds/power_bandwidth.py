"""Power bandwidth: the power at the rated distortion (the first --limit,
1 % THD+N by default) at a few frequencies, each found by the power run's
adaptive steps, and the frequencies where it falls 3 dB below its value at
1 kHz (IEC 60268-3 describes the characteristic: the rated distortion held,
the drive set at each frequency).

Each frequency is its own capture (``capture-<F>Hz.wav``, on disk before it
is analysed) in the one run folder; its power run is what ``benchkit power``
would measure there.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

from benchkit.analysis.compare import Figure, finite
from benchkit.analysis.documents import document
from benchkit.analysis.power import DEFAULT_LIMITS_PCT, ONSET_DB, PowerResult
from benchkit.analysis.uncertainty import lookup
from benchkit.errors import BenchkitError
from benchkit.kinds import Kind, Live, Measured, RunParams

#: the frequencies by default: the bass, the reference, the treble as high as
#: distortion can be read (its third harmonic within the 20 kHz band)
DEFAULT_AT_HZ = (20.0, 50.0, 100.0, 1000.0, 5000.0, 6300.0)
#: the band the power runs read distortion in (the power command's)
BAND_HZ = (20.0, 20000.0)
#: the power the others are read against is at this frequency (or the nearest one measured)
REFERENCE_HZ = 1000.0
#: its bandwidth ends where the power falls this far below that
DROP_DB = 3.0


def stem_at(frequency_hz: float) -> str:
    """The capture's stem of one frequency."""
    return f"capture-{frequency_hz:g}Hz"


def corners(freqs, powers, reference_hz: float = REFERENCE_HZ, drop_db: float = DROP_DB):
    """(low, high): where the power falls ``drop_db`` below its value at
    the frequency nearest ``reference_hz``, walking out from there,
    interpolated in log frequency and log power between the two measured
    points that bracket it; None on a side where it does not fall that far
    within the frequencies measured (a frequency without a power is
    stepped over)."""
    pts = sorted((f, p) for f, p in zip(freqs, powers) if p is not None and p > 0)
    if not pts:
        return None, None
    k = min(range(len(pts)), key=lambda i: abs(math.log(pts[i][0] / reference_hz)))
    target = math.log10(pts[k][1]) - drop_db / 10.0

    def walk(indices):
        prev = pts[k]
        for i in indices:
            f, p = pts[i]
            if math.log10(p) <= target:
                (f0, p0), lp = prev, math.log10(p)
                t = (math.log10(p0) - target) / (math.log10(p0) - lp)
                return 10 ** (math.log10(f0) + t * (math.log10(f) - math.log10(f0)))
            prev = (f, p)
        return None

    return walk(range(k - 1, -1, -1)), walk(range(k + 1, len(pts)))


def corner_u(points: list[dict], corner_hz: float | None, reference_hz: float | None) -> float | None:
    """A -3 dB frequency's standard uncertainty, Hz: the relative u of the
    power interpolated there (the two bracketing points', by their weights)
    and of the reference's, over the curve's slope in log power against
    log frequency (JCGM 100 5.1.2: the crossing's sensitivity to the
    level), and the straight line's departure from the curve between the
    two points. The part every power shares (one chain: its calibration,
    pad and load) cancels in their ratio (JCGM 100 5.2, correlation +1) and
    is left out. None where a power's u is not known."""
    if corner_hz is None:
        return None

    def own(p):
        u, shared = p.get("power_u_w"), p.get("power_shared_u_w") or 0.0
        return None if u is None else math.sqrt(max(u * u - shared * shared, 0.0))

    known = sorted((p["frequency_hz"], p["power_w"], own(p)) for p in points if p["power_w"])
    below = [q for q in known if q[0] <= corner_hz]
    above = [q for q in known if q[0] > corner_hz]
    ref = next((q for q in known if q[0] == reference_hz), None)
    if not below or not above or ref is None or any(q[2] is None for q in (below[-1], above[0], ref)):
        return None
    (f0, p0, u0), (f1, p1, u1) = below[-1], above[0]
    w = math.log(corner_hz / f0) / math.log(f1 / f0)
    slope = math.log(p1 / p0) / math.log(f1 / f0)
    # the level read at the corner less the reference's: each power's weight in it (the
    # reference counted once where it is one of the two points)
    weights = {f0: (1 - w, u0 / p0), f1: (w, u1 / p1)}
    c, r = weights.get(ref[0], (0.0, ref[2] / ref[1]))
    weights[ref[0]] = (c - 1.0, r)
    rel = math.sqrt(sum((c * r) ** 2 for c, r in weights.values()))
    # the straight line between the two points against the curve: its bend
    # from the next point out (a second difference), at most half the bend
    # times the distances to the two points, taken as rectangular (JCGM 100 4.3.7)
    third = above[1] if len(above) > 1 else below[-2] if len(below) > 1 else None
    if third is not None:
        xs, ys = zip(*sorted((math.log(f), math.log(p)) for f, p, _u in ((f0, p0, u0), (f1, p1, u1), third)))
        bend = 2 * ((ys[2] - ys[1]) / (xs[2] - xs[1]) - (ys[1] - ys[0]) / (xs[1] - xs[0])) / (xs[2] - xs[0])
        x = math.log(corner_hz)
        rel = math.hypot(rel, abs(bend) * (x - math.log(f0)) * (math.log(f1) - x) / 2 / math.sqrt(3))
    return corner_hz * rel / abs(slope) if slope else None


@dataclass(frozen=True)
class BandwidthResult:
    """The power at the rated distortion at each frequency measured."""

    load_ohms: float
    limit_pct: float
    metric: str
    points: tuple[tuple[float, PowerResult], ...]
    warnings: tuple[str, ...] = ()

    def power_at(self, result: PowerResult) -> float | None:
        point = result.rated
        return None if point is None else point.power_w

    @property
    def corners(self):
        return corners([f for f, _r in self.points], [self.power_at(r) for _f, r in self.points])

    def to_dict(self) -> dict:
        points, docs = [], []
        for f, r in self.points:
            d = r.to_dict()
            docs.append(d)
            lim = next(iter(d.get("limits") or []), {})
            points.append({"frequency_hz": f, "power_w": self.power_at(r), "vrms": lim.get("vrms"),
                           "power_u_w": lookup(d, "limits.power_w", 0) if lim else None,
                           "power_shared_u_w": lookup(d, "limits.power_w", 0, part="shared") if lim else None,
                           "reached": lim.get("power_w") is not None, "steps": len(d.get("steps") or []),
                           "stop_reason": d.get("stop_reason"), "file": d.get("file")})
        measured = [(p["frequency_hz"], p["power_w"]) for p in points if p["power_w"] is not None]
        ref = min(measured, key=lambda q: abs(math.log(q[0] / REFERENCE_HZ)), default=(None, None))
        low, high = self.corners
        return document("power-bandwidth", {
            "load_ohms": self.load_ohms, "limit_pct": self.limit_pct, "limit_metric": self.metric,
            "reference_hz": ref[0], "reference_power_w": ref[1], "drop_db": DROP_DB,
            "low_3db_hz": low, "high_3db_hz": high,
            "low_3db_u_hz": corner_u(points, low, ref[0]), "high_3db_u_hz": corner_u(points, high, ref[0]),
            "points": points, "runs": docs, "warnings": list(self.warnings),
        })


def analyze_power_bandwidth(points, *, warnings=()) -> BandwidthResult:
    """The power bandwidth: the power at the rated distortion at each
    frequency, and where it falls 3 dB below its value at 1 kHz.

    Parameters
    ----------
    points : sequence of (float, PowerResult)
        Each frequency (Hz) and its power run's figures
        (:func:`benchkit.analyze_power`), all into one load and read on one
        metric; the first limit of each is the rated distortion.
    warnings : tuple of BenchWarning
        The run's warnings, kept with the result.

    Returns
    -------
    BandwidthResult
        ``corners`` (the low and the high -3 dB frequency, None beyond
        those measured); ``to_dict()`` is the "power-bandwidth" document.

    References
    ----------
    IEC 60268-3 describes the characteristic: the rated distortion held,
    the drive set at each frequency, the power read against its value at
    1 kHz. The -3 dB points are interpolated in log frequency and log power
    between the frequencies either side (common practice).

    Examples
    --------
    A stage that clips at 10 V peak at 1 kHz and whose clipping level falls
    as a first-order low-pass at 2 kHz, 10 V / sqrt(1 + (f / 2000)^2): its
    power goes as 1 / (1 + (f / 2000)^2), so against 1 kHz it falls 3 dB at
    2000 sqrt(1.5) = 2449 Hz (circuit theory); between the 2 and 2.5 kHz
    points the interpolation reads it within half a percent:

    >>> import numpy as np, benchkit
    >>> t = np.arange(48000) / 48000
    >>> points = []
    >>> for f in (1000.0, 2000.0, 2500.0):
    ...     clip = 10.0 * np.sqrt(1.25) / np.sqrt(1 + (f / 2000) ** 2)
    ...     steps = []
    ...     for vpk in clip * np.arange(0.8, 1.21, 0.02):
    ...         out = np.clip(vpk * np.sin(2 * np.pi * f * t), -clip, clip)
    ...         steps.append((20 * np.log10(vpk / 20), benchkit.analyze_tone(out / 20, 48000, volts_per_fs=20.0, load_ohms=8.0)))
    ...     points.append((f, benchkit.analyze_power(steps, load_ohms=8.0, limits_pct=(1.0,))))
    >>> low, high = benchkit.analyze_power_bandwidth(points).corners
    >>> low is None, round(float(high / (2000 * np.sqrt(1.5))), 2)
    (True, 1.0)
    """
    points = sorted(((float(f), r) for f, r in points), key=lambda p: p[0])
    if not points:
        raise BenchkitError("a power bandwidth needs at least one frequency")
    first = points[0][1]
    if any(r.load_ohms != first.load_ohms or r.metric != first.metric for _f, r in points):
        raise BenchkitError("the power runs of a power bandwidth must share their load and their metric")
    limit = first.limits[0][0] if first.limits else DEFAULT_LIMITS_PCT[0]
    return BandwidthResult(first.load_ohms, limit, first.metric, tuple(points), tuple(warnings))


def bandwidth_figures(doc: dict) -> list[Figure]:
    """What compares: the power at each frequency, the reference power and
    the two -3 dB frequencies (the headline)."""
    metric = "THD+N" if doc.get("limit_metric", "thdn") == "thdn" else "THD"
    at = f"{doc.get('limit_pct', 1):g} % {metric}"
    out = [Figure(f"power_w@{p['frequency_hz']:g}Hz", "power", finite(p.get("power_w")), "W", "higher",
                  at=f"{p['frequency_hz']:g} Hz, {at}", u=p.get("power_u_w"), shared=p.get("power_shared_u_w") or 0.0)
           for p in doc.get("points") or []]
    ref = next((p for p in doc.get("points") or [] if p["frequency_hz"] == doc.get("reference_hz")), {})
    out += [Figure("reference_power_w", f"power near {REFERENCE_HZ:g} Hz", finite(doc.get("reference_power_w")), "W",
                   "higher", at=at, headline=True, u=ref.get("power_u_w"), shared=ref.get("power_shared_u_w") or 0.0),
            Figure("low_3db_hz", "-3 dB power, low", finite(doc.get("low_3db_hz")), "Hz", "lower", headline=True,
                   u=doc.get("low_3db_u_hz")),
            Figure("high_3db_hz", "-3 dB power, high", finite(doc.get("high_3db_hz")), "Hz", "higher", headline=True,
                   u=doc.get("high_3db_u_hz"))]
    return out


@dataclass(frozen=True)
class BandwidthParams(RunParams):
    """What a power-bandwidth run plays and how it is analysed (run.json's ``params``)."""

    channel: int = 1
    ref_channel: int | None = None
    frequencies_hz: tuple[float, ...] = ()
    load_ohms: float | None = None
    metric: str = "thdn"
    limit_pct: float = DEFAULT_LIMITS_PCT[0]
    onset_db: float = ONSET_DB


def summary(result: BandwidthResult, title: str) -> str:
    from benchkit.report import power_bandwidth as report

    return report.bandwidth_summary(result.to_dict(), title)


def reports(result: BandwidthResult, folder: Path, channel: int = 1, **options) -> list[Path]:
    from benchkit.report import power_bandwidth as report

    return report.bandwidth_reports(result.to_dict(), folder)


def _from_captures(folder: Path, p: BandwidthParams, say) -> BandwidthResult:
    from benchkit.kinds import run_capture
    from benchkit.kinds.power import power_from_steps
    from benchkit.kinds.tone import analyze_steps

    points = []
    for f in p.frequencies_hz:
        rec = run_capture(folder, int(p.channel or 1), say, stem=stem_at(f))
        steps = analyze_steps(rec, load_ohms=p.load_ohms)
        points.append((float(f), power_from_steps(steps, p.load_ohms, p.metric, (p.limit_pct,), p.onset_db)))
    return analyze_power_bandwidth(points)


def reanalyse(folder: Path, record: dict, say) -> tuple[dict, list[Path]]:
    p = BandwidthParams.from_dict(record.get("params"))
    result = _from_captures(folder, p, say)
    return result.to_dict(), reports(result, folder)


def overlay(comparison, docs: list[dict], entries, out: Path, title: str) -> list[Path]:
    """The power at the rated distortion against frequency, a line a run."""
    from benchkit.report import power_bandwidth as report

    return [report.bandwidth_png(docs, comparison.labels, out / "overlay.png", f"{title}: power bandwidth",
                                 comparison.warnings)]


# --- on the bench ----------------------------------------------------------------


def _opens(o: dict) -> dict:
    from benchkit.analysis.tone import DEFAULT_BAND_HZ
    from benchkit.kinds.power import figure_options

    freqs = sorted(float(f) for f in o["at"]) if o["at"] else list(DEFAULT_AT_HZ)
    over = [f for f in freqs if 3 * f > BAND_HZ[1] * 1.0001]
    if over:
        raise BenchkitError(f"--at {over[0]:g}: its third harmonic lies above the {BAND_HZ[1]:g} Hz band, so the distortion "
                            f"limit cannot be read there (a clipping stage would be driven to the drive cap); "
                            f"measure up to {BAND_HZ[1] / 3:.0f} Hz")
    return dict(ref=o["ref_channel"], load=o["load"], within=(("--at", freqs, DEFAULT_BAND_HZ),),
                keep=dict(freqs=freqs, figures=figure_options(o)))


def _prepare(s) -> dict:
    o, f = s.o, s.more["figures"]
    s.ref_channel = o["ref_channel"] if o["ref_channel"] is not None else s.backend.reference_input()
    return dict(channel=s.channel, ref_channel=s.ref_channel, frequencies_hz=s.more["freqs"], load_ohms=o["load"],
                metric=f["metric"], limit_pct=f["limits_pct"][0], onset_db=f["onset_db"])


def _measure(s, folder: Path) -> Measured:
    import sys

    from benchkit.kinds.power import plan_power, power_run
    from benchkit.report.live import StepBoard

    o, f = s.o, s.more["figures"]
    limit = f["limits_pct"][0]
    points, warnings = [], []
    for k, freq in enumerate(s.more["freqs"], 1):
        s.say(f"{freq:g} Hz ({k} of {len(s.more['freqs'])})")
        plan, first, top, _scale = plan_power(s.backend, s.profile, freq, s.channel, o["margin"], o["rail"],
                                              o["pad_rating"], o["load"], o["btl"], f["budget"], o["start"], say=s.say)
        warnings += [w for w in plan.warnings if w not in warnings]
        board = StepBoard(f"power bandwidth: {freq:g} Hz into {o['load']:g} ohm ({k} of {len(s.more['freqs'])})",
                          (limit,), f["metric"], s.stage_volts_per_fs, o["load"], s.say, live=sys.stderr.isatty())
        with board:
            result = power_run(s.backend, folder, freq, first, top, o["load"], s.channel, s.ref_channel, f["metric"],
                               (limit,), f["onset_db"], calibration=s.profile, calibration_file=s.calibration_file,
                               note=s.labels.get("note", ""), name=stem_at(freq), input_margin_db=o["margin"],
                               step_db=o["step_db"], fine_db=o["fine_db"], on_step=board.step,
                               warnings=tuple(plan.warnings))
        points.append((freq, result))
        if (result.info or {}).get("interrupted"):
            break
    result = analyze_power_bandwidth(points, warnings=tuple(warnings))
    interrupted = any((r.info or {}).get("interrupted") for _f, r in points)
    return Measured(result, f"power bandwidth into {o['load']:g} ohm at {limit:g} % "
                            f"{'THD+N' if f['metric'] == 'thdn' else 'THD'}",
                    status="interrupted" if interrupted else "complete")


#: the command's help
ABOUT = """Measure the power at the rated distortion across the band, and where it falls 3 dB.

    At each frequency (20, 50, 100 Hz, 1, 5 and 6.3 kHz by default; --at,
    up to a third of the 20 kHz band, where the third harmonic still lies in it)
    the power run's rising steps find the power where THD+N (or THD)
    crosses the first --limit (1 % by default); the power bandwidth is
    where that power falls 3 dB below its value at 1 kHz.

    Example: benchkit power-bandwidth --load 8 --rail 24 --bias 0.8

    Safety: this drives the stage into clipping at full power at every
    frequency, the highest too. Use a dummy load rated for the power (never
    a speaker), mind the heat sink and the load's temperature, and keep the
    pad rated for the highest output. Ctrl-C fades the output to silence
    and keeps the frequencies done.
    """

ON_BENCH = Live(
    _opens, _prepare, _measure,
    options="at start step_db fine_db ref_channel json",
    groups=("live", "figures", "filing"),
    defaults=dict(load=...),
    helps=dict(load="Load resistance, ohms (a dummy load of the right rating).",
               at="The frequencies to measure, Hz (repeatable; default 20, 50, 100, 1000, 5000, 6300; at most 6667)."),
    about=ABOUT,
    shows_itself=True,
)

KIND = Kind("power-bandwidth", reanalyse, BandwidthParams, summary, reports, figures=bandwidth_figures, overlay=overlay,
            live=ON_BENCH, rank=75)

