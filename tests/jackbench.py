"""A real audio server for the tests: a JACK server on the dummy driver, and
JACK clients (jack-client package) that wire benchkit's PortAudio ports
through a loopback or a known nonlinearity.

benchkit itself runs in a subprocess (the real console entry point) that
finds the server through JACK_DEFAULT_SERVER.
"""

from __future__ import annotations

import glob
import os
import shutil
import signal
import subprocess
import sys
import threading
import time
import uuid

import numpy as np

import forkcli


#: How many nice steps above the rest the server and its clients run where
#: this user may (:func:`forkcli.raise_priority`): a bench runs its audio
#: server ahead of other work, and a test's stream must not fault because
#: the other test worker keeps both cores busy. Not real time: jackd drops
#: a real-time client that misses its deadline, and the Python patch
#: clients would (the deliberate stalls of the dropout tests aside).
AUDIO_PRIORITY = 10
#: a program started ahead of the rest: nice(1) lowers its nice value where
#: this user may, and otherwise says so (stderr) and starts it as it is (no
#: preexec_fn: the test process has threads of its own)
_AHEAD = ["nice", "-n", f"-{AUDIO_PRIORITY}"] if shutil.which("nice") else []


class JackServer:
    """jackd --no-realtime -d dummy with a name unique to this run, at
    :data:`AUDIO_PRIORITY`."""

    def __init__(self, period: int = 1024, rate: int = 48000):
        self.name = f"benchkit-test-{uuid.uuid4().hex[:8]}"
        self.period, self.rate = period, rate
        self.proc: subprocess.Popen | None = None

    def start(self) -> "JackServer":
        for _attempt in range(2):
            _forget_dead_servers()
            self.proc = subprocess.Popen(
                [*_AHEAD, "jackd", "--no-realtime", "-n", self.name, "-d", "dummy", "-r", str(self.rate), "-p",
                 str(self.period)],
                stdout=subprocess.DEVNULL,
                stderr=subprocess.DEVNULL,
            )
            deadline = time.monotonic() + 60  # only a hang guard: a busy machine is slow to start it
            while time.monotonic() < deadline and self.proc.poll() is None:
                ok = subprocess.run(["jack_lsp", "-s", self.name], capture_output=True, timeout=5)
                if ok.returncode == 0 and b"system:playback_1" in ok.stdout:
                    return self
                time.sleep(0.1)
            self.stop()
        raise RuntimeError("jackd did not come up")

    def env(self) -> dict:
        return {**os.environ, "JACK_DEFAULT_SERVER": self.name, "JACK_NO_START_SERVER": "1"}

    def stop(self) -> None:
        # SIGINT (jackd shuts down at once; SIGTERM takes it seconds) and
        # patience: a jackd killed outright leaves its entry in the shared
        # registry of (at most 8) servers
        if self.proc and self.proc.poll() is None:
            self.proc.send_signal(signal.SIGINT)
            try:
                self.proc.wait(30)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait(5)

    def __enter__(self):
        return self.start()

    def __exit__(self, *exc):
        self.stop()


def _forget_dead_servers() -> None:
    """jackd keeps at most 8 servers in its shared registry ("Too many
    servers already active"), and a server that died hard (the tests kill
    some on purpose) leaves its entry behind, run after run. With no jackd
    running the registry can only hold stale entries: clear it."""
    if subprocess.run(["pgrep", "-x", "jackd"], capture_output=True).returncode == 0:
        return
    for stale in glob.glob("/dev/shm/jack*"):
        try:
            os.unlink(stale)
        except OSError:
            pass  # jack_db-0 is a folder, and not a server's entry


def have_jack() -> bool:
    return shutil.which("jackd") is not None


class Patchbay:
    """Waits for benchkit's PortAudio client and wires it, from a process
    of its own (libjack stays out of the test process, which a dying
    server could otherwise take down).

    mode "loopback": out_0 -> in_0 and in_1 (and to the client, which only
    listens). mode "poly": out_0 -> a client
    applying y = x + a2 x^2 + a3 x^3 -> in_0 (its harmonics follow the
    power-reduction identities), and out_0 -> in_1 (reference). mode
    "stereo": a two-channel stage, out_0 -> in_0 and out_1 -> in_1, each
    channel taking ``a2`` (a ratio) of the other: flat crosstalk.
    ``stall_after`` seconds into the tones that stream number ``stall_stream``
    plays (benchkit opens one per run: a pre-flight probe, the run, retries), the
    stage client sleeps 0.2 s in its process callback once: an xrun for
    everyone.
    """

    def __init__(self, server: JackServer, mode: str = "loopback", a2: float = 0.0, a3: float = 0.0,
                 stall_after: float | None = None, stall_stream: int = 1):
        self.lines: list[str] = []
        self.proc = subprocess.Popen(
            [*_AHEAD, sys.executable, __file__, server.name, mode, str(a2), str(a3), str(stall_after or -1),
             str(stall_stream)],
            stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, text=True,
        )
        self._reader = threading.Thread(target=self._read, daemon=True)
        self._reader.start()
        deadline = time.monotonic() + 60  # only a hang guard
        while "ready" not in self.lines:
            if time.monotonic() > deadline or self.proc.poll() is not None:
                raise RuntimeError("the JACK patch bay did not start")
            time.sleep(0.01)

    def _read(self):
        for line in self.proc.stdout:
            self.lines.append(line.strip())

    @property
    def stalled(self) -> bool:
        return "stalled" in self.lines

    def interrupt(self, proc) -> None:
        """Send benchkit (``proc``) SIGINT, the patch bay noting the JACK
        frame it was sent at (it hears the output: loopback mode)."""
        self.proc.send_signal(signal.SIGUSR1)  # its handler reads the server's frame clock
        deadline = time.monotonic() + 10
        while not any(line.startswith("marked") for line in self.lines) and time.monotonic() < deadline:
            time.sleep(0.0005)
        proc.send_signal(signal.SIGINT)

    def frames_to_silence(self) -> int:
        """Frames from the SIGINT of :meth:`interrupt` to the output's
        last sample above 1e-6 FS (plus one): when it went silent, as the
        server's frame clock counts."""
        self.proc.send_signal(signal.SIGUSR2)
        deadline = time.monotonic() + 10
        while time.monotonic() < deadline:
            got = [line for line in self.lines if line.startswith("silence")]
            if got:
                return int(got[-1].split()[1])
            time.sleep(0.01)
        raise RuntimeError("the patch bay did not report")

    def close(self):
        if self.proc.poll() is None:
            self.proc.terminate()
            try:
                self.proc.wait(5)
            except subprocess.TimeoutExpired:
                self.proc.kill()
        self._reader.join(2)

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()


class _PatchClient:
    """The JACK side of :class:`Patchbay` (runs in its own process)."""

    def __init__(self, server: str, mode: str, a2: float, a3: float, stall_after: float | None, stall_stream: int = 1):
        import jack

        self.stall_stream = stall_stream

        self.jack = jack
        self.mode, self.a2, self.a3 = mode, a2, a3
        self.stall_after = stall_after
        self.wired = False  # the stream to stall is wired: count its tones' frames
        self.frames_loud = 0
        self.stalled = False
        self.client = jack.Client(f"patch-{uuid.uuid4().hex[:6]}", servername=server, no_start_server=True)
        self.inp = self.client.inports.register("in")
        self.out = self.client.outports.register("out")
        self.ports = [self.out]
        if mode == "stereo":
            self.inp2 = self.client.inports.register("in2")
            self.out2 = self.client.outports.register("out2")
            self.ports.append(self.out2)
        self.client.set_process_callback(self._process)
        self.mark, self.last_sound = None, None  # frames: the SIGINT sent, the output's last sound
        signal.signal(signal.SIGUSR1, self._mark)
        signal.signal(signal.SIGUSR2, self._report)
        self.client.activate()

    def _mark(self, *_):
        # the frame counting at the server now (jack_frame_time: the last cycle's start plus the time since)
        self.mark = self.client.frame_time
        print(f"marked {self.mark}", flush=True)

    def _report(self, *_):
        print(f"silence {self.last_sound - self.mark}", flush=True)

    def _process(self, frames):
        x = self.inp.get_array()
        y = self.out.get_array()
        if self.mode == "poly":
            y[:] = x + self.a2 * x * x + self.a3 * x * x * x
        elif self.mode == "stereo":
            x2 = self.inp2.get_array()
            y2 = self.out2.get_array()
            a, b = x.copy(), x2.copy()
            y[:] = a + self.a2 * b
            y2[:] = b + self.a2 * a
        else:
            y[:] = x
            loud = np.flatnonzero(np.abs(x) > 1e-6)
            if loud.size:  # the frame after the output's last sound, so far
                self.last_sound = self.client.last_frame_time + int(loud[-1]) + 1
        if self.stall_after is not None and not self.stalled and self.wired:
            # the stream's own time, counted from what it plays (blocks
            # above -23 dBFS: the tones, not the -26 dBFS marker), so that
            # neither the clock nor a late wiring moves the stall
            if np.max(np.abs(x)) > 10 ** (-23 / 20):
                self.frames_loud += frames
            if self.frames_loud > self.stall_after * self.client.samplerate:
                self.stalled = True
                time.sleep(0.2)
                print("stalled", flush=True)

    def watch(self):
        # every stream benchkit opens (a retry opens a new one) comes up
        # with fresh port names wired to the system ports: rewire each
        c = self.client
        print("ready", flush=True)
        while True:
            try:
                plan = self._plan(c)
                if plan and not self._wired(c, plan):
                    self._wire(c, plan)
                    if plan[0][2] == self.stall_stream:
                        self.wired = True
                    print("wired", flush=True)
            except self.jack.JackError:
                pass
            time.sleep(0.002)

    def _newest(self, ports, per_stream: int):
        """The names of the newest stream's ports, or None while that
        stream has not registered all of them. PortAudio numbers ports on
        from stream to stream (a stream with two inputs has in_0 and in_1,
        the next in_2 and in_3), and a closed stream's ports can linger
        for a moment beside the next one's: wire the highest-numbered
        group, never a mix."""
        numbers = {int(p.name.rsplit("_", 1)[1]): p.name for p in ports}
        if not numbers:
            return None, 0
        base = max(numbers) - max(numbers) % per_stream
        group = [numbers.get(base + i) for i in range(per_stream)]
        return (None if None in group else group), base // per_stream + 1

    def _plan(self, c):
        """(source, destination, stream number) for the newest stream."""
        outs, stream = self._newest(c.get_ports("PortAudio:out_", is_output=True), len(self.ports))
        ins, _ = self._newest(c.get_ports("PortAudio:in_", is_input=True), 2)
        if outs is None or ins is None:
            return None
        if self.mode == "stereo":
            pairs = [(outs[0], self.inp.name), (outs[1], self.inp2.name), (self.out.name, ins[0]),
                     (self.out2.name, ins[1])]
        elif self.mode == "poly":
            pairs = [(outs[0], self.inp.name), (self.out.name, ins[0]), (outs[0], ins[1])]
        else:
            pairs = [(outs[0], ins[0]), (outs[0], ins[1]), (outs[0], self.inp.name)]  # the last: to hear the tones
        return [(a, b, stream) for a, b in pairs]

    def _wired(self, c, plan) -> bool:
        want = {(a, b) for a, b, _ in plan}
        have = set()
        for p in c.get_ports("PortAudio:", is_output=True) + self.ports:
            have.update((p.name, q.name) for q in c.get_all_connections(p))
        return want == {(a, b) for a, b in have if b in {d for _s, d in want}} and want <= have \
            and not any(b.startswith("system:") for _a, b in have)

    def _wire(self, c, plan):
        want = {(a, b) for a, b, _ in plan}
        targets = {b for _a, b in want}
        for p in c.get_ports("PortAudio:") + self.ports + [self.inp] + ([self.inp2] if self.mode == "stereo" else []):
            for q in c.get_all_connections(p):
                src, dst = (p, q) if p.is_output else (q, p)
                stray = dst.name.startswith("system:") or src.name.startswith("system:") \
                    or (dst.name in targets and (src.name, dst.name) not in want)
                if stray:
                    try:
                        c.disconnect(src, dst)
                    except self.jack.JackError:
                        pass
        for a, b in want:
            try:
                c.connect(a, b)
            except self.jack.JackError:
                pass  # already connected


def benchkit(server: JackServer, *args: str):
    """Start the benchkit console entry point against the server (a child
    of the tests' fork server, see forkcli.py; Popen-like)."""
    return forkcli.benchkit(*args, env=server.env(), priority=AUDIO_PRIORITY)


def played_segment(levels, index: int, rate: int = 48000) -> np.ndarray:
    """The samples benchkit played for a step, as the stream carried them."""
    from benchkit.capture.portaudio import LEAD_S
    from benchkit.signals import stepped_tones

    stim = stepped_tones(997.0, levels, rate, lead_s=LEAD_S, n_out=1)
    seg = stim.segments[index]
    return stim.samples[seg.settled : seg.end, 0].astype(np.float32).astype(np.float64)


if __name__ == "__main__":
    name, mode, a2, a3, stall, stream = sys.argv[1:7]
    _PatchClient(name, mode, float(a2), float(a3), float(stall) if float(stall) >= 0 else None, int(stream)).watch()
