"""Shared helpers for the tests: signals with known content (numpy only)."""

from __future__ import annotations

import os

# one BLAS thread in every worker and every command they start, as the
# command line has it (benchkit/cli/__init__.py): set before numpy loads
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
import shutil
import signal
import subprocess
from pathlib import Path

import numpy as np
import pytest

import forkcli


#: the demo stage of a plan (DESIGN.md's invented scenario), for the tests' plans
PLAN_STAGE = """[stage]
name = "Test stage B-2 (invented)"
load = 8
rail = 24
bias = 0.8
vsat = 1.0
pad = "1.8k:200"
"""

def cosine(freq_hz: float, rate: float, seconds: float = 1.0, amp: float = 0.5, phase: float = 0.0) -> np.ndarray:
    n = np.arange(int(round(rate * seconds)))
    return amp * np.cos(2 * np.pi * freq_hz * n / rate + phase)


def pytest_configure(config):
    """A suite started in the background (``pytest &`` in a script, nohup)
    inherits SIGINT ignored, and so would every command it starts: the
    Ctrl-C tests need it delivered. Python's own handler here becomes the
    default again in each program started (an exec keeps only "ignored")."""
    if signal.getsignal(signal.SIGINT) is signal.SIG_IGN:
        signal.signal(signal.SIGINT, signal.default_int_handler)


def pytest_xdist_auto_num_workers(config):
    """Two workers more than the cores ('-n auto'): one of them holds the
    real-stream tests (test_jack.py), which mostly wait on the stream,
    while the others keep every core busy with the rest, and hold their
    share of the cores when other work competes for them (measured beside
    busy.sh: 400 s with three workers, 357 s with four; DEVELOPERS.md)."""
    return (os.cpu_count() or 1) + 2


def pytest_collection_modifyitems(items):
    """The real-stream tests first: they take the longest in wall time and
    run one after another on one worker, while the other worker takes the
    rest (with --dist loadfile --no-loadscope-reorder, see pyproject.toml)."""
    items.sort(key=lambda item: item.path.name != "test_jack.py")


def run_cli(*args: str, cwd=None) -> subprocess.CompletedProcess:
    """Run the real console entry point in a process of its own: forked
    from a server that has done the imports (tests/forkcli.py), or a fresh
    interpreter with BENCHKIT_TEST_FORK=0."""
    return forkcli.run(*args, cwd=cwd, timeout=500)  # only a hang guard: busy machines are slow


def system_program(name: str, packages: str, what: str = "") -> str:
    """A program from Debian's packages: required in CI (it installs
    them), the test skipped elsewhere with a clear message."""
    path = shutil.which(name)
    if path is None:
        if os.environ.get("CI"):
            pytest.fail(f"{name} is not installed; CI must install it (apt-get install {packages})")
        pytest.skip(f"{what or name} is not installed (apt-get install {packages})")
    return path


@pytest.fixture(scope="session")
def sox_path() -> str:
    """The sox program."""
    return system_program("sox", "sox")


@pytest.fixture(autouse=True)
def _bench_of_its_own(tmp_path, monkeypatch):
    """Every test's measurements are filed in a bench folder of its own,
    never in the repository (subprocesses inherit the variable)."""
    monkeypatch.setenv("BENCHKIT_BENCH", str(tmp_path / "bench"))


def run_folders(bench) -> list:
    """The run folders of a bench folder, oldest first."""
    runs = Path(bench) / "runs"
    return sorted(p for p in runs.iterdir() if p.is_dir()) if runs.exists() else []


def the_run(bench):
    """The one run folder of a bench folder."""
    folders = run_folders(bench)
    assert len(folders) == 1, folders
    return folders[0]


class GlitchingBench:
    """The virtual bench whose stream reports an overflow in the middle of
    a segment's analysed span (the first, or ``segment``) on the takes
    named (counted from 1), the samples left whole so that only the report
    can spoil the take; or, with ``reported`` false, drops 10 ms there on
    input ``channel`` without a word (an audio server's late client). A duplex stream skips the
    block in and out together: a gap in the recording, no shift after it."""

    def __init__(self, bench, glitched, reported: bool = True, segment: int = 0, channel: int = 1):
        self.bench, self.glitched, self.takes, self.reported = bench, set(glitched), 0, reported
        self.segment, self.column = segment, channel - 1

    def __getattr__(self, name):
        return getattr(self.bench, name)

    def play_record(self, stimulus, partial=None):
        from dataclasses import replace

        raw = self.bench.play_record(stimulus, partial)
        self.takes += 1
        if self.takes not in self.glitched:
            return raw
        seg = stimulus.segments[self.segment]
        x, mid, gap = raw.samples, (seg.settled + seg.end) // 2, int(0.01 * self.bench.sample_rate_hz)
        if not self.reported:  # as an audio server's late client drops a block: without a word
            lost = x.copy()
            lost[mid : mid + gap, self.column] = 0.0
            return replace(raw, samples=lost)
        # reported: the stream's word alone must spoil the take (the samples
        # are left whole, so that nothing else can catch it)
        return replace(raw, fault_frames=(mid,), fault_block=1024, events=(f"frame {mid}: input overflow",))
