"""One-screen text summaries, for stderr: a comparison's, a budget's and a
calibration profile's (each kind's own in ``report/NAME.py``)."""

from __future__ import annotations

import math

from benchkit.units import quantity


#: the units a level can be shown in that are dB (--levels-in): printed as the dB figures are
DB_LEVELS = ("dBV", "dBu", "dBr")


def figure_value(v, unit: str) -> str:
    if v is None:
        return "-"
    return f"{v:.2f} {unit}" if unit in ("dB", "dBc", "dBFS", "%", *DB_LEVELS) else f"{quantity(v, unit)}"


class ShownDelta:
    """A compared level (a comparison's Delta) in the unit levels are
    shown in: its values, changes and their uncertainty converted; its
    name, direction and verdicts the figure's own (judged as measured)."""

    def __init__(self, delta, unit: str, values: tuple, slopes: tuple):
        self.delta, self.unit, self.values, self.slopes = delta, unit, values, slopes

    def __getattr__(self, name):
        return getattr(self.delta, name)

    @property
    def changes(self) -> tuple:
        first = self.values[0]
        return tuple(None if v is None or first is None else v - first for v in self.values[1:])

    def change_u(self, k: int):
        """The change's expanded uncertainty, carried into the unit shown
        (the slope of the conversion, the mean of the two runs')."""
        big = self.delta.change_u(k)
        s0, sk = self.slopes[0], self.slopes[k]
        if big is None or s0 is None or sk is None:
            return None
        return big * (abs(s0) + abs(sk)) / 2.0


def _slope(convert, v: float) -> float | None:
    """d convert / dv at v, by a central difference."""
    h = 1e-6 * max(abs(v), 1e-9)
    try:
        slope = (convert(v + h) - convert(v - h)) / (2.0 * h)
    except (ValueError, ZeroDivisionError):
        return None
    return slope if math.isfinite(slope) else None


def levels_shown(deltas, scales=()) -> list:
    """Compared figures with the levels among them in the unit levels are
    shown in (:func:`benchkit.units.level_view`), each run's read with its
    ``scales`` ((volts peak per FS, load ohms) a run); a level some run
    cannot show so stays as stored, as does everything else."""
    from benchkit.report.logbook import is_level
    from benchkit.units import level_view

    view = level_view()
    if view.unit is None:
        return list(deltas)
    out = []
    for d in deltas:
        if not is_level(d.name, d.unit) or len(scales) < len(d.values):
            out.append(d)
            continue
        got = [None if v is None else view.stored(v, d.unit, *scales[k]) for k, v in enumerate(d.values)]
        seen = {g[1] for g in got if g is not None}
        if len(seen) != 1 or seen == {d.unit}:
            out.append(d)
            continue
        slopes = tuple(None if v is None else _slope(lambda x, k=k: view.stored(x, d.unit, *scales[k])[0], v)
                       for k, v in enumerate(d.values))
        out.append(ShownDelta(d, seen.pop(), tuple(None if g is None else g[0] for g in got), slopes))
    return out


def figure_shown(f) -> str:
    """A comparable figure's value with its expanded uncertainty (k = 2) when it has one."""
    from benchkit.analysis.uncertainty import shown, shown_quantity

    if f.value is None:
        return "-"
    if f.unit in ("dB", "dBc", "dBFS", "%"):
        return f"{shown(f.value, f.u)} {f.unit}" + (" (a bound)" if f.bound else "")
    return shown_quantity(f.value, f.u, f.unit) if f.u is not None else figure_value(f.value, f.unit)


def figure_name(d) -> str:
    """A compared figure's name: its label, and where it was read when the label does not say."""
    return f"{d.label} ({d.at})" if d.at and d.at not in d.label else d.label


def change_text(d, k: int) -> str:
    """Run k's change from the first (a comparison's Delta), with its unit and verdict."""
    ch = d.changes[k - 1]
    if ch is None:
        return "-"
    unit = d.unit if d.unit in ("dB", "dBc", "dBFS", "%", *DB_LEVELS) else ""
    big = d.change_u(k)
    if unit:  # to the uncertainty's two significant digits, at least to 0.01
        places = 2 if not big else max(2, min(6, 1 - math.floor(math.log10(big))))
        text = f"{ch:+.{places}f}" + (f" +- {big:.{places}f}" if big is not None else "") + f" {unit}"
    else:
        text = ("+" if ch >= 0 else "-") + quantity(abs(ch), d.unit, 3) + (
            f" +- {quantity(big, d.unit, 2)}" if big is not None else "")
    verdict = d.verdict(k)
    return text + (f" {verdict}" if verdict else "")


def _change_cells(d, k: int, size: float) -> list[str]:
    """Run k's change from the first, its expanded uncertainty (to two
    significant digits, the change to the same places; dB at least to
    0.01) and the verdict, in a unit ``size`` times the figure's."""
    ch, big = d.changes[k - 1], d.change_u(k)
    if ch is None:
        return ["-", "-", d.verdict(k) or ""]
    if d.unit not in SHOWN_DB and abs(big or ch) < 0.01 * size:  # too fine for the row's prefix: its own
        return [("+" if ch >= 0 else "-") + quantity(abs(ch), d.unit, 3),
                "-" if big is None else quantity(big, d.unit, 2), d.verdict(k) or ""]
    ch, big = ch / size, None if big is None else big / size
    if big:
        places = max(0, min(6, 1 - math.floor(math.log10(big))))
        if d.unit in SHOWN_DB:
            places = max(2, places)
    else:
        places = 2 if d.unit in SHOWN_DB or ch == 0 else max(0, min(6, 2 - math.floor(math.log10(abs(ch)))))
    return [f"{ch:+.{places}f}", "-" if big is None else f"{big:.{places}f}", d.verdict(k) or ""]


#: units whose values print to two decimals (ratios and levels)
LEVELS = ("dB", "dBc", "dBFS", "%")
#: and with them the dB units a level may be shown in
SHOWN_DB = LEVELS + DB_LEVELS


def delta_table(groups, n: int) -> str:
    """Compared figures as one table: each figure's unit (one prefix for
    the row), its value in each of ``n`` runs, and for each later run the
    change from [0], the change's U and the verdict. ``groups``: (heading
    or None, deltas) in order; a heading takes a row of its own."""
    from benchkit.report.screen import Column, table_text
    from benchkit.units import in_one_unit, prefix_scale

    rows = []
    for heading, deltas in groups:
        if heading:
            rows.append([heading] + [""] * (1 + n + 3 * (n - 1)))
        for d in deltas:
            if d.unit in SHOWN_DB:
                unit, values = d.unit, ["-" if v is None else f"{v:.2f}" for v in d.values]
            else:
                unit, values = in_one_unit(d.values, d.unit)
            size = prefix_scale(unit) if d.unit not in SHOWN_DB else 1.0
            changes = [cell for k in range(1, n) for cell in _change_cells(d, k, size)]
            rows.append([("  " if heading else "") + figure_name(d), unit, *values, *changes])
    columns = [Column("figure", "left"), Column("unit", "left"), *(Column(f"[{k}]") for k in range(n))]
    for k in range(1, n):
        columns += [Column(f"change [{k}]-[0]"), Column("U"), Column("verdict", "left")]
    return table_text(columns, rows)


def comparison_text(c, scales=()) -> str:
    """A comparison, figure by figure: each run's value, the change from
    the first and whether it is better or worse; the headline first; the
    levels in the unit levels are shown in, each run's read with its
    ``scales`` (:func:`levels_shown`)."""
    lines = [f"!! {w}" for w in c.warnings]
    lines.append("runs: " + "; ".join(f"[{k}] {lab}" for k, lab in enumerate(c.labels)) + " (changes are from [0])")
    if c.judged():
        lines.append(f"U is the change's expanded uncertainty at k = {c.coverage:.2g}: noise alone calls none of the "
                     f"{c.judged()} figures judged better or worse, 99 times in 100")
    ordered = list(c.headline()) + [d for d in c.deltas if not d.headline]
    shown = ordered if len(ordered) <= 30 else list(c.headline()) + [d for d in ordered if d.better][:30]
    lines.append(delta_table([(None, levels_shown(shown, scales))], len(c.labels)))
    if len(shown) < len(ordered):
        lines.append(f"  ... {len(ordered) - len(shown)} more figures in the CSV")
    return "\n".join(lines)


def first_half(half: str) -> str:
    return "both halves together" if half == "symmetric" else f"the {half} half"


def budget_summary(d: dict) -> str:
    """A class-A budget (``ClassABudget.to_dict``) on one screen."""
    lines = [
        f"se-class-a: {d['rail_v']:g} V rail, {d['bias_a']:g} A bias, {d['load_ohms']:g} ohm load, {d['vsat_v']:g} V saturation",
        f"  positive swing      +{quantity(d['positive_swing_vpk'], 'V', 3)} peak "
        + ("(current-limited: I x R)" if d["limiting_half"] == "positive"
           else f"(rail-limited: rail/2 - Vsat; the current would allow +{quantity(d['current_limited_vpk'], 'V', 3)})"),
        f"  negative swing      -{quantity(d['negative_swing_vpk'], 'V', 3)} peak (rail-limited: rail/2 - Vsat)",
        f"  clips first         {first_half(d['limiting_half'])}",
        f"  largest clean sine  {quantity(d['max_sine_w'], 'W')} (Vpk^2 / 2R)",
        f"  supply draw         {quantity(d['supply_w'], 'W', 3)} at idle and at full power; idle dissipation {quantity(d['idle_dissipation_w'], 'W', 3)}",
        f"  efficiency          {d['max_efficiency_pct']:.1f} % at the largest clean sine (class A: at most 25 %)",
    ]
    if "target" in d:
        t = d["target"]
        lines.append(f"  for {t['power_w']:g} W         bias {quantity(t['bias_a'], 'A', 3)} and a rail of at least {quantity(t['rail_v'], 'V', 3)}")
    if "current_limiter" in d:
        c = d["current_limiter"]
        lines.append(f"  limiter at {c['limit_a']:g} A     sense resistor {quantity(c['sense_ohms'], 'ohm', 3)} ({c['vbe_v']:g} V / I), "
                     f"{quantity(c['sense_w'], 'W', 3)} in it: rate it at least {quantity(2 * c['sense_w'], 'W', 2)}")
    return "\n".join(lines)


def _chain_line(profile) -> str:
    """The volts' and the watts' expanded uncertainty at 1 kHz from the
    chain, and what it is made of (benchkit.analysis.uncertainty.Chain)."""
    from benchkit.analysis.uncertainty import COVERAGE

    u, chain = profile.uncertainty, profile.chain()
    volts, watts = chain.volts(None), chain.watts(None)
    parts = "; ".join(f"{name} {100 * v:.2f} %" for name, v in volts.parts)
    pad = "" if profile.pad is None or profile.pad.measured or profile.pad.r1_ohms is None else (
        f", resistors +-{profile.pad.tolerance_pct if profile.pad.tolerance_pct is not None else 1:g} %")
    return (f"uncertainty at the stage (k = {COVERAGE}): volts +-{100 * volts.expanded():.2f} %, watts "
            f"+-{100 * watts.expanded():.2f} % (standard: {parts}{pad}; voltmeter +-{u.get('voltmeter_pct', 0):g} %, "
            f"repeatability {u.get('repeatability_db', 0):.4f} dB; load +-{u.get('load_tolerance_pct', 5):g} %)")


def profile_lines(profile, path) -> list[str]:
    """What a calibration profile says, as ``benchkit calibrate`` shows it."""
    floor = profile.loopback_floor
    coupling = "DC coupled" if profile.dc_coupled else f"AC coupled ({profile.ac_corner_hz:.2g} Hz)"
    return [
        f"output {quantity(profile.output_vpk_per_fs, 'V', 5)} peak per FS, input "
        f"{quantity(profile.input_vpk_per_fs, 'V', 5)} peak per FS, pad ratio {profile.pad_ratio:.5g}: "
        f"{quantity(profile.stage_volts_per_fs, 'V', 5)} peak per FS at the stage",
        f"loopback floor THD+N {floor['thdn_db']:.1f} dB at {floor['level_dbfs']:.1f} dBFS; "
        f"{'inverting' if profile.polarity_inverts else 'non-inverting'}; {coupling}; "
        f"latency {profile.latency_samples} samples",
        _chain_line(profile),
        f"profile: {path} (hash {profile.digest()})",
    ]


def batch_table(headers, rows) -> str:
    """Many captures on one screen (:func:`benchkit.kinds.batch_rows`): a
    row a file and channel, the headline figures in columns (units in the
    headers, one prefix a column)."""
    from benchkit.report.screen import Column, table_text
    from benchkit.units import in_one_unit

    columns = [Column("file", "left"), Column("channel", "right"), Column("kind", "left"), Column("valid", "left")]
    cells = [[str(r[0]), str(r[1]), r[2], r[3]] for r in rows]
    for k, (label, unit) in enumerate(headers):
        values = [r[4 + k] for r in rows]
        if unit in LEVELS or unit in ("dBV", "dBu"):
            shown, texts = unit, ["-" if v is None else f"{v:.2f}" for v in values]
        else:
            shown, texts = in_one_unit(values, unit)
        columns.append(Column(f"{label} ({shown})"))
        for row, text in zip(cells, texts):
            row.append(text)
    return table_text(columns, cells)
