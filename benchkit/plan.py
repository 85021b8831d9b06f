"""A bench plan: the stage described once and the measurements to make of
it, in order, in a TOML file.

::

    [stage]                      # what is measured: feeds every step
    name = "Test stage B-2"
    load = 8                     # ohms: --load, and the virtual stage's load
    rail = 24                    # V: --rail, the budget, the supply's volts
    bias = 0.8                   # A: --bias, the supply's amps (class A)

    [bench]                      # how it is measured: the live options
    device = "virtual"

    [[measure]]                  # one measurement: a kind and its options
    kind = "tone"
    level = ["-30dBFS", "-20dBFS"]

Every option of a step is named as on the command line without its
dashes (``step-duration``) and read by the same parser
(:mod:`benchkit.options`): a plan is refused with its line and key, before
anything plays, for an unknown table, kind, option or stage value, or a
value its option cannot take.
"""

from __future__ import annotations

import re
import sys
from dataclasses import dataclass, field
from pathlib import Path

from benchkit import kinds
from benchkit.errors import BenchkitError

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - Python 3.10
    import tomli as tomllib

#: the demo's plan, shipped with the package ("Test stage B-2", invented)
DEMO_PLAN = Path(__file__).parent / "plans" / "stage-b2.toml"

#: the stage's values: (parser key in benchkit.options, what it is); each feeds the options of that key
STAGE = {
    "name": (None, "what the stage is called (text)"),
    "load": ("load", "the dummy load, ohms"),
    "rail": ("rail", "the supply rail to rail, V"),
    "bias": ("bias", "the bias (quiescent) current, A"),
    "vsat": ("vsat", "the saturation voltage at the negative swing, V"),
    "supply-volts": ("supply_volts", "the supply's voltage, V (default: the rail)"),
    "supply-amps": ("supply_amps", "the supply's current, A (default: the bias, as a class-A stage draws)"),
    "pad": ("pad", "the pad's resistors R1:R2, ohms (on the virtual bench: its simulated pad)"),
    "calibration": ("calibration", "the calibration profile (a path, from the plan's folder)"),
    "ambient": (None, "the room's temperature, degC (on the virtual bench: its stage's)"),
    "topology": (None, "how the stage is built (text)"),
    "notes": (None, "anything else worth keeping with every run (text)"),
}
#: what the stage needs, whatever the plan measures
STAGE_NEEDS = ("name", "load")
#: the options a step may not take: the session files every run itself
SESSION_OWNS = ("bench", "tag", "note", "stage", "stage_info", "json", "from_runs")
#: the tables a plan holds
TABLES = ("stage", "bench", "tags", "measure")


@dataclass(frozen=True)
class Step:
    """One measurement of a plan: its kind, the options it gives (by key,
    parsed) and the line it starts on."""

    kind: str
    given: dict
    line: int
    label: str = ""

    def title(self, index: int) -> str:
        return f"{index + 1}. {self.kind}" + (f" ({self.label})" if self.label else "")


@dataclass(frozen=True)
class Plan:
    """A plan as read: its stage (by stage key, parsed), the live options
    of its [bench] table and its tags (by key), and its steps."""

    stage: dict
    bench: dict
    tags: dict
    steps: tuple[Step, ...]
    text: str = ""
    source: str = "plan"
    folder: Path = field(default_factory=Path)

    @property
    def name(self) -> str:
        return str(self.stage["name"])

    def session_tags(self) -> dict:
        """The tags every run of the plan's session carries: the stage's
        bias and rail (where given), then the plan's own."""
        tags = {}
        if "bias" in self.stage:
            tags["bias"] = f"{self.stage['bias']:g}A"
        if "rail" in self.stage:
            tags["rail"] = f"{self.stage['rail']:g}V"
        return {**tags, **self.tags}

    def with_stage(self, changes: dict) -> "Plan":
        """The plan with stage values changed (``--set bias=1.2``), each
        checked as the file's would be."""
        from dataclasses import replace

        stage = dict(self.stage)
        for key, value in changes.items():
            stage[key] = _stage_value(key, value, f"--set {key}")
        return replace(self, stage=stage)

    def options(self, index: int, bench_root: Path, session_id: str | None = None) -> dict:
        """Step ``index``'s options by key, as its command would have them:
        the kind's defaults, then the stage's values and the [bench]
        table's where the kind takes them, then the step's own (the
        virtual stage's parameters add up: the stage's, then those
        given; a calibration is found from the plan's folder; a step's
        virtual-bench seed is the [bench] seed plus its index unless it
        gives its own)."""
        step = self.steps[index]
        taken = kind_options(step.kind)
        o = {key: _default(key, default) for key, default in taken.items()}
        stage = self.stage
        derived = {"supply_volts": stage.get("rail"), "supply_amps": stage.get("bias")}
        for key, (option, _what) in STAGE.items():
            if option is not None and key in stage:
                derived[option] = stage[key]
        if "calibration" in derived:
            derived["calibration"] = Path(derived["calibration"])
        given = {**self.bench, **step.given}
        for key, value in {**derived, **given}.items():
            if key in o and value is not None:
                o[key] = value
        if isinstance(o.get("calibration"), Path) and not o["calibration"].is_absolute():
            o["calibration"] = (self.folder / o["calibration"]).resolve()  # (from the plan's folder, wherever given)
        if "sim_param" in o:  # the stage's values first; a --sim-param given says otherwise (the last one counts)
            o["sim_param"] = (_stage_on_the_virtual_bench(stage, o.get("sim", "se-class-a"))
                              + list(self.bench.get("sim_param", [])) + list(step.given.get("sim_param", [])))
        if "sim_pad" in o and "pad" in stage and "sim_pad" not in given:
            o["sim_pad"] = stage["pad"]
        if "seed" in o and "seed" not in step.given:  # each step its own noise on the virtual bench
            o["seed"] = o["seed"] + index
        o.update(bench=bench_root, session=session_id, tag=[f"{k}={v}" for k, v in self.session_tags().items()],
                 note=f"{self.name}: step {step.title(index)}", stage=None,
                 stage_info=[f"{k}={v}" for k, v in stage.items() if k != "calibration"])
        return o


def _stage_on_the_virtual_bench(stage: dict, model: str) -> list[str]:
    """The stage's values the virtual stage model takes (its rail, bias,
    saturation and room), as --sim-param items."""
    from benchkit.capture.stages import model_params

    try:
        takes = {p.name for p in model_params(model)}
    except BenchkitError:
        return []
    values = {"rail": stage.get("rail"), "bias": stage.get("bias"), "vsat": stage.get("vsat"),
              "ambient_c": stage.get("ambient")}  # (the load reaches it as every command's --load does)
    return [f"{k}={v:g}" for k, v in values.items() if k in takes and v is not None]


def kind_options(kind_name: str) -> dict:
    """The options a kind takes, by key, with its defaults (a plan gives
    them all but those the session sets, SESSION_OWNS)."""
    from benchkit.options import defaults

    live = kinds.get(kind_name).live
    if live is None:
        raise BenchkitError(f"{kind_name} is not measured on a bench")
    return {**defaults(live.options, *live.groups), **live.defaults}


def plannable() -> tuple[str, ...]:
    """The kinds a plan can measure."""
    return tuple(k.name for k in kinds.all_kinds() if k.live is not None)


def _default(key: str, default):
    from benchkit.options import OPTIONS

    if default is ... or default is None:
        return default
    parse = OPTIONS[key].parse
    if parse is None:
        return default
    return [parse(v) for v in default] if isinstance(default, list) else parse(default)


def _flag_key() -> dict:
    """Option keys by their name in a plan (the flag without its dashes)."""
    from benchkit.options import OPTIONS

    return {opt.flag.lstrip("-"): key for key, opt in OPTIONS.items()}


def _value(key: str, value, where: str, repeats: bool):
    """One option's value from the plan, through its option's parser."""
    from benchkit.options import OPTIONS
    from benchkit.options.values import BadValue

    opt = OPTIONS[key]
    if isinstance(value, (dict, list)) and not (repeats and isinstance(value, list)):
        raise BenchkitError(f"{where}: takes one value, got {'a table' if isinstance(value, dict) else 'a list'}")
    items = value if isinstance(value, list) else [value]
    if not items:
        raise BenchkitError(f"{where}: an empty list: give one value or more, or leave the option out")
    out = []
    for item in items:
        if isinstance(item, (dict, list)):
            raise BenchkitError(f"{where}: a list of plain values, got a nested {type(item).__name__}")
        if opt.kind is bool:
            if not isinstance(item, bool):
                raise BenchkitError(f"{where}: true or false, got {item!r}")
            out.append(item)
            continue
        try:
            got = opt.parse(item) if opt.parse is not None else item
        except BadValue as exc:
            raise BenchkitError(f"{where}: {exc}") from None
        out.append(Path(got) if opt.kind is Path else (str(got) if opt.parse is None else got))
    return out if repeats else out[0]


def _stage_value(key: str, value, where: str):
    if key not in STAGE:
        raise BenchkitError(f"{where}: the stage has no value {key!r} (it has {', '.join(STAGE)})")
    option = STAGE[key][0]
    if key == "ambient":
        from benchkit.options.values import BadValue, number

        try:
            return number(-40.0, 100.0, unit="degC")(value)
        except BadValue as exc:
            raise BenchkitError(f"{where}: {exc}") from None
    if option is None or option == "calibration":
        if not isinstance(value, str):
            raise BenchkitError(f"{where}: text, got {value!r}")
        return value
    return _value(option, value, where, False)


class _Lines:
    """Where each key of a plan's text stands: tomllib gives values, not
    lines, so the text is read once more for its headers and keys."""

    HEADER = re.compile(r"^\s*\[(\[)?\s*([A-Za-z0-9_.-]+)\s*\]")
    KEY = re.compile(r"^\s*([A-Za-z0-9_-]+)\s*=")

    def __init__(self, text: str):
        self.at: dict[tuple, int] = {}
        table, counts = None, {}
        for n, line in enumerate(text.splitlines(), 1):
            m = self.HEADER.match(line)
            if m:
                name = m.group(2)
                index = counts.get(name, 0)
                counts[name] = index + 1
                table = (name, index)
                self.at.setdefault(table, n)
                continue
            m = self.KEY.match(line)
            if m:
                self.at.setdefault((table, m.group(1)), n)

    def of(self, table, key=None) -> int:
        return self.at.get((table, key) if key is not None else table, 0) or self.at.get(table, 0)


def read_plan(path: str | Path) -> Plan:
    """Read and check a plan file (see the module's notes)."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise BenchkitError(f"cannot read the plan {path}: {getattr(exc, 'strerror', None) or exc}") from None
    return parse_plan(text, str(path), path.parent)


def parse_plan(text: str, source: str = "plan", folder: Path = Path(".")) -> Plan:
    """A plan from its TOML text (``source`` names it in refusals)."""
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise BenchkitError(f"{source}: not a TOML file: {exc}") from None
    lines = _Lines(text)

    def where(table, key=None, index=0) -> str:
        line = lines.of((table, index), key) if table else lines.at.get((key, 0)) or lines.of(None, key)
        shown = f"[[{table}]] #{index + 1}" if table == "measure" else f"[{table}]" if table else ""
        return f"{source} line {line}: {shown}{' ' if shown and key else ''}{key or ''}".rstrip()

    for key, value in doc.items():
        if key not in TABLES:
            raise BenchkitError(f"{where(None, key)}: a plan holds the tables {', '.join(TABLES)}, not {key!r}")
        if key == "measure" and not (isinstance(value, list) and all(isinstance(v, dict) for v in value)):
            raise BenchkitError(f"{where(None, key)}: each measurement is a [[measure]] table")
        if key != "measure" and not isinstance(value, dict):
            raise BenchkitError(f"{where(None, key)}: [{key}] is a table")
    stage_doc = doc.get("stage")
    if stage_doc is None:
        raise BenchkitError(f"{source}: the plan has no [stage] table: describe the stage once ({', '.join(STAGE_NEEDS)} "
                            "at least; 'benchkit plan new' writes a starter plan)")
    stage = {key: _stage_value(key, value, where("stage", key)) for key, value in stage_doc.items()}
    for key in STAGE_NEEDS:
        if key not in stage:
            raise BenchkitError(f"{where('stage')}: the stage needs {key} ({STAGE[key][1]})")
    from benchkit.options import LIVE

    names = _flag_key()
    bench = {}
    for name, value in (doc.get("bench") or {}).items():
        key = names.get(name)
        if key not in LIVE and key != "yes":
            raise BenchkitError(f"{where('bench', name)}: not an option of the bench (it takes "
                                f"{', '.join(sorted(n for n, k in names.items() if k in LIVE))})")
        bench[key] = _value(key, value, where("bench", name), isinstance(_default_of(key), list))
    tags = {}
    for name, value in (doc.get("tags") or {}).items():
        if isinstance(value, (dict, list)):
            raise BenchkitError(f"{where('tags', name)}: a tag is one value")
        tags[name] = str(value)
    measures = doc.get("measure") or []
    if not measures:
        raise BenchkitError(f"{source}: the plan measures nothing: add a [[measure]] table with its kind")
    steps = []
    can = plannable()
    for i, table in enumerate(measures):
        kind = table.get("kind")
        if kind not in can:
            raise BenchkitError(f"{where('measure', 'kind' if kind is not None else None, i)}: "
                                + (f"no kind of measurement {kind!r}" if kind is not None else "no kind given")
                                + f" (a plan measures {', '.join(can)})")
        taken = kind_options(kind)
        given = {}
        for name, value in table.items():
            if name in ("kind", "label"):
                continue
            key = names.get(name)
            if key is None or key not in taken or key in SESSION_OWNS:
                hint = "" if key is None or key not in SESSION_OWNS else " (the session sets it)"
                if key is None and name.replace("_", "-") in names:
                    hint = f" (written {name.replace('_', '-')})"
                raise BenchkitError(f"{where('measure', name, i)}: {kind} takes no option {name!r}{hint}")
            given[key] = _value(key, value, where("measure", name, i), isinstance(taken[key], list))
        for key, default in taken.items():
            if default is ... and key not in given and not _from_stage(key, stage):
                from benchkit.options import OPTIONS

                raise BenchkitError(f"{where('measure', None, i)}: {kind} needs {OPTIONS[key].flag.lstrip('-')}")
        label = table.get("label", "")
        if not isinstance(label, str):
            raise BenchkitError(f"{where('measure', 'label', i)}: a label is text")
        steps.append(Step(kind, given, lines.of(("measure", i)), label))
    return Plan(stage, bench, tags, tuple(steps), text, source, Path(folder))


def _default_of(key: str):
    from benchkit.options import OPTIONS

    return OPTIONS[key].default


def _from_stage(key: str, stage: dict) -> bool:
    return any(option == key and name in stage for name, (option, _w) in STAGE.items())
