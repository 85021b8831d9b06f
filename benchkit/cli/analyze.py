"""`benchkit analyze`: captures on disk, analysed offline."""

from __future__ import annotations

from pathlib import Path
from typing import List

import typer

from benchkit import kinds
from benchkit.analysis.documents import document
from benchkit.cli.common import answer, app, err, EXIT_BAD_INPUT, one_line, progress, takes
from benchkit.errors import BenchkitError


def each_channel(files, options):
    """(file, its options) to analyse: with --channel all, one a channel of
    each file but its reference input (--ref-channel, or the one its
    sidecar names); a file that cannot be read keeps one, to say why."""
    from dataclasses import replace

    import soundfile as sf

    from benchkit.jsonfile import load_json

    for path in files:
        if options.channel != "all":
            yield path, options
            continue
        try:
            n = sf.info(str(path)).channels
        except (RuntimeError, OSError, ValueError):
            n = 1
        ref = options.ref_channel
        if ref is None:
            try:
                ref = load_json(Path(path).with_suffix(".json")).get("reference_channel")
            except (OSError, ValueError, AttributeError, BenchkitError):  # no sidecar, or one it cannot read
                ref = None
        for k in range(1, n + 1):
            if k != ref or n == 1:
                yield path, replace(options, channel=k)


def floor_lines(docs: list[dict]) -> list[str]:
    """The interface floor each result of a batch was judged against, one
    line a result that has one, as a single file's summary states it
    (:func:`benchkit.interface_floor.summary_line`), led by its file (and
    channel, when the batch holds several channels of one file)."""
    from benchkit.interface_floor import summary_line

    files = [d.get("file") for d in docs]
    lines = []
    for d in docs:
        line = summary_line(d)
        if line is None:
            continue
        where = str(d.get("file") or "")
        if files.count(d.get("file")) > 1 and d.get("channel") is not None:
            where += f" channel {d['channel']}"
        lines.append(f"{where}: {line}" if where else line)
    return lines


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
    elsewhere. Several files (or --channel all) print one table, a row a
    file and channel, then the interface floor each result was judged
    against (a line a result, as one file's summary states it), and --out
    writes summary.csv beside the reports.

    Example: benchkit analyze sample_captures/b2-bias0.8A-997Hz-steps.wav --load 8 --out report/
    """
    with one_line():
        options = kinds.Offline.of(o)
        if o["zout"] is not None and len(files) != 2:
            raise BenchkitError("--zout takes two captures: the stage unloaded, then loaded")
        if o["zout"] is not None and o["channel"] == "all":
            raise BenchkitError("--zout reads one channel of its two captures: give --channel N")
    if o["zout"] is not None:
        from benchkit.kinds.zout import analyse_pair

        jobs = [(files[0], lambda _path: analyse_pair(files[0], files[1], o["channel"], o["ref_channel"],
                                                      options.bandwidth_hz, o["zout"], o["open_load"]))]
    else:
        jobs = [(path, lambda path, options=options: kinds.analyse_file(Path(path), options, say=err))
                for path, options in each_channel(files, options)]
    docs, failed = [], 0
    batch = len(jobs) > 1  # many: one table, a row a file and channel (their warnings still said)
    for path, analyse in progress(jobs, "analysing"):
        try:
            got = analyse(path)
            if batch:
                for line in got.text.split("\n"):
                    if line.lstrip().startswith(("warning", "NOT VALID")):
                        err(f"{path}: {line.strip()}")
            else:
                answer(got.text, o["json"])
            for written in got.write(o["out"]) if got.write is not None and o["out"] is not None else ():
                err(f"  wrote        {written}")
        except BenchkitError as exc:
            failed += 1
            err(f"benchkit: error: {exc}")
            docs.append(document("error", {"file": str(path), "error": str(exc)}))
            continue
        docs.append(got.doc)
    if batch:
        from benchkit.report.summary import batch_table
        from benchkit.report.tables import write_batch_csv

        headers, rows = kinds.batch_rows(docs)
        answer(batch_table(headers, rows), o["json"])
        for line in floor_lines(docs):
            answer(line, o["json"])
        if o["out"] is not None:
            err(f"  wrote        {write_batch_csv(headers, rows, Path(o['out']) / 'summary.csv')}")
    if o["json"]:
        from benchkit.report.tables import dumps

        print(dumps(docs[0] if len(docs) == 1 else docs))
    if failed:
        raise typer.Exit(EXIT_BAD_INPUT)
