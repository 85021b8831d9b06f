"""Sound cards through PortAudio (sounddevice): the real capture backend.

A whole run is ONE duplex callback stream. The callback copies the next
block of the stimulus out and the arriving block into a buffer allocated
before the stream starts; a writer thread streams that buffer to disk as it
fills (no disk I/O in the callback). Safety:

- the stimulus itself fades in and out and ends in silence;
- on Ctrl-C, an exception or a watchdog timeout the callback ramps the
  output to zero over ``ABORT_FADE_S`` from the block it is in, then writes
  silence: the samples written reach zero within 50 ms of the event;
- a watchdog ends a run whose stream stops calling back (device lost);
- the drive cannot exceed a cap (default ``DEFAULT_DRIVE_CAP_DBFS``) unless
  the command is given an explicit override;
- the partial capture stays on disk whatever happens.

sounddevice is imported only here, and only when a real device is used, so
everything else runs where PortAudio is absent.
"""

from __future__ import annotations

import contextlib
import signal
import threading
import time
from pathlib import Path

import numpy as np

from benchkit import units
from benchkit.capture import Capabilities, CLIP_STOP_FS, InputChannel, RawRecording, count_stream
from benchkit.errors import BenchkitError
from benchkit.recordings import WavStreamWriter
from benchkit.signals import Stimulus

#: Conservative cap on the drive at a real interface's output, dBFS.
DEFAULT_DRIVE_CAP_DBFS = -12.0
#: Length of the emergency fade to silence.
ABORT_FADE_S = 0.02
#: A stream that has not called back for this long is taken as lost.
WATCHDOG_S = 2.0
#: Silence before the marker on a real device: streams and patch bays settle.
LEAD_S = 0.5
DEFAULT_BLOCKSIZE = 1024


class CaptureInterrupted(BenchkitError):
    """The run stopped early (Ctrl-C, device loss); ``partial`` is the raw
    recording kept on disk."""

    def __init__(self, message: str, partial: Path | None, device_lost: bool = False):
        super().__init__(message)
        self.partial = partial
        #: the device (or its server) went away: PortAudio may hang on shutdown
        self.device_lost = device_lost


@contextlib.contextmanager
def _signals_to_this_thread():
    """Keep Ctrl-C (SIGINT) and SIGTERM away from the threads PortAudio and
    its audio server's client library start in here: they inherit this
    thread's blocked signals. A signal the kernel hands to an audio thread
    reaches Python only when the main thread next wakes by itself (up to
    one poll, 20 ms, later): the fade would start a period late."""
    if not hasattr(signal, "pthread_sigmask"):  # not POSIX: nothing to hold back
        yield
        return
    old = signal.pthread_sigmask(signal.SIG_BLOCK, {signal.SIGINT, signal.SIGTERM})
    try:
        yield
    finally:
        signal.pthread_sigmask(signal.SIG_SETMASK, old)


def _sd():
    """sounddevice, or a one-line reason why not."""
    try:
        with _signals_to_this_thread():  # importing it starts PortAudio (and, on JACK, a client)
            import sounddevice
    except OSError as exc:  # the PortAudio library itself is missing
        raise BenchkitError(
            "PortAudio is not installed, so real interfaces are unavailable: install the system package "
            "libportaudio2 (Debian/Ubuntu: apt-get install libportaudio2); the virtual bench still works"
        ) from exc
    except ImportError as exc:
        raise BenchkitError("the Python package sounddevice is missing: pip install sounddevice") from exc
    return sounddevice


def list_devices() -> list[dict]:
    """Every device PortAudio sees: index, name, host API, channels, rate."""
    sd = _sd()
    apis = sd.query_hostapis()
    return [
        {
            "index": int(d["index"]),
            "name": d["name"],
            "host_api": apis[d["hostapi"]]["name"],
            "max_input_channels": int(d["max_input_channels"]),
            "max_output_channels": int(d["max_output_channels"]),
            "default_sample_rate_hz": float(d["default_samplerate"]),
        }
        for d in sd.query_devices()
    ]


def find_device(spec: str) -> dict:
    """A device by index ("3") or by part of its name ("USB"), case-blind;
    refuses an ambiguous or unknown name."""
    devices = list_devices()
    if spec.strip().isdigit():
        idx = int(spec)
        for d in devices:
            if d["index"] == idx:
                return d
        raise BenchkitError(f"no audio device has index {idx}; 'benchkit devices' lists them")
    hits = [d for d in devices if spec.lower() in d["name"].lower()]
    exact = [d for d in hits if d["name"].lower() == spec.lower()]
    if len(exact) == 1:
        return exact[0]
    if len(hits) == 1:
        return hits[0]
    if not hits:
        raise BenchkitError(f"no audio device matches {spec!r}; 'benchkit devices' lists them")
    names = ", ".join(f"{d['index']}: {d['name']}" for d in hits)
    raise BenchkitError(f"{spec!r} matches several devices ({names}); give the index")


class PortAudioBackend:
    """A real interface as a capture backend.

    Parameters
    ----------
    device : str
        Index or part of the name (see :func:`find_device`).
    sample_rate : float
    in_channel : int
        Input carrying the stage's output (through the pad), from 1.
    out_channel : int
        Output that drives the stage, from 1.
    ref_channel : int, optional
        Input wired straight from the driven output (a loopback reference).
    blocksize : int
        Frames per callback. On a JACK server the server's period rules:
        the stream takes it as it comes (asking PortAudio for another size
        puts an adapting buffer, as much latency again, between the two).
    latency : str or float
        PortAudio's suggested latency: "low", "high" or seconds.
    drive_cap_dbfs : float
        Highest peak level the stimulus may have.
    volts_per_fs : float, optional
        Scale of ``in_channel`` in volts at the stage per FS, when known.
    in_device : str, optional
        A separate input device (index or name); its clock is then not the
        output's, and the offset between them is measured on the reference.
    more_inputs, more_outputs : tuple of int
        Further inputs recorded and outputs played (a stereo stage's
        second channel); a further input takes ``volts_per_fs`` too.
    input_max_vpk : float, optional
        The most the inputs take without damage, volts peak, as the
        interface's manual states it (the pre-flight's fault check).
    """

    #: a real interface: the user wires, shorts and switches; a profile gives volts
    capabilities = Capabilities()

    def __init__(
        self,
        device: str,
        sample_rate: float = 48000.0,
        in_channel: int = 1,
        out_channel: int = 1,
        ref_channel: int | None = None,
        blocksize: int = DEFAULT_BLOCKSIZE,
        latency: str | float = "high",
        drive_cap_dbfs: float = DEFAULT_DRIVE_CAP_DBFS,
        volts_per_fs: float | None = None,
        watchdog_s: float = WATCHDOG_S,
        in_device: str | None = None,
        more_inputs: tuple[int, ...] = (),
        more_outputs: tuple[int, ...] = (),
        input_max_vpk: float | None = None,
    ):
        self.sd = _sd()
        self.info = find_device(device)
        self.in_info = find_device(in_device) if in_device else self.info
        self.name = f"{self.info['name']} ({self.info['host_api']})"
        if self.in_info is not self.info:
            self.name = f"{self.in_info['name']} in, {self.name} out"
        self.sample_rate_hz = float(sample_rate)
        self.in_channel, self.out_channel, self.ref_channel = in_channel, out_channel, ref_channel
        self.more_inputs, self.more_outputs = tuple(more_inputs), tuple(more_outputs)
        wanted_in = max((in_channel, ref_channel or 0, *self.more_inputs))
        if min(in_channel, out_channel, ref_channel or 1, *self.more_inputs, *self.more_outputs) < 1:
            raise BenchkitError("channels are numbered from 1")
        if wanted_in > self.in_info["max_input_channels"]:
            raise BenchkitError(f"{self.in_info['name']} has {self.in_info['max_input_channels']} inputs; input {wanted_in} does not exist")
        wanted_out = max((out_channel, *self.more_outputs))
        if wanted_out > self.info["max_output_channels"]:
            raise BenchkitError(f"{self.name} has {self.info['max_output_channels']} outputs; output {wanted_out} does not exist")
        if ref_channel is not None and ref_channel == in_channel:
            raise BenchkitError("the reference input must differ from the stage's input")
        self.n_inputs = wanted_in
        self.n_outputs = wanted_out
        self.drive_output = out_channel
        self.blocksize = int(blocksize)
        #: what the stream asks PortAudio for: 0 (the host's own size) where the host's period rules
        self.stream_blocksize = 0 if "jack" in self.info["host_api"].lower() else self.blocksize
        self.latency = latency
        self.drive_cap_dbfs = drive_cap_dbfs
        self.volts_per_fs = volts_per_fs
        self.watchdog_s = watchdog_s
        self.output_vpk_per_fs = None  # known only from a calibration
        self.input_max_vpk = input_max_vpk  # as its manual states it (--input-max), else unknown
        self.lead_s = LEAD_S
        self._abort = threading.Event()

    # --- the protocol -----------------------------------------------------
    def inputs(self) -> tuple[InputChannel, ...]:
        chans = []
        for k in range(1, self.n_inputs + 1):
            if k == self.in_channel:
                source = "given" if self.volts_per_fs is not None else "none"
                chans.append(InputChannel(k, "stage output", self.volts_per_fs, source))
            elif k == self.ref_channel:
                chans.append(InputChannel(k, f"reference: output {self.out_channel} looped back"))
            elif k in self.more_inputs:
                # a second channel's output through its own pad, like the first
                source = "given" if self.volts_per_fs is not None else "none"
                chans.append(InputChannel(k, "second stage output", self.volts_per_fs, source))
            else:
                chans.append(InputChannel(k, "unused"))
        return tuple(chans)

    def reference_input(self) -> int | None:
        return self.ref_channel

    def pad_input_ohms(self) -> float | None:
        return None  # (a profile's pad says it)

    def describe(self) -> dict:
        return {
            "device": self.info,
            "input_device": self.in_info,
            "blocksize": self.blocksize,
            "latency": self.latency,
            "drive_cap_dbfs": self.drive_cap_dbfs,
            "in_channel": self.in_channel,
            "out_channel": self.out_channel,
            "ref_channel": self.ref_channel,
        }

    def request_abort(self) -> None:
        """Fade out and stop (thread-safe; also what Ctrl-C does)."""
        self._abort.set()

    def hold_tone(self, frequency_hz: float, level_dbfs: float, seconds: float) -> dict:
        """Play a steady tone for ``seconds`` and record nothing
        (preconditioning a stage: an hour is not kept in memory). Faded in
        and out; Ctrl-C, an abort or a silent stream fade it within 20 ms."""
        sd = self.sd
        if level_dbfs > self.drive_cap_dbfs + 1e-9:
            raise BenchkitError(f"the preconditioning tone ({level_dbfs:.1f} dBFS) is above the drive cap of "
                                f"{self.drive_cap_dbfs:g} dBFS")
        rate = self.sample_rate_hz
        amp = units.ratio_from_db(level_dbfs)
        n_total = int(seconds * rate)
        fade_n = max(1, int(ABORT_FADE_S * rate))
        col = self.out_channel - 1
        state = {"pos": 0, "fade_at": -1, "last": time.monotonic()}
        done = threading.Event()
        self._abort.clear()

        def callback(outdata, frames, _time, _status):
            pos = state["pos"]
            state["last"] = time.monotonic()
            if self._abort.is_set() and state["fade_at"] < 0:
                state["fade_at"] = pos
            k = pos + np.arange(frames)
            env = np.clip(np.minimum((k + 0.5) / fade_n, (n_total - k) / fade_n), 0.0, 1.0)
            if state["fade_at"] >= 0:
                env = np.minimum(env, np.clip(1.0 - (k - state["fade_at"]) / fade_n, 0.0, 1.0))
            outdata[:] = 0.0
            outdata[:, col] = amp * env * np.sin(2 * np.pi * frequency_hz * k / rate)
            state["pos"] = pos + frames
            if pos >= n_total or (state["fade_at"] >= 0 and pos - state["fade_at"] > fade_n):
                done.set()
                raise sd.CallbackStop

        count_stream(self.name, "hold_tone")
        try:
            with _signals_to_this_thread():
                stream = sd.OutputStream(samplerate=rate, blocksize=self.stream_blocksize, device=self.info["index"],
                                         channels=self.n_outputs, dtype="float32", latency=self.latency,
                                         callback=callback, finished_callback=done.set)
        except Exception as exc:
            raise BenchkitError(f"cannot open {self.name}: {exc}") from exc
        reason, lost = None, False
        try:
            with _signals_to_this_thread():
                stream.start()
            while not done.wait(0.05):
                if time.monotonic() - state["last"] > self.watchdog_s:
                    reason, lost = "the audio stream stopped calling back (device lost?)", True
                    self._abort.set()
                    break
        except KeyboardInterrupt:
            reason = "interrupted"
            self._abort.set()
            done.wait(1.0)
        finally:
            _close(stream, timeout=1.0)
        if reason is not None:
            raise CaptureInterrupted(f"{reason} during preconditioning: the output faded to silence", None, lost)
        return {"seconds": state["pos"] / rate, "level_dbfs": level_dbfs, "frequency_hz": frequency_hz}

    def play_record(self, stimulus: Stimulus, partial: Path | None = None) -> RawRecording:
        """Play and record in one duplex stream; stream the raw recording
        to ``partial`` (a WAV) as it arrives."""
        sd = self.sd
        # a stimulus that listens decides as it plays: its samples so far,
        # its length an upper bound; the cap below holds it all the same
        listening = hasattr(stimulus, "listen")
        on_fault = getattr(stimulus, "fault", None)  # it marks what it hears across a dropout
        known = stimulus.samples
        peak = float(np.max(np.abs(known))) if known.size else 0.0
        if peak > 0 and units.db_from_ratio(peak) > self.drive_cap_dbfs + 1e-9:
            raise BenchkitError(
                f"the drive would peak at {units.db_from_ratio(peak):.1f} dBFS, above the cap of "
                f"{self.drive_cap_dbfs:g} dBFS; lower the level, or raise the cap knowingly (--drive-cap)"
            )
        rate = self.sample_rate_hz
        n_play = stimulus.n_samples
        tail = int(0.3 * rate) + 4 * self.blocksize  # room for the round trip
        total = n_play + tail
        cols = min(known.shape[1], self.n_outputs)
        # a stream that may run for hours keeps only its last keep_s in a ring
        keep = getattr(stimulus, "keep_s", None)
        ring = _Ring(int(keep * rate) + self.blocksize if keep else total + self.blocksize, self.n_inputs, bool(keep))
        fade_n = max(1, int(ABORT_FADE_S * rate))
        after_abort = int(0.25 * rate)
        ramp = np.linspace(1.0, 0.0, fade_n, dtype=np.float32)
        cap_fs = np.float32(units.ratio_from_db(self.drive_cap_dbfs))
        state = {"pos": 0, "fade_at": -1, "last": time.monotonic(), "faults": [], "statuses": [], "clipped_at": -1,
                 "end": total, "block": 0, "stop_at": total}
        in_col = self.in_channel - 1
        done = threading.Event()
        self._abort.clear()

        def callback(indata, outdata, frames, _time, status):
            try:
                fill(indata, outdata, frames, status)
            except sd.CallbackStop:
                raise
            except Exception as exc:  # noqa: BLE001 - handed to the main thread
                outdata[:] = 0.0
                state["error"] = exc
                done.set()
                raise sd.CallbackAbort from exc

        def fill(indata, outdata, frames, status):
            pos = state["pos"]
            state["last"] = time.monotonic()
            state["block"] = max(state["block"], frames)
            if status:
                state["faults"].append(pos)
                state["statuses"].append(str(status))
                if on_fault is not None:
                    on_fault(pos, frames)
            # output: the stimulus, or the emergency fade, or silence
            if self._abort.is_set() and state["fade_at"] < 0:
                state["fade_at"] = pos
            n = 0
            if pos < n_play and state["end"] == total:
                block = stimulus.render(pos, frames)
                n = block.shape[0]
                outdata[:n, :cols] = block[:, :cols]
                outdata[:n, cols:] = 0.0
                if listening and n < frames:  # it has finished: a round trip more, then stop
                    state["end"] = min(total, pos + n + tail)
            outdata[n:] = 0.0
            fa = state["fade_at"]
            if fa >= 0:
                k0 = pos - fa  # how far into the fade this block starts
                if k0 >= fade_n:
                    outdata[:] = 0.0
                else:
                    k1 = min(fade_n, k0 + frames)
                    outdata[: k1 - k0] *= ramp[k0:k1, None]
                    outdata[k1 - k0 :] = 0.0
            # the cap holds whatever the stimulus renders (last line of defence)
            np.clip(outdata, -cap_fs, cap_fs, out=outdata)
            # input, into the buffer allocated up front
            m = ring.put(pos, indata)
            # the measuring input at full scale: stop stepping up, fade out
            if state["clipped_at"] < 0 and m and np.max(np.abs(indata[:m, in_col])) >= CLIP_STOP_FS:
                state["clipped_at"] = pos
                self._abort.set()
            state["pos"] = pos + frames
            # after an abort, keep recording silence for a round trip, so
            # the capture shows the fade arriving
            finished = state["pos"] >= min(state["end"], state["stop_at"]) or (fa >= 0 and pos - fa >= fade_n + after_abort)
            if finished:
                done.set()
                raise sd.CallbackStop

        writer = WavStreamWriter(partial, rate, self.n_inputs) if partial is not None else None
        stop_writer = threading.Event()
        written = {"frames": 0, "heard": 0}
        # a stimulus known in advance with its marker: once the span the marker is looked for in has come
        # back, the round trip is known, and the stream ends a round trip and two blocks after the last
        # frame played, not after the tail's worst case
        marker = getattr(stimulus, "marker", None)
        segments = getattr(stimulus, "segments", ())
        window = (segments[0].start if segments else n_play) + (marker.size if marker is not None else 0)
        early = {"open": not listening and marker is not None and marker.size > 0 and window < n_play}
        ref_col = (self.reference_input() or 1) - 1

        def end_early() -> None:
            from benchkit.capture.align import find_marker

            early["open"] = False
            try:
                found = find_marker(ring.get(0, window)[:, ref_col].astype(np.float64), marker)
            except Exception:  # noqa: BLE001 - (capture.run looks again, and says why, once the stream has ended)
                return
            latency = found - stimulus.marker_start
            if 0 <= latency and n_play + latency + 2 * self.blocksize < total:
                state["stop_at"] = n_play + latency + 2 * self.blocksize

        def drain():
            # off the audio thread: the raw recording to disk, and to a
            # stimulus that listens (it analyses and decides here)
            while True:
                stopping = stop_writer.wait(0.05)
                upto = min(state["pos"], total)
                if writer is not None and upto > written["frames"] and "writer_error" not in state:
                    try:
                        writer.write(ring.get(written["frames"], upto))
                        written["frames"] = upto
                    except OSError as exc:  # disk full, folder gone: the run goes on in memory
                        state["writer_error"] = f"{exc.strerror or exc}"
                if early["open"] and upto >= window:
                    end_early()
                if listening and upto > written["heard"]:
                    try:
                        stimulus.listen(ring.get(written["heard"], upto).astype(np.float64), written["heard"])
                    except Exception as exc:  # noqa: BLE001 - the run must still fade out and end
                        state["error"] = exc
                        self._abort.set()
                    written["heard"] = upto
                if stopping:
                    return

        thread = (threading.Thread(target=drain, name="benchkit-capture-writer", daemon=True)
                  if writer or listening or early["open"] else None)
        reason = None
        lost = False
        count_stream(self.name, "play_record")
        try:
            with _signals_to_this_thread():
                stream = sd.Stream(
                    samplerate=rate,
                    blocksize=self.stream_blocksize,
                    device=(self.in_info["index"], self.info["index"]),
                    channels=(self.n_inputs, self.n_outputs),
                    dtype="float32",
                    latency=self.latency,
                    callback=callback,
                    finished_callback=done.set,
                )
        except Exception as exc:  # PortAudio's reasons are in the message
            if writer:
                writer.close()
            raise BenchkitError(f"cannot open {self.name}: {exc}") from exc
        try:
            with _signals_to_this_thread():  # the server's process thread starts with the stream
                if thread:
                    thread.start()
                stream.start()
            while not done.wait(0.02):
                if time.monotonic() - state["last"] > self.watchdog_s:
                    reason = f"the audio stream stopped calling back for {self.watchdog_s:g} s (device lost?)"
                    lost = True
                    self._abort.set()
                    break
        except KeyboardInterrupt:
            reason = "interrupted"
            self._abort.set()
            done.wait(1.0 + 4 * self.blocksize / rate)
        except Exception as exc:
            reason = f"the audio stream failed: {exc}"
            lost = True
            self._abort.set()
            done.wait(0.5)
        finally:
            _close(stream, timeout=1.0)
            stop_writer.set()
            if thread:
                thread.join(timeout=5.0)
            if writer:
                writer.close()
        if reason is None and state.get("error") is not None:
            reason = f"the audio callback failed ({state['error']!r})"
        clipped_at = state["clipped_at"] if state["clipped_at"] >= 0 else None
        if reason is None and state["pos"] < min(state["end"], state["stop_at"]) and state["fade_at"] < 0:
            reason = "the audio stream ended before the run did (device or server gone?)"
            lost = True
        if reason is not None:
            where = f"; the partial capture is in {partial}" if partial is not None else ""
            raise CaptureInterrupted(f"{reason}: the output faded to silence{where}", partial, lost)
        got = min(state["pos"], state["end"])
        events = tuple(f"frame {p}: {s}" for p, s in zip(state["faults"], state["statuses"]))
        if clipped_at is not None:
            events += (f"frame {clipped_at}: the input clipped; the run stopped",)
        if state.get("writer_error"):
            events += (f"the raw recording could not be streamed to {partial}: {state['writer_error']}",)
        return RawRecording(samples=ring.get(max(0, got - ring.n) if ring.wraps else 0, got).astype(np.float64),
                            events=events, fault_frames=tuple(state["faults"]),
                            fault_block=state["block"] or self.blocksize, stopped_at=clipped_at)


class _Ring:
    """The recording buffer, allocated up front: a plain one (frame k at
    row k), or with ``wraps`` a ring holding the last ``n`` frames."""

    def __init__(self, n: int, channels: int, wraps: bool):
        self.n, self.wraps = n, wraps
        self.buf = np.zeros((n, channels), dtype=np.float32)

    def put(self, pos: int, data: np.ndarray) -> int:
        """Frames from ``pos`` on; returns how many found room."""
        if not self.wraps:
            m = max(0, min(data.shape[0], self.n - pos))
            self.buf[pos : pos + m] = data[:m]
            return m
        k = pos % self.n
        first = min(data.shape[0], self.n - k)
        self.buf[k : k + first] = data[:first]
        self.buf[: data.shape[0] - first] = data[first:]
        return data.shape[0]

    def get(self, a: int, b: int) -> np.ndarray:
        """Frames a to b (in a ring, the last n at most)."""
        if not self.wraps:
            return self.buf[a:b]
        a = max(a, b - self.n)
        i, j = a % self.n, b % self.n
        if b - a == 0:
            return self.buf[:0]
        return self.buf[i:j] if i < j else np.concatenate([self.buf[i:], self.buf[:j]])


def _close(stream, timeout: float) -> None:
    """Stop and close a stream without hanging on a dead server."""

    def work():
        try:
            stream.abort()
        except Exception:  # noqa: BLE001 - already gone
            pass
        try:
            stream.close()
        except Exception:  # noqa: BLE001
            pass

    t = threading.Thread(target=work, daemon=True)
    t.start()
    t.join(timeout)
