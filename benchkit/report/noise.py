"""What people read of noise: the text summary, the density table and plot,
and the report files."""

from __future__ import annotations

import csv
import math
from pathlib import Path

import numpy as np
from matplotlib.figure import Figure

from benchkit.analysis.uncertainty import lookup, shown, shown_quantity
from benchkit.errors import read_warnings
from benchkit.report.files import result_csv_png
from benchkit.report.plots import BAND, FAINT, labels_apart, LEGEND_PLACES, legend_clear, log_hz_axis, MARK, save_png, TRACE
from benchkit.units import level_view, quantity


def _also(text: str) -> str:
    return f", {text}" if text else ""


def noise_summary(d: dict, title: str = "") -> str:
    """A noise result (its document), one screen."""
    lines = [title] if title else []
    lo, hi = d["bandwidth_hz"]
    band = f"{lo:g} Hz to {hi:g} Hz"

    view = level_view()

    def level(key):
        v, dbfs, u = d[f"{key}_vrms"], d[f"{key}_dbfs"], lookup(d, f"{key}_vrms")
        if v is None:
            return f"{shown(dbfs, lookup(d, f'{key}_dbfs'), 1)} dBFS"
        also = [f"{d[f'{key}_dbv'] or 0:.1f} dBV", f"{dbfs:.1f} dBFS"]
        if view.own(dbfs, v) and view.unit != "dBV":  # (shown already)
            also.insert(0, view.text(dbfs, v))
        return f"{shown_quantity(v, u, 'Vrms')} ({', '.join(also)})"

    lines.append(f"  unweighted   {level('noise')} over {band}")
    lines.append(f"  A-weighted   {level('noise_a')}   (+- is the expanded uncertainty, k = 2)")
    ref = d.get("snr_reference")
    if ref and d.get("snr_db") is not None:
        lines.append(f"  SNR          {d['snr_db']:.1f} dB, {d['snr_a_db']:.1f} dB A-weighted, re {ref['what']} "
                     f"({quantity(ref['vrms'], 'Vrms')}{_also(view.also(ref['vrms'], 'Vrms'))})")
    if d.get("hum"):
        def hum(h):
            also = [quantity(h["level_vrms"], "Vrms")] if h.get("level_vrms") else []
            if view.own(h["level_dbfs"], h.get("level_vrms")):
                also.append(view.text(h["level_dbfs"], h.get("level_vrms")))
            return f"{h['freq_hz']:g} Hz {h['level_dbfs']:.1f} dBFS" + (f" ({', '.join(also)})" if also else "")

        parts = [hum(h) for h in d["hum"]]
        lines.append(f"  hum          {d['mains_hz']:g} Hz mains: " + "; ".join(parts))
    else:
        lines.append("  hum          no mains lines above the noise")
    for w in read_warnings(d.get("warnings")):
        lines.append(f"  warning      {w}")
    return "\n".join(lines)


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


def density_db(psd_fs2_per_hz, volts_per_fs: float | None):
    """A noise density in dB, and its unit: re 1 V/sqrt(Hz) with a scale,
    else re 1 FS/sqrt(Hz) (the run's plot and the comparison's overlay alike)."""
    db = 10 * np.log10(np.maximum(np.asarray(psd_fs2_per_hz, float), 1e-300))
    if volts_per_fs:
        return db + 20 * np.log10(volts_per_fs), "dB re 1 V/sqrt(Hz)"
    return db, "dB re 1 FS/sqrt(Hz)"


def noise_figure(result, title: str) -> Figure:
    """The noise spectrum (density, log frequency), the A-weighted density
    beside it, the band shaded and the hum lines marked with their levels."""
    from benchkit.analysis.weighting import a_weighting_power

    shown = result.freq_hz >= max(result.freq_hz[1], 5.0)  # from 5 Hz (or the first bin above DC)
    f, p = result.freq_hz[shown], result.psd_fs2_per_hz[shown]
    unit = density_db(1.0, result.volts_per_fs)[1]

    def to_db(q):
        return density_db(q, result.volts_per_fs)[0]

    fig = Figure(figsize=(10, 5.6))
    ax = fig.add_subplot(1, 1, 1)
    lo, hi = result.bandwidth_hz
    ax.axvspan(max(lo, f[0]), hi, color=BAND, zorder=0, label="measurement band")
    ax.plot(f, to_db(p), color=TRACE, lw=0.8, label="noise density")
    ax.plot(f, to_db(p * a_weighting_power(f)), color=FAINT, lw=0.8, label="A-weighted")
    hum = []
    for h in result.hum:
        k = int(np.argmin(np.abs(f - h.freq_hz)))
        ax.plot([f[k]], [to_db(p[k])], "v", ms=5, color=MARK)
        hum.append((f[k], to_db(p[k]), f"{h.freq_hz:g} Hz\n{h.level_dbfs:.1f} dBFS"))
    log_hz_axis(ax)
    ax.set_xlim(f[0], f[-1])
    in_band = to_db(p[(f >= lo) & (f <= hi)])
    ax.set_ylim(float(np.min(in_band)) - 30.0, float(np.max(in_band)) + 12.0)
    ax.set_xlabel("frequency (Hz)")
    ax.set_ylabel(unit)
    ax.grid(True, which="both", color="#e6e6e6", lw=0.5)
    d = result.to_dict()
    ax.set_title(f"{title}: noise {d['noise_dbfs']:.1f} dBFS, A-weighted {d['noise_a_dbfs']:.1f} dBFS", loc="left",
                 fontsize=10)
    fig.subplots_adjust(left=0.09, right=0.97, top=0.92, bottom=0.11)
    labels_apart(ax, hum, fontsize=7, color=MARK)
    legend_clear(ax, ("upper right", *LEGEND_PLACES), fontsize=8, frameon=False)
    return fig


def noise_png(result, path: Path, title: str) -> Path:
    """:func:`noise_figure`, written to ``path``."""
    return save_png(noise_figure(result, title), path)


def noise_reports(result, path: Path, channel: int, out: Path) -> list[Path]:
    return result_csv_png(result, path, channel, out, "noise", write_noise_csv, noise_png)
