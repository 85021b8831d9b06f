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

    Example: benchkit analyze sample_captures/b2-bias0.8A-997Hz-steps.wav --load 8 --out report/
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
    from benchkit import runs
    from benchkit.report import summary

    rec = read_capture(path, channel)
    scale, source = (volts_per_fs, "given") if volts_per_fs is not None else rec.channel_scale()
    if load is not None and scale is None:
        raise BenchkitError(f"{path}: --load needs a voltage scale (--volts-per-fs, or a sidecar that gives one)")
    if runs.is_stepped(rec):
        steps = runs.analyze_steps(rec, band, load, volts_per_fs, out is not None, fundamental, averages)
        _err(summary.steps_summary(steps, f"{path} channel {channel} ({len(steps.steps)} steps)"))
        if out is not None:
            for written in _write_steps_reports(steps, Path(path), channel, out):
                _err(f"  wrote        {written}")
        return steps.to_dict()
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
    _err(summary.tone_summary(result, str(path), channel))
    if out is not None:
        for written in _write_reports(result, doc, Path(path), channel, out):
            _err(f"  wrote        {written}")
    return doc


def _report_folder(out: Path) -> Path:
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise BenchkitError(f"cannot create report folder {out}: {exc.strerror}") from exc
    return out


def _write_reports(result, doc, path: Path, channel: int, out: Path) -> list[Path]:
    from benchkit.report import plots, tables

    _report_folder(out)
    stem = path.stem if channel == 1 else f"{path.stem}-ch{channel}"
    title = f"{path.name}, channel {channel}"
    return [
        tables.write_json(doc, out / f"{stem}.result.json"),
        tables.write_harmonics_csv(result, out / f"{stem}.harmonics.csv"),
        tables.write_spectrum_csv(result, out / f"{stem}.spectrum.csv"),
        plots.spectrum_png(result, out / f"{stem}.spectrum.png", title),
        plots.residual_png(result, out / f"{stem}.residual.png", title),
    ]


def _write_steps_reports(steps, path: Path, channel: int, out: Path) -> list[Path]:
    from benchkit.report import plots, tables

    _report_folder(out)
    stem = path.stem if channel == 1 else f"{path.stem}-ch{channel}"
    written = [
        tables.write_json(steps.to_dict(), out / f"{stem}.result.json"),
        tables.write_steps_csv(steps, out / f"{stem}.steps.csv"),
        plots.steps_png([(path.name, steps)], out / f"{stem}.thdn.png", f"{path.name}: THD+N"),
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


# --- live measurements ---------------------------------------------------------

_SIM_HELP = "Simulated stage for --device virtual: ideal, poly, hard-clip, se-class-a (see 'benchkit models')."


def _open_backend(device: Optional[str], sim: str, sim_params: List[str], sim_pad: str, seed: int):
    """The capture backend a command asked for; says on stderr which."""
    from benchkit import pads
    from benchkit.capture import resolve_device
    from benchkit.capture.stages import parse_params
    from benchkit.capture.virtual import DEMO_PAD, virtual_bench

    name = resolve_device(device)
    if name != "virtual":
        raise BenchkitError(
            f"device {name!r}: real interfaces need the PortAudio backend, which this version does not have yet; "
            "use --device virtual (or unset BENCHKIT_DEVICE)"
        )
    pad = DEMO_PAD if sim_pad == "demo" else pads.parse_pad(sim_pad)
    bench = virtual_bench(sim, parse_params(sim_params), pad=pad, seed=seed)
    pad_text = "no pad" if pad is None else f"pad {pad.r1_ohms:g}:{pad.r2_ohms:g} ohm ({1 / bench.pad_ratio():.2f}:1)"
    _err(f"device: virtual bench (simulated interface, stage {sim}, {pad_text}); nothing is played")
    return bench


@app.command()
def tone(
    frequency: float = typer.Option(997.0, "--freq", help="Tone frequency, Hz (997 Hz keeps harmonics off sub-multiples of the rate)."),
    levels: List[str] = typer.Option(["-20 dBFS"], "--level", help="Drive level at the interface output, e.g. -20dBFS or 0.1Vrms (repeat for steps)."),
    channel: int = typer.Option(1, "--channel", "-c", help="Input that carries the stage output, from 1."),
    load: Optional[float] = typer.Option(None, "--load", help="Load resistance, ohms: adds power in W."),
    bandwidth: str = typer.Option("20:20000", "--bandwidth", help="Measurement band LO:HI in Hz, or 'full'."),
    out: Optional[Path] = typer.Option(None, "--out", help="Run folder for the capture and reports (default: tone-<time>)."),
    device: Optional[str] = typer.Option(None, "--device", help="Capture device; default 'virtual' unless BENCHKIT_DEVICE names one."),
    sim: str = typer.Option("se-class-a", "--sim", help=_SIM_HELP),
    sim_param: List[str] = typer.Option([], "--sim-param", help="Stage parameter key=value (repeatable), e.g. bias=1.2."),
    sim_pad: str = typer.Option("demo", "--sim-pad", help="Simulated pad R1:R2 in ohms, 'none', or 'demo' (1.8k:200)."),
    seed: int = typer.Option(1, "--seed", help="Seed of the virtual bench (latency, noise)."),
    as_json: bool = typer.Option(False, "--json", help="Print the result as JSON on stdout."),
) -> None:
    """Play stepped tones into the stage, capture through the pad, analyse each step.

    The capture is written to the run folder before it is analysed.

    Example: benchkit tone --level -30dBFS --level -20dBFS --level -14dBFS --load 8 --sim-param bias=1.2

    Safety: on a real bench, start low, measure through a pad into a dummy
    load, and keep speakers off the output.
    """
    from datetime import datetime

    from benchkit import runs
    from benchkit.report import summary

    try:
        band = units.parse_band(bandwidth)
        backend = _open_backend(device, sim, sim_param, sim_pad, seed)
        # a level in volts is at the interface output, whose scale the device knows
        drive = [units.parse_level(text).to_dbfs(backend.output_vpk_per_fs) for text in levels]
        folder = _report_folder(out or Path(f"tone-{datetime.now():%Y%m%d-%H%M%S}"))
        steps = runs.tone_run(backend, folder, frequency, drive, load_ohms=load, bandwidth_hz=band, channel=channel, traces=True)
        _err(summary.steps_summary(steps, f"{frequency:g} Hz, {len(drive)} steps"))
        for written in _write_steps_reports(steps, folder / "capture.wav", channel, folder):
            _err(f"  wrote        {written}")
        _err(f"run folder: {folder}")
    except BenchkitError as exc:
        _err(f"benchkit: error: {exc}")
        raise typer.Exit(EXIT_BAD_INPUT)
    if as_json:
        from benchkit.report.tables import dumps

        print(dumps(steps.to_dict()))


@app.command()
def demo(
    out: Path = typer.Option(Path("benchkit-demo"), "--out", help="Report folder."),
    seed: int = typer.Option(1, "--seed", help="Seed of the virtual bench."),
) -> None:
    """Run the demo on the virtual bench: Test stage B-2 at 0.8 A and 1.2 A bias, compared.

    No hardware and no options needed; writes captures, PNG, CSV, JSON and a
    summary into the report folder and prints where it is.

    Example: benchkit demo --out demo-report
    """
    from benchkit.demo import run_demo

    try:
        _report_folder(out)
        report = run_demo(out, seed=seed, say=_err)
    except BenchkitError as exc:
        _err(f"benchkit: error: {exc}")
        raise typer.Exit(EXIT_BAD_INPUT)
    _err(report.text)
    _err(f"report: {report.folder.resolve()} ({len(report.files)} files)")


@app.command()
def models() -> None:
    """List the virtual bench's stage models with their parameters and units.

    Example: benchkit models
    """
    from benchkit.capture.stages import models_help

    print(models_help())


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
