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
#: a step's states; a session's are running, complete, incomplete (a step failed) and interrupted
STEP_STATES = ("pending", "complete", "interrupted", "failed", "skipped")


class SessionInterrupted(BenchkitError):
    """The session stopped before its last step (Ctrl-C, a lost device):
    what it measured is filed, the rest marked skipped."""

    def __init__(self, doc: dict, why: str, device_lost: bool = False):
        super().__init__(f"{why}: session {doc['id']} stopped; what it measured is filed, the rest is marked skipped "
                         f"('benchkit plan resume {doc['id']}' measures it)")
        self.doc, self.device_lost = doc, device_lost


def folder_of(root: Path, session_id: str) -> Path:
    return Path(root) / SESSIONS / session_id


def save(root: Path, doc: dict) -> None:
    write_json_atomic(doc, folder_of(root, doc["id"]) / SESSION_FILE)


def all_sessions(root: Path) -> list[dict]:
    """Every session of a bench folder, newest first (a damaged record is left out)."""
    found = []
    base = Path(root) / SESSIONS
    for path in sorted(base.glob(f"*/{SESSION_FILE}"), reverse=True) if base.is_dir() else []:
        try:
            doc = load_json(path)
        except (OSError, ValueError):
            continue
        if isinstance(doc, dict) and doc.get("kind") == SESSION_KIND:
            found.append(doc)
    return found


def read_session(root: Path, ref: str) -> dict:
    """A session by its id, a unique prefix of it, or 'last' / 'last-N'."""
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
    step's options checked as its command checks them, then the highest
    drive of any step against the drive cap, and with one low probe step
    through the stage, against the pad, the rail and the input (a power
    step finds its own top step, below the input's full scale, when it
    runs)."""
    from benchkit import bench, record
    from benchkit.signals import check_level

    playing = []
    for i, step in enumerate(plan.steps):
        o = plan.options(i, root)
        live = kinds.get(step.kind).live
        if live.opens is not None and live.other is None:
            bench.check_within(o["rate"], dict(live.opens(o)).get("within", ()))
        playing += [(i, text) for text in _drive_of(step.kind, o)]
    if not playing:
        say("plan pre-flight: no step plays a set level (power finds its own, noise and drift play nothing)")
        return
    o = plan.options(playing[0][0], root)
    backend, profile = bench.live_setup(o, lambda _m: None, ref=o.get("ref_channel"), load=o.get("load"))
    try:
        drive, i = max((units.parse_level(text).to_dbfs(backend.output_vpk_per_fs), i) for i, text in playing)
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
        close = getattr(backend, "close", None)
        if close is not None:
            close()
    say(f"plan pre-flight: the highest drive is {drive:.1f} dBFS (step {step.title(i)}): the input, the pad and "
        "the rail allow it")
    for w in got.warnings:
        say(f"warning: plan pre-flight: {w}")


# --- running it -------------------------------------------------------------------------


@dataclass(frozen=True)
class SessionEnd:
    """How a session ended: its record (``doc``) and its folder."""

    doc: dict
    folder: Path

    @property
    def complete(self) -> bool:
        return self.doc["status"] == "complete"


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
        began = time.monotonic()
        why = None
        try:  # (Ctrl-C between steps ends the session as well as within one)
            say(f"[{i + 1}/{len(doc['steps'])}] {step.kind}" + (f": {step.label}" if step.label else "")
                + f" ({_clock(time.monotonic() - t0)} so far{left})")
            filed = bench.measure(step.kind, plan.options(i, root, doc["id"]), say, ask)
        except KeyboardInterrupt:
            why, lost = "interrupted", False
            st.update(state="interrupted", error="interrupted (Ctrl-C)")
        except CaptureInterrupted as exc:
            why, lost = str(exc), exc.device_lost
            st.update(state="interrupted", error=str(exc))
        except BenchkitError as exc:
            st.update(state="failed", error=str(exc))
            say(f"step {step.title(i)} failed: {exc}")
        else:
            st.update(run=filed.run.id, error=None,
                      state="complete" if filed.status == "complete" and filed.ended is None else "interrupted")
            if filed.ended is not None:
                why, lost = filed.ended, filed.ended == "device-lost"
        st["seconds"] = round(time.monotonic() - began, 3)
        done += 1
        if why is not None:
            for j in todo[at + 1:]:
                doc["steps"][j].update(state="skipped", error=f"not measured: the session stopped ({why})")
            doc.update(status="interrupted", finished=now_iso())
            save(root, doc)
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
