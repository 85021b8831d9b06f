"""A small SCPI multimeter emulator for the tests: serves on 127.0.0.1
(raw socket, newline-terminated, as LAN meters do on port 5025) and
answers *IDN?, CONF:VOLT:DC (or CONF:CURR:DC), READ? and MEAS:VOLT:DC?
with a DC value drifting along a known exponential - the first-order step
response of circuit theory, v = v_f + (v_0 - v_f) exp(-t/tau) - plus
Gaussian noise. The commands are the common SCPI ones (IEEE 488.2 *IDN?;
CONF/READ/MEAS from the SCPI standard), from memory. It can close its
socket after a while (a meter switched off mid-log).
"""

from __future__ import annotations

import math
import socket
import threading
import time

import numpy as np


class EmulatedMeter:
    """v(t) = final + (start - final) exp(-t / tau) + noise, t from the first READ?."""

    def __init__(self, final_v: float, start_v: float, tau_s: float, noise_v: float = 20e-6,
                 close_after_s: float | None = None, seed: int = 7):
        self.final_v, self.start_v, self.tau_s, self.noise_v = final_v, start_v, tau_s, noise_v
        self.close_after_s = close_after_s
        self._rng = np.random.default_rng(seed)
        self._srv = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
        self._srv.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        self._srv.bind(("127.0.0.1", 0))
        self._srv.listen(1)
        self.port = self._srv.getsockname()[1]
        self.t0: float | None = None
        self.readings = 0
        self._thread = threading.Thread(target=self._serve, daemon=True)
        self._thread.start()

    @property
    def resource(self) -> str:
        return f"TCPIP::127.0.0.1::{self.port}::SOCKET"

    def value_at(self, t: float) -> float:
        return self.final_v + (self.start_v - self.final_v) * math.exp(-t / self.tau_s)

    def _serve(self) -> None:
        try:
            conn, _ = self._srv.accept()
        except OSError:
            return
        buf = b""
        with conn:
            while True:
                if self.close_after_s is not None and self.t0 is not None and time.monotonic() - self.t0 > self.close_after_s:
                    return  # switched off: the socket closes
                try:
                    conn.settimeout(0.2)
                    chunk = conn.recv(1024)
                except socket.timeout:
                    continue
                except OSError:
                    return
                if not chunk:
                    return
                buf += chunk
                while b"\n" in buf:
                    line, buf = buf.split(b"\n", 1)
                    reply = self._answer(line.decode().strip().upper())
                    if reply is not None:
                        conn.sendall(reply.encode() + b"\n")

    def _answer(self, cmd: str) -> str | None:
        if cmd == "*IDN?":
            return "benchkit-tests,emulated DMM,0001,1.0"
        if cmd.startswith("CONF"):
            self.function = cmd
            return None
        if cmd in ("READ?", "MEAS:VOLT:DC?"):
            now = time.monotonic()
            if self.t0 is None:
                self.t0 = now
            self.readings += 1
            v = self.value_at(now - self.t0) + self.noise_v * float(self._rng.standard_normal())
            return f"{v:+.9E}"
        return None

    def close(self) -> None:
        try:
            self._srv.close()
        except OSError:
            pass
