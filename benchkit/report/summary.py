"""One-screen text summaries of results, for stderr."""

from __future__ import annotations

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

_PREFIXES = ((1.0, ""), (1e-3, "m"), (1e-6, "u"), (1e-9, "n"))


def format_si(value: float, unit: str, digits: int = 4) -> str:
    """``0.0123, "V"`` -> ``"12.30 mV"``."""
    mag = abs(value)
    for scale, prefix in _PREFIXES:
        if mag >= scale or scale == 1e-9:
            return f"{value / scale:.{digits}g} {prefix}{unit}"
    return f"{value:g} {unit}"  # pragma: no cover


def conditions_line(r: ToneResult) -> str:
    """The conditions a tone result holds under, in one line."""
    lo, hi = r.bandwidth_hz
    scale = "no voltage scale" if r.volts_per_fs is None else f"{r.volts_per_fs:g} V peak per FS ({r.scale_source})"
    return (
        f"{r.sample_rate_hz:g} Hz, {r.n_samples} samples ({r.duration_s:.3g} s), band {lo:g} to {hi:g} Hz, "
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
        fund += f"   {format_si(r.fundamental_vrms, 'Vrms')}"
    if r.power_w is not None:
        fund += f"   {format_si(r.power_w, 'W')} into {r.load_ohms:g} ohm"
    lines.append(fund)
    orders = f"H2..H{r.harmonics[-1].order}" if r.harmonics else "no harmonics in band"
    lines.append(f"  THD          {r.thd_pct:.4g} %   {r.thd_db:.2f} dB   ({orders})")
    lines.append(f"  THD+N        {r.thdn_pct:.4g} %   {r.thdn_db:.2f} dB   SINAD {r.sinad_db:.2f} dB")
    noise = f"  noise        {r.noise_dbfs:.1f} dBFS"
    if r.noise_vrms is not None:
        noise += f"   {format_si(r.noise_vrms, 'Vrms')}"
    lines.append(noise)
    lines.append(f"  DC {r.dc_fs:+.3g} FS   peak {r.peak_fs:.4g} FS   crest factor {r.crest_factor:.3f}")
    if r.harmonics:
        hs = "  ".join(f"H{h.order} {h.level_dbc:.1f}" for h in r.harmonics[:9])
        lines.append(f"  dBc          {hs}")
    lines.append(f"  conditions   {conditions_line(r)}")
    for w in r.warnings:
        lines.append(f"  warning      {w}")
    lines.append(f"  reading      {PROFILE_TEXT[r.harmonic_profile]}")
    return "\n".join(lines)


def steps_summary(steps, title: str = "") -> str:
    """A stepped-tone run as a table: one line per step."""
    lines = [title] if title else []
    lines.append("  drive dBFS    level        power      THD+N %    THD+N dB   H2 dBc   H3 dBc")
    for s in steps.steps:
        r = s.result
        by_order = {h.order: h.level_dbc for h in r.harmonics}
        level = format_si(r.fundamental_vrms, "Vrms") if r.fundamental_vrms is not None else f"{r.fundamental_dbfs:.2f} dBFS"
        power = format_si(r.power_w, "W") if r.power_w is not None else "-"
        mark = "" if r.valid else "   NOT VALID (clipped capture)"
        lines.append(
            f"  {s.drive_dbfs:9.2f}   {level:>11}  {power:>10}  {r.thdn_pct:9.4g}  {r.thdn_db:9.2f}  "
            f"{by_order.get(2, float('nan')):7.1f}  {by_order.get(3, float('nan')):7.1f}{mark}"
        )
    seen = set()
    for w in list(steps.warnings) + [w for s in steps.steps for w in s.result.warnings]:
        if w not in seen:
            seen.add(w)
            lines.append(f"  warning      {w}")
    return "\n".join(lines)


def comparison_summary(deltas, labels: tuple[str, str]) -> str:
    """Before/after, step by step: THD+N and its change (lower is better)."""
    a, b = labels
    lines = [f"  drive dBFS   THD+N {a:>10}   THD+N {b:>10}   change"]
    for d in deltas:
        better = "better" if d.thdn_change_db < -0.1 else "worse" if d.thdn_change_db > 0.1 else "same"
        lines.append(
            f"  {d.drive_dbfs:9.2f}   {d.before.thdn_db:13.2f} dB   {d.after.thdn_db:13.2f} dB   "
            f"{d.thdn_change_db:+6.2f} dB ({better})"
        )
    return "\n".join(lines)


def response_summary(r, title: str = "") -> str:
    """The derived figures of a frequency response, one screen."""
    d = r.to_dict()

    def hz(v):
        return "beyond the measured range" if v is None else f"{v:.4g} Hz"

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
        lines.append(f"  low corner   {verdict} a first-order high-pass at {fit.corner_hz:.4g} Hz (RMS error {fit.rms_error_db:.2f} dB)")
        if r.coupling_capacitor_f is not None:
            lines.append(f"  coupling C   {r.coupling_capacitor_f * 1e6:.4g} uF into {r.load_ohms:g} ohm (C = 1/(2 pi R f))")
    thd = [v for v in r.thd_db if v == v]
    if thd:
        lines.append(f"  THD          {min(thd):.1f} to {max(thd):.1f} dB over frequency")
    lines += [f"  warning      {w}" for w in r.warnings]
    return "\n".join(lines)
