"""One-screen text summaries of results, for stderr."""

from __future__ import annotations

from benchkit import units
from benchkit.units import quantity
from benchkit.analysis import spectrum as sp
from benchkit.analysis.tone import ToneResult

#: Plain readings of the harmonic profile (common practice).
PROFILE_TEXT = {
    "even-order": "even-order dominant: an asymmetric transfer curve, the usual signature of a single-ended stage",
    "odd-order": "odd-order dominant: a symmetric curvature, as from a push-pull stage or a symmetric soft limit",
    "high-order-tail": (
        "a long high-order tail: hard clipping or a sharp kink in the transfer curve; the residual plot shows which"
    ),
    "mixed": "even and odd orders alike: more than one mechanism at work",
    "below-noise": "no harmonic stands clear of the noise: the residual is noise, not distortion",
}



def conditions_line(r: ToneResult) -> str:
    """The conditions a tone result holds under, in one line."""
    lo, hi = r.bandwidth_hz
    scale = "no voltage scale" if r.volts_per_fs is None else f"{r.volts_per_fs:g} V peak per FS ({r.scale_source})"
    return (
        f"{r.sample_rate_hz:g} Hz, {r.n_samples} samples ({quantity(r.duration_s, 's', 3)}), band {lo:g} to {hi:g} Hz, "
        f"{sp.WINDOW_NAME.split(',')[0]} window, averages {r.averages}, "
        f"fit to H{r.fitted_orders}, {scale}"
    )


def tone_summary(r: ToneResult, name: str = "", channel: int | None = None) -> str:
    """The figures of a tone analysis on one screen, ending with a plain
    reading of the harmonic profile."""
    lines = []
    head = " ".join(x for x in (name, f"channel {channel}" if channel else "") if x)
    if head:
        lines.append(head)
    if not r.valid:
        lines.append("  NOT VALID: " + "; ".join(w for w in r.warnings if "clipped" in w))
    fund = f"  fundamental  {r.fundamental_hz:.4f} Hz   {r.fundamental_dbfs:.2f} dBFS"
    if r.fundamental_vrms is not None:
        fund += f"   {quantity(r.fundamental_vrms, 'Vrms')}"
    if r.power_w is not None:
        fund += f"   {quantity(r.power_w, 'W')} into {r.load_ohms:g} ohm"
    lines.append(fund)
    heard = sum(h.above_noise for h in r.harmonics)
    if not r.harmonics:
        lines.append(f"  THD          not defined: every harmonic lies above the band "
                     f"(up to {r.bandwidth_hz[1]:g} Hz)")
    elif r.thd_upper_bound:
        lines.append(f"  THD          < {r.thd_pct:.4g} %   < {r.thd_db:.2f} dB   (H2..H{r.harmonics[-1].order}: "
                     "none over the noise)")
    else:
        lines.append(f"  THD          {r.thd_pct:.4g} %   {r.thd_db:.2f} dB   (H2..H{r.harmonics[-1].order}: "
                     f"{heard} over the noise)")
    lines.append(f"  THD+N        {r.thdn_pct:.4g} %   {r.thdn_db:.2f} dB   SINAD {r.sinad_db:.2f} dB")
    noise = f"  noise        {r.noise_dbfs:.1f} dBFS"
    if r.noise_vrms is not None:
        noise += f"   {quantity(r.noise_vrms, 'Vrms')}"
    lines.append(noise)
    lines.append(f"  DC {r.dc_fs:+.3g} FS   peak {r.peak_fs:.4g} FS   crest factor {r.crest_factor:.3f}")
    if r.harmonics:
        hs = "  ".join(f"H{h.order} {h.level_dbc:.1f}" if h.above_noise else f"H{h.order} ({h.level_dbc:.1f})"
                       for h in r.harmonics[:9])
        lines.append(f"  dBc          {hs}")
        if not all(h.above_noise for h in r.harmonics[:9]):
            lines.append("               (in brackets: not over the noise, left out of THD)")
    lines.append(f"  conditions   {conditions_line(r)}")
    for w in r.warnings:
        lines.append(f"  warning      {w}")
    lines.append(f"  reading      {PROFILE_TEXT[r.harmonic_profile]}")
    return "\n".join(lines)


def _harmonic_cell(h) -> str:
    """A harmonic's level, bracketed when it cannot be told from the noise,
    "above band" when the band leaves it out."""
    if h is None:
        return "above band"
    return f"{h.level_dbc:.1f}" if h.above_noise else f"({h.level_dbc:.1f})"


def steps_summary(steps, title: str = "") -> str:
    """A stepped-tone run as a table: one line per step."""
    lines = [title] if title else []
    lines.append("  drive dBFS    level        power      THD+N %    THD+N dB      H2 dBc      H3 dBc")
    for s in steps.steps:
        r = s.result
        by_order = {h.order: h for h in r.harmonics}
        level = quantity(r.fundamental_vrms, "Vrms") if r.fundamental_vrms is not None else f"{r.fundamental_dbfs:.2f} dBFS"
        power = quantity(r.power_w, "W") if r.power_w is not None else "-"
        mark = "" if r.valid else ("   NOT VALID (clipped capture)" if r.clipped else "   NOT VALID (see the warnings)")
        lines.append(
            f"  {s.drive_dbfs:9.2f}   {level:>11}  {power:>10}  {r.thdn_pct:9.4g}  {r.thdn_db:9.2f}  "
            f"{_harmonic_cell(by_order.get(2)):>10}  {_harmonic_cell(by_order.get(3)):>10}{mark}"
        )
    seen = set()
    for w in list(steps.warnings) + [w for s in steps.steps for w in s.result.warnings]:
        if w not in seen:
            seen.add(w)
            lines.append(f"  warning      {w}")
    return "\n".join(lines)


def _figure_value(v, unit: str) -> str:
    if v is None:
        return "-"
    return f"{v:.2f} {unit}" if unit in ("dB", "dBc", "dBFS", "%") else f"{quantity(v, unit)}"


def comparison_text(c) -> str:
    """A comparison, figure by figure: each run's value, the change from
    the first and whether it is better or worse; the headline first."""
    lines = [f"!! {w}" for w in c.warnings]
    width = max(len(lab) for lab in c.labels)
    lines.append("runs: " + "; ".join(f"[{k}] {lab}" for k, lab in enumerate(c.labels)) + " (changes are from [0])")
    ordered = list(c.headline()) + [d for d in c.deltas if not d.headline]
    shown = ordered if len(ordered) <= 30 else list(c.headline()) + [d for d in ordered if d.better][:30]
    name_w = max(len(f"{d.label} ({d.at})" if d.at and d.at not in d.label else d.label) for d in shown)
    for d in shown:
        name = f"{d.label} ({d.at})" if d.at and d.at not in d.label else d.label
        cells = [f"{_figure_value(v, d.unit):>{max(12, width)}}" for v in d.values]
        changes = []
        for k, ch in enumerate(d.changes, start=1):
            if ch is None:
                changes.append("-")
                continue
            verdict = d.verdict(k)
            unit = d.unit if d.unit in ("dB", "dBc", "dBFS", "%") else ""
            text = f"{ch:+.2f} {unit}" if unit else ("+" if ch >= 0 else "-") + quantity(abs(ch), d.unit, 3)
            changes.append(text + (f" {verdict}" if verdict else ""))
        lines.append(f"  {name:<{name_w}}  " + "  ".join(cells) + "   " + "; ".join(changes))
    if len(shown) < len(ordered):
        lines.append(f"  ... {len(ordered) - len(shown)} more figures in the CSV")
    return "\n".join(lines)


def response_summary(r, title: str = "") -> str:
    """The derived figures of a frequency response, one screen."""
    d = r.to_dict()

    def hz(v):
        return "beyond the measured range" if v is None else f"{quantity(v, 'Hz', 4)}"

    def db(v):
        return "not measured" if v is None else f"{v:+.2f} dB"

    lines = [title] if title else []
    lines += [
        f"  method       {r.method}, referred by {r.scale_source}; magnitude in {r.mag_units}",
        f"  at {r.reference_hz:g} Hz   {r.ref_db:+.2f} dB",
        f"  -3 dB        {hz(d['low_3db_hz'])} and {hz(d['high_3db_hz'])}",
        f"  -1 dB        {hz(d['low_1db_hz'])} and {hz(d['high_1db_hz'])}",
        f"  ripple       {'not measured' if d['ripple_db'] is None else format(d['ripple_db'], '.2f') + ' dB peak to peak'}",
        f"  20 Hz, 20 kHz {db(d['level_20hz_db'])}, {db(d['level_20khz_db'])}",
    ]
    fit = r.corner_fit
    if fit is not None:
        verdict = "fits" if fit.fits else "does not fit"
        lines.append(f"  low corner   {verdict} a first-order high-pass at {quantity(fit.corner_hz, 'Hz', 4)} (RMS error {fit.rms_error_db:.2f} dB)")
        if r.coupling_capacitor_f is not None:
            lines.append(f"  coupling C   {r.coupling_capacitor_f * 1e6:.4g} uF into {r.load_ohms:g} ohm (C = 1/(2 pi R f))")
    thd = [v for v in r.thd_db if v == v]
    if thd:
        lines.append(f"  THD          {min(thd):.1f} to {max(thd):.1f} dB over frequency")
    lines += [f"  warning      {w}" for w in r.warnings]
    return "\n".join(lines)


def power_summary(r, title: str = "") -> str:
    """Power at the limits, onset, clipping half, efficiency; measured
    beside expected when the stage is described."""
    metric = "THD+N" if r.metric == "thdn" else "THD"
    lines = [title] if title else []
    for lim, pt in r.limits:
        if pt is None:
            lines.append(f"  at {lim:g} % {metric}".ljust(22) + "not reached")
        else:
            s0, s1 = r.steps[pt.below], r.steps[pt.above]
            lines.append(f"  at {lim:g} % {metric}".ljust(22) + f"{quantity(pt.power_w, 'W')} ({quantity(pt.vrms, 'Vrms', 4)}), "
                         f"between the {s0.drive_dbfs:.2f} and {s1.drive_dbfs:.2f} dBFS steps")
    if r.onset is not None:
        lines.append(f"  clipping onset       {quantity(r.onset.power_w, 'W')} ({quantity(r.onset.vrms, 'Vrms', 4)}, "
                     f"THD+N {r.onset.departure_db:g} dB over its low-level trend)")
    if r.half:
        lines.append(f"  clipping half        {r.half}")
    eff = r.efficiency_pct
    at = "" if eff is None else f", efficiency {eff:.1f} % at {r.limits[0][0]:g} %"
    if r.supply_w:
        lines.append(f"  supply               {quantity(r.supply_w, 'W', 3)} ({r.supply_v:g} V x {r.supply_a:g} A; all heat at idle){at}")
    elif r.supply_v and any(s.supply_a is not None for s in r.steps):
        metered = [s.supply_a for s in r.steps if s.supply_a is not None]
        lines.append(f"  supply               {r.supply_v:g} V, {quantity(min(metered), 'A', 4)} to {quantity(max(metered), 'A', 4)} metered{at}")
    if r.expected:
        e = r.expected
        got = r.onset.power_w if r.onset is not None else None
        lines.append(f"  expected ceiling     {quantity(e['max_sine_w'], 'W')} ({_first_half(e['limiting_half'])} first: "
                     f"+{quantity(e['positive_swing_vpk'], 'V', 3)} / -{quantity(e['negative_swing_vpk'], 'V', 3)} peak)"
                     + ("" if got is None else f"; measured onset {100 * got / e['max_sine_w']:.0f} % of it"))
    rating = (r.info or {}).get("rating")
    if rating:
        pre = rating.get("preconditioning")
        if pre:
            lines.append(f"  preconditioned       {quantity(pre['power_w'], 'W', 3)} for {pre['seconds']:g} s ({rating['manner_of']} manner)")
        verdict = {True: "reaches", False: "falls short of", None: "cannot be judged against"}[rating["meets"]]
        lines.append(f"  rating               {verdict} {rating['rated_power_w']:g} W at {rating['limit_pct']:g} %: "
                     + "; ".join(rating["notes"]))
    lines += [f"  warning              {w}" for w in r.warnings]
    return "\n".join(lines)


def _first_half(half: str) -> str:
    return "both halves together" if half == "symmetric" else f"the {half} half"


def budget_summary(d: dict) -> str:
    """A class-A budget (``ClassABudget.to_dict``) on one screen."""
    lines = [
        f"se-class-a: {d['rail_v']:g} V rail, {d['bias_a']:g} A bias, {d['load_ohms']:g} ohm load, {d['vsat_v']:g} V saturation",
        f"  positive swing      +{quantity(d['positive_swing_vpk'], 'V', 3)} peak "
        + ("(current-limited: I x R)" if d["limiting_half"] == "positive"
           else f"(rail-limited: rail/2 - Vsat; the current would allow +{quantity(d['current_limited_vpk'], 'V', 3)})"),
        f"  negative swing      -{quantity(d['negative_swing_vpk'], 'V', 3)} peak (rail-limited: rail/2 - Vsat)",
        f"  clips first         {_first_half(d['limiting_half'])}",
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


def drift_summary(r, title: str = "") -> str:
    """The figures of a drift log."""
    d = r.to_dict()
    lines = [title] if title else []
    lines += [
        f"  readings     {d['samples']} over {d['duration_s']:.1f} s",
        f"  now          {d['last_v'] * 1e3:.3f} mV (min {d['min_v'] * 1e3:.3f}, max {d['max_v'] * 1e3:.3f}, "
        f"peak to peak {d['pp_v'] * 1e3:.3f} mV)",
    ]
    if d["rate_mv_per_min"] is not None:
        lines.append(f"  drift rate   {d['rate_mv_per_min']:+.4f} mV/min over the last {d['rate_window_s']:g} s")
    f = r.fit
    if f is not None:
        settle = "" if f.settle_s is None else (
            f"; within {quantity(f.band_v, 'V')} from {quantity(f.settle_s, 's', 3)} (+-{quantity(f.settle_sd_s, 's', 2)})")
        lines.append(f"  settling     towards {quantity(f.final_v, 'V', 5)} (+-{quantity(f.final_sd_v, 'V', 2)}), "
                     f"tau {quantity(f.tau_s, 's', 3)} (+-{quantity(f.tau_sd_s, 's', 2)}){settle}")
    for e in r.events:
        lines.append(f"  step         at {e['time_s']:.1f} s: {e['step_v'] * 1e3:+.3f} mV")
    if r.verdict:
        about = f" about {r.nominal_v:g} V" if r.nominal_v else ""
        lines.append(f"  verdict      {r.verdict} (limit +-{r.limit_v * 1e3:g} mV{about})")
    lines += [f"  warning      {w}" for w in r.warnings]
    return "\n".join(lines)


def noise_summary(d: dict, title: str = "") -> str:
    """A noise result (its document), one screen."""
    lines = [title] if title else []
    lo, hi = d["bandwidth_hz"]
    band = f"{lo:g} Hz to {hi:g} Hz"

    def level(v, db, dbfs):
        return f"{quantity(v, 'Vrms')} ({db:.1f} dBV, {dbfs:.1f} dBFS)" if v is not None else f"{dbfs:.1f} dBFS"

    lines.append(f"  unweighted   {level(d['noise_vrms'], d['noise_dbv'] or 0, d['noise_dbfs'])} over {band}")
    lines.append(f"  A-weighted   {level(d['noise_a_vrms'], d['noise_a_dbv'] or 0, d['noise_a_dbfs'])}")
    ref = d.get("snr_reference")
    if ref and d.get("snr_db") is not None:
        lines.append(f"  SNR          {d['snr_db']:.1f} dB, {d['snr_a_db']:.1f} dB A-weighted, re {ref['what']} "
                     f"({quantity(ref['vrms'], 'Vrms')})")
    if d.get("hum"):
        parts = [f"{h['freq_hz']:g} Hz {h['level_dbfs']:.1f} dBFS" + (f" ({quantity(h['level_vrms'], 'Vrms')})"
                                                                       if h.get("level_vrms") else "")
                 for h in d["hum"]]
        lines.append(f"  hum          {d['mains_hz']:g} Hz mains: " + "; ".join(parts))
    else:
        lines.append("  hum          no mains lines above the noise")
    for w in d.get("warnings") or []:
        lines.append(f"  warning      {w}")
    return "\n".join(lines)


def _order_cell(order: dict | None) -> str:
    """An order's level; "partial" marks one missing a product, "-" one not measured."""
    if not order:
        return "-"
    return f"{order['db']:.1f}" + (" partial" if order.get("partial") else "")


def imd_summary(d: dict, title: str = "") -> str:
    """An intermodulation result (its document): a line a step, then the
    strongest products of the top valid step."""
    lines = [title] if title else []
    f1, f2 = d["tones_hz"]
    ref = "re f2" if d["method"] == "modulation" else "re f1 + f2"
    lines.append(f"  method       {d['method']}: {f1:g} Hz + {f2:g} Hz at {d['tone_ratio']:g}:1; products {ref}")
    lines.append("  drive dBFS    peak at stage   IMD %      IMD dB   order 2 dB  order 3 dB")
    for s in d["steps"]:
        peak = (quantity(s["peak_v"], "V") if s.get("peak_v") is not None
                else f"{units.dbfs_from_peak(max(s['peak_fs'], 1e-12)):.2f} dBFS")
        o = s.get("orders") or {}
        mark = "" if s["valid"] else ("   NOT VALID (clipped capture)" if s["clipped"] else "   NOT VALID (see the warnings)")
        drive = "-" if s["drive_dbfs"] is None else f"{s['drive_dbfs']:.2f}"
        lines.append(f"  {drive:>9}   {peak:>13}  {s['imd_pct']:9.4g}  {s['imd_db']:8.2f}  "
                     f"{_order_cell(o.get('2')):>10}  {_order_cell(o.get('3')):>10}{mark}")
    valid = [s for s in d["steps"] if s["valid"]]
    if valid:
        top = max(valid, key=lambda s: s["drive_dbfs"] or 0.0)
        shown = sorted((p for p in top["products"] if not p["at_floor"]), key=lambda p: -p["level_db"])[:6]
        if shown:
            at = "" if top["drive_dbfs"] is None else f"at {top['drive_dbfs']:g} dBFS: "
            lines.append(f"  products     {at}"
                         + "; ".join(f"{p['label']} ({p['frequency_hz']:.0f} Hz) {p['level_db']:.1f} dB" for p in shown))
    seen = set()
    for w in list(d.get("warnings") or []) + [w for s in d["steps"] for w in s.get("warnings") or []]:
        if w not in seen:
            seen.add(w)
            lines.append(f"  warning      {w}")
    return "\n".join(lines)


def zout_summary(d: dict, title: str = "") -> str:
    """An output impedance result (its document): a line a frequency."""
    lines = [title] if title else []
    open_load = "open" if d["open_load_ohms"] is None else f"{quantity(d['open_load_ohms'], 'ohm', 4)} (pad and input)"
    lines.append(f"  loads        {d['load_ohms']:g} ohm against {open_load}; {d['method']}")
    lines.append("  freq Hz      |Zout| ohm    R ohm       X ohm      damping")
    for p in d["points"]:
        df = "-" if p["damping_factor"] is None else f"{p['damping_factor']:.3g}"
        mark = "" if p["valid"] else "   NOT VALID"
        lines.append(f"  {p['frequency_hz']:>9.5g}   {p['zout_ohms']:10.4g}  {p['resistance_ohms']:10.4g}  "
                     f"{p['reactance_ohms']:10.4g}  {df:>8}{mark}")
    if d.get("zout_ohms") is not None:
        df = "-" if d["damping_factor"] is None else f"{d['damping_factor']:.3g}"
        lines.append(f"  at {d['reference_hz']:g} Hz  Zout {quantity(d['zout_ohms'], 'ohm', 4)}, damping factor {df} re "
                     f"{d['load_ohms']:g} ohm")
    for w in d.get("warnings") or []:
        lines.append(f"  warning      {w}")
    return "\n".join(lines)


def crosstalk_summary(d: dict, title: str = "") -> str:
    """A crosstalk result (its document): a line a frequency."""
    lines = [title] if title else []
    lines.append("  freq Hz      A into B dB   B into A dB   balance B-A dB")
    balance = {round(b["frequency_hz"], 3): b["balance_db"] for b in d["balance"]}
    for a, b in zip(d["a_to_b"], d["b_to_a"]):
        def cell(x):
            return f"{'<' if x['below_floor'] else ' '}{x['crosstalk_db']:.1f}"

        bal = balance.get(round(a["frequency_hz"], 3))
        lines.append(f"  {a['frequency_hz']:>9.5g}   {cell(a):>11}   {cell(b):>11}   "
                     f"{'-' if bal is None else f'{bal:+.3f}':>14}")
    if d.get("crosstalk_db") is not None:
        lines.append(f"  at {quantity(d['reference_hz'], 'Hz', 4)}  crosstalk {d['crosstalk_db']:.1f} dB (the worse direction), "
                     f"separation {-d['crosstalk_db']:.1f} dB"
                     + ("" if d.get("balance_db") is None else f"; balance {d['balance_db']:+.3f} dB"))
    for w in d.get("warnings") or []:
        lines.append(f"  warning      {w}")
    return "\n".join(lines)


def gain_summary(d: dict, title: str = "") -> str:
    """A gain result (its document): the gain with its phase, the levels."""
    lines = [title] if title else []
    phase = "" if d["phase_deg"] is None else f", phase {d['phase_deg']:+.1f} deg" + (" (inverting)" if d["inverting"] else "")
    lines.append(f"  gain         {quantity(d['gain_vv'], 'V/V', 4)} ({d['gain_db']:+.2f} dB) at {quantity(d['frequency_hz'], 'Hz', 4)}{phase}")
    lines.append(f"  levels       {quantity(d['vin_vrms'], 'Vrms', 4)} in ({d['input_source']}), {quantity(d['vout_vrms'], 'Vrms', 4)} out"
                 + (f" into {d['load_ohms']:g} ohm" if d["load_ohms"] else ""))
    return "\n".join(lines)
