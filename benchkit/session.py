"""A session: a plan (:mod:`benchkit.plan`) measured on a bench as one.

One pre-flight for the whole plan before any step plays, then every step
the one way (:func:`benchkit.bench.measure`), each run filed in the
bench's logbook with the session's id and tags. The session's own record,
``sessions/<id>/session.json`` in the bench folder, keeps the plan's text,
the stage as measured and each step's state (pending, complete,
interrupted, failed, skipped) with its run; it is written again after
every step, so Ctrl-C, a lost device or a crash leaves what was measured
filed and the rest marked, and :func:`run_session` with ``resume`` measures
what is left in the same session.
"""

from __future__ import annotations

import os
import re
import time
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path
from typing import Callable

from benchkit import kinds, units
from benchkit.errors import BenchkitError
from benchkit.jsonfile import load_json
from benchkit.logbook import now_iso, slug, write_json_atomic
from benchkit.plan import Plan, parse_plan

SESSIONS = "sessions"
SESSION_FILE = "session.json"
SESSION_KIND, SESSION_VERSION = "session", 1
#: a step's states; a session's are running, complete, interrupted (it stopped: Ctrl-C, a lost
#: device, a fault) and incomplete (it went to its end with a step failed)
STEP_STATES = ("pending", "complete", "interrupted", "failed", "skipped")


class SessionInterrupted(BenchkitError):
    """The session stopped before its last step (Ctrl-C, a lost device):
    what it measured is filed, the rest marked skipped."""

    def __init__(self, doc: dict, why: str, device_lost: bool = False):
        super().__init__(f"{why}: session {doc['id']} stopped; what it measured is filed, the rest is marked skipped "
                         f"('benchkit plan resume {doc['id']}' measures it)")
        self.doc, self.why, self.device_lost = doc, why, device_lost

    def __reduce__(self):  # (across a process pool: the demo's sessions)
        return SessionInterrupted, (self.doc, self.why, self.device_lost)


def folder_of(root: Path, session_id: str) -> Path:
    return Path(root) / SESSIONS / session_id


def save(root: Path, doc: dict) -> None:
    write_json_atomic(doc, folder_of(root, doc["id"]) / SESSION_FILE)


def _damage(doc) -> str | None:
    """What is wrong with a session record, or None."""
    if not isinstance(doc, dict) or doc.get("kind") != SESSION_KIND:
        return "not a benchkit session record"
    if doc.get("schema_version") != SESSION_VERSION:
        return f"schema_version {doc.get('schema_version')!r}, this benchkit reads {SESSION_VERSION}"
    needs = {"id": str, "name": str, "status": str, "started": str, "plan_text": str, "stage": dict, "tags": dict,
             "steps": list}
    for key, kind in needs.items():
        if not isinstance(doc.get(key), kind):
            return f"{key} is missing or not a {kind.__name__}"
    for k, st in enumerate(doc["steps"]):
        if not (isinstance(st, dict) and isinstance(st.get("n"), int) and isinstance(st.get("kind"), str)
                and st.get("state") in STEP_STATES and isinstance(st.get("options"), dict)
                and isinstance(st.get("label"), str) and (st.get("run") is None or isinstance(st["run"], str))):
            return f"steps[{k}] is damaged"
    return None


def _read(path: Path) -> dict:
    try:
        doc = load_json(path)
    except (OSError, ValueError) as exc:
        raise BenchkitError(f"the session record {path} is unreadable ({exc})") from None
    problem = _damage(doc)
    if problem:
        raise BenchkitError(f"the session record {path} is damaged ({problem})")
    return doc


def all_sessions(root: Path, say: Callable[[str], None] = lambda _m: None) -> list[dict]:
    """Every session of a bench folder, newest first (a damaged record is
    left out, and said)."""
    found = []
    base = Path(root) / SESSIONS
    for path in sorted(base.glob(f"*/{SESSION_FILE}"), reverse=True) if base.is_dir() else []:
        try:
            found.append(_read(path))
        except BenchkitError as exc:
            say(f"warning: {exc}")
    return found


def read_session(root: Path, ref: str) -> dict:
    """A session by its id, a unique prefix of it, or 'last' / 'last-N'."""
    exact = folder_of(root, ref) / SESSION_FILE
    if exact.exists():
        return _read(exact)
    every = all_sessions(root)
    m = re.fullmatch(r"last(?:-(\d+))?", ref)
    if m:
        n = int(m.group(1) or 0)
        if len(every) <= n:
            raise BenchkitError(f"the bench {root} has {len(every)} session(s): there is no {ref}")
        return every[n]
    got = [d for d in every if d["id"] == ref] or [d for d in every if d["id"].startswith(ref)]
    if not got:
        raise BenchkitError(f"no session {ref!r} in {Path(root) / SESSIONS} ('benchkit plan list' shows them)")
    if len(got) > 1:
        raise BenchkitError(f"{ref!r} matches {len(got)} sessions ({', '.join(d['id'] for d in got[:3])}): give more of it")
    return got[0]


def is_session(root: Path, ref: str) -> bool:
    """Whether ``ref`` names exactly one session of the bench."""
    try:
        read_session(root, ref)
    except BenchkitError:
        return False
    return True


def plan_of(doc: dict) -> Plan:
    """The plan a session measured, read from the text it kept, with its stage changes."""
    plan = parse_plan(doc["plan_text"], f"session {doc['id']}'s plan", Path(doc.get("plan_folder") or "."))
    return plan.with_stage(doc.get("changes") or {})


def _new(root: Path, plan: Plan, changes: dict) -> dict:
    started = datetime.now().astimezone()
    base = f"{started:%Y%m%d-%H%M%S}-{slug(plan.name, 40)}"
    for k in range(1, 1000):
        sid = base if k == 1 else f"{base}-{k}"
        try:
            folder_of(root, sid).mkdir(parents=True)
            break
        except FileExistsError:
            continue
        except OSError as exc:
            raise BenchkitError(f"cannot make a session folder in {Path(root) / SESSIONS}: {exc.strerror or exc}") from None
    else:
        raise BenchkitError(f"{Path(root) / SESSIONS}: a thousand sessions named {base}")
    return {
        "kind": SESSION_KIND, "schema_version": SESSION_VERSION, "id": sid, "name": plan.name,
        "started": started.isoformat(timespec="seconds"), "finished": None, "status": "running", "pid": os.getpid(),
        "plan_file": plan.source, "plan_folder": str(plan.folder.resolve()), "plan_text": plan.text,
        "changes": changes, "stage": plan.stage, "tags": plan.session_tags(),
        "steps": [{"n": i + 1, "kind": s.kind, "label": s.label, "options": _shown(s.given), "state": "pending",
                   "run": None, "error": None, "seconds": None} for i, s in enumerate(plan.steps)],
    }


def _shown(given: dict) -> dict:
    """A step's options as JSON keeps them (paths as text)."""
    return {k: (str(v) if isinstance(v, Path) else v) for k, v in given.items()}


# --- the whole plan's pre-flight ------------------------------------------------------


def _drive_of(kind: str, o: dict) -> list[str]:
    """The drive levels (text) a step plays; none for a step that plays
    nothing (noise, a DC log) or finds its own top step (power)."""
    if kind in ("noise", "drift", "power"):
        return []
    level = o.get("level")
    return [] if level is None else list(level) if isinstance(level, list) else [level]


def preflight(plan: Plan, root: Path, say: Callable[[str], None]) -> None:
    """The pre-flight of the whole plan, before any step plays: every
    step's frequencies against the rate and its band (each value was
    read by its option's parser with the plan), then the highest drive
    of any step against the drive cap and, with one low probe step
    through the stage, against the pad, the rail and the input, on the
    device as that step opens it (a power step finds its own top step,
    below the input's full scale, when it runs; each step's own
    pre-flight runs again as it starts)."""
    from benchkit import bench, record
    from benchkit.signals import check_level

    playing = []
    for i, step in enumerate(plan.steps):
        o = plan.options(i, root)
        live = kinds.get(step.kind).live
        if live.opens is not None:
            bench.check_within(o["rate"], dict(live.opens(o)).get("within", ()))
        playing += [(i, text) for text in _drive_of(step.kind, o)]
    if not playing:
        say("plan pre-flight: no step plays a set level (power finds its own, noise and drift play nothing)")
        return
    def opened(i: int):
        o = plan.options(i, root)
        return bench.live_setup(o, lambda _m: None, ref=o.get("ref_channel"), load=o.get("load"))

    backend, profile = opened(playing[0][0])
    try:
        drive, i = max((units.parse_level(text).to_dbfs(backend.output_vpk_per_fs), i) for i, text in playing)
        if i != playing[0][0]:  # judged on the device as that step opens it (its cap, scale, profile)
            _close(backend)
            backend, profile = opened(i)
        step = plan.steps[i]
        try:
            check_level(drive)
        except BenchkitError as exc:
            raise BenchkitError(f"step {step.title(i)}: {exc}") from None
        if drive > backend.drive_cap_dbfs + 1e-9:
            raise BenchkitError(f"step {step.title(i)} drives {drive:.1f} dBFS, above the drive cap of "
                                f"{backend.drive_cap_dbfs:g} dBFS: nothing has played; lower it, or raise the cap "
                                "knowingly (drive-cap in [bench])")
        o = plan.options(i, root)
        freq = o.get("freq") or 997.0
        freq = freq[0] if isinstance(freq, list) else freq
        scaled = backend.capabilities.simulated or profile is not None or o["volts_per_fs"] is not None
        got = record.plan_run(backend, profile, [drive], freq, o["in_channel"], o.get("gain"), o["margin"],
                              o.get("rail"), o.get("pad_rating"), plan.stage["load"] if scaled else None,
                              o.get("btl", False))
    except BenchkitError as exc:
        raise BenchkitError(f"plan pre-flight: {exc}") from None
    finally:
        _close(backend)
    say(f"plan pre-flight: the highest drive is {drive:.1f} dBFS (step {step.title(i)}): the input, the pad and "
        "the rail allow it")
    for w in got.warnings:
        say(f"warning: plan pre-flight: {w}")


def _close(backend) -> None:
    close = getattr(backend, "close", None)
    if close is not None:
        close()


# --- running it -------------------------------------------------------------------------


@dataclass(frozen=True)
class SessionEnd:
    """How a session ended: its record (``doc``) and its folder."""

    doc: dict
    folder: Path

    @property
    def complete(self) -> bool:
        return self.doc["status"] == "complete"


def _alive(pid) -> bool:
    """Whether the process that ran a session is still there (not this one)."""
    from benchkit.logbook import process_alive

    return isinstance(pid, int) and pid != os.getpid() and process_alive(pid)


def _newest(root: Path, session_id: str, kind: str, since: str) -> str | None:
    """The run a step filed (the session's newest run of its kind since it began), if any."""
    from benchkit.logbook import CATALOG, Logbook

    if not (Path(root) / CATALOG).exists():
        return None
    with Logbook(root) as book:
        got = book.entries(command=kind, session=session_id, since=since, limit=1)
    return got[0].id if got else None


def _stop(root: Path, doc: dict, rest: list[int], why: str) -> None:
    """The session stopped: the steps not reached are skipped, and it says so on disk."""
    for j in rest:
        doc["steps"][j].update(state="skipped", error=f"not measured: the session stopped ({why})")
    doc.update(status="interrupted", finished=now_iso())
    save(root, doc)


def _clock(seconds: float) -> str:
    seconds = int(round(seconds))
    return f"{seconds // 60}:{seconds % 60:02d}"


def run_session(plan: Plan, root: Path, say: Callable[[str], None], ask: Callable[[str], None] = lambda _t: "",
                changes: dict | None = None, resume: str | None = None) -> SessionEnd:
    """Measure ``plan`` on the bench folder ``root`` as one session (or
    take up the session ``resume``: its steps not complete, measured
    again). Ctrl-C or a lost device raises :class:`SessionInterrupted`
    once the session's record says so."""
    from benchkit import bench
    from benchkit.capture.portaudio import CaptureInterrupted
    from benchkit.logbook import check_writable

    root = Path(root)
    check_writable(root)
    if resume is not None:
        doc = read_session(root, resume)
        if doc["status"] == "complete":
            raise BenchkitError(f"session {doc['id']} is complete: nothing is left to measure")
        if doc["status"] == "running" and _alive(doc.get("pid")):
            raise BenchkitError(f"session {doc['id']} is running (process {doc['pid']}): let it end, or stop it first")
        plan = plan_of(doc)
        doc.update(status="running", finished=None, pid=os.getpid())
    else:
        plan = plan.with_stage(changes or {})
    preflight(plan, root, say)
    if resume is None:
        doc = _new(root, plan, changes or {})
    save(root, doc)
    todo = [i for i, st in enumerate(doc["steps"]) if st["state"] != "complete"]
    say(f"session {doc['id']}: {plan.name}, {units.count(len(todo), 'step')} to measure"
        + (f" of {len(doc['steps'])} (resumed)" if resume is not None else "")
        + f"; tags {', '.join(f'{k}={v}' for k, v in doc['tags'].items())}")
    t0, done = time.monotonic(), 0
    for at, i in enumerate(todo):
        st, step = doc["steps"][i], plan.steps[i]
        left = "" if not done else f", about {_clock((time.monotonic() - t0) / done * (len(todo) - at))} left"
        began, since = time.monotonic(), datetime.now().astimezone().isoformat(timespec="milliseconds")
        why, lost = None, False
        try:  # (Ctrl-C between steps ends the session as well as within one)
            say(f"[{i + 1}/{len(doc['steps'])}] {step.kind}" + (f": {step.label}" if step.label else "")
                + f" ({_clock(time.monotonic() - t0)} so far{left})")
            filed = bench.measure(step.kind, plan.options(i, root, doc["id"]), say, ask)
        except CaptureInterrupted as exc:
            why, lost = str(exc), exc.device_lost
            st.update(state="interrupted", error=str(exc))
        except BenchkitError as exc:
            st.update(state="failed", error=str(exc))
            say(f"step {step.title(i)} failed: {exc}")
        except BaseException as exc:  # Ctrl-C (at a prompt too), or a fault: the record says so, then it goes on up
            ctrl_c = isinstance(exc, KeyboardInterrupt) or type(exc).__name__ == "Abort"
            why = "interrupted" if ctrl_c else f"{type(exc).__name__}: {exc}"
            st.update(state="interrupted" if ctrl_c else "failed", error="interrupted (Ctrl-C)" if ctrl_c else why,
                      run=_newest(root, doc["id"], step.kind, since))
            _stop(root, doc, todo[at + 1:], why)
            if ctrl_c:
                raise SessionInterrupted(doc, why) from None
            raise
        else:
            stopped = filed.ended or (filed.status if filed.status != "complete" else None)
            st.update(run=filed.run.id, error=None if stopped is None else f"it ended early: {stopped}",
                      state="complete" if stopped is None else "interrupted")
            if filed.early:  # a capture that stopped before its last step (the input clipped): filed, said
                st["error"] = f"stopped early: {filed.early[0]}"
                say(f"warning: step {step.title(i)} stopped early: {filed.early[0]}")
            if stopped is not None:
                why, lost = stopped, filed.ended == "device-lost"
        if st["run"] is None:
            st["run"] = _newest(root, doc["id"], step.kind, since)  # what an interrupted or failed step filed
        st["seconds"] = round(time.monotonic() - began, 3)
        done += 1
        if why is not None:
            _stop(root, doc, todo[at + 1:], why)
            raise SessionInterrupted(doc, why, lost)
        save(root, doc)
    states = [st["state"] for st in doc["steps"]]
    doc.update(status="complete" if all(s == "complete" for s in states) else "incomplete", finished=now_iso())
    save(root, doc)
    failed = states.count("failed")
    say(f"session {doc['id']}: {doc['status']}, {units.count(states.count('complete'), 'step')} measured"
        + (f", {failed} failed ('benchkit plan resume {doc['id']}' measures them again)" if failed else "")
        + f" in {_clock(time.monotonic() - t0)}")
    return SessionEnd(doc, folder_of(root, doc["id"]))
