"""Report files of each kind of result, written into a folder: JSON,
CSV and PNG under the capture's stem (docs/file-formats.md)."""

from __future__ import annotations

from pathlib import Path

from benchkit.errors import BenchkitError
from benchkit.report import overlays, plots, tables
from benchkit.report.summary import conditions_line


def report_folder(out: Path) -> Path:
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise BenchkitError(f"cannot create report folder {out}: {exc.strerror}") from exc
    return out


def tone_reports(result, doc, path: Path, channel: int, out: Path) -> list[Path]:
    report_folder(out)
    stem = path.stem if channel == 1 else f"{path.stem}-ch{channel}"
    title = f"{path.name}, channel {channel}"
    return [
        tables.write_json(doc, out / f"{stem}.result.json"),
        tables.write_harmonics_csv(result, out / f"{stem}.harmonics.csv"),
        tables.write_spectrum_csv(result, out / f"{stem}.spectrum.csv"),
        plots.spectrum_png(result, out / f"{stem}.spectrum.png", title),
        plots.residual_png(result, out / f"{stem}.residual.png", title),
    ]


def _result_csv_png(result, path: Path, channel: int, out: Path, what: str, write_csv, plot) -> list[Path]:
    """STEM.WHAT.json, .csv and .png: the result, its table and its plot."""
    report_folder(out)
    stem = path.stem if channel == 1 else f"{path.stem}-ch{channel}"
    return [
        tables.write_json(result.to_dict(), out / f"{stem}.{what}.json"),
        write_csv(result, out / f"{stem}.{what}.csv"),
        plot(result, out / f"{stem}.{what}.png", path.name),
    ]


def power_reports(result, path: Path, channel: int, out: Path) -> list[Path]:
    return _result_csv_png(result, path, channel, out, "power", tables.write_power_csv, plots.power_png)


def steps_reports(steps, path: Path, channel: int, out: Path) -> list[Path]:
    report_folder(out)
    stem = path.stem if channel == 1 else f"{path.stem}-ch{channel}"
    written = [
        tables.write_json(steps.to_dict(), out / f"{stem}.result.json"),
        tables.write_steps_csv(steps, out / f"{stem}.steps.csv"),
        overlays.distortion_png([steps.to_dict()], [path.name], out / f"{stem}.thdn.png", f"{path.name}: THD+N",
                                caption=conditions_line(steps.steps[0].result)),
    ]
    for s in steps.steps:
        tag = f"{stem}-drive{s.drive_dbfs:+.0f}dBFS"
        title = f"{path.name}, drive {s.drive_dbfs:g} dBFS"
        written += [
            plots.spectrum_png(s.result, out / f"{tag}.spectrum.png", title),
            plots.residual_png(s.result, out / f"{tag}.residual.png", title),
            tables.write_harmonics_csv(s.result, out / f"{tag}.harmonics.csv"),
        ]
    return written


def response_reports(result, path: Path, channel: int, out: Path, smooth: int | None = None) -> list[Path]:
    report_folder(out)
    stem = path.stem if channel == 1 else f"{path.stem}-ch{channel}"
    return [
        tables.write_json(result.to_dict(), out / f"{stem}.response.json"),
        tables.write_response_csv(result, out / f"{stem}.response.csv"),
        plots.response_png(result, out / f"{stem}.response.png", path.name, smooth),
        plots.distortion_png(result, out / f"{stem}.distortion.png", path.name),
    ]


def drift_reports(result, log: Path, out: Path) -> list[Path]:
    report_folder(out)
    return [
        tables.write_json(result.to_dict(), out / f"{log.stem}.drift.json"),
        tables.write_drift_csv(result, out / f"{log.stem}.drift.csv"),
        plots.drift_png(result, out / f"{log.stem}.drift.png", log.name),
    ]


def noise_reports(result, path: Path, channel: int, out: Path) -> list[Path]:
    return _result_csv_png(result, path, channel, out, "noise", tables.write_noise_csv, plots.noise_png)


def imd_reports(result, path: Path, channel: int, out: Path) -> list[Path]:
    """STEM.imd.json, .csv and .png: the IMD against level, and the top
    valid step's spectrum with its products when the analysis kept it."""
    report_folder(out)
    stem = path.stem if channel == 1 else f"{path.stem}-ch{channel}"
    doc = result.to_dict()
    top = result.top() or result.steps[-1]
    spectrum = None
    if top.result.spectrum is not None:
        spectrum = (*top.result.spectrum, doc["steps"][result.steps.index(top)])
    return [
        tables.write_json(doc, out / f"{stem}.imd.json"),
        tables.write_imd_csv(result, out / f"{stem}.imd.csv"),
        overlays.imd_png([doc], [path.name], out / f"{stem}.imd.png", path.name, spectrum=spectrum),
    ]


def zout_reports(result, folder: Path, out: Path, name: str = "zout") -> list[Path]:
    """NAME.json, .csv and .png of an output impedance result."""
    report_folder(out)
    return [
        tables.write_json(result.to_dict(), out / f"{name}.json"),
        tables.write_zout_csv(result, out / f"{name}.csv"),
        plots.zout_png(result, out / f"{name}.png", folder.name),
    ]


def crosstalk_reports(result, path: Path, out: Path) -> list[Path]:
    return _result_csv_png(result, path, 1, out, "crosstalk", tables.write_crosstalk_csv, plots.crosstalk_png)
