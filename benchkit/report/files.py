"""Report files: the folder they go in, and the result, table and plot
most kinds write under the capture's stem (docs/file-formats.md). Each
kind's own report files are in ``report/NAME.py``."""

from __future__ import annotations

from pathlib import Path

from benchkit.errors import BenchkitError
from benchkit.report import tables


def report_folder(out: Path) -> Path:
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise BenchkitError(f"cannot create report folder {out}: {exc.strerror}") from exc
    return out


def title_of(path: Path) -> str:
    """What the plots of a capture (or a log) are titled: the stage's name
    and the run's tags when it was measured as a logged run (its run.json
    beside it, or above a take's folder), the run's command and start when
    it names neither, else the file's name."""
    from benchkit.jsonfile import load_json

    path = Path(path)
    for folder in (path.parent, path.parent.parent):
        record = folder / "run.json"
        if record.is_file():
            try:
                d = load_json(record)
            except (OSError, ValueError):
                break
            name = str((d.get("stage") or {}).get("name") or "")
            tags = ", ".join(f"{k}={v}" for k, v in (d.get("tags") or {}).items())
            if name or tags:
                return "; ".join(p for p in (name, tags) if p)
            started = str(d.get("started") or "")[:16].replace("T", " ")
            return f"{d.get('command') or 'a'} run of {started}" if started else path.name
    return path.name


def stem_of(path: Path, channel: int) -> str:
    """What a capture's report files are named after: its stem, with the
    channel when it is not the first."""
    return path.stem if channel == 1 else f"{path.stem}-ch{channel}"


def result_csv_png(result, path: Path, channel: int, out: Path, what: str, write_csv, plot) -> list[Path]:
    """STEM.WHAT.json, .csv and .png: the result, its table and its plot."""
    report_folder(out)
    stem = stem_of(path, channel)
    return [
        tables.write_json(result.to_dict(), out / f"{stem}.{what}.json"),
        write_csv(result, out / f"{stem}.{what}.csv"),
        plot(result, out / f"{stem}.{what}.png", title_of(path)),
    ]
