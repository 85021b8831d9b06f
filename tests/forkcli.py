"""Running the console entry point fast: a fork server for the tests.

Every `benchkit` command the tests run is a process of its own, and most
of its CPU time went on imports (scipy.signal, matplotlib, benchkit: about
1.5 to 2 s of CPU each, over a hundred and eighty times per suite). This
server imports them once; each command is a child forked from it that
takes the test's environment, working folder, arguments and standard
streams, runs the module as ``python -m benchkit`` would (``runpy``, run
name ``__main__``) and exits with the command's status. The test holds a
:class:`Forked`, which answers like a ``subprocess.Popen`` (pipes, signals,
``communicate``, ``returncode``).

The server never imports sounddevice, so PortAudio starts afresh in each
child that opens a stream (it would not survive a fork).
``BENCHKIT_TEST_FORK=0`` turns the server off: every command a fresh
interpreter. Tests that need a terminal or the interpreter's own start
(the pty, the device variable read at start-up) use ``subprocess`` as
they always did.

Protocol: a Unix socket pair of packets. The test sends ``{"args", "env",
"cwd"}`` with the command's stdin, stdout and stderr attached (SCM_RIGHTS);
the server answers ``{"pid"}`` once the child runs, and ``{"pid",
"status"}`` (a wait status) whenever a child has ended.
"""

from __future__ import annotations

import atexit
import json
import os
import select
import socket
import subprocess
import sys
import threading

# what the commands load besides benchkit's own modules; imported once, in the server
PRELOAD = ("scipy.signal", "matplotlib.figure", "matplotlib.backends.backend_agg")
_PACKET = 1 << 20


def raise_priority(steps: int) -> None:
    """Lower this process's nice value by ``steps`` where this user may (root
    may; anyone else keeps the priority it has): the threads it starts
    after inherit it."""
    try:
        os.nice(-steps)
    except OSError:
        pass


def _child(sock: socket.socket, req: dict, fds: list[int]) -> None:
    """In the forked child: become ``python -m benchkit <args>``."""
    import runpy

    code = 1
    try:
        sock.close()
        for fd, target in zip(fds, (0, 1, 2)):
            os.dup2(fd, target)
            os.close(fd)
        if req.get("nice"):
            raise_priority(req["nice"])
        os.environ.clear()
        os.environ.update(req["env"])
        os.chdir(req["cwd"])
        sys.argv = ["benchkit", *req["args"]]  # run_module puts the module's path first, as -m does
        try:
            runpy.run_module("benchkit", run_name="__main__", alter_sys=True)
            code = 0
        except SystemExit as exc:
            code = exc.code if isinstance(exc.code, int) else (0 if exc.code is None else 1)
            if not isinstance(exc.code, (int, type(None))):
                print(exc.code, file=sys.stderr)
        except BaseException:  # noqa: BLE001 - as the interpreter would: a traceback and status 1
            import traceback

            traceback.print_exc()
            code = 1
    finally:
        try:
            sys.stdout.flush()
            sys.stderr.flush()
        finally:
            os._exit(code)


def serve(fd: int) -> None:
    """The server's loop (``python forkcli.py FD``)."""
    import importlib
    import pkgutil

    import benchkit

    for name in PRELOAD:
        importlib.import_module(name)
    for mod in pkgutil.walk_packages(benchkit.__path__, "benchkit."):
        if mod.name != "benchkit.__main__":  # importing it runs a command
            importlib.import_module(mod.name)
    assert "sounddevice" not in sys.modules, "the fork server must not load PortAudio"
    sock = socket.socket(fileno=fd)
    sock.sendall(b'{"ready": true}')
    children = 0
    while True:
        if select.select([sock], [], [], 0.02 if children else None)[0]:
            msg, fds, _flags, _addr = socket.recv_fds(sock, _PACKET, 3)
            if not msg:
                return  # the test process has gone
            pid = os.fork()
            if pid == 0:
                _child(sock, json.loads(msg), fds)
            for fd_ in fds:
                os.close(fd_)
            children += 1
            sock.sendall(json.dumps({"pid": pid}).encode())
        while children:
            pid, status = os.waitpid(-1, os.WNOHANG)
            if pid == 0:
                break
            children -= 1
            sock.sendall(json.dumps({"pid": pid, "status": status}).encode())


class ForkServer:
    """The test side: one server per test process, started on first use."""

    def __init__(self):
        self.proc: subprocess.Popen | None = None
        self.sock: socket.socket | None = None
        self._spawn = threading.Lock()
        self._ended = threading.Condition()
        self._status: dict[int, int] = {}
        self._pids: list[int] = []

    def _start(self) -> None:
        ours, theirs = socket.socketpair(socket.AF_UNIX, socket.SOCK_SEQPACKET)
        self.proc = subprocess.Popen([sys.executable, __file__, str(theirs.fileno())], pass_fds=[theirs.fileno()])
        theirs.close()
        if json.loads(ours.recv(_PACKET) or b"{}").get("ready") is not True:
            raise RuntimeError("the benchkit fork server did not start")
        self.sock = ours
        threading.Thread(target=self._listen, name="forkcli", daemon=True).start()

    def _listen(self) -> None:
        while True:
            msg = self.sock.recv(_PACKET)
            if not msg:
                return
            doc = json.loads(msg)
            with self._ended:
                if "status" in doc:
                    self._status[doc["pid"]] = doc["status"]
                else:
                    self._pids.append(doc["pid"])
                self._ended.notify_all()

    def spawn(self, args, env=None, cwd=None, stdin=None, priority: int = 0) -> "Forked":
        """``python -m benchkit *args`` as a child of the server, its stdout
        and stderr pipes to this process (text), stdin ``stdin`` (a file
        descriptor) or /dev/null; ``priority`` steps of nice value higher
        where allowed (:func:`raise_priority`)."""
        with self._spawn:
            if self.proc is None or self.proc.poll() is not None:
                self._start()
            out_r, out_w = os.pipe()
            err_r, err_w = os.pipe()
            in_fd = os.open(os.devnull, os.O_RDONLY) if stdin is None else os.dup(stdin)
            req = {"args": [str(a) for a in args], "env": dict(os.environ if env is None else env),
                   "cwd": str(cwd or os.getcwd()), "nice": priority}
            try:
                socket.send_fds(self.sock, [json.dumps(req).encode()], [in_fd, out_w, err_w])
            finally:
                for fd in (in_fd, out_w, err_w):
                    os.close(fd)
            with self._ended:
                self._ended.wait_for(lambda: self._pids, timeout=60)
                if not self._pids:
                    raise RuntimeError("the benchkit fork server did not start the command")
                pid = self._pids.pop(0)
        return Forked(self, pid, [sys.executable, "-m", "benchkit", *args], out_r, err_r)

    def wait(self, pid: int, timeout: float | None) -> int | None:
        """The child's wait status, or None if it is still running after ``timeout``."""
        with self._ended:
            self._ended.wait_for(lambda: pid in self._status, timeout=timeout)
            return self._status.get(pid)

    def close(self) -> None:
        if self.proc is not None and self.proc.poll() is None:
            self.sock.shutdown(socket.SHUT_RDWR)  # the server sees the end and leaves
            try:
                self.proc.wait(10)
            except subprocess.TimeoutExpired:
                self.proc.kill()


class Forked:
    """A command running as a child of the fork server, with the parts of
    ``subprocess.Popen`` the tests use."""

    def __init__(self, server: ForkServer, pid: int, args: list, out_fd: int, err_fd: int):
        self.server, self.pid, self.args = server, pid, args
        # as Popen(text=True) decodes: the locale's encoding, universal newlines
        self.stdout = open(out_fd, encoding=None, newline=None)
        self.stderr = open(err_fd, encoding=None, newline=None)
        self.returncode: int | None = None
        self._readers: list[threading.Thread] = []
        self._read: dict[str, list[str]] = {"out": [], "err": []}

    def poll(self) -> int | None:
        if self.returncode is None:
            status = self.server.wait(self.pid, 0)
            if status is not None:
                self.returncode = os.waitstatus_to_exitcode(status)
        return self.returncode

    def wait(self, timeout: float | None = None) -> int:
        status = self.server.wait(self.pid, timeout)
        if status is None:
            raise subprocess.TimeoutExpired(self.args, timeout)
        self.returncode = os.waitstatus_to_exitcode(status)
        return self.returncode

    def communicate(self, input=None, timeout: float | None = None) -> tuple[str, str]:  # noqa: A002 - Popen's name
        if not self._readers:
            for key, fh in (("out", self.stdout), ("err", self.stderr)):
                t = threading.Thread(target=lambda fh=fh, key=key: self._read[key].append(fh.read()), daemon=True)
                t.start()
                self._readers.append(t)
        for t in self._readers:
            t.join(timeout)
            if t.is_alive():
                raise subprocess.TimeoutExpired(self.args, timeout)
        self.wait(timeout)
        self.stdout.close()
        self.stderr.close()
        return "".join(self._read["out"]), "".join(self._read["err"])

    def send_signal(self, sig: int) -> None:
        if self.poll() is None:
            os.kill(self.pid, sig)

    def terminate(self) -> None:
        self.send_signal(15)

    def kill(self) -> None:
        self.send_signal(9)


_SERVER: list = []


def benchkit(*args, env=None, cwd=None, priority: int = 0):
    """``python -m benchkit *args`` with stdout and stderr piped (text): a
    :class:`Forked` child of this process's fork server, or with
    BENCHKIT_TEST_FORK=0 a ``subprocess.Popen``; ``priority`` as
    :meth:`ForkServer.spawn` takes it (the fork server's children only)."""
    if os.environ.get("BENCHKIT_TEST_FORK", "1") == "0" or not hasattr(os, "fork"):
        return subprocess.Popen([sys.executable, "-m", "benchkit", *args], stdout=subprocess.PIPE,
                                stderr=subprocess.PIPE, text=True, env=env, cwd=cwd)
    if not _SERVER:
        _SERVER.append(ForkServer())
        atexit.register(_SERVER[0].close)
    return _SERVER[0].spawn(args, env=env, cwd=cwd, priority=priority)


def run(*args, cwd=None, timeout: float = 120) -> subprocess.CompletedProcess:
    """As ``subprocess.run([python, -m, benchkit, *args], capture_output=True, text=True)``."""
    proc = benchkit(*args, cwd=cwd)
    try:
        out, err = proc.communicate(timeout=timeout)
    except subprocess.TimeoutExpired:
        proc.kill()
        proc.communicate()
        raise
    return subprocess.CompletedProcess(proc.args, proc.returncode, out, err)


if __name__ == "__main__":
    serve(int(sys.argv[1]))
