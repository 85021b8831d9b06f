"""What the logbook commands show: runs one or two lines each, one run
in full, a run as `log list --json` gives it."""

from __future__ import annotations

from benchkit.analysis.documents import V1_KINDS
from benchkit.errors import read_warnings
from benchkit.units import level_view, quantity

#: how a headline figure is shown in a run's line: its label and format (None: a quantity in its unit)
SHORT = {"thdn_db": ("THD+N", "{:.1f} dB"), "noise_vrms": ("noise", None), "noise_dbfs": ("noise", "{:.1f} dBFS"),
          "power_w": ("P", None), "clipping_onset_w": ("onset", None), "low_3db_hz": ("-3dB lo", None),
          "high_3db_hz": ("-3dB hi", None), "settled_v": ("settled", None), "imd_db": ("IMD", "{:.1f} dB"),
          "gain_db": ("gain", "{:+.2f} dB"), "noise_a_vrms": ("noise(A)", None), "zout_ohms": ("Zout", "{:.3g} ohm"),
          "damping_factor": ("DF", "{:.3g}"), "crosstalk_db": ("crosstalk", "{:.1f} dB")}
UNITS = {"noise_vrms": "Vrms", "noise_a_vrms": "Vrms", "power_w": "W", "clipping_onset_w": "W", "low_3db_hz": "Hz", "high_3db_hz": "Hz",
          "settled_v": "V"}


def headline_text(entry) -> str:
    """A run's headline figures in a few words ("THD+N -61.2 dB; P 2.74 W")."""
    parts = []
    for f in entry.figures:
        if f["value"] is None or f["name"] not in SHORT:
            continue
        label, fmt = SHORT[f["name"]]
        value = fmt.format(f["value"]) if fmt else quantity(f["value"], UNITS[f["name"]], 3)
        if is_level(f["name"], f.get("unit", "")) and level_view().unit is not None:  # (no scale in the catalog)
            value = level_view().stored_text(f["value"], f["unit"])
        parts.append(f"{label} {value}")
    return "; ".join(parts)


def entry_doc(entry) -> dict:
    """A catalog entry as ``log list --json`` prints it: its result's kind
    by the one name it has now (a version-1 run's catalog keeps the old)."""
    doc = entry.to_dict()
    return {**doc, "kind": V1_KINDS.get(doc.get("kind"), doc.get("kind"))}


def runs_lines(entries) -> list[str]:
    """Each run: its id, status, command and tags; under it its headline
    figures and the first line of its note."""
    from benchkit.report.screen import Column, table_text

    rows = []
    for e in entries:
        valid = "" if e.valid is not False else " INVALID"
        filed = " (filed)" if e.filed else ""
        rows.append([e.id, e.status + valid, e.command + filed, " ".join(f"{k}={v}" for k, v in e.tags.items())])
        stage = f"stage {e.stage['name']}" if isinstance(e.stage, dict) and e.stage.get("name") else ""
        line = "; ".join(x for x in (headline_text(e), stage, e.note.splitlines()[0] if e.note else "") if x)
        if line:
            rows.append(["", "", "", line])
    columns = [Column("run", "left"), Column("status", "left"), Column("command", "left"),
               Column("tags / headline figures / note", "left")]
    return table_text(columns, rows).split("\n")


#: a stored option's unit, from the end of its key
KEY_UNITS = (("_vrms", "Vrms"), ("_vpk", "V"), ("_hz", "Hz"), ("_ohms", "ohm"), ("_dbfs", "dBFS"), ("_db", "dB"),
             ("_pct", "%"), ("_w", "W"), ("_v", "V"), ("_a", "A"), ("_s", "s"))


def param_text(key: str, value) -> str:
    """A stored option as a person reads it: a number in the unit its key
    ends in, through the one quantity formatter (``reference_vrms`` 2.828
    Vrms, not 2.8284271247461903); a list item by item."""
    if isinstance(value, list):
        return "[" + ", ".join(param_text(key, v) for v in value) + "]"
    if isinstance(value, float):
        unit = next((u for end, u in KEY_UNITS if key.endswith(end)), "")
        return quantity(value, unit) if unit else quantity(value, "")
    return str(value)


def filed_lines(filed) -> list[str]:
    """Where a run filed from a capture made elsewhere came from, and the
    scale it was filed with (none for a measured run)."""
    if not isinstance(filed, dict):
        return []
    scale = filed.get("volts_per_fs")
    return [f"  filed from   {filed.get('from')} (sha256 {filed.get('sha256')})",
            f"  scale        {quantity(scale, 'V', 4)} peak per FS ({filed.get('scale_source')})"
            if isinstance(scale, (int, float)) else "  scale        none"]


def is_level(name: str, unit: str) -> bool:
    """Whether a stored figure is a level of the signal, shown in the unit
    levels are shown in: one in dBFS or volts RMS. A power (W) stays a
    power, as the tables' power columns do; a ratio (dB, dBc), a DC volt
    (V) stay as they are."""
    return unit in ("dBFS", "Vrms")


def level_scale(doc: dict | None) -> tuple[float | None, float | None]:
    """What reads a stored result's levels in other units: its scale
    (volts peak per FS at the stage) and its load (ohms), None where it
    has none."""
    if not isinstance(doc, dict):
        return None, None
    steps = doc.get("steps") if isinstance(doc.get("steps"), list) else []
    first = steps[0] if steps and isinstance(steps[0], dict) else {}
    places = [doc.get("conditions"), doc, first.get("conditions"), first]

    def known(key):
        for where in places:
            v = where.get(key) if isinstance(where, dict) else None
            if isinstance(v, (int, float)) and not isinstance(v, bool) and v > 0:
                return float(v)
        return None

    return known("volts_per_fs"), known("load_ohms")


def figure_text(f: dict, scale: tuple[float | None, float | None] = (None, None)) -> str:
    """A stored figure's value: a level in the unit levels are shown in
    (:func:`benchkit.units.level_view`, read with the run's ``scale``),
    anything else in its own unit."""
    if is_level(f["name"], f["unit"]):
        return level_view().stored_text(f["value"], f["unit"], *scale)
    return quantity(f["value"], f["unit"])


def run_lines(entry, record: dict, scale: tuple[float | None, float | None] = (None, None)) -> list[str]:
    """One run in full: when, what, the device and the calibration, the
    stage, tags, note, options, figures (levels in the unit levels are
    shown in, read with the run's ``scale``: :func:`level_scale`),
    warnings (with their codes), the folder."""
    cal = record.get("calibration") or {}
    lines = [f"run {entry.id}: {entry.command}, {entry.status}" + ("" if entry.valid is not False else " (INVALID)"),
             f"  started      {record['started']}" + (f", ended {record['finished']}" if record.get("finished") else ""),
             f"  device       {record.get('device')}",
             *filed_lines(record.get("filed")),
             f"  calibration  {cal.get('file')} (hash {cal.get('hash')})" if cal else "  calibration  none"]
    lines += [f"  stage        {key}: {value}" for key, value in (record.get("stage") or {}).items()]
    if entry.tags:
        lines.append("  tags         " + " ".join(f"{k}={v}" for k, v in entry.tags.items()))
    if entry.note:
        lines.append("  note         " + entry.note.replace("\n", "\n               "))
    lines.append("  options      " + ", ".join(f"{k}={param_text(k, v)}" for k, v in (record.get("params") or {}).items()))
    lines += [f"  figure       {f['name']} = {figure_text(f, scale)}" + (f" ({f['at']})" if f.get("at") else "")
              if f["value"] is not None else f"  figure       {f['name']}: not measured" for f in record.get("figures") or []]
    lines += [f"  warning      {w} [{w.code}]" for w in read_warnings(record.get("warnings"))]
    if record.get("error"):
        lines.append(f"  ended with   {record['error']}")
    lines.append(f"  folder       {entry.folder} ({len(record.get('files') or [])} files)")
    return lines
