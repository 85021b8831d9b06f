"""Running the console entry point fast: a fork server for the tests.

Every `benchkit` command the tests run is a process of its own, and most
of its CPU time went on imports (scipy.signal, matplotlib, benchkit: about
1.5 to 2 s of CPU each, over a hundred and fifty times per suite). This
server imports them once; each command is a child forked from it that
takes the test's environment, working folder and arguments, runs the
module as ``python -m benchkit`` would (``runpy``, run name ``__main__``),
writes its own stdout and stderr, and exits with the command's status.

The server never imports sounddevice (PortAudio does not survive a fork):
commands on a real stream start a fresh interpreter (tests/jackbench.py).
``BENCHKIT_TEST_FORK=0`` turns the server off (every command a fresh
interpreter, as before).

Protocol, one JSON line each way per command: the test sends
``{"args", "env", "cwd", "out", "err"}``; the server answers ``{"pid"}``
once the child runs, then ``{"status"}`` (a wait status) when it has ended.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import threading

# what the commands load besides benchkit's own modules; imported once, in the server
PRELOAD = ("scipy.signal", "matplotlib.figure", "matplotlib.backends.backend_agg")


def _child(req: dict) -> None:
    """In the forked child: become ``python -m benchkit <args>``."""
    import runpy

    code = 1
    try:
        os.environ.clear()
        os.environ.update(req["env"])
        os.chdir(req["cwd"])
        devnull = os.open(os.devnull, os.O_RDONLY)
        out = os.open(req["out"], os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o644)
        err = os.open(req["err"], os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o644)
        for fd, target in ((devnull, 0), (out, 1), (err, 2)):
            os.dup2(fd, target)
            os.close(fd)
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


def serve() -> None:
    """The server's loop (``python forkcli.py``)."""
    import importlib
    import pkgutil

    import benchkit

    for name in PRELOAD:
        importlib.import_module(name)
    for mod in pkgutil.walk_packages(benchkit.__path__, "benchkit."):
        if mod.name != "benchkit.__main__":  # importing it runs a command
            importlib.import_module(mod.name)
    assert "sounddevice" not in sys.modules, "the fork server must not load PortAudio"
    reply = sys.stdout
    reply.write('{"ready": true}\n')
    reply.flush()
    for line in sys.stdin:
        req = json.loads(line)
        reply.flush()
        pid = os.fork()
        if pid == 0:
            _child(req)
        reply.write(json.dumps({"pid": pid}) + "\n")
        reply.flush()
        _, status = os.waitpid(pid, 0)
        reply.write(json.dumps({"status": status}) + "\n")
        reply.flush()


class ForkServer:
    """The test side: one server per test process, started on first use."""

    def __init__(self):
        self.proc: subprocess.Popen | None = None
        self.lock = threading.Lock()

    def _start(self) -> None:
        self.proc = subprocess.Popen([sys.executable, __file__], stdin=subprocess.PIPE, stdout=subprocess.PIPE,
                                     text=True, bufsize=1)
        if json.loads(self.proc.stdout.readline() or "{}").get("ready") is not True:
            raise RuntimeError("the benchkit fork server did not start")

    def run(self, args, cwd, timeout: float) -> subprocess.CompletedProcess:
        with self.lock:
            if self.proc is None or self.proc.poll() is not None:
                self._start()
            out, err = _scratch("stdout"), _scratch("stderr")
            req = {"args": list(args), "env": dict(os.environ), "cwd": str(cwd or os.getcwd()), "out": out, "err": err}
            self.proc.stdin.write(json.dumps(req) + "\n")
            self.proc.stdin.flush()
            try:
                pid = json.loads(self.proc.stdout.readline())["pid"]
                code = os.waitstatus_to_exitcode(self._wait(pid, timeout, args))
                return subprocess.CompletedProcess([sys.executable, "-m", "benchkit", *args], code,
                                                   _read_text(out), _read_text(err))
            finally:
                os.unlink(out)
                os.unlink(err)

    def _wait(self, pid: int, timeout: float, args) -> int:
        got: list[str] = []
        reader = threading.Thread(target=lambda: got.append(self.proc.stdout.readline()), daemon=True)
        reader.start()
        reader.join(timeout)
        if not got:
            os.kill(pid, 9)
            reader.join(10)
            raise subprocess.TimeoutExpired([sys.executable, "-m", "benchkit", *args], timeout)
        return json.loads(got[0])["status"]

    def close(self) -> None:
        if self.proc is not None and self.proc.poll() is None:
            self.proc.stdin.close()
            self.proc.wait(10)


def _scratch(what: str) -> str:
    import tempfile

    fd, path = tempfile.mkstemp(prefix=f"benchkit-{what}-")
    os.close(fd)
    return path


def _read_text(path: str) -> str:
    # as subprocess.run(text=True) decodes: the locale's encoding, universal newlines
    with open(path, encoding=None, newline=None) as fh:
        return fh.read()


if __name__ == "__main__":
    serve()
