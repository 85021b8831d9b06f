"""The demo: "Test stage B-2" on the virtual bench, before and after a bias
change (the invented scenario of the design notes), as a bench plan.

The shipped plan (``benchkit/plans/stage-b2.toml``, which 'benchkit plan
new' copies for one's own stage) describes the stage once: a 24 V
single-ended class-A stage with a constant-current pull-up,
capacitor-coupled into an 8 ohm dummy load, measured through a 10:1 pad
into a line input of 2.0 V peak full scale, ambient 23 degC; and what to
measure: a 997 Hz tone at four levels, intermodulation at three, power to
10 % THD+N, a sweep from 2 Hz, the output noise, the output impedance,
crosstalk of a stereo pair and the midpoint's drift as it warms. The demo
runs it as two sessions, at 0.8 A and at 1.2 A of bias, compares them
(:mod:`benchkit.compare_sessions`) and writes one HTML report of the
comparison. The report folder is a bench folder: every run is filed in
its logbook, each session in sessions/.
"""

from __future__ import annotations

import contextlib
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Callable

from benchkit.plan import DEMO_PLAN, read_plan

#: the bias the stage is measured at, before and after, A
BIASES_A = ("0.8", "1.2")


@dataclass(frozen=True)
class DemoReport:
    folder: Path
    sessions: tuple[dict, ...]
    report: Path
    files: tuple[Path, ...]
    text: str


def _session(out: Path, seed: int, bias: str, quiet: bool) -> dict:
    """One session of the demo's plan at ``bias`` (in a process of its own when ``quiet``)."""
    import sys

    from benchkit.session import run_session

    plan = read_plan(DEMO_PLAN)
    plan = replace(plan, bench={**plan.bench, "seed": seed})

    def say(line: str) -> None:  # side by side: the progress only, marked by its bias
        if not quiet or line.startswith(("[", "plan pre-flight")):
            print(f"[{bias} A] {line}" if quiet else line, file=sys.stderr, flush=True)

    return run_session(plan, out, say, changes={"bias": bias}).doc


def run_demo(out: Path, seed: int = 1, say: Callable[[str], None] = lambda _m: None, together: bool = True) -> DemoReport:
    """Run the demo into the bench folder ``out``: the plan at each bias
    (``together``: the two sessions side by side, one process each, their
    own text kept short), the comparison, the report."""
    from benchkit.compare_sessions import compare_sessions
    from benchkit.logbook import Logbook
    from benchkit.recordings import write_text_atomic
    from benchkit.session_report import write_report

    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    say(f"virtual bench: {read_plan(DEMO_PLAN).name}, the plan {DEMO_PLAN.name} at "
        + " and then ".join(f"{b} A" for b in BIASES_A) + " of bias")
    with ProcessPoolExecutor(len(BIASES_A)) if together else contextlib.nullcontext() as pool:
        if together:
            docs = list(pool.map(_session, [out] * len(BIASES_A), [seed] * len(BIASES_A), BIASES_A,
                                 [True] * len(BIASES_A)))
            for doc in docs:
                say(f"session {doc['id']}: {doc['status']}, tags " + ", ".join(f"{k}={v}" for k, v in doc["tags"].items()))
        else:
            docs = [_session(out, seed, bias, False) for bias in BIASES_A]
        with Logbook(out) as book:
            compared = compare_sessions(book, [d["id"] for d in docs], each=pool.map if together else map)
            report = write_report(book, list(compared.sessions), out / "report.html", compared,
                                  title=f"{docs[0]['name']}: bias {BIASES_A[0]} A against {BIASES_A[1]} A")
    text = "\n".join([f"{docs[0]['name']} on the virtual bench, bias {BIASES_A[0]} A -> {BIASES_A[1]} A "
                      "('benchkit compare' of the two sessions):", compared.text, "",
                      *(f"session {d['id']} ({', '.join(f'{k}={v}' for k, v in d['tags'].items())}): {d['status']}, "
                        f"{out / 'sessions' / d['id']}" for d in docs), f"report: {report}"])
    files = (write_text_atomic(out / "summary.txt", text + "\n"), report, *compared.files)
    return DemoReport(out, tuple(docs), report, files, text)
