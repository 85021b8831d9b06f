"""Captures made elsewhere, filed in the logbook as runs of their kind
(``benchkit log file``).

Each capture is analysed first exactly as ``benchkit analyze`` analyses it
(:func:`benchkit.kinds.recognised`, then its kind's offline ``analyse``,
with the same options): a capture that cannot be read or analysed is
refused there, and nothing is filed. Then it is filed the way a live run
is (:func:`benchkit.bench.start_run`, then :func:`benchkit.bench.complete`):
a run of its kind, running, whose folder receives a copy of the capture
(``capture.wav``) and a sidecar that holds the scale it was filed with;
the run's result and report files are made from that copy by its kind's
``reanalyse``, the very path ``log reanalyse`` takes, so analysing it again
gives the same figures. A failure there marks the run failed, as a live
run's does.

A filed run says where it came from: its device is ``"file"``, and its
record's ``filed`` holds the original path, the file's SHA-256, the
SHA-256 of the copy stored in the run folder (``copy_sha256``, hashed
from the folder after the copy was written) and the scale used (volts
per FS given, or the calibration profile, whose file and digest the
record's ``calibration`` keeps as a live run's does). The copy is checked
against the original before the run is analysed: a WAV copied byte for
byte must hash as the original did when it was analysed (so ``sha256``
and ``copy_sha256`` agree); a capture in another format, rewritten as a
WAV, must hold the original's samples. A copy that fails the check fails
its run.

Several captures file one by one: one that cannot be filed (refused, or
an error of the file system while it is read or copied) is reported in
one line and the others are filed still.

A capture of one tone that benchkit did not write (no stepped sidecar) is
filed as a tone run of one step at the drive ``--level`` states, so that
its figures pair with a measured tone run's at that drive.
"""

from __future__ import annotations

import hashlib
import os
import shutil
from dataclasses import dataclass, fields
from pathlib import Path
from typing import Callable

from benchkit import kinds, units
from benchkit.errors import BenchkitError
from benchkit.logbook import FILED_DEVICE

#: the device a filed run names: a file made elsewhere, not measured here
DEVICE = FILED_DEVICE
#: the analysis options ``analyze`` has that filing does not take (their usual values)
NOT_TAKEN = "sweep imd out time_col value_col"


@dataclass(frozen=True)
class Prepared:
    """A capture analysed as ``analyze`` does, ready to file."""

    path: Path
    kind: kinds.Kind
    text: str
    sidecar: dict
    params: dict
    filed: dict


def sha256_of(path: Path) -> str:
    """The SHA-256 of a file's bytes, hex."""
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def copy_hashing(source: Path, dest: Path) -> str:
    """Copy ``source`` to ``dest`` byte for byte; the SHA-256 of the bytes
    read (and written), hex."""
    digest = hashlib.sha256()
    with open(source, "rb") as fin, open(dest, "wb") as fout:
        for block in iter(lambda: fin.read(1 << 20), b""):
            digest.update(block)
            fout.write(block)
        fout.flush()
        os.fsync(fout.fileno())
    return digest.hexdigest()


def offline_options(o: dict) -> kinds.Offline:
    """The offline analysis options, as ``analyze`` reads them, checked."""
    from benchkit.options import defaults

    if o["channel"] == "all":
        raise BenchkitError("--channel all: a filed run is one channel of a capture; give --channel N")
    return kinds.Offline.of({**defaults(NOT_TAKEN, "judge"), **o})


def prepare(path: Path, options: kinds.Offline, o: dict, say: Callable[[str], None]) -> Prepared:
    """Analyse one capture as ``analyze`` does (refusing what it cannot
    read or analyse), and work out what its run will hold: the sidecar of
    its copy, its kind's params, where it came from."""
    from benchkit.kinds.tone import is_stepped

    path = Path(path)
    if path.suffix.lower() == ".csv":
        raise BenchkitError(f"{path}: a table of readings, not a capture: 'log file' files WAV or FLAC captures")
    kind, rec = kinds.recognised(path, options, say)
    try:
        got = kind.analyse(rec, options)
    except BenchkitError as exc:
        asked = (kind.chosen is not None and kind.chosen(options)) or (kind.recognises is not None and kind.recognises(rec))
        if asked:
            raise
        raise BenchkitError(f"{exc}; no sidecar says what the capture holds, so it was read as one tone: "
                            "--as noise, gain or power says what else it is") from None
    scale, source = options.scale(rec)
    if scale is None:
        raise BenchkitError(f"{path}: no scale: state the volts at the stage with --volts-per-fs or --calibration "
                            "(its sidecar gives none)")
    side = {k: v for k, v in rec.sidecar.items() if k not in ("kind", "schema_version")}
    side.setdefault("sample_rate_hz", rec.sample_rate_hz)
    if options.volts_per_fs is not None:  # the scale given, where the copy's analysis (and reanalyse) reads it
        side["scale_source"] = "given"
        side["channels"] = [c for c in side.get("channels") or [] if isinstance(c, dict)
                            and c.get("number") != rec.channel] + [{"number": rec.channel, "volts_per_fs": scale}]
    drive = None
    if kind.name == "tone" and not is_stepped(rec):
        drive = one_step(side, rec, got.doc, o.get("level"), options, path)
    filed = {"from": str(path.resolve()), "sha256": sha256_of(path), "volts_per_fs": scale, "scale_source": source}
    side["filed_from"] = {"file": filed["from"], "sha256": filed["sha256"]}
    return Prepared(path, kind, got.text, side, params_for(kind, side, rec.sample_rate_hz, options, o, drive), filed)


def one_step(side: dict, rec, doc: dict, level, options: kinds.Offline, path: Path) -> float:
    """A capture of one tone described in its copy's sidecar as stepped
    tones of one step, the whole capture, at the frequency its analysis
    found and the drive ``level`` states (dBFS, or volts through the
    profile's output scale); returns that drive, dBFS."""
    if level is None:
        raise BenchkitError(f"{path} holds one tone made elsewhere: give --level, the drive it was made at (e.g. "
                            "-20dBFS), so that it files as a step that pairs with measured tone runs at that drive")
    out_scale = options.profile.output_vpk_per_fs if options.profile is not None else None
    drive = units.parse_level(level).to_dbfs(out_scale)
    if drive > 0.0:
        raise BenchkitError(f"--level {level} is a drive of {drive:+.1f} dBFS, above full scale: no output plays that")
    f = float(doc["fundamental_hz"])
    n = int(rec.samples.size)
    side["stimulus"] = {"kind": "stepped-tones", "frequency_hz": f, "levels_dbfs": [drive],
                        "step_s": n / rec.sample_rate_hz, "settle_s": 0.0, "made": "elsewhere: one tone, filed as one step",
                        "segments": [{"start": 0, "stop": n, "settled": 0, "end": n, "frequency_hz": f,
                                      "level_dbfs": drive}]}
    return drive


def params_for(kind: kinds.Kind, side: dict, rate: float, options: kinds.Offline, o: dict, drive: float | None) -> dict:
    """What the filed run's record stores as ``params``: the options the
    capture was analysed with, by the names its kind's RunParams gives
    them (the band kept when 'full': None is a value there)."""
    stim = side.get("stimulus") if isinstance(side.get("stimulus"), dict) else {}
    load = options.load_ohms
    given = dict(channel=options.channel, load_ohms=load, averages=options.averages, ref_channel=options.ref_channel,
                 ref_freq_hz=options.ref_freq_hz, smooth=options.smooth, sample_rate_hz=rate,
                 frequency_hz=stim.get("frequency_hz") if not isinstance(stim.get("frequency_hz"), list) else None,
                 levels_dbfs=stim.get("levels_dbfs"), step_s=stim.get("step_s"))
    if drive is not None:
        given.update(frequency_hz=stim["frequency_hz"], levels_dbfs=[drive])
    if options.power is not None:
        p = options.power
        given.update(metric=p["metric"], limits_pct=list(p["limits_pct"]), onset_db=p["onset_db"], supply_v=p["supply_v"],
                     supply_a=p["supply_a"], rail_v=o.get("rail"), bias_a=o.get("bias"), vsat_v=o.get("vsat"))
    if kind.name == "noise" and load is not None:  # the SNR's reference, as analyze gives it
        given.update(reference_vrms=units.vrms_from_watts(1.0, load), reference=f"1 W into {load:g} ohm")
    names = {f.name for f in fields(kind.params)}
    chosen = {k: v for k, v in given.items() if k in names and v is not None}
    if "bandwidth_hz" in names:
        chosen["bandwidth_hz"] = None if options.bandwidth_hz is None else list(options.bandwidth_hz)
    return kind.params(**chosen).to_dict()


def copy_capture(source: Path, folder: Path, sidecar: dict, sha256: str | None = None) -> tuple[Path, str]:
    """The capture copied into the run's folder as ``capture.wav`` (a WAV
    byte for byte; another format rewritten as 32-bit float WAV), with its
    sidecar and the takes its steps played again lie in; checked against
    the original (``sha256``: the original's hash when it was analysed).
    Returns the copy and its SHA-256, hashed from the folder after it was
    written."""
    dest = folder / kinds.CAPTURE_WAV
    stim = sidecar.get("stimulus") if isinstance(sidecar.get("stimulus"), dict) else {}
    for seg in stim.get("segments") or []:  # a step played again lies in a take beside it, under its own name
        take = seg.get("file") if isinstance(seg, dict) else None
        if take and Path(take).name != source.name:
            for part in (Path(take).name, Path(take).with_suffix(".json").name):
                if (source.parent / part).exists():
                    shutil.copyfile(source.parent / part, folder / part)
    try:
        return _copy_checked(source, dest, folder, sidecar, sha256)
    except BaseException:
        # (a copy that failed its check is not the capture: none is left behind)
        from benchkit.recordings import sidecar_path

        for part in (dest, sidecar_path(dest)):
            part.unlink(missing_ok=True)
        raise


def _copy_checked(source: Path, dest: Path, folder: Path, sidecar: dict, sha256: str | None) -> tuple[Path, str]:
    from benchkit.recordings import write_capture, write_capture_sidecar

    def changed(now: str) -> BenchkitError:
        return BenchkitError(f"{source} changed after it was analysed (SHA-256 {sha256[:12]}... then, {now[:12]}... "
                             "now): not filed; file it again")

    if source.suffix.lower() == ".wav":
        read = copy_hashing(source, dest)
        if sha256 is not None and read != sha256:
            raise changed(read)
        stored = sha256_of(dest)
        if stored != read:
            raise BenchkitError(f"the copy of {source} in {folder} does not match it (SHA-256 {stored[:12]}... against "
                                f"{read[:12]}...): not filed")
        write_capture_sidecar(dest, sidecar)
        return dest, stored
    import numpy as np
    import soundfile as sf

    if sha256 is not None and (now := sha256_of(source)) != sha256:
        raise changed(now)
    data, rate = sf.read(str(source), dtype="float64", always_2d=True)
    write_capture(dest, data, rate, sidecar)
    kept, kept_rate = sf.read(str(dest), dtype="float64", always_2d=True)
    if kept_rate != rate or kept.shape != data.shape or not np.array_equal(kept, data.astype(np.float32)):
        raise BenchkitError(f"the copy of {source} in {folder} does not hold its samples: not filed")
    return dest, sha256_of(dest)


def file_one(ready: Prepared, book, labels: dict, options: kinds.Offline, say: Callable[[str], None]):
    """File one prepared capture as a run (:func:`benchkit.bench.start_run`),
    its copy analysed by its kind's reanalyse, the run completed (or, on a
    failure, marked failed) as a live run's is."""
    from benchkit.bench import complete, start_run

    run = start_run(book, labels, ready.kind.name, DEVICE, options.profile, options.profile_path, ready.params, say,
                    filed=ready.filed)
    with run:
        _copy, digest = copy_capture(ready.path, run.folder, ready.sidecar, ready.filed.get("sha256"))
        run.record["filed"] = {**(run.record.get("filed") or {}), "copy_sha256": digest}
        doc, written = kinds.reanalyse(run.folder, run.record, say)
        return complete(run, doc, written, say, played=False)


def file_captures(files: list[Path], o: dict, say: Callable[[str], None], tell: Callable[[str], None]):
    """File each capture as a run of its kind in the bench's logbook
    (``o``: the options by key). Options are checked before any capture is
    read; then each capture is analysed, and filed when its analysis
    succeeded. Returns the runs filed and the errors of those refused
    (``(file, reason)``): a capture refused, or one the file system failed
    on (read, hashed or copied), is one of those, and the others are filed
    still."""
    from benchkit.bench import bench_logbook

    options = offline_options(o)
    done, refused = [], []
    with bench_logbook(o, remembered=False) as (book, labels):
        if not labels["stage"]:
            raise BenchkitError("say which stage the captures are of: --stage FILE (a JSON object or 'key: value' "
                                "lines) or --stage-info name=...")
        for path in files:
            try:
                ready = prepare(Path(path), options, o, say)
                tell(ready.text)
                done.append(file_one(ready, book, labels, options, say))
            except BenchkitError as exc:
                refused.append((path, str(exc)))
            except OSError as exc:  # (a disk full, a file gone or unreadable: this capture only)
                where = f" ({exc.filename})" if exc.filename and str(exc.filename) != str(path) else ""
                refused.append((path, f"{path}: cannot file it: {exc.strerror or exc}{where}"))
    return done, refused
