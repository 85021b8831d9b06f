"""Write the sample captures in this folder (invented demo data).

Stand-in for the virtual bench until it lands: a plain model of "Test stage
B-2" from the demo scenario -- a 24 V single-ended class-A stage with a
constant-current pull-up, capacitor-coupled into an 8 ohm dummy load,
measured through a 10:1 pad into a line input whose full scale is 2.0 V peak.
The numbers are made up for the demo; they are not data from any source.

Model (textbook class-A behaviour, see ../shared/REFERENCES.md): the gain
varies with the output device's current, which gives mostly H2 that shrinks
as the bias rises; the positive half is current-limited at I_bias x R_load
(the device cuts off), the negative half at the rail, ~0.8 V short of
half the supply. The nonlinearity runs 8x oversampled and is band-limited
before decimation, as an analog stage would not alias.

Run: python sample_captures/make_samples.py
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from scipy.signal import resample_poly

from benchkit.recordings import write_capture

RATE = 48000
OVERSAMPLE = 8
SECONDS = 1.0
FREQ = 997.0
SUPPLY_V = 24.0
LOAD_OHMS = 8.0
PAD_RATIO = 10.0
INPUT_FS_VPK = 2.0
ADC_NOISE_DBFS = -110.0  # over 20 Hz to 20 kHz
HERE = Path(__file__).resolve().parent


def stage_output(v_ideal: np.ndarray, bias_a: float) -> np.ndarray:
    """Stage output in volts for the undistorted output ``v_ideal``."""
    i_limit = bias_a * LOAD_OHMS  # positive swing: the device cuts off
    rail = SUPPLY_V / 2.0 - 0.8  # negative swing: the device saturates
    # gain rises with device current (= bias - load current): mostly H2
    v = v_ideal * (1.0 - 0.02 * v_ideal / i_limit)
    # rounded knees into the two limits
    knee = 0.15
    v = i_limit - knee * np.logaddexp(0.0, (i_limit - v) / knee)
    v = -rail + knee * np.logaddexp(0.0, (v + rail) / knee)
    return v


def capture(bias_a: float, vrms: float, pad: float, seed: int) -> np.ndarray:
    n_over = int(RATE * SECONDS * OVERSAMPLE)
    t = np.arange(n_over) / (RATE * OVERSAMPLE)
    v = stage_output(np.sqrt(2.0) * vrms * np.sin(2 * np.pi * FREQ * t), bias_a)
    v -= np.mean(v)  # the coupling capacitor blocks DC
    v = resample_poly(v, 1, OVERSAMPLE)  # band-limited decimation
    x = v / pad / INPUT_FS_VPK
    rng = np.random.default_rng(seed)
    sigma = 10 ** (ADC_NOISE_DBFS / 20) / np.sqrt(2) * np.sqrt((RATE / 2) / 19980.0)
    x = x + sigma * rng.standard_normal(x.size)
    return np.clip(x, -1.0, 1.0 - 2.0**-23)  # the converter clips at full scale


def main() -> None:
    cases = [
        ("b2-bias0.8A-997Hz", 0.8, 2.0, PAD_RATIO, "2.0 Vrms into 8 ohm at 0.8 A bias"),
        ("b2-bias1.2A-997Hz", 1.2, 2.0, PAD_RATIO, "2.0 Vrms into 8 ohm at 1.2 A bias"),
        ("b2-bias0.8A-997Hz-clipping", 0.8, 5.0, PAD_RATIO, "driven past the 6.4 V current limit at 0.8 A"),
        ("b2-nopad-997Hz", 0.8, 2.0, 1.0, "no pad: 2.83 V peak into a 2.0 V peak input clips the converter"),
    ]
    for i, (name, bias, vrms, pad, note) in enumerate(cases):
        x = capture(bias, vrms, pad, seed=20261201 + i)
        sidecar = {
            "generator": "sample_captures/make_samples.py (stand-in stage model)",
            "sample_rate_hz": RATE,
            "scale_source": "simulation",
            "channels": [
                {"number": 1, "role": "stage output" + (f" through {pad:g}:1 pad" if pad != 1 else ""),
                 "volts_per_fs": INPUT_FS_VPK * pad},
            ],
            "stimulus": {"kind": "tone", "frequency_hz": FREQ, "level_vrms_at_stage": vrms},
            "stage": {
                "name": "Test stage B-2",
                "topology": "single-ended class A, constant-current pull-up, capacitor-coupled output",
                "supply_v": SUPPLY_V,
                "bias_a": bias,
                "load_ohms": LOAD_OHMS,
                "ambient_c": 23.0,
            },
            "pad": {"ratio": pad},
            "interface": {"input_full_scale_vpk": INPUT_FS_VPK},
            "note": f"invented demo data: {note}",
        }
        write_capture(HERE / f"{name}.wav", x[:, None], RATE, sidecar, subtype="PCM_24")
        print(f"wrote {name}.wav")


if __name__ == "__main__":
    main()
