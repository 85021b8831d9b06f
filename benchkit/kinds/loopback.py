"""Loopback: the interface's self-test, its output wired straight to its
input (a Y lead to a second input for the channel match), no stage.

A run records five kinds of capture into its folder, each on disk before
anything is analysed:

- ``levels.wav``: 997 Hz stepped from -60 dBFS to the drive cap: the
  residual THD+N, THD, H2, H3 against level;
- ``response.wav``: stepped sines from 20 Hz to 20 kHz (below 0.45 of
  the rate) at -10 dBFS: the response re 1 kHz of each input, and the two
  inputs against each other;
- ``noise.wav``: silence played: the noise floor over the band,
  unweighted and A-weighted;
- ``start1.wav`` ...: short captures, each a new start of the stream: the
  round trip each time and its spread;
- ``stream.wav``: one steady tone for ``--duration`` seconds (a minute by
  default): the faults the stream reports and the gaps heard in the tone.

With ``--calibration PROFILE`` the interface's floor (residual THD+N
against level, noise) is stored in the profile: every later run with it
states the floor and marks a figure within 6 dB of it.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from datetime import datetime, timezone
from pathlib import Path

from benchkit.analysis.loopback import analyze_loopback, loopback_figures, LoopbackResult
from benchkit.analysis.tone import analyze_tone
from benchkit.errors import BenchkitError
from benchkit.kinds import Kind, Live, Measured, RunParams
from benchkit.kinds.watch import block_seconds, SteadyTone

#: the tone of the level steps, the starts and the long stream
FREQ_HZ = 997.0
#: the levels stepped (those above the drive cap are not played), dBFS
LEVELS_DBFS = (-60.0, -50.0, -40.0, -30.0, -20.0, -12.0, -6.0, -3.0, -1.0)
#: the response's frequencies (ISO 266 octave and third-octave points), Hz, and its level
RESPONSE_HZ = (20.0, 31.5, 50.0, 100.0, 200.0, 500.0, 1000.0, 2000.0, 5000.0, 10000.0, 16000.0, 20000.0)
RESPONSE_DBFS = -10.0
#: the level of the starts and the long stream, dBFS
STREAM_DBFS = -20.0
#: seconds of silence for the noise floor
NOISE_S = 3.0
#: the longest stream checked, seconds (only its last seconds are held)
LONGEST_S = 3600.0


@dataclass(frozen=True)
class LoopbackParams(RunParams):
    """What a self-test plays and how it is analysed (run.json's ``params``)."""

    channel: int = 1
    other_channel: int | None = None
    levels_dbfs: tuple[float, ...] | None = None
    response_hz: tuple[float, ...] | None = None
    starts: int = 5
    stream_s: float = 60.0
    bandwidth_hz: tuple[float, float] | None = (20.0, 20000.0)


def _read(folder: Path, stem: str, channel: int):
    from benchkit.recordings import read_capture

    path = folder / f"{stem}.wav"
    if not path.is_file():
        raise BenchkitError(f"{folder}: the self-test's {stem} capture is missing")
    return read_capture(path, channel)


def analyse_folder(folder: Path, p: LoopbackParams) -> LoopbackResult:
    """The self-test from the captures its run folder holds."""
    from benchkit.kinds.noise import analyze_noise_capture
    from benchkit.kinds.tone import analyze_steps

    band = p.band()
    ch = int(p.channel or 1)
    levels = analyze_steps(_read(folder, "levels", ch), band)
    first = [st.result for st in analyze_steps(_read(folder, "response", ch), None).steps]
    second = None
    if p.other_channel is not None:
        second = [st.result for st in analyze_steps(_read(folder, "response", p.other_channel), None).steps]
    noise = analyze_noise_capture(_read(folder, "noise", ch), band)  # (None: the full band, as the levels)
    latencies = [int(_read(folder, f"start{k}", ch).sidecar["latency_samples"]) for k in range(1, p.starts + 1)]
    stream = _read(folder, "stream", ch).sidecar  # (found as it streamed: the stream's reports are in no recording)
    start = _read(folder, "start1", ch).sidecar
    # volts at the interface's own input (no pad in a loopback): the profile's input scale, or the simulated interface's
    cal = start.get("calibration") or {}
    scale = cal.get("input_vpk_per_fs") or ((start.get("bench") or {}).get("interface") or {}).get("input_vpk_per_fs")
    return analyze_loopback(
        [(st.drive_dbfs, st.result) for st in levels.steps], first, other=second, noise=noise,
        latencies_samples=latencies, stream_s=p.stream_s, faults_reported=len(stream.get("faults") or []),
        gaps_heard_s=stream.get("gaps_heard_s") or [], channel=ch,
        other_channel=p.other_channel, volts_per_fs=scale, calibration=cal or None,
        conditions={"frequency_hz": FREQ_HZ, "levels_dbfs": [st.drive_dbfs for st in levels.steps],
                    "stream_dbfs": STREAM_DBFS, "starts": p.starts,
                    "method": "stepped tones, sine fit; silence for the noise (IEC 61672-1 A-weighting); "
                              "marker alignment at each start"})


def summary(result: LoopbackResult, title: str) -> str:
    from benchkit.report import loopback as report

    return report.loopback_summary(result.to_dict(), title)


def reports(result: LoopbackResult, folder: Path, channel: int = 1, **options) -> list[Path]:
    from benchkit.report import loopback as report

    return report.loopback_reports(result.to_dict(), folder)


def reanalyse(folder: Path, record: dict, say) -> tuple[dict, list[Path]]:
    result = analyse_folder(folder, LoopbackParams.from_dict(record.get("params")))
    return result.to_dict(), reports(result, folder)


def overlay(comparison, docs: list[dict], entries, out: Path, title: str) -> list[Path]:
    """Each self-test's residual THD+N against the input level."""
    from benchkit.kinds import series_from_csv
    from benchkit.report import overlays

    series = [series_from_csv(e.folder, "loopback.levels.csv", "level_dbfs", "thdn_db") for e in entries]
    return [overlays.lines_png(series, comparison.labels, out / "overlay.png", f"{title}: the interface's residual",
                               comparison.warnings, "level at the input (dBFS)", "THD+N (dB)", False)]


# --- on the bench ----------------------------------------------------------------


def _opens(o: dict) -> dict:
    from benchkit.bench import at_most, given_band

    at_most(o, "duration", LONGEST_S, "a stream checked for dropouts")
    if o.get("sim_stereo"):
        raise BenchkitError("the self-test tests the interface alone: no stereo stage (--sim-stereo) in a loopback")
    if o["starts"] < 2:
        raise BenchkitError("--starts must be at least 2: the round trip's spread needs two starts")
    return dict(ref=o["ref_channel"], within=(("--bandwidth", given_band(o["bandwidth"])),))


def _prepare(s) -> dict:
    o, b = s.o, s.backend
    other = o["ref_channel"] if o["ref_channel"] is not None else b.reference_input()
    s.more["levels"] = [x for x in LEVELS_DBFS if x <= b.drive_cap_dbfs + 1e-9]
    s.more["response"] = [f for f in RESPONSE_HZ if f < 0.45 * b.sample_rate_hz]
    s.more["response_dbfs"] = min(RESPONSE_DBFS, b.drive_cap_dbfs)
    if not b.capabilities.simulated and not o["yes"]:
        s.ask("disconnect the stage; wire the output straight to the input"
              + (f" and, with a Y lead, to input {other}" if other else "") + ", then press Enter")
    skipped = [x for x in LEVELS_DBFS if x not in s.more["levels"]]
    if skipped:
        s.say(f"levels above the drive cap ({b.drive_cap_dbfs:g} dBFS) not played: {', '.join(f'{x:g}' for x in skipped)} "
              "dBFS (raise the cap with --drive-cap to read the interface near full scale: into a loopback only)")
    s.more["params"] = dict(channel=s.channel, other_channel=other, levels_dbfs=s.more["levels"],
                            response_hz=s.more["response"], starts=o["starts"], stream_s=o["duration"], bandwidth_hz=s.band)
    return s.more["params"]


class StreamCheck(SteadyTone):
    """A steady tone streamed for ``seconds``, each stretch of it checked
    for gaps as it comes back (a stream that listens: only its last
    seconds are held, so a long check costs no memory; the virtual bench
    runs it as fast as it can, a real stream at its own pace). A stretch
    the stream reported a fault in is not searched for gaps: the report
    explains it."""

    realtime = False
    keep_s = 2.0

    def __init__(self, seconds: float, rate: float, in_channel: int, out_channel: int, n_out: int):
        block = block_seconds(FREQ_HZ)
        super().__init__(FREQ_HZ, STREAM_DBFS, rate, None, in_channel, out_channel, n_out, max_s=seconds + 1.0,
                         update_s=block)
        self.on_reading = lambda _reading: None
        self.gaps_s: list[float] = []
        self.checked_s = 0.0
        self.description["purpose"] = "dropout check"

    def analyse(self, x, t_s: float, disturbed: bool = False):
        self.checked_s += x.size / self.sample_rate_hz
        if disturbed:
            return None
        try:
            gaps = analyze_tone(x, self.sample_rate_hz, fundamental_hz=FREQ_HZ, bandwidth_hz=None,
                                check_dropouts=True).dropouts_s
        except BenchkitError:  # no tone in this stretch: the whole of it is a gap
            gaps = [0.0]
        start = t_s - x.size / self.sample_rate_hz
        self.gaps_s += [start + g for g in gaps]
        return None

    def faults(self) -> list[tuple[int, int]]:
        """The stream's reported faults, those within a block of each other merged (one dropout reports
        an overflow and an underflow), as spans of raw frames."""
        merged: list[list[int]] = []
        for a, b in sorted(self._faults):
            if merged and a <= merged[-1][1] + self.block_n:
                merged[-1][1] = max(merged[-1][1], b)
            else:
                merged.append([a, b])
        return [(a, b) for a, b in merged]


def _stream(s, folder: Path, seconds: float) -> None:
    """The dropout check: its recording (``stream.wav``, raw) and what it
    found (its sidecar: the faults reported, the gaps heard) on disk."""
    from benchkit.recordings import write_capture_sidecar

    b = s.backend
    check = StreamCheck(seconds, b.sample_rate_hz, s.channel, getattr(b, "drive_output", 1), b.n_outputs)
    partial = folder / "stream.partial.wav"
    raw = b.play_record(check, partial)
    audio = partial.with_name("stream.wav")
    partial.rename(audio)
    write_capture_sidecar(audio, {"sample_rate_hz": b.sample_rate_hz, "device": b.name, "stimulus": check.description,
                                  "channels": [c.to_dict() for c in b.inputs()], "events": list(raw.events),
                                  "note": "raw, unaligned recording of the self-test's dropout check",
                                  "stream_s": seconds, "checked_s": round(check.checked_s, 3),
                                  "faults": [list(f) for f in check.faults()], "gaps_heard_s": check.gaps_s})


def _measure(s, folder: Path) -> Measured:
    from benchkit.kinds.noise import record_silence
    from benchkit.record import record_steps

    b = s.backend
    params = LoopbackParams.from_dict(s.more["params"])
    wired = getattr(b, "wiring", None)
    try:
        if b.capabilities.simulated:
            b.wiring = "loopback"
        kw = dict(channel=s.channel, **s.stored())
        s.say(f"levels: {len(params.levels_dbfs)} steps at {FREQ_HZ:g} Hz")
        record_steps(b, folder, FREQ_HZ, list(params.levels_dbfs), name="levels", step_s=0.5, settle_s=0.2, **kw)
        s.say(f"response: {len(params.response_hz)} frequencies at {s.more['response_dbfs']:g} dBFS")
        record_steps(b, folder, list(params.response_hz), [s.more["response_dbfs"]] * len(params.response_hz), name="response",
                     step_s=0.3, settle_s=0.15, **kw)
        s.say(f"noise: {NOISE_S:g} s of silence")
        record_silence(b, folder, NOISE_S, s.channel, s.labels.get("note", ""), s.profile, s.calibration_file, "noise")
        s.say(f"round trip: {params.starts} starts of the stream")
        for k in range(1, params.starts + 1):
            record_steps(b, folder, FREQ_HZ, [STREAM_DBFS], name=f"start{k}", step_s=0.1, settle_s=0.05, **kw)
        s.say(f"dropouts: {params.stream_s:g} s of streaming")
        _stream(s, folder, params.stream_s)
    finally:
        if b.capabilities.simulated:
            b.wiring = wired
    result = analyse_folder(folder, params)
    if s.profile is not None and s.calibration_file:
        _store_floor(s, result, folder)
    return Measured(result, f"self-test of {b.name}: input {s.channel}"
                    + (f" (and input {params.other_channel})" if params.other_channel else ""))


def _store_floor(s, result: LoopbackResult, folder: Path) -> None:
    """The interface's floor into the calibration profile the run used."""
    from benchkit.calibration import save_profile

    from benchkit.interface_floor import problem

    floor = result.floor(f"loopback run {folder.name}", datetime.now(timezone.utc).isoformat(timespec="seconds"))
    why = problem(floor)
    if why:  # (a profile that would not load again is not written)
        s.say(f"warning: the interface's floor was not stored in {s.calibration_file}: {why}")
        return
    save_profile(replace(s.profile, interface_floor=floor), s.calibration_file)
    s.say(f"stored the interface's floor in {s.calibration_file}: later runs with it state it and mark figures "
          "within 6 dB of it")


#: the command's help
ABOUT = """Test the interface alone, output wired to input: residual THD+N against level, noise floor, response, channel match, round trip, dropouts.

    Wire the output straight to the measuring input (a Y lead to a second
    input, --ref-channel, adds the channel match); no stage, no pad. The
    run steps a 997 Hz tone from -60 dBFS to the drive cap, steps sines
    from 20 Hz to 20 kHz, records silence for the noise floor (unweighted
    and A-weighted), starts the stream --starts times to see whether the
    round trip stays put, and streams a tone for --duration seconds to
    count dropouts. With --calibration the floor is stored in the profile:
    later runs state it and mark any figure within 6 dB of it.

    Example: benchkit loopback --calibration calibration/my-interface.json --duration 60

    Safety: disconnect the stage first; an output looped into an input
    cannot hurt either at these levels, but mind the input's maximum if
    you raise the drive cap.
    """

#: how it measures on a bench: the command's options (benchkit.options) and help
ON_BENCH = Live(
    _opens, _prepare, _measure,
    options="ref_channel bandwidth starts yes json",
    defaults=dict(duration=60.0),
    helps=dict(duration="Seconds of steady tone streamed to count dropouts (a minute by default)."),
    about=ABOUT,
)

KIND = Kind("loopback", reanalyse, LoopbackParams, summary, reports, figures=loopback_figures, overlay=overlay,
            live=ON_BENCH, rank=90)
