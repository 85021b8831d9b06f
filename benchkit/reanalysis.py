"""Analysing a logged run again from what its folder holds.

The current analysis runs on the stored raw captures (or a drift run's
log.csv) with the options the run was made with (its record's
``params``), and writes the reports again. A tone, IMD, sweep or power run
that was killed while it played is first recovered from its partial recording
(:func:`benchkit.runs.recover_capture`).
"""

from __future__ import annotations

from pathlib import Path

from benchkit.errors import BenchkitError
from benchkit.recordings import read_capture
from benchkit.jsonfile import load_json

CAPTURE = "capture"


def _band(params: dict):
    band = params.get("bandwidth_hz", (20.0, 20000.0))
    return None if band is None else tuple(band)


def _capture(folder: Path, channel: int, say):
    from benchkit.runs import recover_capture

    path = folder / f"{CAPTURE}.wav"
    if not path.exists():
        path = recover_capture(folder, CAPTURE)
        say(f"recovered {path.name} from the partial recording")
    return read_capture(path, channel)


def reanalyse(folder: Path, record: dict, say=lambda _m: None) -> tuple[dict, list[Path]]:
    """The result document and the report files of a run, made again from
    its folder. The first file is the result JSON."""
    from benchkit.report import files

    command, p = record.get("command"), record.get("params") or {}
    channel = int(p.get("channel") or 1)
    if command == "tone":
        from benchkit.runs import analyze_steps

        steps = analyze_steps(_capture(folder, channel, say), _band(p), p.get("load_ohms"), traces=True)
        return steps.to_dict(), files.steps_reports(steps, folder / f"{CAPTURE}.wav", channel, folder)
    if command == "sweep":
        from benchkit.analysis.response import REFERENCE_HZ
        from benchkit.responses import analyze_response

        result = analyze_response(_capture(folder, channel, say), p.get("ref_channel"),
                                  reference_hz=p.get("ref_freq_hz") or REFERENCE_HZ, load_ohms=p.get("load_ohms"),
                                  bandwidth_hz=_band(p))
        return result.to_dict(), files.response_reports(result, folder / f"{CAPTURE}.wav", channel, folder,
                                                        p.get("smooth"))
    if command == "power":
        from benchkit.budget import ClassABudget
        from benchkit.power_runs import power_from_steps
        from benchkit.runs import analyze_steps

        rec = _capture(folder, channel, say)
        load = float(p["load_ohms"])
        budget = (ClassABudget(p["rail_v"], p["bias_a"], load, p.get("vsat_v") or 1.0)
                  if p.get("rail_v") is not None and p.get("bias_a") is not None else None)
        inverts = bool((rec.sidecar.get("calibration") or {}).get("polarity_inverts"))
        result = power_from_steps(analyze_steps(rec, load_ohms=load), load, p.get("metric", "thdn"),
                                  tuple(p.get("limits_pct") or (1.0, 0.1, 10.0)), p.get("onset_db", 6.0),
                                  p.get("supply_v"), p.get("supply_a"), budget, polarity_inverts=inverts)
        return result.to_dict(), files.power_reports(result, folder / f"{CAPTURE}.wav", channel, folder)
    if command == "drift":
        from benchkit.drift_runs import analyze_drift_csv

        log = folder / "log.csv"
        if not log.exists():
            raise BenchkitError(f"{folder}: the drift run has no log.csv: it stopped before its first reading")
        result = analyze_drift_csv(log, limit_v=p.get("limit_v"), band_v=p.get("band_v") or 1e-3,
                                   window_s=p.get("window_s") or 60.0, nominal_v=p.get("nominal_v") or 0.0,
                                   info={"source": record.get("device"), "ended": "reanalysed",
                                         "accelerated": p.get("accelerated")})
        return result.to_dict(), files.drift_reports(result, log, folder)
    if command == "gain":
        from benchkit.gain_runs import analyze_gain
        from benchkit.report.tables import write_json

        path = _capture(folder, channel, say).path
        result = analyze_gain(path, channel, p.get("ref_channel"), _band(p), p.get("load_ohms"))
        return result.to_dict(), [write_json(result.to_dict(), folder / f"{CAPTURE}.gain.json")]
    if command == "imd":
        from benchkit.imd_runs import analyze_imd_steps

        result = analyze_imd_steps(_capture(folder, channel, say), load_ohms=p.get("load_ohms"), spectrum=True)
        return result.to_dict(), files.imd_reports(result, folder / f"{CAPTURE}.wav", channel, folder)
    if command == "zout":
        from benchkit.zout_runs import readings_of_result, zout_of_captures

        load, open_load = float(p["load_ohms"]), p.get("open_load_ohms")
        if p.get("from"):
            from benchkit.analysis.zout import output_impedance

            docs = [load_json(folder / f"{state}.result.json") for state in ("open", "loaded")]
            result = output_impedance(*(readings_of_result(d) for d in docs), load, open_load)
        else:
            result = zout_of_captures(folder, load, open_load, channel, p.get("ref_channel"))
        return result.to_dict(), files.zout_reports(result, folder, folder)
    if command == "crosstalk":
        from benchkit.crosstalk_runs import analyze_crosstalk_capture

        path = _capture(folder, channel, say).path
        result = analyze_crosstalk_capture(path, _band(p))
        return result.to_dict(), files.crosstalk_reports(result, path, folder)
    if command == "noise":
        from benchkit.noise_runs import analyze_noise_capture

        result = analyze_noise_capture(_capture(folder, channel, say), _band(p), None, p.get("reference_vrms"),
                                       p.get("reference"), traces=True)
        return result.to_dict(), files.noise_reports(result, folder / f"{CAPTURE}.wav", channel, folder)
    if command == "watch":
        from benchkit.report.tables import write_json
        from benchkit.watch import summarise

        old = {}
        try:
            old = load_json(folder / "watch.json").get("conditions") or {}
        except (OSError, ValueError):
            pass  # a watch killed before it wrote its summary
        doc = summarise(folder / "readings.csv", {"frequency_hz": p.get("frequency_hz"), "level_dbfs": p.get("level_dbfs"),
                                                  "ended": "reanalysed", "device": record.get("device"),
                                                  "conditions": old or {"bandwidth_hz": p.get("bandwidth_hz")}})
        return doc, [write_json(doc, folder / "watch.json"), folder / "readings.csv"]
    raise BenchkitError(f"runs of command {command!r} cannot be analysed again")
