"""The benchkit command line: thin; parses, calls the layers, prints.

Human text goes to stderr, ``--json`` documents to stdout. Bad input ends
with a one-line reason and a non-zero exit, never a traceback (set
BENCHKIT_DEBUG=1 to see one).
"""

from __future__ import annotations

import os
import sys
from pathlib import Path
from typing import List, Optional

import typer

from benchkit import __version__, units
from benchkit.analysis.tone import SCHEMA_VERSION, analyze_tone
from benchkit.errors import BenchkitError
from benchkit.recordings import read_capture

app = typer.Typer(
    add_completion=False,
    no_args_is_help=True,
    pretty_exceptions_enable=False,
    help="benchkit: a calibrated bench analyzer for audio amplifier stages.",
)

EXIT_BAD_INPUT = 1
EXIT_INTERNAL = 3


def _err(text: str) -> None:
    print(text, file=sys.stderr)


def _progress(items: list, what: str):
    """Iterate with a progress bar on stderr when there are several items
    and stderr is a terminal; plainly otherwise."""
    if len(items) < 2 or not sys.stderr.isatty():
        return items
    from rich.console import Console
    from rich.progress import track

    return track(items, description=what, console=Console(stderr=True), transient=True)


def _version(value: bool) -> None:
    if value:
        print(f"benchkit {__version__}")
        raise typer.Exit()


@app.callback()
def _root(
    version: bool = typer.Option(False, "--version", callback=_version, is_eager=True, help="Print the version."),
) -> None:
    """benchkit: a calibrated bench analyzer for audio amplifier stages.

    Safety: amplifier stages run from mains-derived supplies and get hot;
    an unpadded output can overload an interface input and a test tone can
    damage a speaker. Measure into a dummy load through a pad, and follow
    local codes and licensed practice for anything mains-powered.
    """


@app.command()
def analyze(
    files: List[Path] = typer.Argument(..., help="WAV or FLAC captures.", show_default=False),
    channel: int = typer.Option(1, "--channel", "-c", help="Channel to analyse, numbered from 1."),
    fundamental: Optional[float] = typer.Option(
        None, "--fundamental", help="Look for the fundamental near this frequency (Hz); default: the sidecar's, else the strongest line."
    ),
    bandwidth: str = typer.Option("20:20000", "--bandwidth", help="Measurement band LO:HI in Hz, or 'full'."),
    averages: int = typer.Option(1, "--averages", help="Split each capture into N blocks and average."),
    volts_per_fs: Optional[float] = typer.Option(
        None, "--volts-per-fs", help="Volts peak at the measured point per full scale (overrides the sidecar)."
    ),
    load: Optional[float] = typer.Option(None, "--load", help="Load resistance in ohms: adds power in W."),
    out: Optional[Path] = typer.Option(None, "--out", help="Write spectrum/residual PNG, CSV and JSON here."),
    as_json: bool = typer.Option(False, "--json", help="Print the result as JSON on stdout."),
) -> None:
    """Analyse recorded tone captures offline: THD, THD+N, harmonics, noise.

    Example: benchkit analyze sample_captures/b2-bias0.8A-997Hz.wav --load 8 --out report/
    """
    try:
        band = units.parse_band(bandwidth)
    except BenchkitError as exc:
        _err(f"benchkit: error: {exc}")
        raise typer.Exit(EXIT_BAD_INPUT)
    docs, failed = [], 0
    for path in _progress(files, "analysing"):
        try:
            docs.append(_analyze_one(path, channel, fundamental, band, averages, volts_per_fs, load, out))
        except BenchkitError as exc:
            failed += 1
            _err(f"benchkit: error: {exc}")
            docs.append({"kind": "error", "schema_version": SCHEMA_VERSION, "file": str(path), "error": str(exc)})
    if as_json:
        from benchkit.report.tables import dumps

        print(dumps(docs[0] if len(docs) == 1 else docs))
    if failed:
        raise typer.Exit(EXIT_BAD_INPUT)


def _analyze_one(path, channel, fundamental, band, averages, volts_per_fs, load, out) -> dict:
    from benchkit.report.summary import tone_summary

    rec = read_capture(path, channel)
    scale, source = (volts_per_fs, "given") if volts_per_fs is not None else rec.channel_scale()
    if load is not None and scale is None:
        raise BenchkitError(f"{path}: --load needs a voltage scale (--volts-per-fs, or a sidecar that gives one)")
    result = analyze_tone(
        rec.samples,
        rec.sample_rate_hz,
        fundamental_hz=fundamental if fundamental is not None else rec.stimulus_frequency_hz,
        bandwidth_hz=band,
        averages=averages,
        volts_per_fs=scale,
        scale_source=source,
        load_ohms=load,
        traces=out is not None,
    )
    d = result.to_dict()
    doc = {"kind": d.pop("kind"), "schema_version": d.pop("schema_version"), "file": str(path), "channel": channel, **d}
    doc["warnings"] = list(rec.warnings) + doc["warnings"]
    _err(tone_summary(result, str(path), channel))
    if out is not None:
        for written in _write_reports(result, doc, Path(path), channel, out):
            _err(f"  wrote        {written}")
    return doc


def _write_reports(result, doc, path: Path, channel: int, out: Path) -> list[Path]:
    from benchkit.report import plots, tables

    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise BenchkitError(f"cannot create report folder {out}: {exc.strerror}") from exc
    stem = path.stem if channel == 1 else f"{path.stem}-ch{channel}"
    title = f"{path.name}, channel {channel}"
    return [
        tables.write_json(doc, out / f"{stem}.result.json"),
        tables.write_harmonics_csv(result, out / f"{stem}.harmonics.csv"),
        tables.write_spectrum_csv(result, out / f"{stem}.spectrum.csv"),
        plots.spectrum_png(result, out / f"{stem}.spectrum.png", title),
        plots.residual_png(result, out / f"{stem}.residual.png", title),
    ]


def main() -> None:
    """Console entry point: the typer app with a last guard against
    tracebacks."""
    try:
        app()
    except KeyboardInterrupt:
        _err("benchkit: interrupted")
        sys.exit(130)
    except Exception as exc:  # noqa: BLE001 - the one place that turns bugs into one line
        if os.environ.get("BENCHKIT_DEBUG"):
            raise
        _err(f"benchkit: internal error: {type(exc).__name__}: {exc} (set BENCHKIT_DEBUG=1 for details)")
        sys.exit(EXIT_INTERNAL)


if __name__ == "__main__":
    main()
