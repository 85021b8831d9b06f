"""Zout: the stage's output impedance and damping factor, from the same
tones played with the load off and then on.

A run: the same tones (one a frequency) played with the
stage unloaded and then loaded, both captures stored, then analysed from
disk (:mod:`benchkit.analysis.zout`); or two logged runs (tone, gain or
sweep runs, one unloaded and one loaded) taken from their stored results.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Callable, ClassVar


from benchkit.analysis.tone import DEFAULT_BAND_HZ
from benchkit.analysis.uncertainty import Chain
from benchkit.analysis.zout import analyze_zout, phasor, Reading, zout_figures, ZoutResult
from benchkit.errors import BenchkitError
from benchkit.kinds import Analysed, Kind, Live, Measured, RunParams
from benchkit.recordings import read_capture, Takes


#: The frequencies a run reads by default, Hz: the low end, where a
#: coupling capacitor's reactance shows, the middle and the top; clear of
#: the mains and its harmonics (50/60 Hz, the ripple at 100/120 Hz).
DEFAULT_FREQS_HZ = (20.0, 40.0, 70.0, 997.0, 10000.0, 20000.0)
#: What a capture of each state is called in the run folder.
STATES = ("open", "loaded")


def readings_of_capture(path: Path, channel: int = 1, ref_channel: int | None = None,
                        bandwidth_hz=DEFAULT_BAND_HZ) -> list[Reading]:
    """Each step of a stepped capture as a reading: the output over the
    reference input with its phase (the sidecar's reference by default),
    else the output's level. In FS: the readings are compared as ratios,
    so the scales (the same in both) cancel."""
    from benchkit.analysis.tone import analyze_tone
    from benchkit.kinds.tone import analyze_steps

    rec = read_capture(path, channel)
    steps = analyze_steps(rec, bandwidth_hz)
    if ref_channel is None:
        ref_channel = next((c["number"] for c in rec.sidecar.get("channels") or []
                            if str(c.get("role", "")).startswith("reference")), None)
    def rel(*results) -> float | None:  # fitted levels' type-A relative uncertainty, root-sum-square
        got = [r.level_rel_u for r in results]
        return None if any(u is None for u in got) else math.hypot(*got)

    if ref_channel is None:
        return [Reading(s.result.fundamental_hz, complex(s.result.fundamental_fs), s.drive_dbfs, s.result.valid,
                        rel_u=rel(s.result)) for s in steps.steps]
    out = []
    takes = Takes(rec)
    for seg, s in zip(rec.sidecar["stimulus"]["segments"], steps.steps):
        r = analyze_tone(takes.step(seg, ref_channel), rec.sample_rate_hz,
                         fundamental_hz=s.result.fundamental_hz, bandwidth_hz=bandwidth_hz)
        phase = s.result.fundamental_phase_deg - r.fundamental_phase_deg
        out.append(Reading(s.result.fundamental_hz, phasor(s.result.fundamental_fs / r.fundamental_fs, phase),
                           s.drive_dbfs, s.result.valid and r.valid, True, rel(s.result, r)))
    return out


def readings_of_result(doc: dict) -> list[Reading]:
    """The stage's output readings a stored result holds, by its kind: a
    gain run's gain, a tone run's step levels, a sweep's response in V/V."""
    from benchkit import kinds
    from benchkit.analysis.documents import upgrade

    doc = upgrade(doc)
    kind = kinds.of_result(doc)
    if kind is None or kind.readings is None:
        raise BenchkitError(f"a {doc.get('kind')} result holds no output levels to compare: use tone, gain or sweep "
                            "runs")
    return kind.readings(doc)


def zout_of_captures(folder: Path, load_ohms: float, open_load_ohms: float | None, channel: int = 1,
                     ref_channel: int | None = None, bandwidth_hz=DEFAULT_BAND_HZ) -> ZoutResult:
    """The output impedance from a run folder's open.wav and loaded.wav
    (recovered from their partial recordings when the run was killed)."""
    from benchkit.record import recover_capture

    got = []
    for state in STATES:
        path = folder / f"{state}.wav"
        if not path.exists():
            path = recover_capture(folder, state)
        got.append(readings_of_capture(path, channel, ref_channel, bandwidth_hz))
    rec = read_capture(folder / f"{STATES[0]}.wav")
    return replace(analyze_zout(got[0], got[1], load_ohms=load_ohms, open_load_ohms=open_load_ohms,
                                load_rel=rec.chain().load), calibration=rec.sidecar.get("calibration"))


def zout_run(backend, folder: Path, load_ohms: float, frequencies_hz, level_dbfs: float,
             switch: Callable[[float | None], None], open_load_ohms: float | None, channel: int = 1,
             ref_channel: int | None = None, note: str = "", calibration=None, calibration_file: str | None = None,
             warnings: tuple[str, ...] = ()) -> ZoutResult:
    """Play one tone a frequency with the load off (``switch(None)``), then
    with it on (``switch(load_ohms)``); store both captures, then analyse
    them from disk."""
    from benchkit.record import record_steps

    freqs = [float(f) for f in frequencies_hz]
    for state, load in zip(STATES, (None, load_ohms)):
        switch(load)
        record_steps(backend, folder, freqs, [level_dbfs] * len(freqs), name=state, channel=channel, note=note,
                     calibration=calibration, calibration_file=calibration_file, warnings=warnings,
                     step_s=max(0.5, 20.0 / min(freqs)), settle_s=max(0.3, 5.0 / min(freqs)))
    return zout_of_captures(folder, load_ohms, open_load_ohms, channel, ref_channel)


def summary(result, title: str) -> str:
    from benchkit.report import zout as report

    return report.zout_summary(result.to_dict(), title)


def reports(result, folder: Path, channel: int = 1, **options) -> list[Path]:
    from benchkit.report import zout as report

    return report.zout_reports(result, folder, folder)


def analyse_pair(open_path: Path, loaded_path: Path, channel: int, ref_channel: int | None, bandwidth_hz,
                 load_ohms: float, open_load_ohms: float | None) -> Analysed:
    """Output impedance from two captures (``analyze --zout``): benchkit's
    stepped ones (each step a reading: a gain with its phase over the
    reference input), or single tones made elsewhere (their levels)."""
    from benchkit.analysis.tone import analyze_tone
    from benchkit.kinds.tone import is_stepped
    from benchkit.report import zout as report

    got = []
    for path in (open_path, loaded_path):
        rec = read_capture(path, channel)
        if is_stepped(rec):
            got.append(readings_of_capture(Path(path), channel, ref_channel, bandwidth_hz))
        else:
            r = analyze_tone(rec.samples, rec.sample_rate_hz, bandwidth_hz=bandwidth_hz)
            got.append([Reading(r.fundamental_hz, complex(r.fundamental_fs), None, r.valid,
                                rel_u=r.level_rel_u)])
    result = analyze_zout(got[0], got[1], load_ohms=load_ohms, open_load_ohms=open_load_ohms,
                          load_rel=read_capture(open_path, channel).chain().load)
    doc = {**result.to_dict(), "files": [str(open_path), str(loaded_path)]}
    return Analysed(doc, report.zout_summary(doc, f"output impedance: {open_path} (open), {loaded_path} (loaded)"),
                    lambda out: report.zout_reports(result, Path(loaded_path).parent, out))


@dataclass(frozen=True)
class ZoutParams(RunParams):
    """The load switched in, what loads the open output, the tones; or the
    two logged runs it was made from (run.json's ``params``)."""

    channel: int = 1
    ref_channel: int | None = None
    load_ohms: float | None = None
    open_load_ohms: float | None = None
    frequencies_hz: tuple[float, ...] = ()
    level_dbfs: float | None = None
    from_runs: tuple[str, ...] | None = None
    STORED_AS: ClassVar[dict[str, str]] = {"from_runs": "from"}


def reanalyse(folder: Path, record: dict, say) -> tuple[dict, list[Path]]:
    p = ZoutParams.from_dict(record.get("params"))
    load, open_load = float(p.load_ohms), p.open_load_ohms
    if p.from_runs:  # made from two logged runs: the copies of their results it keeps
        from benchkit.jsonfile import load_json

        docs = [load_json(folder / f"{state}.result.json") for state in ("open", "loaded")]
        result = analyze_zout(*(readings_of_result(d) for d in docs), load_ohms=load, open_load_ohms=open_load,
                              load_rel=Chain.load_rel(None))
    else:
        result = zout_of_captures(folder, load, open_load, int(p.channel or 1), p.ref_channel)
    return result.to_dict(), reports(result, folder)


# --- on the bench ----------------------------------------------------------------


def _opens(o: dict) -> dict:
    return dict(ref=o["ref_channel"], load=o["load"], within=(("--freq", o["freq"], DEFAULT_BAND_HZ),))


def _open_load(s) -> float | None:
    """What loads the "open" output: as given, else the virtual bench's pad
    and input, else the calibration's pad; None: taken as open."""
    if s.o["open_load"] is not None:
        return s.o["open_load"]
    ohms = s.backend.pad_input_ohms()
    pad = s.profile.pad if s.profile is not None else None
    if ohms is None and pad is not None and pad.pad() is not None:
        ohms = pad.pad().input_impedance(pad.input_ohms or float("inf"))
    return ohms


def _prepare(s) -> dict:
    from benchkit.bench import preflight

    o = s.o
    s.ref_channel = o["ref_channel"] if o["ref_channel"] is not None else s.backend.reference_input()
    preflight(s, [o["level"]], 1000.0, o["load"], volts=False)
    s.more["open_load"] = _open_load(s)
    return dict(channel=s.channel, ref_channel=s.ref_channel, load_ohms=o["load"], open_load_ohms=s.more["open_load"],
                frequencies_hz=list(o["freq"]), level_dbfs=s.drive[0])


def _measure(s, folder: Path) -> Measured:
    def switch(ohms):
        if s.backend.capabilities.switchable_load:
            s.backend.connect_load(ohms)
        elif not s.o["yes"]:
            s.ask(f"{'disconnect the load' if ohms is None else f'connect the {ohms:g} ohm load'} (no tone is "
                  "playing), then press Enter")

    result = zout_run(s.backend, folder, s.o["load"], s.o["freq"], s.drive[0], switch, s.more["open_load"], s.channel,
                      s.ref_channel, s.labels.get("note", ""), s.profile, s.calibration_file, s.warnings)
    return Measured(result, "output impedance")


def from_runs(o: dict, say, tell=None):
    """The output impedance from two logged runs' stored results (--from:
    the unloaded one, then the loaded one), filed as a run of its own with
    copies of the two results, for reanalysis; None without --from."""
    from benchkit.bench import bench_logbook, finish, start_run
    from benchkit.compare_runs import stored_result
    from benchkit.report.tables import write_json

    if not o["from_runs"]:
        return None
    if len(o["from_runs"]) != 2:
        raise BenchkitError("--from takes two runs: the unloaded one, then the loaded one")
    with bench_logbook(o) as (book, labels):
        entries = [book.entry(r) for r in o["from_runs"]]
        docs = [stored_result(book, e)[1] for e in entries]
        result = analyze_zout(*(readings_of_result(d) for d in docs), load_ohms=o["load"], open_load_ohms=o["open_load"],
                              load_rel=Chain.load_rel(None))
        params = {"from": [e.id for e in entries], "load_ohms": o["load"], "open_load_ohms": o["open_load"]}
        with start_run(book, labels, "zout", "logbook", None, None, params, say) as run:
            copies = [write_json(d, run.folder / f"{state}.result.json") for d, state in zip(docs, ("open", "loaded"))]
            title = f"output impedance from {entries[0].id} (open) and {entries[1].id} (loaded)"
            return finish(run, KIND, Measured(result, title, files=tuple(copies)), say, tell=tell)


#: the command's help
ABOUT = """Measure the stage's output impedance and damping factor: the output unloaded, then loaded.

    The same tones (one a --freq) play twice at one level: with the load
    disconnected, then connected; Zout = R (V_open / V_loaded - 1), with
    the pad's own loading of the "open" output taken into account when it
    is known, and the damping factor R / |Zout|. With a reference input
    the readings are complex, so a capacitor's reactance at low
    frequencies shows as such. --from takes two logged runs instead (two
    sweeps give Zout across frequency).

    Example: benchkit zout --load 8 --tag bias=1.2A

    Safety: switch the load only while no tone plays (benchkit waits for
    you between the two readings). A stage with an output transformer
    (valve amplifiers) must not run unloaded: do not use this on one.
    """

#: how it measures on a bench: the command's options (benchkit.options) and help
ON_BENCH = Live(
    _opens, _prepare, _measure,
    options="level ref_channel open_load from_runs yes json",
    defaults=dict(load=..., freq=list(DEFAULT_FREQS_HZ)),
    helps=dict(load="The dummy load switched on for the loaded reading, ohms (the damping factor is quoted against it)."),
    about=ABOUT,
    other=from_runs,
)

KIND = Kind("zout", reanalyse, ZoutParams, summary, reports, figures=zout_figures, live=ON_BENCH)
