"""Comparing runs: the figures of stored results side by side, with deltas.

Pure: result documents (the JSON every run stores) in, a frozen
:class:`Comparison` out. Each kind of result names its comparable figures,
with a unit and a direction (which way is better); the same figures, a few
of them marked headline, index the logbook.

Runs compare only when their conditions match (frequency, load, band,
calibration, sample rate, scale): otherwise :func:`compare` refuses, or
with ``anyway=True`` reports every mismatch as a warning.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from benchkit.units import quantity
from benchkit.errors import BenchkitError

SCHEMA_VERSION = 1

#: Below this a change is reported as the same: a tenth of a dB, or half a
#: percent of the value (repeatability of a bench measurement, common practice).
SAME_DB = 0.1
SAME_REL = 0.005


@dataclass(frozen=True)
class Figure:
    """One comparable figure of a result. ``better`` is "higher",
    "lower", "nearer" (to ``target``) or None (no direction: a condition
    or a level)."""

    name: str
    label: str
    value: float | None
    unit: str
    better: str | None = None
    target: float = 0.0
    at: str = ""
    headline: bool = False

    def to_dict(self) -> dict:
        return {"name": self.name, "value": self.value, "unit": self.unit, "at": self.at}


def _num(x) -> float | None:
    return float(x) if isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x) else None


def _step_figures(doc: dict) -> list[Figure]:
    steps = [s for s in doc.get("steps") or [] if isinstance(s, dict)]
    out = []
    for s in steps:
        drive = _num(s.get("drive_dbfs"))
        if drive is None:
            continue
        at = f"drive {drive:g} dBFS"
        key = f"@{drive:+g}dBFS"
        out += [
            Figure(f"thdn_db{key}", "THD+N", _num(s.get("thdn_db")), "dB", "lower", at=at),
            Figure(f"thd_db{key}", "THD", _num(s.get("thd_db")), "dB", "lower", at=at),
        ]
        for h in (s.get("harmonics") or [])[:2]:
            out.append(Figure(f"h{h['order']}_dbc{key}", f"H{h['order']}", _num(h.get("level_dbc")), "dBc", "lower", at=at))
        out.append(Figure(f"noise_dbfs{key}", "noise", _num(s.get("noise_dbfs")), "dBFS", "lower", at=at))
        if _num(s.get("fundamental_vrms")) is not None:
            out.append(Figure(f"level_vrms{key}", "level", _num(s.get("fundamental_vrms")), "Vrms", None, at=at))
        if _num(s.get("power_w")) is not None:
            out.append(Figure(f"power_w{key}", "power", _num(s.get("power_w")), "W", None, at=at))
    valid = [s for s in steps if s.get("valid", True) and _num(s.get("thdn_db")) is not None]
    if valid:
        top = max(valid, key=lambda s: s["drive_dbfs"])
        out.append(Figure("thdn_db", "THD+N at the top valid step", _num(top["thdn_db"]), "dB", "lower",
                          at=f"drive {top['drive_dbfs']:g} dBFS",
                          headline=True))
        low = min(valid, key=lambda s: s["drive_dbfs"])
        if _num(low.get("noise_vrms")) is not None:
            out.append(Figure("noise_vrms", "noise at the lowest step", _num(low["noise_vrms"]), "Vrms", "lower",
                              at=f"drive {low['drive_dbfs']:g} dBFS", headline=True))
        else:
            out.append(Figure("noise_dbfs", "noise at the lowest step", _num(low.get("noise_dbfs")), "dBFS", "lower",
                              at=f"drive {low['drive_dbfs']:g} dBFS", headline=True))
    return out


def _power_figures(doc: dict) -> list[Figure]:
    out = []
    metric = "THD+N" if doc.get("limit_metric", "thdn") == "thdn" else "THD"
    for i, lim in enumerate(doc.get("limits") or []):
        pct = _num(lim.get("limit_pct"))
        if pct is None:
            continue
        # the first limit is the rated point: the headline, under a fixed name
        out.append(Figure("power_w" if i == 0 else f"power_w@{pct:g}%", f"power at {pct:g} % {metric}",
                          _num(lim.get("power_w")), "W", "higher", at=f"{pct:g} % {metric}", headline=i == 0))
    out.append(Figure("clipping_onset_w", "clipping onset", _num(doc.get("clipping_onset_w")), "W", "higher",
                      headline=True))
    if _num(doc.get("efficiency_pct")) is not None:
        out.append(Figure("efficiency_pct", "efficiency at the first limit", _num(doc["efficiency_pct"]), "%", "higher"))
    if _num(doc.get("idle_dissipation_w")) is not None:
        out.append(Figure("idle_dissipation_w", "idle dissipation", _num(doc["idle_dissipation_w"]), "W", None))
    expected = doc.get("expected") or {}
    if _num(expected.get("max_sine_w")) is not None:
        out.append(Figure("expected_w", "budget's ceiling", _num(expected["max_sine_w"]), "W", None))
    return out


def _response_figures(doc: dict) -> list[Figure]:
    fit = doc.get("low_corner_fit") or {}
    return [
        Figure("low_3db_hz", "-3 dB, low", _num(doc.get("low_3db_hz")), "Hz", "lower", headline=True),
        Figure("high_3db_hz", "-3 dB, high", _num(doc.get("high_3db_hz")), "Hz", "higher", headline=True),
        Figure("low_1db_hz", "-1 dB, low", _num(doc.get("low_1db_hz")), "Hz", "lower"),
        Figure("high_1db_hz", "-1 dB, high", _num(doc.get("high_1db_hz")), "Hz", "higher"),
        Figure("ripple_db", "ripple between the -1 dB points", _num(doc.get("ripple_db")), "dB", "lower"),
        Figure("level_20hz_db", "level at 20 Hz", _num(doc.get("level_20hz_db")), "dB", "nearer",
               target=_num(doc.get("reference_level_db")) or 0.0),
        Figure("level_20khz_db", "level at 20 kHz", _num(doc.get("level_20khz_db")), "dB", "nearer",
               target=_num(doc.get("reference_level_db")) or 0.0),
        Figure("corner_fit_hz", "first-order corner fit", _num(fit.get("corner_hz")) if fit.get("fits") else None,
               "Hz", "lower"),
        Figure("coupling_capacitor_uf", "coupling capacitor", _num(doc.get("coupling_capacitor_uf")), "uF", None),
    ]


def _drift_figures(doc: dict) -> list[Figure]:
    fit = doc.get("fit") or {}
    nominal = _num(doc.get("nominal_v")) or 0.0
    settled = _num(fit.get("final_v"))
    return [
        Figure("settled_v", "settled value" if settled is not None else "last value",
               settled if settled is not None else _num(doc.get("last_v")), "V", "nearer", target=nominal,
               at="settling fit" if settled is not None else "last reading", headline=True),
        Figure("pp_v", "peak to peak", _num(doc.get("pp_v")), "V", "lower"),
        Figure("rate_mv_per_min", "drift rate at the end", _num(doc.get("rate_mv_per_min")), "mV/min", "nearer"),
        Figure("tau_s", "settling time constant", _num(fit.get("tau_s")), "s", "lower"),
        Figure("settle_s", "time to settle", _num(fit.get("settle_s")), "s", "lower"),
    ]


def _watch_figures(doc: dict) -> list[Figure]:
    """A watch: the last reading of each figure (where the adjustment ended)."""
    better = {"thdn_db": "lower", "thd_db": "lower", "h2_dbc": "lower", "h3_dbc": "lower", "noise_dbfs": "lower"}
    return [Figure(key, f"{f['label']}, last reading", _num(f.get("last")), f["unit"], better.get(key),
                   headline=key == "thdn_db")
            for key, f in (doc.get("figures") or {}).items()]


def _noise_figures(doc: dict) -> list[Figure]:
    scaled = _num(doc.get("noise_vrms")) is not None
    out = [Figure("noise_a_vrms", "noise, A-weighted", _num(doc.get("noise_a_vrms")), "Vrms", "lower", headline=True),
           Figure("noise_vrms", "noise, unweighted", _num(doc.get("noise_vrms")), "Vrms", "lower")] if scaled else [
           Figure("noise_a_dbfs", "noise, A-weighted", _num(doc.get("noise_a_dbfs")), "dBFS", "lower", headline=True),
           Figure("noise_dbfs", "noise, unweighted", _num(doc.get("noise_dbfs")), "dBFS", "lower")]
    ref = (doc.get("snr_reference") or {}).get("what", "")
    out += [Figure("snr_db", "SNR", _num(doc.get("snr_db")), "dB", "higher", at=ref),
            Figure("snr_a_db", "SNR, A-weighted", _num(doc.get("snr_a_db")), "dB", "higher", at=ref),
            Figure("hum_dbfs", "hum, all lines", _num(doc.get("hum_dbfs")), "dBFS", "lower")]
    return out


def _gain_figures(doc: dict) -> list[Figure]:
    at = f"{quantity(doc.get('frequency_hz', 0), 'Hz', 4)}, drive {doc.get('drive_dbfs', 0):g} dBFS"
    return [Figure("gain_db", "gain", _num(doc.get("gain_db")), "dB", None, at=at, headline=True),
            Figure("phase_deg", "phase", _num(doc.get("phase_deg")), "deg", None, at=at)]


def _imd_figures(doc: dict) -> list[Figure]:
    steps = [s for s in doc.get("steps") or [] if isinstance(s, dict) and _num(s.get("drive_dbfs")) is not None]
    out = []
    for s in steps:
        at, key = f"drive {s['drive_dbfs']:g} dBFS", f"@{s['drive_dbfs']:+g}dBFS"
        out.append(Figure(f"imd_db{key}", "IMD", _num(s.get("imd_db")), "dB", "lower", at=at))
        for order, o in sorted((s.get("orders") or {}).items()):
            out.append(Figure(f"imd{order}_db{key}", f"IMD order {order}", _num((o or {}).get("db")), "dB", "lower", at=at))
    valid = [s for s in steps if s.get("valid", True) and _num(s.get("imd_db")) is not None]
    if valid:
        top = max(valid, key=lambda s: s["drive_dbfs"])
        out.append(Figure("imd_db", "IMD at the top valid step", _num(top["imd_db"]), "dB", "lower",
                          at=f"drive {top['drive_dbfs']:g} dBFS", headline=True))
    return out


def _zout_figures(doc: dict) -> list[Figure]:
    at = f"{doc['reference_hz']:g} Hz" if _num(doc.get("reference_hz")) is not None else ""
    out = [Figure("zout_ohms", "output impedance", _num(doc.get("zout_ohms")), "ohm", "lower", at=at, headline=True),
           Figure("damping_factor", "damping factor", _num(doc.get("damping_factor")), "", "higher", at=at,
                  headline=True)]
    for p in doc.get("points") or []:
        f = _num(p.get("frequency_hz"))
        if f is not None:
            out.append(Figure(f"zout_ohms@{f:.4g}Hz", "output impedance", _num(p.get("zout_ohms")), "ohm", "lower",
                              at=f"{quantity(f, 'Hz', 4)}"))
    return out


def _crosstalk_figures(doc: dict) -> list[Figure]:
    at = f"{quantity(doc['reference_hz'], 'Hz', 4)}" if _num(doc.get("reference_hz")) is not None else ""
    out = [Figure("crosstalk_db", "crosstalk, the worse direction", _num(doc.get("crosstalk_db")), "dB", "lower", at=at,
                  headline=True),
           Figure("balance_db", "channel balance", _num(doc.get("balance_db")), "dB", "nearer", at=at, headline=True)]
    for key, name in (("a_to_b", "A into B"), ("b_to_a", "B into A")):
        for x in doc.get(key) or []:
            f = _num(x.get("frequency_hz"))
            if f is not None:
                out.append(Figure(f"crosstalk_{key}_db@{f:.4g}Hz", f"crosstalk {name}", _num(x.get("crosstalk_db")),
                                  "dB", "lower", at=f"{quantity(f, 'Hz', 4)}"))
    return out


_FIGURES = {"crosstalk": _crosstalk_figures, "output-impedance": _zout_figures, "imd": _imd_figures, "gain": _gain_figures, "noise": _noise_figures, "watch": _watch_figures, "tone-steps": _step_figures, "power": _power_figures, "response": _response_figures,
            "drift": _drift_figures}


def figures_of(doc: dict) -> list[Figure]:
    """Every comparable figure of a result document (none for a kind
    without figures)."""
    return _FIGURES.get(doc.get("kind"), lambda _d: [])(doc)


def headline_figures(doc: dict) -> list[dict]:
    """The figures the logbook indexes: THD+N at the top valid step, noise,
    power at the first limit, the -3 dB points, the settled value."""
    return [f.to_dict() for f in figures_of(doc) if f.headline]


# --- conditions: what must match for runs to compare -------------------------------

def conditions_of(doc: dict, record: dict | None = None) -> dict:
    """The conditions a comparison checks, from a result and its run record."""
    record = record or {}
    params = record.get("params") or {}
    steps = doc.get("steps") or []
    first = steps[0] if steps and isinstance(steps[0], dict) else {}
    cal = doc.get("calibration") or record.get("calibration") or {}
    load = doc.get("load_ohm", doc.get("load_ohms"))
    if load is None:
        load = (first.get("conditions") or {}).get("load_ohms")
    if load is None:  # a result that does not carry its load (crosstalk, reanalysed): the run's own parameters
        load = params.get("load_ohms")
    band = doc.get("bandwidth_hz", first.get("bandwidth_hz"))
    return {
        "frequency_hz": _num(doc.get("frequency_hz")),
        "load_ohms": _num(load),
        "bandwidth_hz": list(band) if isinstance(band, (list, tuple)) else None,
        "sample_rate_hz": _num(first.get("sample_rate_hz")) or _num(params.get("sample_rate_hz")),
        "calibration_hash": cal.get("hash"),
        "scale": doc.get("scale_source", first.get("scale_source")),
        "metric": doc.get("limit_metric"),
        "mag_units": doc.get("mag_units"),
        "nominal_v": _num(doc.get("nominal_v")),
        "snr_reference_vrms": _num((doc.get("snr_reference") or {}).get("vrms")),
        "imd_method": doc.get("method") if doc.get("kind") == "imd" else None,
        "tones_hz": list(doc["tones_hz"]) if isinstance(doc.get("tones_hz"), list) else None,
    }


_WHAT = {
    "frequency_hz": "the tone's frequency",
    "load_ohms": "the load",
    "bandwidth_hz": "the measurement band",
    "sample_rate_hz": "the sample rate",
    "calibration_hash": "the calibration profile",
    "scale": "the voltage scale's source",
    "metric": "the distortion metric the limits apply to",
    "mag_units": "what the magnitude is referred to",
    "nominal_v": "the nominal value the drift is judged against",
    "snr_reference_vrms": "the output the SNR is referred to",
    "imd_method": "the intermodulation method",
    "tones_hz": "the pair of tones",
}


def mismatches(conditions: list[dict], labels: list[str]) -> list[str]:
    """One sentence for each condition that differs between the runs."""
    out = []
    for key, what in _WHAT.items():
        values = [c.get(key) for c in conditions]
        if all(v is None for v in values):
            continue
        if key in ("frequency_hz", "load_ohms", "sample_rate_hz", "nominal_v", "snr_reference_vrms"):
            known = [v for v in values if v is not None]
            same = len(known) == len(values) and max(known) - min(known) <= 1e-6 * max(1.0, abs(max(known)))
        else:
            same = all(v == values[0] for v in values)
        if not same:
            shown = ", ".join(f"{lab}: {'none' if v is None else (f'{v:g}' if isinstance(v, float) else v)}"
                              for lab, v in zip(labels, values))
            out.append(f"{what} differs ({shown})")
    return out


# --- the comparison ------------------------------------------------------------------

@dataclass(frozen=True)
class Delta:
    """One figure across the runs: values in run order, each change from
    the first run, and whether it is better, worse or the same."""

    name: str
    label: str
    unit: str
    at: str
    values: tuple[float | None, ...]
    better: str | None
    target: float = 0.0
    headline: bool = False

    @property
    def changes(self) -> tuple[float | None, ...]:
        first = self.values[0]
        return tuple(None if v is None or first is None else v - first for v in self.values[1:])

    def verdict(self, k: int) -> str | None:
        """For run k (from 1): "better", "worse", "same", or None (no direction, or a value missing)."""
        a, b = self.values[0], self.values[k]
        if self.better is None or a is None or b is None:
            return None
        if self.better == "nearer":
            a, b = abs(a - self.target), abs(b - self.target)
        gain = (b - a) if self.better == "higher" else (a - b)
        same = SAME_DB if self.unit in ("dB", "dBc", "dBFS") else SAME_REL * max(abs(a), abs(b))
        if abs(gain) <= same:
            return "same"
        return "better" if gain > 0 else "worse"

    def to_dict(self) -> dict:
        return {"name": self.name, "label": self.label, "unit": self.unit, "at": self.at,
                "values": list(self.values), "changes": list(self.changes), "better": self.better,
                "verdicts": [self.verdict(k) for k in range(1, len(self.values))]}


@dataclass(frozen=True)
class Comparison:
    kind: str
    labels: tuple[str, ...]
    deltas: tuple[Delta, ...]
    conditions: tuple[dict, ...]
    warnings: tuple[str, ...] = ()
    comparable: bool = True

    def headline(self) -> tuple[Delta, ...]:
        return tuple(d for d in self.deltas if d.headline)

    def to_dict(self) -> dict:
        return {"kind": "comparison", "schema_version": SCHEMA_VERSION, "of": self.kind, "runs": list(self.labels),
                "comparable": self.comparable, "conditions": list(self.conditions),
                "deltas": [d.to_dict() for d in self.deltas], "warnings": list(self.warnings)}


def compare(docs: list[dict], labels: list[str], records: list[dict] | None = None, anyway: bool = False) -> Comparison:
    """Compare the results of two or more runs of one kind, the first the
    baseline ("before").

    Raises
    ------
    BenchkitError
        When the runs are of different kinds, have no figure in common, or
        (unless ``anyway``) were measured under different conditions.
    """
    if len(docs) < 2:
        raise BenchkitError("a comparison needs at least two runs")
    kinds = {d.get("kind") for d in docs}
    if len(kinds) != 1:
        raise BenchkitError("the runs are not comparable: they hold different kinds of result ("
                            + ", ".join(f"{lab}: {d.get('kind')}" for lab, d in zip(labels, docs)) + ")")
    kind = kinds.pop()
    if kind not in _FIGURES:
        raise BenchkitError(f"results of kind {kind!r} have no figures to compare")
    records = records or [None] * len(docs)
    conditions = [conditions_of(d, r) for d, r in zip(docs, records)]
    problems = mismatches(conditions, labels)
    if problems and not anyway:
        raise BenchkitError("the runs are not comparable: " + "; ".join(problems)
                            + " (--anyway compares them, with that warning)")
    per_run = [{f.name: f for f in figures_of(d)} for d in docs]
    names = [n for n in per_run[0] if all(n in fig for fig in per_run[1:])]
    deltas = []
    for n in names:
        f0 = per_run[0][n]
        values = tuple(fig[n].value for fig in per_run)
        if all(v is None for v in values):
            continue
        at = f0.at if all(fig[n].at == f0.at for fig in per_run) else " / ".join(fig[n].at for fig in per_run)
        deltas.append(Delta(n, f0.label, f0.unit, at, values, f0.better, f0.target, f0.headline))
    if not deltas:
        raise BenchkitError("the runs share no figure to compare (a stepped run pairs steps by drive level)")
    warnings = [f"NOT LIKE FOR LIKE: {p}" for p in problems]
    return Comparison(kind, tuple(labels), tuple(deltas), tuple(conditions), tuple(warnings), not problems)
