"""Grid: THD+N, THD, H2 and H3 across frequency at several levels, one
stream of stepped tones (each cell settled and analysed with the tone
core), as IEC 60268-3 describes the characteristics of distortion against
frequency and against level.

The levels are drives (dBFS, or volts at the interface output) or, with
--at-power, output powers into --load worked out from the stage's measured
gain; by default 0.1 W, 1 W and 80 % of the power near the 1 % point: the
budget's largest clean sine when --rail and --bias describe the stage, else
the newest logged power run's into the same load; without a load, three
drives. A run records through :mod:`benchkit.record` (the capture on disk
before anything is analysed) and analyses the stored capture with
:func:`benchkit.kinds.tone.analyze_steps`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

from benchkit import units
from benchkit.analysis.grid import grid_figures
from benchkit.analysis.tone import DEFAULT_BAND_HZ
from benchkit.errors import BenchkitError
from benchkit.kinds import Analysed, CAPTURE_WAV, Kind, Live, Measured, Offline, run_capture, RunParams
from benchkit.kinds.tone import analyze_steps, StepsResult
from benchkit.recordings import read_capture

#: the frequencies by default: a third of an octave apart over the audio band
DEFAULT_SPAN_HZ = (20.0, 20000.0)
DEFAULT_PER_OCTAVE = 3
#: the levels by default without a load and a scale: drives
DEFAULT_DRIVES = ("-30 dBFS", "-20 dBFS", "-10 dBFS")
#: with them: output powers, W, and a share of the largest clean sine the budget gives
DEFAULT_POWERS_W = (0.1, 1.0)
NEAR_LIMIT_SHARE = 0.8
#: each cell long enough to settle and to hold twenty periods (the harmonics
#: of a low tone stand apart from the noise between them)
STEP_MIN_S, STEP_PERIODS = 0.25, 20.0
SETTLE_MIN_S, SETTLE_PERIODS = 0.2, 4.0


@dataclass(frozen=True)
class GridResult:
    """Every cell of a grid run: the steps (a frequency and a drive each,
    in the order played), as the tone analysis reads them."""

    steps: StepsResult
    #: the frequency each cell played, Hz (the analysis reads its own, to a fraction of a hertz)
    played_hz: tuple[float, ...]
    #: the output power each level was asked as, W (None: given as drives)
    powers_w: tuple[float, ...] | None = None

    @property
    def drives(self) -> list[float]:
        return sorted({s.drive_dbfs for s in self.steps.steps})

    @property
    def frequencies(self) -> list[float]:
        return sorted(set(self.played_hz))

    def to_dict(self) -> dict:
        d = self.steps.to_dict()
        d["kind"] = "grid"
        d["levels_dbfs"] = self.drives
        d["frequencies_hz"] = self.frequencies
        d["powers_w"] = None if self.powers_w is None else list(self.powers_w)
        for step, s, f in zip(d["steps"], self.steps.steps, self.played_hz):
            step["frequency_hz"] = f
            # the marks a reader needs per cell: THD only a bound (no harmonic over the noise),
            # a harmonic in the noise or above the band
            step["thd_in_noise"] = bool(s.result.thd_upper_bound)
            step["thd_defined"] = bool(s.result.harmonics)  # (not when every harmonic lies above the band)
            orders = {h.order: h for h in s.result.harmonics}
            for k in (2, 3):
                h = orders.get(k)
                step[f"h{k}_state"] = "above band" if h is None else "measured" if h.above_noise else "in the noise"
        return d


def analyze_grid(cells, *, powers_w=None) -> GridResult:
    """Distortion across frequency and level, from each cell's analysis.

    Parameters
    ----------
    cells : sequence of (float, float, ToneResult)
        Each cell: the frequency it played (Hz), its drive (dBFS) and its
        tone analysis (:func:`benchkit.analyze_tone`).
    powers_w : sequence of float, optional
        The output power each level (in rising drive) was asked as, W.

    Returns
    -------
    GridResult
        ``frequencies`` and ``drives``; ``to_dict()`` is the "grid"
        document (docs/results-json.md): every cell's THD+N, THD, H2 and H3
        with its marks (THD only a bound, a harmonic in the noise or above
        the band).

    References
    ----------
    IEC 60268-3 describes distortion against frequency and against level
    as characteristics of an amplifier; each cell is read by the tone
    analysis.

    Examples
    --------
    A memoryless y = x + 0.1 x^2 at two levels and two frequencies: H2 is
    a2 A / 2 of the fundamental (the power-reduction identity), -40 dBc at
    A = 0.2 and -34 dBc at 0.4, whatever the frequency:

    >>> import numpy as np, benchkit
    >>> t = np.arange(48000) / 48000
    >>> cells = []
    >>> for amp in (0.2, 0.4):
    ...     for f in (100.0, 1000.0):
    ...         x = amp * np.sin(2 * np.pi * f * t)
    ...         cells.append((f, 20 * np.log10(amp), benchkit.analyze_tone(x + 0.1 * x**2, 48000, fundamental_hz=f)))
    >>> doc = benchkit.analyze_grid(cells).to_dict()
    >>> [(c["frequency_hz"], round(c["harmonics"][0]["level_dbc"], 1)) for c in doc["steps"]]
    [(100.0, -40.0), (1000.0, -40.0), (100.0, -34.0), (1000.0, -34.0)]
    """
    from benchkit.kinds.tone import StepResult

    cells = list(cells)
    if not cells:
        raise BenchkitError("a grid needs at least one cell")
    steps = StepsResult("", 1, float(cells[0][0]), tuple(StepResult(float(d), r) for _f, d, r in cells))
    return GridResult(steps, tuple(float(f) for f, _d, _r in cells), None if powers_w is None else tuple(powers_w))


@dataclass(frozen=True)
class GridParams(RunParams):
    """What a grid run plays and how it is analysed (run.json's ``params``)."""

    channel: int = 1
    frequencies_hz: tuple[float, ...] = ()
    levels_dbfs: tuple[float, ...] = ()
    powers_w: tuple[float, ...] | None = None
    load_ohms: float | None = None
    bandwidth_hz: tuple[float, float] | None = DEFAULT_BAND_HZ


def _analysed(rec, band, load_ohms, powers=None, traces: bool = False) -> GridResult:
    played = tuple(float(seg["frequency_hz"]) for seg in rec.sidecar["stimulus"]["segments"])
    return GridResult(analyze_steps(rec, band, load_ohms, traces=traces), played, None if not powers else tuple(powers))


def summary(result: GridResult, title: str) -> str:
    from benchkit.report import grid as report

    return report.grid_summary(result.to_dict(), title)


def reports(result: GridResult, folder: Path, channel: int = 1, **options) -> list[Path]:
    from benchkit.report import grid as report

    return report.grid_reports(result.to_dict(), folder / CAPTURE_WAV, channel, folder)


def reanalyse(folder: Path, record: dict, say) -> tuple[dict, list[Path]]:
    p = GridParams.from_dict(record.get("params"))
    rec = run_capture(folder, int(p.channel or 1), say)
    result = _analysed(rec, p.band(), p.load_ohms, p.powers_w)
    return result.to_dict(), reports(result, folder, rec.channel)


def overlay(comparison, docs: list[dict], entries, out: Path, title: str) -> list[Path]:
    """THD+N against frequency, a colour a run and a line style a level."""
    from benchkit.report import grid as report

    return [report.grid_png(docs, comparison.labels, out / "overlay.png", f"{title}: THD+N across frequency",
                            comparison.warnings)]


def recognises(rec) -> bool:
    return isinstance(rec.sidecar.get("grid"), dict)


def analyse(rec, o: Offline) -> Analysed:
    from benchkit.report import grid as report

    result = _analysed(rec, o.bandwidth_hz, o.load_ohms, (rec.sidecar.get("grid") or {}).get("powers_w"))
    doc = result.to_dict()
    path, channel = Path(rec.path), rec.channel
    return Analysed(doc, report.grid_summary(doc, f"{path} channel {channel}"),
                    lambda out: report.grid_reports(doc, path, channel, out))


# --- on the bench ----------------------------------------------------------------


#: ISO 266's preferred frequencies a third of an octave apart (the R10
#: series), one decade of them: the bench's usual third-octave points
THIRDS = (1.0, 1.25, 1.6, 2.0, 2.5, 3.15, 4.0, 5.0, 6.3, 8.0)


def preferred_thirds(lo_hz: float, hi_hz: float) -> list[float]:
    """The preferred third-octave frequencies (ISO 266) from lo to hi."""
    out = []
    for decade in range(math.floor(math.log10(lo_hz)) - 1, math.ceil(math.log10(hi_hz)) + 1):
        out += [round(m * 10.0 ** decade, 6) for m in THIRDS if lo_hz * 0.999 <= m * 10.0 ** decade <= hi_hz * 1.001]
    return out


def frequencies_of(o: dict) -> list[float]:
    """The frequencies a grid plays: --at; else over --span, ISO 266's
    preferred thirds of an octave (--per-octave 3), or --per-octave
    log-spaced."""
    from benchkit.kinds.sweep import stepped_frequencies

    if o["at"]:
        return sorted(float(f) for f in o["at"])
    span = units.parse_span(o["span"])
    return preferred_thirds(*span) if o["per_octave"] == 3 else stepped_frequencies(*span, o["per_octave"])


def powers_of(o: dict) -> list[float] | None:
    """The output powers the levels are asked as (W into --load), or None
    for drives: --at-power; else, with a load and no --level given, 0.1 W,
    1 W and (with --rail and --bias) 80 % of the budget's largest clean sine."""
    from benchkit.budget import ClassABudget

    if o["at_power"]:
        if o["load"] is None:
            raise BenchkitError("--at-power needs --load (ohms): the power is into it")
        return sorted(float(p) for p in o["at_power"])
    if o["load"] is None or o["level"]:
        return None
    powers = list(DEFAULT_POWERS_W)
    if o["rail"] is not None and o["bias"] is not None:
        top = NEAR_LIMIT_SHARE * ClassABudget(o["rail"], o["bias"], o["load"], o["vsat"]).max_sine_w
        powers = [p for p in powers if p < 0.8 * top] + [top]
    return powers


def near_limit_from_log(book, load_ohms: float) -> tuple[float, str] | None:
    """The power at the rated distortion of the newest complete power run
    into the same load in the logbook, and its id (None: there is none)."""
    entries = getattr(book, "entries", None)
    if entries is None:
        return None
    for e in entries(command="power", status="complete", limit=20):
        params = (book.read_record(e.id, missing_ok=True) or {}).get("params") or {}
        watts = e.figure("power_w")
        if watts and params.get("load_ohms") == load_ohms:
            return watts, e.id
    return None


def _opens(o: dict) -> dict:
    from benchkit.bench import opens_tones

    freqs = frequencies_of(o)
    if o["level"] and o["at_power"]:
        raise BenchkitError("give the levels as --level (drives) or as --at-power (output powers), not both")
    return opens_tones(o, freqs, keep=dict(freqs=freqs, powers=powers_of(o)))


def _drives_for(s, powers: list[float]) -> list[str]:
    """Each output power's drive, from the stage's gain measured by a probe
    at 1 kHz (or the nearest frequency played) and the scale at the stage."""
    from benchkit.bench import preflight

    volts = s.stage_volts_per_fs
    if not volts:
        raise BenchkitError("levels as output powers need volts at the stage: give --calibration or --volts-per-fs")
    probe = min(s.more["freqs"], key=lambda f: abs(math.log(f / 1000.0)))
    preflight(s, ["-40 dBFS"], probe, s.o["load"])
    gain_fs = s.plan.gain_fs
    return [f"{units.dbfs_from_peak(math.sqrt(2.0 * p * s.o['load']) / volts / gain_fs):.3f} dBFS" for p in powers]


def _prepare(s) -> dict:
    from benchkit.bench import preflight

    o, freqs, powers = s.o, s.more["freqs"], s.more["powers"]
    if powers is not None and not o["at_power"] and (o["rail"] is None or o["bias"] is None):
        logged = near_limit_from_log(s.book, o["load"])
        if logged is not None:  # the top level near the 1 % point a power run of this stage found
            top = NEAR_LIMIT_SHARE * logged[0]
            powers = s.more["powers"] = [p for p in powers if p < 0.8 * top] + [top]
            s.say(f"top level: {NEAR_LIMIT_SHARE:.0%} of the {units.quantity(logged[0], 'W', 3)} at the rated distortion "
                  f"of power run {logged[1]}")
    levels = _drives_for(s, powers) if powers else (o["level"] or list(DEFAULT_DRIVES))
    probe = min(freqs, key=lambda f: abs(math.log(f / 1000.0)))
    preflight(s, levels, probe, o["load"])
    if powers:
        s.say("levels: " + ", ".join(f"{units.quantity(p, 'W', 3)} at {d:.1f} dBFS" for p, d in zip(powers, s.drive)))
    return dict(channel=s.channel, frequencies_hz=freqs, levels_dbfs=s.drive, powers_w=powers, load_ohms=o["load"],
                bandwidth_hz=s.band)


def _measure(s, folder: Path) -> Measured:
    from benchkit.record import record_steps

    o, freqs, drives = s.o, s.more["freqs"], sorted(s.drive)
    cells = [(f, d) for d in drives for f in freqs]  # each level across the band, the quietest first
    path = record_steps(s.backend, folder, [f for f, _d in cells], [d for _f, d in cells], channel=s.channel,
                        step_s=[max(STEP_MIN_S, STEP_PERIODS / f) for f, _d in cells],
                        settle_s=[max(SETTLE_MIN_S, SETTLE_PERIODS / f) for f, _d in cells],
                        extra={"grid": {"frequencies_hz": freqs, "levels_dbfs": drives, "powers_w": s.more["powers"]}},
                        **s.stored())
    result = _analysed(read_capture(path, s.channel), s.band, o["load"], s.more["powers"], traces=False)
    return Measured(result, f"{units.count(len(freqs), 'frequency', 'frequencies')} x "
                            f"{units.count(len(drives), 'level')}, {units.count(len(result.steps.steps), 'cell')}")


#: the command's help
ABOUT = """Measure THD+N, THD, H2 and H3 across frequency at several levels, in one stream.

    Each level is stepped across the band (a third of an octave apart
    from 20 Hz to 20 kHz by default; --at or --span and --per-octave),
    every cell settled and analysed alone. Levels are drives (--level) or
    output powers into --load (--at-power, from the stage's measured gain);
    with a load and a scale and no level given: 0.1 W, 1 W and 80 % of
    the stage's largest clean sine (its budget, from --rail and --bias) or
    of the power at 1 % the newest logged power run into that load found.

    Example: benchkit grid --load 8 --rail 24 --bias 0.8 --tag bias=0.8A

    Safety: the top level drives the stage near clipping at every
    frequency, the highest too: use a dummy load rated for the power, never
    a speaker (tweeters burn first), and mind the heat sink. Ctrl-C fades
    the output to silence and keeps the partial capture.
    """

#: how it measures on a bench: the command's options (benchkit.options) and help
ON_BENCH = Live(
    _opens, _prepare, _measure,
    options="span per_octave at at_power load bandwidth ref_channel bias vsat json",
    defaults=dict(level=[], span="20:20000"),
    helps=dict(level="Drive levels at the interface output, e.g. -20dBFS or 0.1Vrms (repeat for each level)."),
    about=ABOUT,
)

KIND = Kind("grid", reanalyse, GridParams, summary, reports, figures=grid_figures, overlay=overlay, recognises=recognises,
            analyse=analyse, live=ON_BENCH, rank=85)
