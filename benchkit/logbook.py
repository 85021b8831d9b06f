"""The bench logbook: every run's folder on disk, one SQLite catalog indexing them.

A bench folder (``--bench DIR``, else ``BENCHKIT_BENCH``, else the current
directory) holds::

    runs/<YYYYmmdd-HHMMSS>-<slug>/   one folder a run: captures, sidecars,
                                     results, CSV, PNG, and run.json
    trash/                           runs moved out by 'log remove'
    logbook.sqlite                   the catalog (WAL mode)
    bench.json                       remembered settings: the stage description

``run.json`` in each run folder is the run's own record and the source of
truth: the catalog is an index of those records and can be rebuilt from
them (:meth:`Logbook.rebuild`). Every change goes to ``run.json`` first
(written whole and renamed into place), then to the catalog in one
transaction.

A run is inserted as ``running`` when it starts, with its process id, and
its process holds an exclusive lock on the folder's ``.lock`` file while it
runs. A running run whose lock is free has lost its process (killed,
crashed, powered off): it is shown, and recorded, as ``incomplete``, its
captures kept for ``log reanalyse``.
"""

from __future__ import annotations

import contextlib
import json
import os
import re
import shutil
import socket
import sqlite3
import sys
import time
import unicodedata
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path
from typing import Callable, Iterator

from benchkit.errors import BenchkitError, read_warnings, warning_docs
from benchkit.recordings import write_text_atomic
from benchkit.jsonfile import INT, NUMBER, TEXT, load_json, loads, wrong_field

BENCH_ENV = "BENCHKIT_BENCH"
CATALOG = "logbook.sqlite"
RUNS, TRASH, SETTINGS, RECORD, LOCK = "runs", "trash", "bench.json", "run.json", ".lock"
#: The layout of the catalog this code writes; older ones are migrated.
SCHEMA_VERSION = 3
RECORD_KIND, RECORD_VERSION = "run", 1
#: How long a writer waits for another process's transaction, seconds.
BUSY_TIMEOUT_S = 30.0
#: The device of a run filed from a capture made elsewhere (``log file``, benchkit.filing).
FILED_DEVICE = "file"
#: What a run can be. "incomplete": its process went away while it ran.
STATUSES = ("running", "complete", "interrupted", "failed", "incomplete")


#: what a run record must hold, and what each field holds (None: may be null)
_RECORD_NEEDS = ("id", "started", "command", "status")
_RECORD_FIELDS = {
    "id": TEXT, "started": TEXT, "finished": TEXT + (None,), "command": TEXT, "status": TEXT,
    "result_kind": TEXT + (None,), "result_file": TEXT + (None,), "pid": INT + (None,), "host": TEXT + (None,),
    "device": TEXT + (None,), "calibration": (dict, None), "stage": (dict, None), "tags": (dict, None),
    "note": TEXT + (None,), "params": (dict, None), "files": (list, None), "valid": (bool, None),
    "warnings": (list, None), "figures": (list, None), "error": TEXT + (None,), "argv": (list, None),
    "retry_error": TEXT + (None,), "session": TEXT + (None,), "filed": (dict, None),
}
_FIGURE_FIELDS = {"name": TEXT, "value": NUMBER + (None,), "unit": TEXT, "at": TEXT + NUMBER + (None,)}


def _unwritable(root: Path, exc: OSError) -> BenchkitError:
    return BenchkitError(f"cannot write to the bench folder {root}: {exc.strerror or exc}; "
                         f"choose a writable one with --bench or {BENCH_ENV}")


def check_writable(root: Path) -> None:
    """Refuse a bench folder benchkit could not write to, leaving nothing
    behind: a file made and removed in it, or in the nearest folder above
    it that exists (a bench not made yet)."""
    here = next((q for q in (root, *root.absolute().parents) if q.exists()), None)
    try:
        if here is None or not here.is_dir():
            raise NotADirectoryError(f"{here} is not a folder")
        probe = here / f".write-check.{os.getpid()}"
        probe.touch()
        probe.unlink()
    except OSError as exc:
        raise _unwritable(root, exc) from None


def read_settings(root: Path) -> dict:
    """The bench folder's remembered settings (bench.json): {} when none."""
    path = Path(root) / SETTINGS
    try:
        doc = load_json(path)
    except FileNotFoundError:
        return {}
    except (OSError, ValueError) as exc:
        raise BenchkitError(f"{path}: unreadable bench settings ({exc})") from None
    return doc if isinstance(doc, dict) else {}


def resolve_bench(option: str | os.PathLike | None) -> Path:
    """The bench folder: the option, else BENCHKIT_BENCH, else the current directory."""
    if option:
        return Path(option)
    env = os.environ.get(BENCH_ENV, "").strip()
    return Path(env) if env else Path.cwd()


def now_iso() -> str:
    return datetime.now(timezone.utc).astimezone().isoformat(timespec="seconds")


def write_json_atomic(doc: dict, path: Path) -> Path:
    """A JSON document written whole and renamed into place."""
    return write_text_atomic(path, json.dumps(doc, indent=2, ensure_ascii=False, allow_nan=False) + "\n")


def slug(text: str, limit: int = 48) -> str:
    """A folder-name part: letters (any script) and digits kept, every run
    of anything else one '-'."""
    text = unicodedata.normalize("NFC", text)
    s = re.sub(r"[^\w.]+", "-", text, flags=re.UNICODE).strip("-._")
    return s[:limit].rstrip("-._") or "run"


def parse_tags(items: list[str], what: str = "a tag is key=value, e.g. bias=1.2A") -> dict[str, str]:
    """``key=value`` strings to a dict; a repeated key keeps the last value."""
    tags = {}
    for item in items:
        key, sep, value = item.partition("=")
        key, value = key.strip(), value.strip()
        if not sep or not key:
            raise BenchkitError(f"{what}; got {item!r}")
        tags[key] = value
    return tags


def read_stage(path: str | os.PathLike) -> dict:
    """A stage description from a file: a JSON object, or 'key: value'
    lines (blank lines and lines starting with # skipped)."""
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise BenchkitError(f"cannot read the stage description {p}: {getattr(exc, 'strerror', None) or exc}") from None
    if text.lstrip().startswith("{"):
        try:
            doc = loads(text)
        except ValueError as exc:
            raise BenchkitError(f"{p}: not valid JSON ({exc})") from None
        if not isinstance(doc, dict):
            raise BenchkitError(f"{p}: a stage description is one JSON object")
        return doc
    doc = {}
    for n, line in enumerate(text.splitlines(), 1):
        line = line.strip()
        if not line or line.startswith("#"):
            continue
        key, sep, value = line.partition(":")
        if not sep or not key.strip():
            raise BenchkitError(f"{p} line {n}: a stage description line is 'key: value', got {line!r}")
        doc[key.strip()] = value.strip()
    return doc


# --- the catalog's layout, version by version -----------------------------------

_V1 = """
CREATE TABLE meta (key TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE runs (
    id TEXT PRIMARY KEY,
    started TEXT NOT NULL,
    finished TEXT,
    command TEXT NOT NULL,
    kind TEXT,
    status TEXT NOT NULL,
    pid INTEGER,
    host TEXT,
    device TEXT,
    calibration_file TEXT,
    calibration_hash TEXT,
    stage TEXT,
    note TEXT NOT NULL DEFAULT '',
    valid INTEGER,
    warnings TEXT NOT NULL DEFAULT '[]',
    error TEXT
);
CREATE TABLE tags (
    run_id TEXT NOT NULL REFERENCES runs(id) ON DELETE CASCADE,
    key TEXT NOT NULL,
    value TEXT NOT NULL,
    PRIMARY KEY (run_id, key)
);
CREATE INDEX runs_started ON runs(started);
"""

_V2 = """
CREATE TABLE figures (
    run_id TEXT NOT NULL REFERENCES runs(id) ON DELETE CASCADE,
    name TEXT NOT NULL,
    value REAL,
    unit TEXT NOT NULL,
    at TEXT NOT NULL DEFAULT '',
    PRIMARY KEY (run_id, name)
);
"""


_V3 = """
ALTER TABLE runs ADD COLUMN session TEXT;
CREATE INDEX runs_session ON runs(session);
"""


def _script(db: sqlite3.Connection, sql: str) -> None:
    """Statements one by one, inside the caller's transaction
    (executescript would commit it first)."""
    for statement in sql.split(";"):
        if statement.strip():
            db.execute(statement)


def _to_v2(book: "Logbook", db: sqlite3.Connection) -> None:
    """Version 2 indexes each run's headline figures: take them from the
    run records on disk."""
    _script(db, _V2)
    for (run_id,) in db.execute("SELECT id FROM runs").fetchall():
        record = book.read_record(run_id, missing_ok=True)
        if record is not None:
            _put_figures(db, run_id, record.get("figures") or [])


def _to_v3(book: "Logbook", db: sqlite3.Connection) -> None:
    """Version 3 indexes the session a run was measured in (a plan's)."""
    _script(db, _V3)
    for (run_id,) in db.execute("SELECT id FROM runs").fetchall():
        record = book.read_record(run_id, missing_ok=True)
        if record is not None and record.get("session"):
            db.execute("UPDATE runs SET session = ? WHERE id = ?", (record["session"], run_id))


#: Step k takes a catalog from version k to k + 1.
MIGRATIONS: tuple[Callable[["Logbook", sqlite3.Connection], None], ...] = (
    lambda _book, db: _script(db, _V1),
    _to_v2,
    _to_v3,
)


def _put_figures(db, run_id: str, figures: list[dict]) -> None:
    db.execute("DELETE FROM figures WHERE run_id = ?", (run_id,))
    db.executemany("INSERT INTO figures (run_id, name, value, unit, at) VALUES (?, ?, ?, ?, ?)",
                   [(run_id, f["name"], f.get("value"), f.get("unit", ""), f.get("at", "")) for f in figures])


# --- locks: is a run's process still there? --------------------------------------

try:
    import fcntl
except ImportError:  # pragma: no cover - not POSIX
    fcntl = None


def _hold_lock(path: Path):
    """The run's lock, taken (BlockingIOError: another process holds it)."""
    fh = open(path, "a+")
    if fcntl is not None:
        try:
            fcntl.flock(fh.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            fh.close()
            raise
    return fh


def _lock_is_held(path: Path, pid: int | None) -> bool:
    """Whether a live process holds the run's lock (without fcntl: whether
    its process id is alive)."""
    if fcntl is None:
        if not pid:
            return False
        try:
            os.kill(pid, 0)
        except OSError:
            return False
        return True
    try:
        fd = os.open(path, os.O_RDWR)  # never made here: taken before the record says running, dropped after it ends
    except FileNotFoundError:
        return False
    except OSError:  # a read-only bench: fall back on the process id
        fd = None
    if fd is not None:
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            return True
        finally:
            os.close(fd)  # (closing drops a lock taken here)
        return False
    return process_alive(pid)


def process_alive(pid: int | None) -> bool:
    """Whether a process of this id is there (on this host)."""
    if not pid:
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


# --- the logbook -------------------------------------------------------------------

@dataclass
class RunEntry:
    """One catalog row, with its tags and figures."""

    id: str
    started: str
    finished: str | None
    command: str
    kind: str | None
    status: str
    device: str | None
    calibration_file: str | None
    calibration_hash: str | None
    stage: dict
    note: str
    valid: bool | None
    warnings: list[str]
    error: str | None
    tags: dict[str, str]
    figures: list[dict]
    folder: Path
    #: the session (a plan's) it was measured in
    session: str | None = None

    @property
    def filed(self) -> bool:
        """Filed from a capture made elsewhere (``log file``), not measured here."""
        return self.device == FILED_DEVICE

    def figure(self, name: str) -> float | None:
        return next((f["value"] for f in self.figures if f["name"] == name), None)

    def to_dict(self) -> dict:
        return {
            "id": self.id, "started": self.started, "finished": self.finished, "command": self.command,
            "kind": self.kind, "status": self.status, "device": self.device,
            "calibration": None if not self.calibration_hash else {"file": self.calibration_file, "hash": self.calibration_hash},
            "stage": self.stage, "note": self.note, "valid": self.valid, "warnings": warning_docs(self.warnings),
            "error": self.error, "tags": self.tags, "figures": self.figures, "folder": str(self.folder),
            "session": self.session,
        }


class Logbook:
    """A bench folder's runs and catalog.

    ``Logbook(root)`` opens (and creates, unless ``readonly``) the catalog;
    a catalog of an older layout is migrated, one of a newer layout is
    refused. Use it as a context manager, or call :meth:`close`.
    """

    def __init__(self, root: str | os.PathLike, readonly: bool = False):
        self.root = Path(root)
        self.readonly = readonly
        self.runs_dir = self.root / RUNS
        path = self.root / CATALOG
        if readonly:
            if not path.exists():
                raise BenchkitError(f"{self.root} holds no logbook yet ({CATALOG}): no runs have been recorded there")
        else:
            try:
                self.runs_dir.mkdir(parents=True, exist_ok=True)
            except OSError as exc:
                raise _unwritable(self.root, exc) from None
            check_writable(self.root)
        self.db = self._connect(path)
        try:
            self._migrate()
        except BaseException:
            self.db.close()
            raise

    def _connect(self, path: Path) -> sqlite3.Connection:
        try:
            if self.readonly:
                try:
                    db = sqlite3.connect(f"{path.resolve().as_uri()}?mode=ro", uri=True, timeout=BUSY_TIMEOUT_S)
                    db.execute("SELECT count(*) FROM sqlite_master").fetchone()
                except sqlite3.OperationalError:
                    # a WAL catalog in a folder we cannot write: read it as it stands
                    db = sqlite3.connect(f"{path.resolve().as_uri()}?immutable=1", uri=True)
            else:
                db = sqlite3.connect(str(path), timeout=BUSY_TIMEOUT_S, isolation_level=None)
                db.execute(f"PRAGMA busy_timeout = {int(BUSY_TIMEOUT_S * 1000)}")
                mode = self._wal(db)
                if mode.lower() != "wal":
                    raise BenchkitError(f"{path}: the catalog cannot use WAL mode here ({mode})")
            db.execute("PRAGMA foreign_keys = ON")
            db.row_factory = sqlite3.Row
            return db
        except sqlite3.DatabaseError as exc:
            raise BenchkitError(f"{path}: cannot open the catalog: {exc}") from None

    @staticmethod
    def _wal(db: sqlite3.Connection) -> str:
        """Switch a catalog to WAL. A new catalog opened by several
        processes at once can answer "locked" without waiting on the busy
        handler (the switch needs the file to itself): try again a while."""
        deadline = time.monotonic() + BUSY_TIMEOUT_S
        while True:
            try:
                return db.execute("PRAGMA journal_mode = WAL").fetchone()[0]
            except sqlite3.OperationalError:
                if time.monotonic() > deadline:
                    raise
                time.sleep(0.05)

    def close(self) -> None:
        self.db.close()

    def __enter__(self) -> "Logbook":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    @contextlib.contextmanager
    def _write(self) -> Iterator[sqlite3.Connection]:
        """One write transaction (BEGIN IMMEDIATE: writers queue, readers don't wait)."""
        if self.readonly:
            raise BenchkitError(f"the logbook in {self.root} was opened read-only")
        try:
            self.db.execute("BEGIN IMMEDIATE")
        except sqlite3.OperationalError as exc:
            raise BenchkitError(f"{self.root / CATALOG}: {exc} (another benchkit is writing; try again)") from None
        try:
            yield self.db
        except BaseException:
            self.db.execute("ROLLBACK")
            raise
        self.db.execute("COMMIT")

    # --- schema ---

    def schema_version(self) -> int:
        has_meta = self.db.execute("SELECT 1 FROM sqlite_master WHERE type = 'table' AND name = 'meta'").fetchone()
        if not has_meta:
            return 0
        row = self.db.execute("SELECT value FROM meta WHERE key = 'schema_version'").fetchone()
        return int(row[0]) if row else 0

    def _migrate(self) -> None:
        try:
            version = self.schema_version()
        except sqlite3.DatabaseError as exc:
            raise BenchkitError(f"{self.root / CATALOG}: not a benchkit catalog ({exc}); "
                                "move it aside and run 'benchkit log rebuild'") from None
        if version > SCHEMA_VERSION:
            raise BenchkitError(f"{self.root / CATALOG} is a version {version} catalog, newer than this benchkit "
                                f"reads (version {SCHEMA_VERSION}): upgrade benchkit to use this bench folder")
        if version == SCHEMA_VERSION:
            return
        if self.readonly:
            raise BenchkitError(f"{self.root / CATALOG} is a version {version} catalog and the bench folder is "
                                f"read-only: it cannot be migrated to version {SCHEMA_VERSION} here")
        with self._write() as db:
            version = self.schema_version()  # another process may have migrated it meanwhile
            for step in MIGRATIONS[version:]:
                step(self, db)
            db.execute("INSERT OR REPLACE INTO meta (key, value) VALUES ('schema_version', ?)", (str(SCHEMA_VERSION),))

    # --- records on disk ---

    def folder(self, run_id: str) -> Path:
        return self.runs_dir / run_id

    def read_record(self, run_id: str, missing_ok: bool = False) -> dict | None:
        path = self.folder(run_id) / RECORD
        try:
            doc = load_json(path)
        except FileNotFoundError:
            if missing_ok:
                return None
            raise BenchkitError(f"run {run_id}: its record {path} is missing") from None
        except (OSError, ValueError) as exc:
            raise BenchkitError(f"run {run_id}: its record {path} is unreadable ({exc})") from None
        if not isinstance(doc, dict) or doc.get("kind") != RECORD_KIND:
            raise BenchkitError(f"run {run_id}: {path} is not a benchkit run record")
        problem = ("missing " + ", ".join(k for k in _RECORD_NEEDS if k not in doc)) if any(
            k not in doc for k in _RECORD_NEEDS) else wrong_field(doc, _RECORD_FIELDS)
        for i, fig in enumerate(doc.get("figures") or []):
            problem = problem or (f"figures[{i}] is not an object" if not isinstance(fig, dict)
                                  else wrong_field(fig, _FIGURE_FIELDS, f"figures[{i}]."))
        if problem is None and doc["status"] not in STATUSES:
            problem = f"status is {doc['status']!r}"
        if problem:
            raise BenchkitError(f"run {run_id}: its record {path} is damaged ({problem})")
        return doc

    def _save_record(self, record: dict) -> None:
        write_json_atomic(record, self.folder(record["id"]) / RECORD)

    def _index(self, db, record: dict) -> None:
        """Put a run record into the catalog (insert or replace)."""
        cal = record.get("calibration") or {}
        db.execute("DELETE FROM tags WHERE run_id = ?", (record["id"],))
        db.execute(
            "INSERT OR REPLACE INTO runs (id, started, finished, command, kind, status, pid, host, device, "
            "calibration_file, calibration_hash, stage, note, valid, warnings, error, session) "
            "VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
            (record["id"], record["started"], record.get("finished"), record["command"], record.get("result_kind"),
             record["status"], record.get("pid"), record.get("host"), record.get("device"), cal.get("file"),
             cal.get("hash"), json.dumps(record.get("stage") or {}, ensure_ascii=False), record.get("note") or "",
             None if record.get("valid") is None else int(bool(record["valid"])),
             json.dumps(warning_docs(record.get("warnings")), ensure_ascii=False), record.get("error"),
             record.get("session")))
        db.executemany("INSERT INTO tags (run_id, key, value) VALUES (?, ?, ?)",
                       [(record["id"], k, str(v)) for k, v in (record.get("tags") or {}).items()])
        _put_figures(db, record["id"], record.get("figures") or [])

    # --- a run's life ---

    def _new_folder(self, started: datetime, name: str) -> Path:
        base = f"{started:%Y%m%d-%H%M%S}-{slug(name)}"
        for k in range(1, 1000):
            path = self.runs_dir / (base if k == 1 else f"{base}-{k}")
            try:
                path.mkdir()
                return path
            except FileExistsError:
                continue
            except OSError as exc:
                raise BenchkitError(f"cannot create a run folder in {self.runs_dir}: {exc.strerror or exc}") from None
        raise BenchkitError(f"{self.runs_dir}: a thousand runs named {base}: pick another name")

    def start(self, command: str, *, tags: dict | None = None, note: str = "", stage: dict | None = None,
              device: str | None = None, calibration: dict | None = None, params: dict | None = None,
              argv: list[str] | None = None, session: str | None = None, filed: dict | None = None) -> "Run":
        """Make the run's folder, write its record and insert it as running
        (``session``: the session it is measured in, a plan's; ``filed``:
        a capture made elsewhere, where it came from). The returned
        :class:`Run` holds the folder's lock until it ends."""
        started = datetime.now(timezone.utc).astimezone()
        tags = dict(tags or {})
        folder = self._new_folder(started, "-".join([command, *(f"{k}-{v}" for k, v in tags.items())]))
        lock = _hold_lock(folder / LOCK)
        record = {
            "kind": RECORD_KIND, "schema_version": RECORD_VERSION, "id": folder.name, "command": command,
            # to the millisecond: runs started within one second keep their order
            "started": started.isoformat(timespec="milliseconds"), "finished": None, "status": "running",
            "pid": os.getpid(), "host": socket.gethostname(), "argv": list(argv if argv is not None else sys.argv[1:]),
            "device": device, "calibration": calibration, "stage": stage or {}, "tags": tags, "note": note,
            "params": params or {}, "result_kind": None, "result_file": None, "files": [], "valid": None,
            "warnings": [], "figures": [], "error": None, "session": session,
        }
        if filed is not None:
            record["filed"] = filed
        try:
            self._save_record(record)
            with self._write() as db:
                self._index(db, record)
        except BaseException:
            lock.close()
            raise
        return Run(self, record, folder, lock)

    def resume(self, run_id: str) -> "Run":
        """Take up a run that has ended (to analyse it again): its lock,
        its record marked running by this process."""
        folder = self.folder(run_id)
        try:
            lock = _hold_lock(folder / LOCK)
        except BlockingIOError:
            raise BenchkitError(f"run {run_id} is still running (process {self._pid(run_id)})") from None
        except OSError as exc:
            raise BenchkitError(f"cannot take up run {run_id} in {folder}: {exc.strerror or exc}") from None
        try:
            record = self.read_record(run_id)
            before = dict(record)
            record.update(status="running", pid=os.getpid(), host=socket.gethostname())
            self.update(record)
        except BaseException:
            lock.close()
            raise
        return Run(self, record, folder, lock, before)

    def update(self, record: dict) -> None:
        """Write a changed record, then its row, in that order."""
        self._save_record(record)
        with self._write() as db:
            self._index(db, record)

    def reap(self) -> list[str]:
        """Mark every running run whose process has gone as incomplete;
        returns their ids."""
        gone = []
        for row in self.db.execute("SELECT id, pid FROM runs WHERE status = 'running'").fetchall():
            if not _lock_is_held(self.folder(row["id"]) / LOCK, row["pid"]):
                gone.append(row["id"])
        if self.readonly:
            return gone
        for run_id in gone:
            try:
                record = self.read_record(run_id, missing_ok=True)
            except BenchkitError:  # a damaged record: listed as it is, 'log rebuild' says why
                continue
            if record is None or record.get("status") != "running":
                continue
            record["status"] = "incomplete"
            record["error"] = record.get("error") or "its process went away while it ran (killed or crashed)"
            self.update(record)
            self._clear_leftovers(run_id)
        return gone

    def _clear_leftovers(self, run_id: str) -> None:
        """What a run whose process went away left behind: the files it was
        writing (``.*.tmp``) and its lock, taken first (a run being taken
        up again holds it: then nothing is touched)."""
        folder = self.folder(run_id)
        try:
            lock = _hold_lock(folder / LOCK)
        except OSError:  # held: taken up again meanwhile
            return
        try:
            for leftover in folder.glob(".*.tmp"):
                leftover.unlink(missing_ok=True)
            (folder / LOCK).unlink(missing_ok=True)
        finally:
            lock.close()

    # --- reading the catalog ---

    def _entry(self, row, incomplete: set[str]) -> RunEntry:
        tags = dict(self.db.execute("SELECT key, value FROM tags WHERE run_id = ? ORDER BY key", (row["id"],)).fetchall())
        figures = [dict(r) for r in self.db.execute(
            "SELECT name, value, unit, at FROM figures WHERE run_id = ? ORDER BY rowid", (row["id"],)).fetchall()]
        status = "incomplete" if row["id"] in incomplete else row["status"]
        return RunEntry(
            id=row["id"], started=row["started"], finished=row["finished"], command=row["command"], kind=row["kind"],
            status=status, device=row["device"], calibration_file=row["calibration_file"],
            calibration_hash=row["calibration_hash"], stage=json.loads(row["stage"] or "{}"), note=row["note"],
            valid=None if row["valid"] is None else bool(row["valid"]), warnings=list(read_warnings(json.loads(row["warnings"] or "[]"))),
            error=row["error"], tags=tags, figures=figures, folder=self.folder(row["id"]), session=row["session"])

    def entries(self, tags: dict[str, str] | None = None, command: str | None = None, status: str | None = None,
                since: str | None = None, until: str | None = None, limit: int | None = None,
                session: str | None = None) -> list[RunEntry]:
        """Runs newest first, filtered by tags (all must match), command,
        status, start time (ISO dates or times, compared as text) and
        session."""
        if status is not None and status not in STATUSES:
            raise BenchkitError(f"no run can be {status!r}: the states are {', '.join(STATUSES)}")
        if limit is not None and limit < 1:
            raise BenchkitError(f"the limit is a count of runs, 1 or more, got {limit}")
        incomplete = set(self.reap())
        sql, args = "SELECT * FROM runs WHERE 1 = 1", []
        for key, value in (tags or {}).items():
            sql += " AND EXISTS (SELECT 1 FROM tags t WHERE t.run_id = runs.id AND t.key = ? AND t.value = ?)"
            args += [key, value]
        if command:
            sql += " AND command = ?"
            args.append(command)
        if session:
            sql += " AND session = ?"
            args.append(session)
        if since:
            sql += " AND started >= ?"
            args.append(since)
        if until:
            sql += " AND substr(started, 1, ?) <= ?"
            args += [len(until), until]
        sql += " ORDER BY started DESC, id DESC"
        rows = self.db.execute(sql, args).fetchall()
        out = [self._entry(r, incomplete) for r in rows]
        if status:
            out = [e for e in out if e.status == status]
        return out if limit is None else out[:limit]

    def entry(self, ref: str) -> RunEntry:
        """One run by its id, a unique prefix of it, or 'last' / 'last-N'
        (the newest, the N-th newest)."""
        m = re.fullmatch(r"last(?:-(\d+))?", ref)
        if m:
            n = int(m.group(1) or 0)
            got = self.entries(limit=n + 1)
            if len(got) <= n:
                raise BenchkitError(f"the logbook in {self.root} has {len(got)} run(s): there is no {ref}")
            return got[n]
        rows = self.db.execute("SELECT * FROM runs WHERE id = ? OR id LIKE ? ESCAPE '\\' ORDER BY id",
                               (ref, ref.replace("\\", "\\\\").replace("%", "\\%").replace("_", "\\_") + "%")).fetchall()
        exact = [r for r in rows if r["id"] == ref]
        rows = exact or rows
        if not rows:
            raise BenchkitError(f"no run {ref!r} in the logbook in {self.root} ('benchkit log list' shows them)")
        if len(rows) > 1:
            raise BenchkitError(f"{ref!r} matches {len(rows)} runs ({', '.join(r['id'] for r in rows[:3])}...): give more of the name")
        return self._entry(rows[0], set(self.reap()))

    # --- edits ---

    def set_note(self, run_id: str, note: str, append: bool = False) -> dict:
        record = self.read_record(run_id)
        record["note"] = f"{record['note']}\n{note}".strip() if append and record.get("note") else note
        self.update(record)
        return record

    def set_tags(self, run_id: str, tags: dict[str, str], remove: list[str] = ()) -> dict:
        record = self.read_record(run_id)
        merged = {**(record.get("tags") or {}), **tags}
        for key in remove:
            merged.pop(key, None)
        record["tags"] = merged
        self.update(record)
        return record

    def remove(self, run_id: str) -> Path:
        """Move a run's folder to trash/ and take it out of the catalog."""
        entry = self.entry(run_id)
        if entry.status == "running":
            raise BenchkitError(f"run {entry.id} is still running (process {self._pid(entry.id)}): stop it first")
        trash = self.root / TRASH
        trash.mkdir(exist_ok=True)
        dest = trash / entry.id
        k = 1
        while dest.exists():
            k += 1
            dest = trash / f"{entry.id}.{k}"
        if entry.folder.exists():
            shutil.move(str(entry.folder), str(dest))
        with self._write() as db:
            db.execute("DELETE FROM runs WHERE id = ?", (entry.id,))
        return dest

    def _pid(self, run_id: str):
        row = self.db.execute("SELECT pid FROM runs WHERE id = ?", (run_id,)).fetchone()
        return row["pid"] if row else None

    def rebuild(self) -> tuple[int, list[str]]:
        """Index every run folder afresh (the catalog lost or damaged):
        returns how many runs were indexed and what was skipped, and why."""
        skipped, records = [], []
        for folder in sorted(p for p in self.runs_dir.iterdir() if p.is_dir()) if self.runs_dir.exists() else []:
            try:
                record = self.read_record(folder.name)
            except BenchkitError as exc:
                skipped.append(str(exc))
                continue
            if record.get("id") != folder.name:
                record["id"] = folder.name  # a folder renamed by hand keeps its new name
            records.append(record)
        with self._write() as db:
            db.execute("DELETE FROM runs")
            for record in records:
                self._index(db, record)
        self.reap()
        return len(records), skipped

    # --- the remembered stage ---

    def settings(self) -> dict:
        return read_settings(self.root)

    def remember_stage(self, stage: dict) -> None:
        doc = {"kind": "bench-settings", "schema_version": 1, **self.settings(), "stage": stage}
        write_json_atomic(doc, self.root / SETTINGS)


class Run:
    """A run in progress: its folder, its record, and the lock that says
    its process is alive. End it with :meth:`complete` or :meth:`fail`;
    as a context manager an exception ends it as failed (or interrupted)
    and goes on."""

    def __init__(self, book: Logbook, record: dict, folder: Path, lock, before: dict | None = None):
        self.book, self.record, self.folder, self._lock = book, record, folder, lock
        #: a run taken up again: its record as it was, kept if the new attempt fails
        self._before = before

    @property
    def id(self) -> str:
        return self.record["id"]

    def _end(self, status: str) -> None:
        self.record["status"] = status
        self.record["finished"] = now_iso()
        try:
            self.book.update(self.record)
        finally:
            (self.folder / LOCK).unlink(missing_ok=True)  # held until here: no empty lock file stays behind
            self._lock.close()
            self._lock = None

    def complete(self, doc: dict, files: list[Path], result_file: Path | None = None, status: str = "complete", *,
                 figures: list[dict]) -> None:
        """Record the result (already written to disk) with its headline
        ``figures`` (benchkit.kinds.headline_figures: the logbook
        stores them, it does not work them out) and end the run."""
        self.record.update(
            result_kind=doc.get("kind"),
            result_file=None if result_file is None else Path(result_file).name,
            files=sorted({Path(f).name for f in files} | {p.name for p in self.folder.iterdir()
                                                          if p.is_file() and not p.name.startswith(".")}),
            valid=_valid(doc), warnings=_warnings(doc), figures=figures,
            error=None)
        self.record.pop("retry_error", None)
        self._end(status)

    def fail(self, message: str, status: str = "failed") -> None:
        if self._before is not None:  # a failed second look keeps what the run was, and why
            self.record = {**self._before, "retry_error": message}
            try:
                self.book.update(self.record)
            finally:
                (self.folder / LOCK).unlink(missing_ok=True)
                self._lock.close()
                self._lock = None
            return
        self.record["error"] = message
        self.record["files"] = sorted(p.name for p in self.folder.iterdir() if p.is_file() and not p.name.startswith("."))
        self._end(status)

    def __enter__(self) -> "Run":
        return self

    def __exit__(self, kind, exc, _tb) -> None:
        if self._lock is None:
            return
        if exc is None:
            self.fail("the run ended without a result")
        elif isinstance(exc, KeyboardInterrupt) or str(exc).startswith("interrupted"):
            self.fail(str(exc) or "interrupted", status="interrupted")
        else:
            self.fail(str(exc) or type(exc).__name__)


def _valid(doc: dict) -> bool | None:
    if "valid" in doc:
        return bool(doc["valid"])
    steps = doc.get("steps")
    if isinstance(steps, list) and steps:
        return all(s.get("valid", True) for s in steps)
    return None


def _warnings(doc: dict) -> list[dict]:
    out = warning_docs(doc.get("warnings"))
    for s in doc.get("steps") or []:
        for w in warning_docs(s.get("warnings")):
            if w not in out:
                out.append(w)
    return out


def rebuild_bench(root: Path, say: Callable[[str], None] = lambda _m: None) -> tuple[int, list[str]]:
    """Index every run folder of a bench afresh (``log rebuild``): a
    damaged catalog is moved aside first (and said). Returns how many runs
    were indexed and why others were skipped."""
    catalog = root / CATALOG
    try:
        book = Logbook(root)
    except BenchkitError as exc:
        if "not a benchkit catalog" not in str(exc) and "cannot open the catalog" not in str(exc):
            raise
        aside = catalog.with_name(f"{catalog.name}.damaged-{datetime.now():%Y%m%d-%H%M%S}")
        catalog.rename(aside)
        for extra in ("-wal", "-shm"):
            catalog.with_name(catalog.name + extra).unlink(missing_ok=True)
        say(f"the catalog was damaged: moved aside to {aside.name}")
        book = Logbook(root)
    with book:
        return book.rebuild()


def open_bench(option: str | os.PathLike | None, write: bool = False) -> Logbook:
    """The logbook of the bench folder ``option`` names (:func:`resolve_bench`),
    for a command that reads it (``write``: or changes it): a folder
    without one is refused unless ``write``; one that cannot be written is
    opened read-only unless ``write``."""
    root = resolve_bench(option)
    if not (root / CATALOG).exists() and not write:
        raise BenchkitError(f"{root} holds no logbook ({CATALOG}): run a measurement there, or give --bench")
    try:
        return Logbook(root)
    except BenchkitError as exc:
        if write or not str(exc).startswith("cannot write"):
            raise
        return Logbook(root, readonly=True)
