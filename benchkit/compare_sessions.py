"""Comparing whole sessions: every measurement of one against the same
measurement of the others, in one table.

The steps of two or more sessions (:mod:`benchkit.session`) pair by kind
and by the options the plan gave the step (the stage's values, the point
of the comparison, may differ); each pair is compared as ``compare``
compares runs (:func:`benchkit.compare_runs.compare_runs`, its folder
inside the session comparison's), unlike conditions refused unless
``anyway``. What no other session measured is listed, not compared.
"""

from __future__ import annotations

import csv
import json
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

from benchkit.compare_runs import ComparisonReport, compare_runs, comparison_folder
from benchkit.errors import BenchkitError
from benchkit.logbook import Logbook, slug
from benchkit.session import read_session


@dataclass(frozen=True)
class Pair:
    """One measurement in every session: its step (in the first), and the
    comparison of its runs."""

    n: int
    kind: str
    label: str
    report: ComparisonReport


@dataclass(frozen=True)
class SessionComparison:
    folder: Path
    sessions: tuple[dict, ...]
    labels: tuple[str, ...]
    pairs: tuple[Pair, ...]
    unpaired: tuple[str, ...]
    files: tuple[Path, ...]
    text: str

    @property
    def comparable(self) -> bool:
        return all(p.report.comparison.comparable for p in self.pairs)

    def to_dict(self) -> dict:
        return {"kind": "session-comparison", "schema_version": 1, "sessions": [d["id"] for d in self.sessions],
                "labels": list(self.labels), "comparable": self.comparable, "unpaired": list(self.unpaired),
                "pairs": [{**p.report.comparison.to_dict(), "step": p.n, "kind": p.kind, "label": p.label,
                           "folder": str(p.report.folder), "run_ids": [e.id for e in p.report.entries]}
                          for p in self.pairs]}


def session_labels(docs: list[dict]) -> list[str]:
    """What each session is called: the tags in which they differ, else their ids."""
    keys = sorted({k for d in docs for k in d.get("tags", {})})
    differ = [k for k in keys if len({d.get("tags", {}).get(k) for d in docs}) > 1]
    labels = [", ".join(f"{k}={d['tags'][k]}" for k in differ if k in d.get("tags", {})) for d in docs]
    return labels if all(labels) and len(set(labels)) == len(labels) else [d["id"] for d in docs]


def _key(step: dict) -> tuple[str, str]:
    return step["kind"], json.dumps(step.get("options") or {}, sort_keys=True)


def pair_steps(docs: list[dict]) -> tuple[list[tuple[dict, list[str]]], list[str]]:
    """The first session's complete steps with a complete step of the same
    kind and options in every other (each used once), with their runs;
    and what stays unpaired, said."""
    pairs, unpaired = [], []
    used = [set() for _ in docs]
    for step in docs[0]["steps"]:
        if step["state"] != "complete" or not step["run"]:
            unpaired.append(f"step {step['n']} ({step['kind']}) is {step['state']} in {docs[0]['id']}")
            continue
        matches = []
        for k, other in enumerate(docs[1:], start=1):
            match = next((s for s in other["steps"] if s["state"] == "complete" and s["run"] and s["n"] not in used[k]
                          and _key(s) == _key(step)), None)
            if match is None:
                unpaired.append(f"step {step['n']} ({step['kind']}) has no like measurement in {other['id']}")
                break
            matches.append(match)
        else:  # (a step is taken only once it pairs in every session)
            for k, match in enumerate(matches, start=1):
                used[k].add(match["n"])
            pairs.append((step, [step["run"]] + [m["run"] for m in matches]))
    return pairs, unpaired


def _compared(root: Path, runs: list[str], anyway: bool, out: Path, title: str) -> ComparisonReport:
    """One measurement's runs compared, into its folder (a process of a pool may do it)."""
    with Logbook(root) as book:
        try:
            return compare_runs(book, runs, anyway=anyway, out=out, title=title)
        except BenchkitError as exc:
            raise BenchkitError(f"step {out.name[:2].lstrip('0')} ({out.name[3:]}): {exc}") from None


def compare_sessions(book: Logbook, refs: list[str], anyway: bool = False, out: Path | None = None,
                     each: Callable = map) -> SessionComparison:
    """Compare sessions (ids, unique starts, 'last', 'last-N'), the first
    the baseline, into one folder (default: comparisons/<time>-sessions-<first>
    in the bench folder): per measurement its own comparison folder, and
    across every kind the table (CSV), the comparison (JSON) and a summary.
    ``each`` maps the measurements' comparisons (a process pool's map
    draws their plots side by side)."""
    from benchkit.recordings import write_text_atomic
    from benchkit.report.tables import write_json

    if len(refs) < 2:
        raise BenchkitError("name two or more sessions to compare")
    docs = [read_session(book.root, r) for r in refs]
    if len({d["id"] for d in docs}) < len(docs):
        raise BenchkitError("a session is named twice: compare different sessions")
    labels = session_labels(docs)
    found, unpaired = pair_steps(docs)
    if not found:
        raise BenchkitError("the sessions share no complete measurement of the same kind and options: nothing compares")
    out = comparison_folder(book, out, f"sessions-{slug(docs[0]['id'][16:], 30)}")
    steps = [step for step, _runs in found]
    reports = list(each(_compared, [book.root] * len(found), [runs for _s, runs in found], [anyway] * len(found),
                        [out / f"{s['n']:02d}-{s['kind']}" for s in steps],
                        [f"{docs[0]['name']}: {s['kind']}" + (f" ({s['label']})" if s["label"] else "") for s in steps]))
    pairs = [Pair(step["n"], step["kind"], step["label"], report) for step, report in zip(steps, reports)]
    files = [f for report in reports for f in report.files]
    result = SessionComparison(out, tuple(docs), tuple(labels), tuple(pairs), tuple(unpaired), (), "")
    text = comparison_text(result)
    files = [write_json(result.to_dict(), out / "sessions.json"), write_table(result, out / "sessions.csv"),
             write_text_atomic(out / "summary.txt", text + "\n"), *files]
    return SessionComparison(out, tuple(docs), tuple(labels), tuple(pairs), tuple(unpaired), tuple(files), text)


def rows(c: SessionComparison, every: bool = False):
    """(pair, delta) in table order: each measurement's headline figures,
    then (``every``, or while few) the rest that have a better direction."""
    for p in c.pairs:
        deltas = p.report.comparison.deltas
        head = [d for d in deltas if d.headline]
        seen = {(d.label, d.at) for d in head}  # (a headline figure is often one of the rest too)
        rest = [d for d in deltas if not d.headline and (every or (d.better and (d.label, d.at) not in seen))]
        for d in head + (rest if every else rest[: max(0, 6 - len(head))]):
            yield p, d


def write_table(c: SessionComparison, path: Path) -> Path:
    """Every figure of every measurement, one row each: the values in each
    session, the change from the first and the verdict."""
    n = len(c.labels)
    with path.open("w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(["step", "kind", "figure", "label", "at", "unit", "better_when",
                    *(f"value [{k}] {lab}" for k, lab in enumerate(c.labels)),
                    *(f"change [{k}]-[0]" for k in range(1, n)), *(f"verdict [{k}]" for k in range(1, n)),
                    "like_for_like"])
        for p, d in rows(c, every=True):
            w.writerow([p.n, p.kind, d.name, d.label, d.at, d.unit, d.better or "",
                        *("" if v is None else f"{v:.6g}" for v in d.values),
                        *("" if ch is None else f"{ch:+.6g}" for ch in d.changes),
                        *(d.verdict(k) or "" for k in range(1, n)), "yes" if p.report.comparison.comparable else "NO"])
    return path


def comparison_text(c: SessionComparison) -> str:
    """The table on one screen: every measurement's headline figures."""
    from benchkit.report.summary import delta_table, levels_shown

    lines = [f"!! NOT LIKE FOR LIKE: {p.kind} (step {p.n}): {w}" for p in c.pairs for w in p.report.comparison.warnings]
    lines.append("sessions: " + "; ".join(f"[{k}] {lab} ({d['id']})" for k, (lab, d) in enumerate(zip(c.labels, c.sessions)))
                 + " (changes are from [0])")
    groups: list = []
    for p, d in rows(c):
        if not groups or groups[-1][0] is not p:
            groups.append((p, []))
        groups[-1][1].extend(levels_shown([d], p.report.scales))
    if groups:
        lines.append(delta_table([(f"{p.n}. {p.kind}" + (f" ({p.label})" if p.label else ""), ds) for p, ds in groups],
                                 len(c.labels)))
    lines += [f"not compared: {u}" for u in c.unpaired]
    return "\n".join(lines)
