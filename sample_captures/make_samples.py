"""Write the sample captures in this folder from the virtual bench.

Invented demo data: "Test stage B-2" of the demo scenario (see README.md
here). Fixed seeds; the analysis of regenerated captures is compared with
the stored ones by tests/test_sample_captures.py (not their bytes: random
streams may change between numpy versions).

Run: python sample_captures/make_samples.py [FOLDER]
"""

from __future__ import annotations

import sys
import tempfile
from pathlib import Path

from benchkit.capture.virtual import DEMO_PAD, virtual_bench
from benchkit.recordings import read_capture, write_capture
from benchkit.kinds.sweep import response_run
from benchkit.kinds.tone import tone_run

HERE = Path(__file__).resolve().parent

#: name, stage parameters, pad, drive levels (dBFS at the interface output), note
CASES = [
    ("b2-bias0.8A-997Hz", {"bias": 0.8}, DEMO_PAD, [-14.0], "1 W into 8 ohm at 0.8 A bias"),
    ("b2-bias1.2A-997Hz", {"bias": 1.2}, DEMO_PAD, [-14.0], "1 W into 8 ohm at 1.2 A bias"),
    ("b2-bias0.8A-997Hz-steps", {"bias": 0.8}, DEMO_PAD, [-30.0, -20.0, -14.0, -9.0],
     "four levels at 0.8 A, the top one past the 6.4 V current limit"),
    ("b2-nopad-997Hz", {"bias": 0.8}, None, [-17.0],
     "no pad: 2.8 V peak into a 2.0 V peak input clips the converter"),
]


#: name, stage parameters, span (Hz), length (s), level (dBFS), note
SWEEPS = [
    ("b2-bias1.2A-sweep", {"bias": 1.2}, (3.0, 22000.0), 5.0, -20.0,
     "a synchronized sweep at 1.2 A, the stage on input 1 and the reference loopback on input 2"),
]


def make(folder: Path) -> list[Path]:
    folder.mkdir(parents=True, exist_ok=True)
    written = []
    for i, (name, params, pad, levels, note) in enumerate(CASES):
        bench = virtual_bench("se-class-a", {**params, "ambient_c": 23.0}, pad=pad, seed=20261201 + i)
        bench.stop_on_clip = False  # keep the clipped capture whole, to show what one looks like
        with tempfile.TemporaryDirectory() as tmp:
            tone_run(bench, Path(tmp), 997.0, levels, name=name, note=f"invented demo data: {note}")
            rec = read_capture(Path(tmp) / f"{name}.wav")
            side = {k: v for k, v in rec.sidecar.items() if k not in ("kind", "schema_version", "created")}
            # keep the files small: the stage's input only, 24-bit
            side["channels"] = side["channels"][:1]
            written.append(write_capture(folder / f"{name}.wav", rec.samples[:, None], rec.sample_rate_hz, side, "PCM_24"))
    for j, (name, params, span, seconds, level, note) in enumerate(SWEEPS):
        bench = virtual_bench("se-class-a", {**params, "ambient_c": 23.0}, pad=DEMO_PAD, seed=20261202 + j)
        with tempfile.TemporaryDirectory() as tmp:
            response_run(bench, Path(tmp), level, span, seconds, ref_channel=2, name=name,
                         note=f"invented demo data: {note}")
            import soundfile as sf

            both, rate = sf.read(str(Path(tmp) / f"{name}.wav"), always_2d=True, dtype="float64")
            side = {k: v for k, v in read_capture(Path(tmp) / f"{name}.wav").sidecar.items()
                    if k not in ("kind", "schema_version", "created")}
            # both inputs (the response is output / reference), 24-bit
            written.append(write_capture(folder / f"{name}.wav", both[:, :2], rate, side, "PCM_24"))
    return written


if __name__ == "__main__":
    for path in make(Path(sys.argv[1]) if len(sys.argv) > 1 else HERE):
        print(f"wrote {path}")
