"""Zout: the stage's output impedance and damping factor, from the same
tones played with the load off and then on."""

from __future__ import annotations

from pathlib import Path

from benchkit.analysis.zout import zout_figures
from benchkit.kinds import Kind


def reanalyse(folder: Path, record: dict, say) -> tuple[dict, list[Path]]:
    from benchkit.report import files
    from benchkit.zout_runs import readings_of_result, zout_of_captures

    p = record.get("params") or {}
    load, open_load = float(p["load_ohms"]), p.get("open_load_ohms")
    if p.get("from"):  # made from two logged runs: the copies of their results it keeps
        from benchkit.analysis.zout import output_impedance
        from benchkit.jsonfile import load_json

        docs = [load_json(folder / f"{state}.result.json") for state in ("open", "loaded")]
        result = output_impedance(*(readings_of_result(d) for d in docs), load, open_load)
    else:
        result = zout_of_captures(folder, load, open_load, int(p.get("channel") or 1), p.get("ref_channel"))
    return result.to_dict(), files.zout_reports(result, folder, folder)


KIND = Kind("zout", reanalyse, figures=zout_figures, result_kinds=("output-impedance",))
