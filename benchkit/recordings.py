"""Captures on disk: audio files and the sidecar JSON beside each.

A capture is a WAV (or FLAC) file read through soundfile, plus an optional
sidecar ``<name>.json`` in the same folder that says what was played, how the
channels were wired and how to turn FS into volts (docs/file-formats.md).
Every measuring command writes its raw capture here *before* analysing it.
"""

from __future__ import annotations

import json
import math
import os
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from benchkit.analysis import refuse_non_finite
from benchkit.errors import BenchkitError, BenchWarning, read_warnings, warning_docs
from benchkit.jsonfile import INT as _INT, NUMBER as _NUMBER, TEXT as _TEXT, load_json, wrong_field

SIDECAR_KIND = "capture"
SIDECAR_SCHEMA_VERSION = 2


@dataclass(frozen=True)
class Recording:
    """One channel of a capture file, in FS units (float64).

    ``channel`` is numbered from 1; ``sidecar`` is the parsed sidecar JSON
    (empty when there is none); ``warnings`` says what was odd about it.
    """

    path: Path
    samples: np.ndarray
    sample_rate_hz: float
    channel: int
    n_channels: int
    sidecar: dict = field(default_factory=dict)
    warnings: tuple[str, ...] = ()

    def all_warnings(self) -> tuple[BenchWarning, ...]:
        """What was odd about the file, then the warnings its sidecar keeps."""
        return self.warnings + read_warnings(self.sidecar.get("warnings"))

    @property
    def stimulus_frequency_hz(self) -> float | None:
        """The tone frequency the sidecar says was played, if any."""
        stim = self.sidecar.get("stimulus") or {}
        f = stim.get("frequency_hz") if isinstance(stim, dict) else None
        return float(f) if isinstance(f, (int, float)) and math.isfinite(f) and f > 0 else None

    def channel_scale(self) -> tuple[float | None, str]:
        """Volts peak per FS for this channel from the sidecar, and where the
        sidecar says that scale came from ("simulation", "profile", ...)."""
        for ch in self.sidecar.get("channels") or []:
            if isinstance(ch, dict) and ch.get("number") == self.channel:
                v = ch.get("volts_per_fs")
                if isinstance(v, (int, float)) and math.isfinite(v) and v > 0:
                    return float(v), str(self.sidecar.get("scale_source", "given"))
        return None, "none"

    def chain(self):
        """The chain's type-B contributions to its volts and watts
        (benchkit.analysis.uncertainty.Chain): the calibration profile's its
        sidecar keeps; without one the scale's own are not known and only
        the load's usual tolerance counts."""
        from benchkit.analysis.uncertainty import Chain

        kept = Chain.from_dict((self.sidecar.get("calibration") or {}).get("chain"))
        return kept if kept is not None else Chain(load=Chain.load_rel(None))


def sidecar_path(audio_path: str | os.PathLike) -> Path:
    """Where the sidecar of an audio file lives: same folder, same stem, .json."""
    return Path(audio_path).with_suffix(".json")


class Takes:
    """A capture and the retakes its sidecar points steps at (``file``:
    a step a stream fault spoiled, played again into ``NAME.retryK.wav``
    beside it), each file and channel read once."""

    def __init__(self, rec: Recording, *others: Recording):
        """``others``: more channels of the same capture, already read."""
        self.rec = rec
        self._read = {(None, r.channel): r for r in (rec, *others)}

    def step(self, seg: dict, channel: int | None = None) -> np.ndarray:
        """The samples of step ``seg`` (a sidecar segment) on ``channel``
        (default: the capture's), from the take that holds its good one."""
        try:
            take, lo, hi = seg.get("file"), int(seg["settled"]), int(seg["end"])
        except (KeyError, TypeError, ValueError, AttributeError) as exc:
            raise BenchkitError(f"{self.rec.path}: the sidecar's step list is damaged") from exc
        ch = self.rec.channel if channel is None else channel
        key = (None if take in (None, self.rec.path.name) else str(take), ch)
        if key not in self._read:
            name = self.rec.path.name if key[0] is None else Path(key[0]).name
            self._read[key] = read_capture(self.rec.path.parent / name, ch)
        src = self._read[key]
        if not 0 <= lo < hi <= src.samples.size:
            raise BenchkitError(f"{src.path}: a step lies outside the capture (samples {lo} to {hi})")
        return src.samples[lo:hi]


def read_capture(path: str | os.PathLike, channel: int = 1) -> Recording:
    """Read one channel of a capture file and its sidecar.

    Parameters
    ----------
    path : path-like
        A WAV or FLAC file (anything libsndfile reads).
    channel : int
        Channel number, from 1.

    Raises
    ------
    BenchkitError
        Missing path, a folder, a file that is not audio or is cut short,
        no samples, or a channel the file does not have.
    """
    import soundfile as sf

    p = Path(path)
    if not p.exists():
        raise BenchkitError(f"{p}: no such file")
    if p.is_dir():
        raise BenchkitError(f"{p}: is a folder, not a capture file")
    if p.stat().st_size == 0:
        raise BenchkitError(f"{p}: the file is empty")
    try:
        data, rate = sf.read(str(p), dtype="float64", always_2d=True)
    except Exception as exc:  # libsndfile's own errors carry the reason
        reason = str(exc).strip().splitlines()[-1] if str(exc).strip() else type(exc).__name__
        raise BenchkitError(f"{p}: cannot read it as audio ({reason})") from exc
    n_channels = data.shape[1]
    if not isinstance(channel, int) or channel < 1 or channel > n_channels:
        raise BenchkitError(f"{p}: has {n_channels} channel(s); channel {channel} does not exist (numbered from 1)")
    if data.shape[0] == 0:
        raise BenchkitError(f"{p}: holds no samples")
    samples = np.ascontiguousarray(data[:, channel - 1])
    refuse_non_finite(samples, f"{p}: channel {channel}")
    sidecar, warnings = _read_sidecar(p)
    return Recording(
        path=p,
        samples=samples,
        sample_rate_hz=float(rate),
        channel=channel,
        n_channels=n_channels,
        sidecar=sidecar,
        warnings=tuple(warnings),
    )


def _read_sidecar(audio: Path) -> tuple[dict, list[str]]:
    side = sidecar_path(audio)
    if not side.is_file():
        return {}, []
    try:
        doc = load_json(side)
    except (OSError, ValueError) as exc:
        return {}, [BenchWarning("ignored", f"sidecar {side.name} is unreadable ({exc.__class__.__name__}); ignored")]
    if not isinstance(doc, dict) or doc.get("kind") != SIDECAR_KIND:
        return {}, [BenchWarning("ignored", f"sidecar {side.name} is not a benchkit capture description; ignored")]
    version = doc.get("schema_version")
    if not isinstance(version, int) or version > SIDECAR_SCHEMA_VERSION:
        return {}, [BenchWarning("ignored", f"sidecar {side.name} has layout version {version!r}, newer than this benchkit reads; ignored")]
    problem = _sidecar_problem(doc)
    if problem:
        return {}, [BenchWarning("ignored", f"sidecar {side.name} is damaged ({problem}); ignored")]
    return doc, []


#: what each field of a sidecar holds (None: may be null), and of its channels and segments
_SIDECAR_FIELDS = {
    "sample_rate_hz": _NUMBER, "device": _TEXT, "scale_source": _TEXT, "channels": (list,), "stimulus": (dict,),
    "marker_start": _INT, "n_samples": _INT, "aligned_on": _INT + (None,), "output_vpk_per_fs": _NUMBER + (None,),
    "note": _TEXT, "bench": (dict, None), "latency_samples": _INT + (None,), "events": (list,),
    "clock_offset_ppm": _NUMBER + (None,), "warnings": (list,), "calibration": (dict, None),
    "reference_channel": _INT + (None,), "stop_reason": _TEXT + (None,), "crosstalk": (dict, None),
    "stopped_early": _TEXT + (None,),
}
_CHANNEL_FIELDS = {"number": _INT, "role": _TEXT, "volts_per_fs": _NUMBER + (None,)}
_CALIBRATION_FIELDS = {"file": _TEXT + (None,), "hash": _TEXT, "interface": _TEXT, "created": _TEXT,
                       "loopback_floor": (dict, None), "interface_floor": (dict, None), "uncertainty_db": _NUMBER + (None,), "dc_coupled": (bool,),
                       "polarity_inverts": (bool,), "output_vpk_per_fs": _NUMBER, "input_vpk_per_fs": _NUMBER,
                       "loopback_response": (list,), "ac_corner_hz": _NUMBER + (None,), "chain": (dict, None)}
_SEGMENT_FIELDS = {"start": _INT, "stop": _INT, "settled": _INT, "end": _INT, "frequency_hz": _NUMBER + (list,),
                   "level_dbfs": _NUMBER + (None,), "file": _TEXT + (None,), "channel": _INT}


def _sidecar_problem(doc: dict) -> str | None:
    """What makes a sidecar unusable: the first field of the wrong type
    (a number given as text, a list where an object belongs ...)."""
    problem = wrong_field(doc, _SIDECAR_FIELDS, "") or wrong_field(doc.get("calibration") or {}, _CALIBRATION_FIELDS,
                                                                      "calibration.")
    if problem:
        return problem
    for i, ch in enumerate(doc.get("channels") or []):
        problem = problem or (f"channels[{i}] is not an object" if not isinstance(ch, dict)
                              else wrong_field(ch, _CHANNEL_FIELDS, f"channels[{i}]."))
    stim = doc.get("stimulus") or {}
    segments = stim.get("segments", [])
    if not isinstance(segments, list):
        return problem or "stimulus.segments is not a list"
    for i, seg in enumerate(segments):
        problem = problem or (f"stimulus.segments[{i}] is not an object" if not isinstance(seg, dict)
                              else wrong_field(seg, _SEGMENT_FIELDS, f"stimulus.segments[{i}]."))
    return problem


def write_capture(
    path: str | os.PathLike,
    data: np.ndarray,
    sample_rate: float,
    sidecar: dict | None = None,
    subtype: str = "FLOAT",
) -> Path:
    """Write a capture (samples x channels, FS units) and its sidecar.

    The audio is written first, to a temporary name, and renamed into place;
    the sidecar follows. ``subtype`` is a soundfile subtype ("FLOAT" for
    32-bit float, "PCM_24" for 24-bit).
    """
    import soundfile as sf

    p = Path(path)
    p.parent.mkdir(parents=True, exist_ok=True)
    tmp = p.with_name(p.name + ".part")
    sf.write(str(tmp), np.asarray(data, dtype=np.float64), int(round(sample_rate)), subtype=subtype, format="WAV")
    os.replace(tmp, p)
    if sidecar is not None:
        write_capture_sidecar(p, sidecar)
    return p


def write_text_atomic(path: str | os.PathLike, text: str) -> Path:
    """Write a file whole under a temporary name, flush it to the disk and
    rename it into place: a reader, or a crash, sees the old file or the
    new one, never half of one."""
    p = Path(path)
    tmp = p.with_name(f".{p.name}.{os.getpid()}.tmp")
    try:
        with open(tmp, "w", encoding="utf-8") as fh:
            fh.write(text)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, p)
    finally:
        tmp.unlink(missing_ok=True)
    return p


def write_capture_sidecar(audio_path: str | os.PathLike, sidecar: dict) -> Path:
    """Write (or rewrite) the sidecar JSON of a capture (its warnings as
    every document stores them: :func:`benchkit.errors.warning_docs`)."""
    doc = {"kind": SIDECAR_KIND, "schema_version": SIDECAR_SCHEMA_VERSION, **sidecar}
    if "warnings" in doc:
        doc["warnings"] = warning_docs(doc["warnings"])
    return write_text_atomic(sidecar_path(audio_path), json.dumps(doc, indent=2, default=_json_default) + "\n")


def _json_default(obj):
    if isinstance(obj, (np.floating, np.integer)):
        return obj.item()
    if isinstance(obj, Path):
        return str(obj)
    raise TypeError(f"not JSON: {type(obj).__name__}")


class WavStreamWriter:
    """A 32-bit float WAV written as it arrives, readable at every moment.

    After each chunk the RIFF and data sizes in the header are brought up to
    date, so a run killed outright (SIGKILL, power loss) leaves a valid file
    holding everything up to the last chunk written; :func:`repair_wav`
    recovers a chunk whose header update did not make it.
    """

    def __init__(self, path: str | os.PathLike, sample_rate: float, channels: int):
        self.path = Path(path)
        self.path.parent.mkdir(parents=True, exist_ok=True)
        self.channels = channels
        self.frames = 0
        self._fh = open(self.path, "wb")
        self._fh.write(_wav_header(int(round(sample_rate)), channels, 0))
        self._fh.flush()

    def write(self, block: np.ndarray) -> None:
        data = np.ascontiguousarray(block, dtype="<f4")
        if data.ndim != 2 or data.shape[1] != self.channels:
            raise ValueError(f"expected (frames, {self.channels}) samples")
        self._fh.seek(0, os.SEEK_END)
        self._fh.write(data.tobytes())
        self.frames += data.shape[0]
        self._update_sizes()

    def _update_sizes(self) -> None:
        nbytes = self.frames * self.channels * 4
        self._fh.seek(4)
        self._fh.write((36 + nbytes).to_bytes(4, "little"))
        self._fh.seek(40)
        self._fh.write(nbytes.to_bytes(4, "little"))
        self._fh.flush()

    def close(self) -> None:
        if not self._fh.closed:
            self._fh.flush()
            os.fsync(self._fh.fileno())
            self._fh.close()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()


def _wav_header(rate: int, channels: int, nbytes: int) -> bytes:
    """Canonical 44-byte header of an IEEE-float 32-bit WAV."""
    block = channels * 4
    return b"".join(
        [
            b"RIFF", (36 + nbytes).to_bytes(4, "little"), b"WAVE",
            b"fmt ", (16).to_bytes(4, "little"), (3).to_bytes(2, "little"), channels.to_bytes(2, "little"),
            rate.to_bytes(4, "little"), (rate * block).to_bytes(4, "little"), block.to_bytes(2, "little"),
            (32).to_bytes(2, "little"),
            b"data", nbytes.to_bytes(4, "little"),
        ]
    )


def repair_wav(path: str | os.PathLike) -> int:
    """Make the header of a stream-written WAV match the whole frames on disk.

    Returns the number of frames the file now holds. Only for files written
    by :class:`WavStreamWriter` (the canonical 44-byte float header).
    """
    p = Path(path)
    with open(p, "r+b") as fh:
        head = fh.read(44)
        if len(head) < 44 or head[:4] != b"RIFF" or head[8:12] != b"WAVE" or head[36:40] != b"data":
            raise BenchkitError(f"{p}: not a stream-written capture; cannot repair it")
        channels = int.from_bytes(head[22:24], "little")
        size = p.stat().st_size - 44
        frames = size // (4 * channels)
        nbytes = frames * 4 * channels
        fh.seek(4)
        fh.write((36 + nbytes).to_bytes(4, "little"))
        fh.seek(40)
        fh.write(nbytes.to_bytes(4, "little"))
        fh.truncate(44 + nbytes)
    return frames


def kept_calibration(folder: Path) -> dict | None:
    """The calibration block the captures in a folder keep (the first
    sidecar's that has one), or None."""
    docs = (_read_sidecar(audio)[0] for audio in sorted(Path(folder).glob("*.wav")))
    return next((doc["calibration"] for doc in docs if doc.get("calibration")), None)


def stopped_early(folder: Path) -> list[str]:
    """Why the captures in a run folder stopped before their last step
    (the input clipped ...), as their sidecars say: empty when every
    capture ran to its end."""
    docs = (_read_sidecar(audio)[0] for audio in sorted(folder.glob("*.wav")))
    return [doc["stopped_early"] for doc in docs if doc.get("stopped_early")]
