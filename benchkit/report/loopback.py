"""What people read of an interface self-test: the summary, two tables
(the residual against level, the response and the inputs' match) as CSV,
and one figure of both."""

from __future__ import annotations

import csv
from pathlib import Path

from benchkit.errors import BenchkitError
from benchkit.units import level_view, quantity


def loopback_summary(d: dict, title: str = "") -> str:
    """A self-test's result (its document) on one screen."""
    from benchkit.report.screen import Column, table_text

    lines = [title] if title else []
    rows = [[f"{r['drive_dbfs']:.0f}", f"{r['level_dbfs']:.2f}", f"{r['thdn_db']:.1f}", f"{r['thd_db']:.1f}",
             "-" if r["h2_dbc"] is None else f"{r['h2_dbc']:.1f}", "-" if r["h3_dbc"] is None else f"{r['h3_dbc']:.1f}",
             f"{r['residual_dbfs']:.1f}"] for r in d["levels"]]
    lines.append("  the residual against level (997 Hz):")
    lines.append(table_text([Column("drive (dBFS)"), Column("input (dBFS)"), Column("THD+N (dB)"), Column("THD (dB)"),
                             Column("H2 (dBc)"), Column("H3 (dBc)"), Column("residual (dBFS)")], rows, "    "))
    volts = "" if d.get("noise_vrms") is None else (f" ({quantity(d['noise_vrms'], 'Vrms', 3)}, "
                                                    f"A {quantity(d['noise_a_vrms'], 'Vrms', 3)} at the input)")
    view = level_view()
    if view.own(d["noise_dbfs"], d.get("noise_vrms")):  # the floor at the input, in the unit levels are shown in
        volts += f" ({view.text(d['noise_dbfs'], d.get('noise_vrms'))}, A {view.text(d['noise_a_dbfs'], d.get('noise_a_vrms'))})"
    lines.append(f"  noise floor  {d['noise_dbfs']:.1f} dBFS, A-weighted {d['noise_a_dbfs']:.1f} dBFS{volts}")
    low, high = d["response_low_db"], d["response_high_db"]
    first, last = d["response"][0]["frequency_hz"], d["response"][-1]["frequency_hz"]
    lines.append(f"  response     {low:+.2f} to {high:+.2f} dB re 1 kHz from {quantity(first, 'Hz', 3)} to "
                 f"{quantity(last, 'Hz', 3)}")
    if d.get("worst_match_db") is not None:
        lines.append(f"  inputs {d['channel']} and {d['other_channel']}  match within {d['worst_match_db']:.3f} dB and "
                     f"{d['worst_phase_deg']:.2f} deg over the same frequencies")
    lat = d["latencies_samples"]
    lines.append(f"  round trip   {d['latency_ms']:.2f} ms; over {len(lat)} starts it moved by "
                 f"{d['latency_spread_samples']} samples ({d['latency_spread_ms']:.2f} ms)")
    lines.append(f"  dropouts     {d['faults_reported']} reported and {len(d['gaps_heard_s'])} heard over "
                 f"{d['stream_s']:g} s of streaming")
    for w in d.get("warnings") or []:
        lines.append(f"  warning: {w['text'] if isinstance(w, dict) else w}")
    return "\n".join(lines)


def _csv(path: Path, header: list[str], rows) -> Path:
    try:
        with path.open("w", newline="", encoding="utf-8") as fh:
            w = csv.writer(fh)
            w.writerow(header)
            w.writerows([["" if v is None else f"{v:.7g}" for v in row] for row in rows])
    except OSError as exc:
        raise BenchkitError(f"cannot write {path}: {exc.strerror or exc}") from None
    return path


def loopback_reports(d: dict, folder: Path) -> list[Path]:
    """loopback.json, loopback.levels.csv, loopback.response.csv and loopback.png."""
    from benchkit.report.tables import write_json

    keys = ("drive_dbfs", "level_dbfs", "thdn_db", "thd_db", "h2_dbc", "h3_dbc", "noise_dbfs", "residual_dbfs")
    rkeys = ("frequency_hz", "gain_db", "other_db", "match_db", "phase_deg")
    return [write_json(d, folder / "loopback.json"),
            _csv(folder / "loopback.levels.csv", list(keys), [[r[k] for k in keys] for r in d["levels"]]),
            _csv(folder / "loopback.response.csv", list(rkeys), [[r[k] for k in rkeys] for r in d["response"]]),
            loopback_png(d, folder / "loopback.png")]


def loopback_png(d: dict, path: Path) -> Path:
    """:func:`loopback_figure` as a PNG."""
    from benchkit.report.plots import save_png

    return save_png(loopback_figure(d), path)


def loopback_figure(d: dict):
    """Left: the residual THD+N and THD against the input level, the noise
    floor's share drawn as the THD+N a residual of the noise alone would
    give. Right: the response re 1 kHz of each input, and their difference."""
    import numpy as np
    from matplotlib.figure import Figure

    from benchkit.report.plots import legend_clear, log_hz_axis

    fig = Figure(figsize=(10.5, 4.2))
    left, right = fig.subplots(1, 2)
    lv = np.array([r["level_dbfs"] for r in d["levels"]])
    left.plot(lv, [r["thdn_db"] for r in d["levels"]], "-o", color="#1f5a8c", ms=4, label="THD+N")
    left.plot(lv, [r["thd_db"] for r in d["levels"]], "--s", color="#b5651d", ms=3, label="THD")
    left.plot(lv, d["noise_dbfs"] - lv, ":", color="#777777", label="the noise floor alone")
    left.set_xlabel("level at the input (dBFS)")
    left.set_ylabel("re the tone (dB)")
    left.set_title("residual against level, 997 Hz")
    left.grid(True, color="#eeeeee", lw=0.5)
    f = [r["frequency_hz"] for r in d["response"]]
    right.plot(f, [r["gain_db"] for r in d["response"]], "-o", color="#1f5a8c", ms=3, label=f"input {d['channel']}")
    if d.get("other_channel") is not None:
        right.plot(f, [r["other_db"] for r in d["response"]], "--", color="#b5651d", label=f"input {d['other_channel']}")
        right.plot(f, [r["match_db"] for r in d["response"]], ":", color="#2e7d32",
                   label=f"input {d['channel']} less input {d['other_channel']}")
    log_hz_axis(right)
    gains = [r["gain_db"] for r in d["response"]]
    span = max(0.5, max(abs(min(gains)), abs(max(gains))) * 1.3)
    right.set_ylim(-span, span)
    right.set_xlabel("frequency (Hz)")
    right.set_ylabel("re 1 kHz (dB)")
    right.set_title("response")
    fig.suptitle(f"interface self-test: noise {d['noise_dbfs']:.1f} dBFS (A {d['noise_a_dbfs']:.1f}), "
                 f"round trip {d['latency_ms']:.2f} ms, {d['dropouts']} dropout(s) in {d['stream_s']:g} s", fontsize=10)
    fig.tight_layout()
    for ax in (left, right):  # once the curves, limits and layout are set
        ax.set_ylim(*ax.get_ylim())
        legend_clear(ax, fontsize=8)
    return fig
