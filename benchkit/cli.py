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


def _open_backend(device: Optional[str], sim: str, sim_params: List[str], sim_pad: str, seed: int, real: dict | None = None):
    """The capture backend a command asked for; says on stderr which."""
    from benchkit import pads
    from benchkit.capture import resolve_device
    from benchkit.capture.stages import parse_params
    from benchkit.capture.virtual import DEMO_PAD, virtual_bench

    name = resolve_device(device)
    if name != "virtual":
        from benchkit.capture.portaudio import PortAudioBackend

        backend = PortAudioBackend(name, **(real or {}))
        cap = backend.drive_cap_dbfs
        _err(f"device: {backend.name}; drive capped at {cap:g} dBFS; output {backend.out_channel} drives the stage, "
             f"input {backend.in_channel} measures it" + (f", input {backend.ref_channel} is the reference" if backend.ref_channel else ""))
        return backend
    pad = DEMO_PAD if sim_pad == "demo" else pads.parse_pad(sim_pad)
    bench = virtual_bench(sim, parse_params(sim_params), pad=pad, seed=seed)
    pad_text = "no pad" if pad is None else f"pad {pad.r1_ohms:g}:{pad.r2_ohms:g} ohm ({1 / bench.pad_ratio():.2f}:1)"
    _err(f"device: virtual bench (simulated interface, stage {sim}, {pad_text}); nothing is played")
    return bench


@app.command()
def devices(as_json: bool = typer.Option(False, "--json", help="Print the list as JSON on stdout.")) -> None:
    """List the interfaces PortAudio sees, and the virtual bench.

    Example: benchkit devices --json
    """
    entries = [{"index": None, "name": "virtual", "host_api": "benchkit virtual bench", "max_input_channels": 2,
                "max_output_channels": 2, "default_sample_rate_hz": 48000.0}]
    note = None
    try:
        from benchkit.capture.portaudio import list_devices

        entries += list_devices()
    except BenchkitError as exc:
        note = str(exc)
    if as_json:
        from benchkit.report.tables import dumps

        print(dumps({"kind": "devices", "schema_version": 1, "devices": entries, "note": note}))
    else:
        for d in entries:
            idx = "-" if d["index"] is None else d["index"]
            _err(f"  {idx:>3}  {d['name']}  [{d['host_api']}]  in {d['max_input_channels']}, out "
                 f"{d['max_output_channels']}, {d['default_sample_rate_hz']:g} Hz")
    if note:
        _err(f"benchkit: {note}")


@app.command()
def tone(
    frequency: float = typer.Option(997.0, "--freq", help="Tone frequency, Hz (997 Hz keeps harmonics off sub-multiples of the rate)."),
    levels: List[str] = typer.Option(["-20 dBFS"], "--level", help="Drive level at the interface output, e.g. -20dBFS or 0.1Vrms (repeat for steps)."),
    load: Optional[float] = typer.Option(None, "--load", help="Load resistance, ohms: adds power in W."),
    bandwidth: str = typer.Option("20:20000", "--bandwidth", help="Measurement band LO:HI in Hz, or 'full'."),
    out: Optional[Path] = typer.Option(None, "--out", help="Run folder for the capture and reports (default: tone-<time>)."),
    device: Optional[str] = typer.Option(None, "--device", help="'virtual', or a real interface by index or part of its name; default 'virtual' unless BENCHKIT_DEVICE names one."),
    in_device: Optional[str] = typer.Option(None, "--in-device", help="A separate input interface (its clock offset is measured on the reference)."),
    in_channel: int = typer.Option(1, "--in-channel", help="Input carrying the stage output (through the pad), from 1."),
    out_channel: int = typer.Option(1, "--out-channel", help="Output driving the stage, from 1 (real devices)."),
    ref_channel: Optional[int] = typer.Option(None, "--ref-channel", help="Input wired straight from the driven output (real devices)."),
    rate: float = typer.Option(48000.0, "--rate", help="Sample rate, Hz (real devices)."),
    blocksize: int = typer.Option(1024, "--blocksize", help="Frames per audio callback (real devices)."),
    latency: str = typer.Option("high", "--latency", help="Stream latency: low, high, or seconds (real devices)."),
    drive_cap: float = typer.Option(-12.0, "--drive-cap", help="Highest drive a real device may get, dBFS peak."),
    override_drive_cap: bool = typer.Option(False, "--override-drive-cap", help="Allow up to -0.5 dBFS on a real device: can overload a stage, a pad or a speaker."),
    volts_per_fs: Optional[float] = typer.Option(None, "--volts-per-fs", help="Volts peak at the stage per full scale of the input (real devices)."),
    sim: str = typer.Option("se-class-a", "--sim", help=_SIM_HELP),
    sim_param: List[str] = typer.Option([], "--sim-param", help="Stage parameter key=value (repeatable), e.g. bias=1.2."),
    sim_pad: str = typer.Option("demo", "--sim-pad", help="Simulated pad R1:R2 in ohms, 'none', or 'demo' (1.8k:200)."),
    seed: int = typer.Option(1, "--seed", help="Seed of the virtual bench (latency, noise)."),
    as_json: bool = typer.Option(False, "--json", help="Print the result as JSON on stdout."),
) -> None:
    """Play stepped tones into the stage, capture through the pad, analyse each step.

    The whole run is one stream; the raw recording goes to disk as it
    arrives and the aligned capture is written before it is analysed.

    Example: benchkit tone --level -30dBFS --level -20dBFS --level -14dBFS --load 8 --sim-param bias=1.2

    Safety: on a real bench, start low, measure through a pad into a dummy
    load, and keep speakers off the output. Ctrl-C fades the output to
    silence and keeps the partial capture.
    """
    from datetime import datetime

    from benchkit import runs
    from benchkit.capture.portaudio import CaptureInterrupted
    from benchkit.report import summary

    try:
        band = units.parse_band(bandwidth)
        lat: str | float = latency if latency in ("low", "high") else float(units.parse_frequency(latency))
        if override_drive_cap:
            _err("WARNING: the drive cap is overridden: full-scale drive can overload the stage, the pad, the "
                 "interface input and any speaker. Keep a dummy load on the output.")
        real = dict(sample_rate=rate, in_channel=in_channel, out_channel=out_channel, ref_channel=ref_channel,
                    blocksize=blocksize, latency=lat, drive_cap_dbfs=-0.5 if override_drive_cap else drive_cap,
                    volts_per_fs=volts_per_fs, in_device=in_device)
        backend = _open_backend(device, sim, sim_param, sim_pad, seed, real)
        # a level in volts is at the interface output, whose scale the device knows
        drive = [units.parse_level(text).to_dbfs(backend.output_vpk_per_fs) for text in levels]
        folder = _report_folder(out or Path(f"tone-{datetime.now():%Y%m%d-%H%M%S}"))
        channel = in_channel
        steps = runs.tone_run(backend, folder, frequency, drive, load_ohms=load, bandwidth_hz=band, channel=channel, traces=True)
        _err(summary.steps_summary(steps, f"{frequency:g} Hz, {len(drive)} steps, latency {steps.latency_samples} samples"))
        for written in _write_steps_reports(steps, folder / "capture.wav", channel, folder):
            _err(f"  wrote        {written}")
        _err(f"run folder: {folder}")
    except CaptureInterrupted as exc:
        _err(f"benchkit: stopped: {exc}")
        if exc.device_lost:
            # PortAudio can hang for good shutting down a dead server's
            # client; everything is on disk, so leave without it
            sys.stdout.flush()
            sys.stderr.flush()
            os._exit(EXIT_BAD_INPUT)
        raise typer.Exit(130 if str(exc).startswith("interrupted") else EXIT_BAD_INPUT)
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
