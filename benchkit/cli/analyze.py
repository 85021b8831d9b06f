"""`benchkit analyze`: captures on disk, analysed offline."""

from __future__ import annotations

from pathlib import Path
from typing import List

import typer

from benchkit import kinds
from benchkit.analysis.documents import document
from benchkit.cli.common import answer, app, err, EXIT_BAD_INPUT, one_line, progress, takes
from benchkit.errors import BenchkitError


@app.command()
@takes("channel fundamental bandwidth averages volts_per_fs load calibration out sweep ref_channel ref_freq smooth "
       "time_col value_col as_kind zout open_load imd rail json", "figures", "judge", "shown",
       helps=dict(calibration="Calibration profile: volts at the stage from its scale and pad.",
                  rail="Describe the stage (se-class-a): its rail, V, for the expected ceiling (with --bias).",
                  ref_channel="Response and gain captures: the reference input (default: the sidecar's).",
                  out="Write spectrum/residual PNG, CSV and JSON here."))
def analyze(files: List[Path] = typer.Argument(..., help="WAV or FLAC captures.", show_default=False), o: dict = None) -> None:
    """Analyse recorded captures offline: tones, responses, IMD, noise, gain, output impedance, crosstalk.

    A capture that benchkit wrote (stepped tones, a sweep or stepped
    sines, a two-tone, noise or crosstalk run) is recognised from its
    sidecar; --sweep, --imd, --as noise and --zout analyse ones made
    elsewhere.

    Example: benchkit analyze sample_captures/b2-bias0.8A-997Hz-steps.wav --load 8 --out report/
    """
    with one_line():
        options = kinds.Offline.of(o)
        if o["zout"] is not None and len(files) != 2:
            raise BenchkitError("--zout takes two captures: the stage unloaded, then loaded")
    if o["zout"] is not None:
        from benchkit.kinds.zout import analyse_pair

        jobs = [(files[0], lambda _path: analyse_pair(files[0], files[1], o["channel"], o["ref_channel"],
                                                      options.bandwidth_hz, o["zout"], o["open_load"]))]
    else:
        jobs = [(path, lambda path: kinds.analyse_file(Path(path), options, say=err)) for path in files]
    docs, failed = [], 0
    for path, analyse in progress(jobs, "analysing"):
        try:
            got = analyse(path)
            answer(got.text, o["json"])
            for written in got.write(o["out"]) if got.write is not None and o["out"] is not None else ():
                err(f"  wrote        {written}")
        except BenchkitError as exc:
            failed += 1
            err(f"benchkit: error: {exc}")
            docs.append(document("error", {"file": str(path), "error": str(exc)}))
            continue
        docs.append(got.doc)
    if o["json"]:
        from benchkit.report.tables import dumps

        print(dumps(docs[0] if len(docs) == 1 else docs))
    if failed:
        raise typer.Exit(EXIT_BAD_INPUT)
