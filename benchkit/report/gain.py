"""What people read of a gain run: the text summary."""

from __future__ import annotations

from benchkit.units import level_view, quantity


def _volts(vrms: float) -> str:
    """Volts RMS, and the same level in the unit levels are shown in when that is another (dBV, dBu, dBr)."""
    also = level_view().also(vrms, "Vrms")
    return quantity(vrms, "Vrms", 4) + (f" ({also})" if also else "")


def gain_summary(d: dict, title: str = "") -> str:
    """A gain result (its document): the gain with its phase, the levels."""
    lines = [title] if title else []
    phase = "" if d["phase_deg"] is None else f", phase {d['phase_deg']:+.1f} deg" + (" (inverting)" if d["inverting"] else "")
    lines.append(f"  gain         {quantity(d['gain_vv'], 'V/V', 4)} ({d['gain_db']:+.2f} dB) at {quantity(d['frequency_hz'], 'Hz', 4)}{phase}")
    lines.append(f"  levels       {_volts(d['vin_vrms'])} in ({d['input_source']}), {_volts(d['vout_vrms'])} out"
                 + (f" into {d['load_ohms']:g} ohm" if d["load_ohms"] else ""))
    return "\n".join(lines)
