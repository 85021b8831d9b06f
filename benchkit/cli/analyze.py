"""`benchkit analyze`: captures on disk, analysed offline."""

from __future__ import annotations

from pathlib import Path
from typing import List, Optional

import typer

from benchkit import units
from benchkit.cli import values as V
from benchkit import kinds
from benchkit.analysis.documents import document
from benchkit.calibration import load_profile
from benchkit.errors import BenchkitError
from benchkit.cli.common import (
    app, BAND, err, EXIT_BAD_INPUT, figure_options, judge_options, one_line, power_options, progress,
)


@app.command()
@figure_options
@judge_options
def analyze(
    files: List[Path] = typer.Argument(..., help="WAV or FLAC captures.", show_default=False),
    channel: int = typer.Option(1, "--channel", "-c", parser=V.CHANNEL, help="Channel to analyse, numbered from 1."),
    fundamental: Optional[float] = typer.Option(
        None, "--fundamental", parser=V.hertz, help="Look for the fundamental near this frequency (Hz); default: the sidecar's, else the strongest line."
    ),
    bandwidth: str = typer.Option(BAND, "--bandwidth", parser=V.checked(units.parse_band), help="Measurement band LO:HI in Hz, or 'full'."),
    averages: int = typer.Option(1, "--averages", parser=V.number(1, 1000, integer=True), help="Split each capture into N blocks and average."),
    volts_per_fs: Optional[float] = typer.Option(
        None, "--volts-per-fs", parser=V.VOLTS, help="Volts peak at the measured point per full scale (overrides the sidecar)."
    ),
    load: Optional[float] = typer.Option(None, "--load", parser=V.ohms, help="Load resistance in ohms: adds power in W."),
    calibration: Optional[Path] = typer.Option(None, "--calibration", help="Calibration profile: volts at the stage from its scale and pad."),
    out: Optional[Path] = typer.Option(None, "--out", parser=V.out_folder, help="Write spectrum/residual PNG, CSV and JSON here."),
    sweep: Optional[str] = typer.Option(None, "--sweep", parser=V.checked(units.parse_sweep_spec), help="The capture holds a synchronized sweep F1:F2:SECONDS of unit amplitude made elsewhere, after unknown silence."),
    ref_channel: Optional[int] = typer.Option(None, "--ref-channel", parser=V.CHANNEL, help="Response captures: the reference input (default: the sidecar's)."),
    ref_freq: float = typer.Option(1000.0, "--ref-freq", parser=V.hertz, help="Response captures: the frequency the level is referred to, Hz."),
    smooth: Optional[int] = typer.Option(None, "--smooth", parser=V.number(1, 96, integer=True), help="Response captures: smooth the plotted magnitude over 1/N octave."),
    time_col: str = typer.Option("1", "--time-col", help="Drift CSVs: the time column, by name or number from 1 (units in the header are applied)."),
    value_col: str = typer.Option("2", "--value-col", help="Drift CSVs: the value column, by name or number."),
    as_kind: Optional[str] = typer.Option(None, "--as", parser=V.one_of("gain", "noise", "power"), help="Analyse as: gain (a tone capture benchkit wrote: the stage's voltage gain over --ref-channel, default the sidecar's reference input, or over the calibrated drive), noise (the stage's noise, input terminated: unweighted, A-weighted, hum; benchkit noise captures are recognised) or power (stepped captures: power at the distortion limits, clipping onset and half; needs --load and volts)."),
    zout_load: Optional[float] = typer.Option(None, "--zout", parser=V.ohms, help="Two captures, the stage unloaded then loaded with this many ohms: its output impedance and damping factor (with --open-load, what loaded the 'open' output)."),
    open_load: Optional[float] = typer.Option(None, "--open-load", parser=V.ohms, help="With --zout: what the pad and input present to the unloaded stage, ohms."),
    imd_method: Optional[str] = typer.Option(None, "--imd", help="The capture holds a two-tone test made elsewhere: modulation or difference, optionally with its tones, e.g. modulation:50:7000 (benchkit imd captures are recognised)."),
    rail: Optional[float] = typer.Option(None, "--rail", parser=V.VOLTS, help="Describe the stage (se-class-a): its rail, V, for the expected ceiling."),
    as_json: bool = typer.Option(False, "--json", help="Print the result as JSON on stdout."),
    figures: dict = None,
    judge: dict = None,
) -> None:
    """Analyse recorded captures offline: tones, responses, IMD, noise, gain, output impedance, crosstalk.

    A capture that benchkit wrote (stepped tones, a sweep or stepped
    sines, a two-tone, noise or crosstalk run) is recognised from its
    sidecar; --sweep, --imd, --as noise and --zout analyse ones made
    elsewhere.

    Example: benchkit analyze sample_captures/b2-bias0.8A-997Hz-steps.wav --load 8 --out report/
    """
    power, voltage_gain, noise = (as_kind == k for k in ("power", "gain", "noise"))
    try:
        band = units.parse_band(bandwidth)
        sweep_spec = units.parse_sweep_spec(sweep) if sweep else None
        profile = load_profile(calibration) if calibration is not None else None
        power_opts = power_options(power, load, rail, **figures) if power else None
    except BenchkitError as exc:
        err(f"benchkit: error: {exc}")
        raise typer.Exit(EXIT_BAD_INPUT)
    if zout_load is not None:
        from benchkit.kinds.zout import analyse_pair
        from benchkit.report.tables import dumps

        with one_line():
            if len(files) != 2:
                raise BenchkitError("--zout takes two captures: the stage unloaded, then loaded")
            got = analyse_pair(files[0], files[1], channel, ref_channel, band, zout_load, open_load)
            err(got.text)
            for written in got.write(out) if out is not None else ():
                err(f"  wrote        {written}")
        if as_json:
            print(dumps(got.doc))
        return

    options = kinds.Offline(channel=channel, fundamental_hz=fundamental, bandwidth_hz=band, averages=averages,
                            volts_per_fs=volts_per_fs, load_ohms=load, out=out, sweep=sweep_spec, ref_channel=ref_channel,
                            ref_freq_hz=ref_freq, smooth=smooth, power=power_opts, imd_method=imd_method, noise=noise,
                            gain=voltage_gain, time_col=time_col, value_col=value_col, judge=judge, profile=profile,
                            profile_path=calibration)
    docs, failed = [], 0
    for path in progress(files, "analysing"):
        try:
            got = kinds.analyse_file(Path(path), options, say=err)
            err(got.text)
            for written in got.write(out) if got.write is not None and out is not None else ():
                err(f"  wrote        {written}")
        except BenchkitError as exc:
            failed += 1
            err(f"benchkit: error: {exc}")
            docs.append(document("error", {"file": str(path), "error": str(exc)}))
            continue
        docs.append(got.doc)
    if as_json:
        from benchkit.report.tables import dumps

        print(dumps(docs[0] if len(docs) == 1 else docs))
    if failed:
        raise typer.Exit(EXIT_BAD_INPUT)
