"""One report of a session, or of a comparison of sessions, as a single
self-contained HTML file: the plots embedded (PNG as data URIs), no
script or style from anywhere else, so it reads offline and prints to PDF
from the browser.

Order: the safety notes; for a comparison, the before/after table first;
then each session: its stage, its plan (every step, its state and run),
and every measurement with its figures, conditions, warnings and plots.
Once every image has decoded, the page sets ``data-images="ready"`` on
its body (``"failed"`` when one did not): a browser test reads it.
"""

from __future__ import annotations

import base64
import html
from pathlib import Path

from benchkit import kinds
from benchkit.errors import BenchkitError
from benchkit.logbook import Logbook
from benchkit.recordings import write_text_atomic
from benchkit.report.summary import figure_shown

#: the page's own look: plain, printable
_STYLE = """
body { font-family: "DejaVu Sans", sans-serif; margin: 2em auto; max-width: 62em; color: #1d1d1d; line-height: 1.35; }
h1 { font-size: 1.5em; border-bottom: 2px solid #44546a; padding-bottom: .2em; }
h2 { font-size: 1.25em; margin-top: 1.8em; color: #44546a; }
h3 { font-size: 1.05em; margin: 1.4em 0 .4em; }
table { border-collapse: collapse; margin: .4em 0 .8em; font-size: .9em; }
th, td { border: 1px solid #c8ccd2; padding: .15em .5em; text-align: left; vertical-align: top; }
th { background: #eef0f3; }
td.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
.better { color: #1e6b2f; } .worse { color: #a3231c; font-weight: bold; }
.warn { background: #fff4d6; border-left: 4px solid #c98a00; padding: .3em .6em; margin: .3em 0; }
.unlike { background: #fde3e1; border-left: 4px solid #a3231c; padding: .3em .6em; font-weight: bold; }
.safety { border: 1px solid #c98a00; padding: .5em 1em; background: #fffaf0; }
.conditions { color: #555; font-size: .85em; }
figure { margin: .6em 0; } figure img { max-width: 100%; border: 1px solid #dde; }
figcaption { font-size: .8em; color: #555; }
section.run { page-break-inside: avoid; }
@media print { body { margin: 0; max-width: none; } h2 { page-break-before: always; } }
"""

#: sets the flag a browser test reads once every image has decoded
_SCRIPT = """
window.addEventListener("load", function () {
  var images = Array.prototype.slice.call(document.images);
  var bad = images.filter(function (img) { return !img.complete || img.naturalWidth === 0; });
  document.body.setAttribute("data-images", bad.length ? "failed" : "ready");
  document.body.setAttribute("data-image-count", String(images.length));
});
"""

SAFETY = ("Amplifier stages run from mains-derived supplies and their heat sinks get hot; an unpadded output can "
          "overload an interface input, and a test tone can damage a speaker. These figures were measured into a "
          "dummy load through a pad. Follow local codes and licensed practice for anything mains-powered.")


def _e(value) -> str:
    return html.escape(str(value))


def _image(path: Path) -> str:
    try:
        data = base64.b64encode(path.read_bytes()).decode("ascii")
    except OSError as exc:
        return f"<p>{_e(path.name)}: cannot be read ({_e(exc.strerror or exc)})</p>"
    return (f'<figure><img alt="{_e(path.stem)}" src="data:image/png;base64,{data}">'
            f"<figcaption>{_e(path.name)}</figcaption></figure>")


def _table(head: list[str], body: list[list[str]], numeric: set[int] = frozenset()) -> str:
    """A table; cells are HTML already."""
    rows = "".join("<tr>" + "".join(f'<td class="num">{c}</td>' if i in numeric else f"<td>{c}</td>"
                                    for i, c in enumerate(row)) + "</tr>" for row in body)
    return "<table><tr>" + "".join(f"<th>{_e(h)}</th>" for h in head) + f"</tr>{rows}</table>"


def _value(v, unit: str) -> str:
    from benchkit.report.summary import figure_value

    return _e(figure_value(v, unit))


def _conditions(doc: dict) -> str:
    shown = {k: v for k, v in (doc.get("conditions") or {}).items() if v not in (None, "", [], {})}
    return '<p class="conditions">conditions: ' + "; ".join(f"{_e(k)} {_e(v)}" for k, v in shown.items()) + "</p>"


def _warnings(doc: dict) -> str:
    from benchkit.errors import read_warnings

    found = list(read_warnings(doc.get("warnings") or []))
    for step in doc.get("steps") or ():
        found += [w for w in read_warnings(step.get("warnings") or []) if w not in found]
    return "".join(f'<div class="warn">warning ({_e(w.code)}): {_e(w)}</div>' for w in found)


def _run(book: Logbook, step: dict) -> str:
    """One step of a session: its figures, conditions, warnings and plots."""
    from benchkit.compare_runs import stored_result

    title = f"{step['n']}. {step['kind']}" + (f": {step['label']}" if step["label"] else "")
    if step["run"] is None:
        return f'<section class="run"><h3>{_e(title)}</h3><p>{_e(step["state"])}: {_e(step.get("error") or "")}</p></section>'
    try:
        entry = book.entry(step["run"])
        record, doc = stored_result(book, entry)
    except BenchkitError as exc:  # (a run removed from the logbook, or holding no result)
        return f'<section class="run"><h3>{_e(title)}</h3><p>{_e(exc)}</p></section>'
    figures = kinds.figures_of(doc)
    shown = [f for f in figures if f.headline] + [f for f in figures if not f.headline and f.better][:10]
    body = [[_e(f.label), _e(f.at), _e(figure_shown(f))] for f in shown]
    pngs = [entry.folder / name for name in record.get("files") or []
            if name.endswith(".png") and "-drive-" not in name and (entry.folder / name).exists()]
    return (f'<section class="run"><h3>{_e(title)}</h3><p class="conditions">run {_e(entry.id)}, {_e(entry.status)}, '
            f"{_e(entry.started)}</p>" + (_table(["figure", "at", "value (+- U, k = 2)"], body, {2}) if body else "")
            + _conditions(doc) + _floor(doc) + _warnings(doc) + "".join(_image(p) for p in pngs) + "</section>")


def _floor(doc: dict) -> str:
    """The interface's floor the result was judged against (its calibration's), if any."""
    from benchkit.interface_floor import summary_line

    line = summary_line(doc)
    return f'<p class="conditions">{_e(line)}</p>' if line else ""


def _session(book: Logbook, doc: dict, label: str = "") -> str:
    stage = _table(["stage", ""], [[_e(k), _e(v)] for k, v in doc["stage"].items()])
    plan = _table(["step", "kind", "what", "options", "state", "run"],
                  [[str(s["n"]), _e(s["kind"]), _e(s["label"]),
                    _e(", ".join(f"{k}={v}" for k, v in s["options"].items())), _e(s["state"]), _e(s["run"] or "")]
                   for s in doc["steps"]])
    head = f"Session {doc['id']}" + (f" ({label})" if label else "")
    return (f"<h2>{_e(head)}</h2><p>{_e(doc['name'])}; started {_e(doc['started'])}, {_e(doc['status'])}; tags "
            + _e(", ".join(f"{k}={v}" for k, v in doc["tags"].items())) + f"; plan {_e(doc['plan_file'])}</p>"
            + stage + "<h3>The plan</h3>" + plan + "".join(_run(book, s) for s in doc["steps"]))


def _comparison(c) -> str:
    """The before/after table of a session comparison, and its overlays."""
    from benchkit.compare_sessions import rows
    from benchkit.report.summary import change_text, figure_name, levels_shown

    out = [f'<div class="unlike">NOT LIKE FOR LIKE: {_e(p.kind)} (step {p.n}): {_e(w)}</div>'
           for p in c.pairs for w in p.report.comparison.warnings]
    body = []
    for p, d in rows(c):
        d = levels_shown([d], p.report.scales)[0]
        changes = []
        for k in range(1, len(d.values)):
            verdict = d.verdict(k) or ""
            changes.append(f'<span class="{verdict.replace(" ", "-")}">{_e(change_text(d, k))}</span>')
        body.append([f"{p.n}. {_e(p.kind)}", _e(figure_name(d)),
                     _e(d.unit), *(_value(v, d.unit) for v in d.values), "; ".join(changes)])
    n = len(c.labels)
    out.append(_table(["measurement", "figure", "unit", *(f"[{k}] {lab}" for k, lab in enumerate(c.labels)),
                       "change from [0]"], body, set(range(3, 3 + n))))
    out += [f"<p>not compared: {_e(u)}</p>" for u in c.unpaired]
    for p in c.pairs:
        pngs = [f for f in p.report.files if f.suffix == ".png"]
        if pngs:
            out.append(f"<h3>{p.n}. {_e(p.kind)}: overlaid</h3>" + "".join(_image(f) for f in pngs))
    return "".join(out)


def write_report(book: Logbook, sessions: list[dict], path: Path, comparison=None, title: str | None = None) -> Path:
    """The report of ``sessions`` (their records), with ``comparison`` (a
    :class:`benchkit.compare_sessions.SessionComparison`) first when given,
    written to ``path``."""
    labels = list(comparison.labels) if comparison is not None else [""] * len(sessions)
    title = title or (f"{sessions[0]['name']}: " + (" vs ".join(labels) if comparison is not None else sessions[0]["id"]))
    parts = [f"<h1>{_e(title)}</h1>", f'<div class="safety"><b>Safety.</b> {_e(SAFETY)}</div>']
    if comparison is not None:
        parts += ["<h2>Before and after</h2>", _comparison(comparison)]
    parts += [_session(book, doc, lab) for doc, lab in zip(sessions, labels)]
    page = (f'<!DOCTYPE html><html lang="en"><head><meta charset="utf-8"><title>{_e(title)}</title>'
            f"<style>{_STYLE}</style><script>{_SCRIPT}</script></head><body>{''.join(parts)}"
            '<p class="conditions">written by benchkit</p></body></html>')
    return write_text_atomic(Path(path), page)


def report_sessions(book: Logbook, refs: list[str], anyway: bool = False, file: Path | None = None,
                    say=lambda _m: None, out: Path | None = None):
    """The report of one session, or of two or more compared (the
    comparison's table said; its folder ``out``, default under
    comparisons/): its path (default: report.html in the session's or the
    comparison's folder), and the comparison (or None)."""
    from benchkit.compare_sessions import compare_sessions
    from benchkit.session import folder_of, read_session

    if len(refs) == 1:
        doc = read_session(book.root, refs[0])
        return write_report(book, [doc], file or folder_of(book.root, doc["id"]) / "report.html"), None
    compared = compare_sessions(book, refs, anyway, out)
    say(compared.text)
    return write_report(book, list(compared.sessions), file or compared.folder / "report.html", compared), compared
