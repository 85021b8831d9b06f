"""What people read of a gain run: the text summary."""

from __future__ import annotations

from benchkit.units import quantity


def gain_summary(d: dict, title: str = "") -> str:
    """A gain result (its document): the gain with its phase, the levels."""
    lines = [title] if title else []
    phase = "" if d["phase_deg"] is None else f", phase {d['phase_deg']:+.1f} deg" + (" (inverting)" if d["inverting"] else "")
    lines.append(f"  gain         {quantity(d['gain_vv'], 'V/V', 4)} ({d['gain_db']:+.2f} dB) at {quantity(d['frequency_hz'], 'Hz', 4)}{phase}")
    lines.append(f"  levels       {quantity(d['vin_vrms'], 'Vrms', 4)} in ({d['input_source']}), {quantity(d['vout_vrms'], 'Vrms', 4)} out"
                 + (f" into {d['load_ohms']:g} ohm" if d["load_ohms"] else ""))
    return "\n".join(lines)
