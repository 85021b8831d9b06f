"""Drift: a DC voltage (the operating point) logged while the stage warms,
how far and how fast it moves, and when it settles.

A run reads a DC source at an interval and streams every reading to a
CSV on disk as it comes (flushed row by row, so Ctrl-C or a crash keeps
all of it), with memory flat however long it runs; then analyses the CSV.
"""

from __future__ import annotations

import time
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

import numpy as np

from benchkit.analysis.drift import analyze_drift, drift_figures, drift_rate_v_per_s, DriftResult, fit_settling
from benchkit.errors import BenchkitError
from benchkit.kinds import Analysed, Kind, Live, Measured, Offline, RunParams
from benchkit.meters import read_drift_csv, SourceLost


#: Readings kept in memory for the live estimate (thinned by halves when full).
LIVE_POINTS = 4096
#: How often the live line refits the settling, readings.
REFIT_EVERY = 10


class _Reservoir:
    """Every reading until full, then every second one, and so on: a
    bounded picture of the whole log for the live estimate."""

    def __init__(self, size: int = LIVE_POINTS):
        self.size, self.keep_every, self.seen = size, 1, 0
        self.t: list[float] = []
        self.v: list[float] = []

    def add(self, t: float, v: float) -> None:
        if self.seen % self.keep_every == 0:
            self.t.append(t)
            self.v.append(v)
            if len(self.t) >= self.size:
                self.t, self.v = self.t[::2], self.v[::2]
                self.keep_every *= 2
        self.seen += 1


@dataclass(frozen=True)
class LogEnd:
    """How a log ended: "duration", "settled", "interrupted" or "lost"."""

    how: str
    message: str = ""


def log_drift(
    source,
    csv_path: Path,
    interval_s: float,
    duration_s: float | None = None,
    until_settled: bool = False,
    band_v: float = 1e-3,
    window_s: float = 60.0,
    say: Callable[[str], None] = lambda _m: None,
    clock: Callable[[], float] = time.monotonic,
    sleep: Callable[[float], None] = time.sleep,
    current=None,
) -> LogEnd:
    """Read ``source`` every ``interval_s`` into ``csv_path`` until the
    duration is up, it has settled within ``band_v`` (``until_settled``),
    Ctrl-C, or the source goes away. A source with ``accelerated`` > 0 is
    simulated: no waiting, ``accelerated`` x ``interval_s`` of its own
    time per reading. ``current``, a second meter reading amps (the
    supply's draw), adds an ``amps`` column."""
    if interval_s <= 0:
        raise BenchkitError("the interval must be positive")
    if duration_s is None and not until_settled:
        raise BenchkitError("give --duration, --until-settled, or both")
    simulated = getattr(source, "accelerated", 0.0) > 0
    step = interval_s * (source.accelerated if simulated else 1.0)
    live = _Reservoir()
    try:
        fh = csv_path.open("w", newline="", encoding="utf-8")
    except OSError as exc:
        raise BenchkitError(f"cannot write {csv_path}: {exc.strerror or exc}") from None
    end = LogEnd("duration")
    with fh:
        fh.write("time_s,volts,amps\n" if current is not None else "time_s,volts\n")
        fh.flush()
        t0 = clock()
        k = 0
        try:
            while True:
                t = k * step if simulated else clock() - t0
                if duration_s is not None and t > duration_s + 1e-9:
                    break
                try:
                    v = source.read()
                    amps = "" if current is None else f",{current.read():.9g}"
                except SourceLost as exc:
                    end = LogEnd("lost", str(exc))
                    break
                fh.write(f"{t:.3f},{v:.9g}{amps}\n")
                fh.flush()
                live.add(t, v)
                k += 1
                if k % REFIT_EVERY == 0:
                    settled = _live_line(live, band_v, window_s, say)
                    if until_settled and settled:
                        end = LogEnd("settled")
                        break
                if simulated:
                    source.advance(step)
                else:
                    sleep(max(0.0, t0 + k * interval_s - clock()))
        except KeyboardInterrupt:
            end = LogEnd("interrupted", "interrupted")
    return end


def _live_line(live: _Reservoir, band_v: float, window_s: float, say) -> bool:
    """Say the latest value, the rate and the time to settle; whether the
    log has settled (the fit's settle time passed, the rate small)."""
    t, v = np.array(live.t), np.array(live.v)
    rate = drift_rate_v_per_s(t, v, window_s)
    fit = fit_settling(t, v, band_v)
    left = ""
    settled = False
    if fit is not None and fit.settle_s is not None:
        remaining = fit.settle_s - t[-1]
        settled = remaining <= 0 and abs(v[-1] - fit.final_v) <= band_v
        left = "settled" if settled else f"settles in about {remaining:.0f} s (to {fit.final_v * 1e3:.2f} mV)"
    rate_text = "" if rate is None else f", {rate * 60e3:+.3f} mV/min"
    say(f"  t {t[-1]:8.1f} s  {v[-1] * 1e3:10.3f} mV{rate_text}  {left}")
    return settled


def analyze_drift_csv(path: Path, time_col: str = "1", value_col: str = "2", limit_v: float | None = None,
                      band_v: float | None = None, window_s: float = 60.0, info: dict | None = None,
                      warnings: tuple[str, ...] = (), nominal_v: float = 0.0) -> DriftResult:
    """The drift figures of a CSV log on disk (benchkit's, or a logger's)."""
    t, v, notes = read_drift_csv(path, time_col, value_col)
    extra = {"file": str(path), **(info or {})}
    try:
        _t, amps, _n = read_drift_csv(path, time_col, "amps")
    except BenchkitError:
        amps = None  # no supply-current column
    if amps is not None:
        extra["supply_current_a"] = {"last": float(amps[-1]), "min": float(amps.min()), "max": float(amps.max()),
                                     "mean": float(amps.mean())}
    return analyze_drift(t, v, limit_v=limit_v, band_v=band_v, window_s=window_s, info=extra,
                         warnings=tuple(notes) + tuple(warnings), nominal_v=nominal_v)


LOG = "log.csv"


def summary(result, title: str) -> str:
    from benchkit.report import drift as report

    return report.drift_summary(result, title)


def reports(result, folder: Path, channel: int = 1, **options) -> list[Path]:
    from benchkit.report import drift as report

    return report.drift_reports(result, folder / LOG, folder)


@dataclass(frozen=True)
class DriftParams(RunParams):
    """What a drift log reads, how often, and how it is judged (run.json's ``params``)."""

    source: str | None = None
    limit_v: float | None = None
    band_v: float | None = None
    window_s: float | None = None
    nominal_v: float | None = None
    interval_s: float | None = None
    #: model seconds a reading interval stands for (the virtual source)
    accelerated: float | None = None


def reanalyse(folder: Path, record: dict, say) -> tuple[dict, list[Path]]:
    p = DriftParams.from_dict(record.get("params"))
    log = folder / LOG
    if not log.exists():
        raise BenchkitError(f"{folder}: the drift run has no {LOG}: it stopped before its first reading")
    result = analyze_drift_csv(log, limit_v=p.limit_v, band_v=p.band_v or 1e-3, window_s=p.window_s or 60.0,
                               nominal_v=p.nominal_v or 0.0,
                               info={"source": record.get("device"), "ended": "reanalysed", "accelerated": p.accelerated})
    return result.to_dict(), reports(result, folder)


def overlay(comparison, docs: list[dict], entries, out: Path, title: str) -> list[Path]:
    """Each run's readings against time."""
    from benchkit.report import drift as report

    series = [read_drift_csv(e.folder / LOG)[:2] for e in entries]
    return [report.drifts_png(series, comparison.labels, out / "overlay.png", f"{title}: DC drift",
                                comparison.warnings)]


def analyse(path: Path, o: Offline) -> Analysed:
    """A CSV log (benchkit's, or a logger's), its columns by name or number."""
    from benchkit.report import drift as report

    j = o.judge or {}
    result = analyze_drift_csv(path, o.time_col, o.value_col, j.get("dc_limit"), j.get("settle_band"),
                               j.get("window", 60.0), nominal_v=j.get("nominal", 0.0))
    return Analysed(result.to_dict(), report.drift_summary(result, f"{path}: drift"),
                    lambda out: report.drift_reports(result, path, out))


# --- on the bench ----------------------------------------------------------------


def _source(o: dict, profile, say):
    """Where the DC is read (--dc-source): the virtual stage's midpoint, a meter, or the measuring input."""
    from benchkit import meters

    if o["dc_source"] == "virtual":
        from benchkit.capture.stages import make_stage, parse_params

        return meters.VirtualMidpoint(make_stage("se-class-a", parse_params(o["sim_param"]), seed=o["seed"]),
                                      o["accelerate"], o["seed"])
    if o["dc_source"] == "meter":
        from benchkit.kinds.watch import check_dc_source

        check_dc_source("meter", o["meter"], None, profile)
        return meters.ScpiMeter(o["meter"])
    from benchkit.bench import open_backend

    backend = open_backend(o["device"], "ideal", [], "demo", o["seed"], say, dict(in_channel=o["in_channel"]))
    return meters.InterfaceDc(backend, profile, o["in_channel"])


def log(o: dict, say, tell=None):
    """A DC log on the bench its options describe (by key,
    benchkit.options), filed in the logbook: every reading written as it
    comes, then judged (its summary through ``tell``, default ``say``).
    Returns the filed run and how the log ended."""
    from benchkit import meters
    from benchkit.bench import bench_logbook, finish, start_run
    from benchkit.calibration import load_profile
    from benchkit.errors import BenchWarning

    virtual = o["dc_source"] == "virtual"
    step = o["interval"] * (o["accelerate"] if virtual else 1.0)  # the source's own seconds between readings
    if o["duration"] is not None and o["duration"] < 2 * step:
        raise BenchkitError(f"--duration {o['duration']:g} s holds fewer than two readings {step:g} s apart"
                            + (f" (--interval {o['interval']:g} s x --accelerate {o['accelerate']:g} on the virtual "
                               "source)" if virtual else "") + ": lengthen it or shorten --interval")
    with bench_logbook(o) as (book, labels):
        profile = load_profile(o["calibration"]) if o["calibration"] is not None else None
        reader = _source(o, profile, say)
        limit = o["dc_limit"]
        band = o["settle_band"] if o["settle_band"] is not None else (limit / 10 if limit else 1e-3)
        params = dict(source=o["dc_source"], limit_v=limit, band_v=band, window_s=o["window"], nominal_v=o["nominal"],
                      interval_s=o["interval"], accelerated=getattr(reader, "accelerated", 0.0) or None)
        with start_run(book, labels, "drift", reader.name, profile if o["dc_source"] == "input" else None,
                       o["calibration"], params, say) as run:
            path = run.folder / LOG
            amps = meters.ScpiMeter(o["current_meter"], quantity="amps") if o["current_meter"] else None
            say(f"source: {reader.name}; logging to {path}" + (f"; supply current: {amps.name}" if amps else ""))
            try:
                end = log_drift(reader, path, o["interval"], o["duration"], o["until_settled"], band, o["window"],
                                say=say, current=amps)
            finally:
                reader.close()
                if amps is not None:
                    amps.close()
            whole = end.how in ("duration", "settled")
            notes = () if whole else (BenchWarning("interrupted", f"the log stopped early: {end.message}"),)
            if end.how == "lost":
                say(f"benchkit: {end.message}: the log stopped; every reading so far is in {path}")
            result = analyze_drift_csv(path, limit_v=limit, band_v=band, window_s=o["window"], warnings=notes,
                                       info={"source": reader.name, "ended": end.how, "accelerated": params["accelerated"]},
                                       nominal_v=o["nominal"])
            got = Measured(result, f"{reader.name}: {end.how}", status="complete" if whole else "interrupted")
            return finish(run, KIND, got, say, tell=tell), end


#: the command's help
ABOUT = """Log the DC operating point as the stage warms: offset, drift rate, settling fit, verdict.

    Every reading goes to log.csv as it comes (Ctrl-C or a crash keeps them
    all); a live line shows the latest value, the rate and the estimated
    time to settle. The virtual source is the se-class-a stage's midpoint,
    its thermal model in accelerated time.

    Example: benchkit drift --dc-source meter --meter TCPIP::192.168.1.50::5025::SOCKET --interval 2 --until-settled --dc-limit 0.05

    Safety: probe a live, hot stage with one hand, with insulated probes,
    and mind the supply's stored charge; follow local codes for anything
    mains-powered.
    """

#: how it measures on a bench: a log over time, every run made by :func:`log`
ON_BENCH = Live(
    None, None, None,
    options="dc_source meter current_meter interval duration until_settled accelerate device in_channel calibration "
            "sim_param seed json",
    groups=("judge", "filing"),
    defaults=dict(dc_source="virtual"),
    helps=dict(current_meter="A meter reading the supply's DC current (its VISA resource), logged beside the volts."),
    about=ABOUT,
    other=lambda o, say, tell=None: log(o, say, tell)[0],
    over_time=True,
)

KIND = Kind("drift", reanalyse, DriftParams, summary, reports, figures=drift_figures, overlay=overlay, analyse=analyse,
            reads="csv", live=ON_BENCH)
