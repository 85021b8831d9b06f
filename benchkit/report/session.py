"""What the plan commands show: a plan step by step, the sessions of a
bench, one session in full."""

from __future__ import annotations

from pathlib import Path


def _options(given: dict) -> str:
    return ", ".join(f"{k.replace('_', '-')}={v}" for k, v in given.items()) or "its defaults"


def plan_lines(plan) -> list[str]:
    """A plan as read: its stage, its tags and what each step measures."""
    lines = [f"plan {plan.source}: {plan.name}",
             "  stage        " + ", ".join(f"{k} {v}" for k, v in plan.stage.items() if k != "name"),
             "  tags         " + ", ".join(f"{k}={v}" for k, v in plan.session_tags().items())]
    if plan.bench:
        lines.append("  bench        " + _options({k: str(v) if isinstance(v, Path) else v for k, v in plan.bench.items()}))
    for i, step in enumerate(plan.steps):
        lines.append(f"  {step.title(i):<24} line {step.line}: {_options(step.given)}")
    return lines


def sessions_lines(docs: list[dict]) -> list[str]:
    """Each session: its id, state, plan and tags, and how far it got."""
    width = max(len(d["id"]) for d in docs)
    lines = [f"  {'session':<{width}}  {'status':<11} steps  tags"]
    for d in docs:
        done = sum(s["state"] == "complete" for s in d["steps"])
        tags = " ".join(f"{k}={v}" for k, v in d["tags"].items())
        lines.append(f"  {d['id']:<{width}}  {d['status']:<11} {done}/{len(d['steps']):<4} {tags}")
    return lines


def session_lines(doc: dict) -> list[str]:
    """One session: when, its plan and stage, each step's state and run."""
    lines = [f"session {doc['id']}: {doc['name']}, {doc['status']}",
             f"  started      {doc['started']}" + (f", finished {doc['finished']}" if doc.get("finished") else ""),
             f"  plan         {doc['plan_file']}" + (f" with {_options(doc['changes'])}" if doc.get("changes") else ""),
             "  stage        " + ", ".join(f"{k} {v}" for k, v in doc["stage"].items() if k != "name"),
             "  tags         " + ", ".join(f"{k}={v}" for k, v in doc["tags"].items())]
    for s in doc["steps"]:
        what = f"{s['n']}. {s['kind']}" + (f" ({s['label']})" if s["label"] else "")
        lines.append(f"  {what:<40} {s['state']:<11} {s['run'] or s.get('error') or ''}")
    return lines
