"""A grid run's document read back: its cells by level, how a level is
named, and what compares (pure functions of the "grid" document; the run
and its analysis are benchkit.kinds.grid's)."""

from __future__ import annotations

import math

from benchkit import units
from benchkit.analysis.compare import Figure, finite


def cells_of(doc: dict) -> dict[float, list[dict]]:
    """A grid document's cells by drive (dBFS), each level's in rising frequency."""
    out: dict[float, list[dict]] = {}
    for s in doc.get("steps") or []:
        out.setdefault(float(s["drive_dbfs"]), []).append(s)
    return {k: sorted(v, key=lambda s: s["frequency_hz"]) for k, v in sorted(out.items())}


def level_name(doc: dict, drive: float) -> str:
    """How a level is named: the output power it was asked as, else its
    drive, and the output it gave at 1 kHz or nearest."""
    cells = cells_of(doc).get(drive) or []
    powers, drives = doc.get("powers_w"), doc.get("levels_dbfs") or []
    if powers and len(powers) == len(drives) and drive in drives:
        return units.quantity(powers[drives.index(drive)], "W", 3)
    near = min(cells, key=lambda s: abs(math.log(s["frequency_hz"] / 1000.0)), default=None)
    out = "" if near is None or near.get("fundamental_vrms") is None else f", {units.quantity(near['fundamental_vrms'], 'Vrms', 3)}"
    return f"drive {drive:g} dBFS{out}"


def grid_figures(doc: dict) -> list[Figure]:
    """What compares: THD+N in every cell, and per level its worst over the
    band and its value nearest 1 kHz; the headline is the top level's worst."""
    out = []
    steps = doc.get("steps") or []
    index = {id(s): i for i, s in enumerate(steps)}
    by_level = cells_of(doc)
    for drive, cells in by_level.items():
        at = f"drive {drive:g} dBFS"
        valid = [s for s in cells if s.get("valid", True) and finite(s.get("thdn_db")) is not None]
        for s in cells:
            out.append(Figure(f"thdn_db@{s['frequency_hz']:.5g}Hz@{drive:+g}dBFS", "THD+N", finite(s.get("thdn_db")), "dB",
                              "lower", at=f"{s['frequency_hz']:.5g} Hz, {at}").of(doc, "steps.thdn_db", index[id(s)]))
        if not valid:
            continue
        worst = max(valid, key=lambda s: s["thdn_db"])
        top = drive == max(by_level)
        out.append(Figure(f"thdn_worst_db@{drive:+g}dBFS", "THD+N, worst over the band", worst["thdn_db"], "dB", "lower",
                          at=f"{worst['frequency_hz']:.5g} Hz, {at}", headline=top).of(doc, "steps.thdn_db", index[id(worst)]))
        near = min(valid, key=lambda s: abs(math.log(s["frequency_hz"] / 1000.0)))
        out.append(Figure(f"thdn_1k_db@{drive:+g}dBFS", "THD+N near 1 kHz", near["thdn_db"], "dB", "lower",
                          at=f"{near['frequency_hz']:.5g} Hz, {at}", headline=top).of(doc, "steps.thdn_db", index[id(near)]))
    return out
