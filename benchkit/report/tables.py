"""CSV and JSON writers. Every CSV has a header row with units in the
column names (docs/file-formats.md)."""

from __future__ import annotations

import csv
import json
import math
from pathlib import Path

import numpy as np

from benchkit import units
from benchkit.analysis.tone import ToneResult


def _clean(obj):
    """Make a result JSON-safe: numpy scalars to Python, non-finite to None."""
    if isinstance(obj, dict):
        return {k: _clean(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_clean(v) for v in obj]
    if isinstance(obj, (np.floating, float)):
        f = float(obj)
        return f if math.isfinite(f) else None
    if isinstance(obj, np.integer):
        return int(obj)
    if isinstance(obj, np.bool_):
        return bool(obj)
    return obj


def dumps(doc) -> str:
    """One JSON document, as benchkit prints and writes it."""
    return json.dumps(_clean(doc), indent=2, allow_nan=False)


def dumps_line(doc) -> str:
    """One JSON document on one line (a stream of them: JSON lines)."""
    return json.dumps(_clean(doc), separators=(",", ":"), allow_nan=False)


def write_json(doc, path: Path) -> Path:
    """A result document, written whole and renamed into place."""
    from benchkit.recordings import write_text_atomic

    return write_text_atomic(path, dumps(doc) + "\n")


def write_harmonics_csv(result: ToneResult, path: Path) -> Path:
    """One row per harmonic (the fundamental first, as order 1)."""
    scale = result.volts_per_fs
    header = ["order", "freq_hz", "level_dbc", "level_dbfs", "phase_deg", "method"]
    if scale is not None:
        header.append("level_vrms")
    with path.open("w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(header)
        fund = [1, f"{result.fundamental_hz:.6f}", "0.000", f"{result.fundamental_dbfs:.3f}", "0.000", "fit"]
        if scale is not None:
            fund.append(f"{result.fundamental_vrms:.6g}")
        w.writerow(fund)
        for h in result.harmonics:
            row = [h.order, f"{h.freq_hz:.6f}", f"{h.level_dbc:.3f}", f"{h.level_dbfs:.3f}", f"{h.phase_deg:.3f}", h.method]
            if scale is not None:
                row.append(f"{h.to_dict(scale)['level_vrms']:.6g}")
            w.writerow(row)
    return path


def write_spectrum_csv(result: ToneResult, path: Path) -> Path:
    """The windowed spectrum: frequency and the level of a sine at each bin."""
    tr = result.traces
    if tr is None:
        raise ValueError("the result was analysed without traces")
    with path.open("w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(["freq_hz", "level_dbfs"])
        w.writerows(zip(np.char.mod("%.4f", tr.freq_hz), np.char.mod("%.3f", tr.spectrum_dbfs)))
    return path


def _steps_row(drive: float, r) -> list:
    by_order = {h.order: h.level_dbc for h in r.harmonics}
    return [
        f"{drive:.2f}",
        f"{r.fundamental_hz:.4f}",
        f"{r.fundamental_dbfs:.3f}",
        "" if r.fundamental_vrms is None else f"{r.fundamental_vrms:.5g}",
        "" if r.power_w is None else f"{r.power_w:.5g}",
        f"{r.thd_pct:.5g}",
        f"{r.thd_db:.3f}",
        f"{r.thdn_pct:.5g}",
        f"{r.thdn_db:.3f}",
        f"{by_order.get(2, float('nan')):.2f}",
        f"{by_order.get(3, float('nan')):.2f}",
        f"{r.noise_dbfs:.2f}",
        str(r.valid).lower(),
    ]


STEPS_HEADER = [
    "drive_dbfs", "fundamental_hz", "fundamental_dbfs", "level_vrms", "power_w", "thd_pct", "thd_db",
    "thdn_pct", "thdn_db", "h2_dbc", "h3_dbc", "noise_dbfs", "valid",
]


def write_steps_csv(steps, path: Path) -> Path:
    """One row per step of a stepped-tone run."""
    with path.open("w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(STEPS_HEADER)
        for s in steps.steps:
            w.writerow(_steps_row(s.drive_dbfs, s.result))
    return path


def write_deltas_csv(c, path: Path) -> Path:
    """A comparison, one row a figure: its value in each run, the change
    from the first run and the verdict (better, worse, same)."""
    labels = list(c.labels)
    with path.open("w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(["figure", "at", "unit", "better_when", *(f"value [{k}] {lab}" for k, lab in enumerate(labels)),
                    *(f"change [{k}]-[0]" for k in range(1, len(labels))),
                    *(f"verdict [{k}]" for k in range(1, len(labels)))])
        for d in c.deltas:
            w.writerow([d.name, d.at, d.unit, d.better or "",
                        *("" if v is None else f"{v:.6g}" for v in d.values),
                        *("" if ch is None else f"{ch:+.6g}" for ch in d.changes),
                        *(d.verdict(k) or "" for k in range(1, len(labels)))])
    return path


def write_response_csv(result, path: Path) -> Path:
    """One row per frequency: magnitude, phase, group delay, THD (THD+N
    for stepped sines) and H2..H5, raw (never smoothed); empty where not
    measured."""
    from benchkit.analysis.response import group_delay_s

    gd = group_delay_s(result.freq_hz, result.phase_deg)
    orders = [c.order for c in result.harmonics]
    with path.open("w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(["freq_hz", f"mag_db ({result.mag_units})", "phase_deg", "group_delay_s", "thd_db", "thdn_db"]
                   + [f"h{k}_dbc" for k in orders])
        for i, f in enumerate(result.freq_hz):
            cells = [result.thd_db[i], None if result.thdn_db is None else result.thdn_db[i]]
            cells += [c.level_dbc[i] for c in result.harmonics]
            w.writerow([f"{f:.4f}", f"{result.mag_db[i]:.4f}", f"{result.phase_deg[i]:.3f}", f"{gd[i]:.4e}"]
                       + ["" if v is None or not math.isfinite(v) else f"{v:.2f}" for v in cells])
    return path


def write_power_csv(result, path: Path) -> Path:
    """One row per step of a power run, with the supply current a meter
    read and the efficiency when the supply is known."""
    header = ["drive_dbfs", "vrms", "power_w", "thd_pct", "thdn_pct", "h2_dbc", "h3_dbc", "h4_dbc", "h5_dbc",
              "noise_vrms", "supply_a", "efficiency_pct", "valid"]
    with path.open("w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(header)
        for s in result.steps:
            h = [s.harmonics_dbc.get(k) for k in (2, 3, 4, 5)]
            w.writerow([f"{s.drive_dbfs:.3f}", f"{s.vrms:.6g}", f"{s.power_w:.6g}", f"{s.thd_pct:.5g}",
                        f"{s.thdn_pct:.5g}"] + ["" if x is None else f"{x:.2f}" for x in h]
                       + ["" if s.noise_vrms is None else f"{s.noise_vrms:.4g}",
                          "" if s.supply_a is None else f"{s.supply_a:.5g}",
                          "" if (e := s.efficiency_pct(result.supply_v, result.supply_a)) is None else f"{e:.3f}",
                          s.valid])
    return path


def write_drift_csv(result, path: Path) -> Path:
    """The readings beside the settling fit: time, volts, fitted volts and
    the residual (empty before the fit's start or without a fit)."""
    fit = result.fit
    with path.open("w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(["time_s", "volts", "fit_v", "residual_v"])
        for t, v in zip(result.t_s, result.v):
            if fit is not None and t >= fit.start_s:
                f = float(fit.value_at(t))
                w.writerow([f"{t:.3f}", f"{v:.9g}", f"{f:.9g}", f"{v - f:.3e}"])
            else:
                w.writerow([f"{t:.3f}", f"{v:.9g}", "", ""])
    return path


def write_catalog_csv(entries, fh) -> None:
    """The logbook as CSV, a row a run: what and when, its state, device,
    calibration, stage, note, a column for each tag key ("tag KEY") and
    for each headline figure the runs hold (units in the names), in the
    order they first appear."""
    keys = sorted({k for e in entries for k in e.tags})
    columns = list(dict.fromkeys(f["name"] for e in entries for f in e.figures))
    w = csv.writer(fh)
    w.writerow(["id", "started", "finished", "command", "status", "valid", "device", "calibration_file",
                "calibration_hash", "stage", "note", *(f"tag {k}" for k in keys), *columns, "warnings"])
    for e in entries:
        figures = {f["name"]: f["value"] for f in e.figures}
        w.writerow([e.id, e.started, e.finished or "", e.command, e.status, "" if e.valid is None else str(e.valid).lower(),
                    e.device or "", e.calibration_file or "", e.calibration_hash or "",
                    json.dumps(e.stage, ensure_ascii=False) if e.stage else "", e.note,
                    *(e.tags.get(k, "") for k in keys),
                    *("" if figures.get(n) is None else f"{figures[n]:.6g}" for n in columns),
                    " | ".join(e.warnings)])


def write_noise_csv(result, path: Path) -> Path:
    """The noise spectrum, a row a frequency: the density in FS^2/Hz and,
    with a scale, in V/sqrt(Hz); A-weighted beside it."""
    from benchkit.analysis.weighting import a_weighting_power

    f, p = result.freq_hz, result.psd_fs2_per_hz
    scale = result.volts_per_fs
    a = a_weighting_power(f)
    with path.open("w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(["freq_hz", "psd_fs2_per_hz", "psd_a_fs2_per_hz"] + (["v_per_sqrt_hz"] if scale else []))
        for k in range(1, f.size):
            row = [f"{f[k]:.4f}", f"{p[k]:.6e}", f"{p[k] * a[k]:.6e}"]
            if scale:
                row.append(f"{math.sqrt(p[k]) * scale:.6e}")
            w.writerow(row)
    return path


def write_imd_csv(result, path: Path) -> Path:
    """A row per product of each step of a two-tone run (the tones first,
    as orders 1), with the step's figures on its tones' rows."""
    with path.open("w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(["drive_dbfs", "label", "order", "freq_hz", "amplitude_fs", "vrms", "level_db", "at_floor",
                    "imd_pct", "order2_pct", "order3_pct", "valid"])
        for s in result.steps:
            r = s.result
            vpf = r.volts_per_fs

            def vrms(a):
                return "" if vpf is None else f"{a * vpf / math.sqrt(2):.6g}"

            drive = "" if s.drive_dbfs is None else f"{s.drive_dbfs:.3f}"
            figures = [f"{r.imd_pct:.5g}"] + ["" if r.orders.get(k) is None else f"{100 * r.orders[k]:.5g}" for k in (2, 3)]
            for label, f, a in (("f1", r.f1_hz, r.a1_fs), ("f2", r.f2_hz, r.a2_fs)):
                w.writerow([drive, label, 1, f"{f:.4f}", f"{a:.6e}", vrms(a),
                            f"{units.db_from_ratio(a / r.reference_fs):.2f}", "false", *figures, r.valid])
            for p in r.products:
                w.writerow([drive, p.label, p.order, f"{p.frequency_hz:.4f}", f"{p.amplitude_fs:.6e}",
                            vrms(p.amplitude_fs), f"{p.level_db:.2f}", str(p.at_floor).lower(), *figures, r.valid])
    return path


def write_zout_csv(result, path: Path) -> Path:
    """A row a frequency: the open-over-loaded ratio, the output impedance
    (magnitude, resistance, reactance) and the damping factor."""
    with path.open("w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(["freq_hz", "ratio", "ratio_phase_deg", "zout_ohms", "resistance_ohms", "reactance_ohms",
                    "damping_factor", "valid"])
        for p in result.points:
            d = p.to_dict()
            w.writerow([f"{p.frequency_hz:.4f}", f"{d['ratio']:.7f}", f"{d['ratio_phase_deg']:.4f}",
                        f"{p.zout_ohms:.6g}", f"{p.zout.real:.6g}", f"{p.zout.imag:.6g}",
                        "" if p.damping_factor is None else f"{p.damping_factor:.4g}", p.valid])
    return path


def write_crosstalk_csv(result, path: Path) -> Path:
    """A row a driven tone: which channel, its frequency, the crosstalk
    and separation, the levels, whether the leak stood over its noise; the
    balance at that frequency on the rows of channel A."""
    balance = dict(result.balance())
    with path.open("w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(["driven", "freq_hz", "crosstalk_db", "separation_db", "driven_dbfs", "leaked_dbfs", "floor_dbfs",
                    "below_floor", "balance_db", "valid"])
        for x in result.leaks:
            d = x.to_dict()
            b = balance.get(x.frequency_hz) if x.driven == "A" else None
            w.writerow([x.driven, f"{x.frequency_hz:.4f}", f"{x.crosstalk_db:.2f}", f"{-x.crosstalk_db:.2f}",
                        f"{d['driven_dbfs']:.2f}", f"{d['leaked_dbfs']:.2f}", f"{d['floor_dbfs']:.2f}",
                        str(x.below_floor).lower(), "" if b is None else f"{b:.3f}", x.valid])
    return path
