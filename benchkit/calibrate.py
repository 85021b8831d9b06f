"""Making a calibration profile: the walk-through of `benchkit calibrate`.

Steps, each a run on the backend (the wiring each needs is asked for, or
set on the virtual bench):

1. output scale: a steady tone at the calibration level and a voltmeter
   reading at the output jack (``reading_vrms``; scripted use);
2. input scale: a cable from the output to the input; the same tone three
   times gives the scale and its repeatability;
3. pad: resistor values (ratio by the loaded-divider formula) or a ratio
   measured with the pad in place;
4. loopback floor (THD+N, noise), loopback response (a stepped sine re
   1 kHz), polarity (phase of input against output) and latency;
5. DC coupling: a 2 Hz tone; an input that keeps it within 0.5 dB of
   1 kHz passes DC, else the first-order corner is estimated.

The uncertainty it claims is the voltmeter's accuracy (as given) and the
repeatability measured, root-sum-square.
"""

from __future__ import annotations

import math
from datetime import datetime, timezone
from typing import Callable

import numpy as np

from benchkit import capture, units
from benchkit.analysis.tone import analyze_tone
from benchkit.calibration import PadSpec, Profile
from benchkit.errors import BenchkitError
from benchkit.pads import Pad
from benchkit.record import step_fault
from benchkit.signals import stepped_tones

CAL_FREQ_HZ = 997.0
RESPONSE_HZ = (20.0, 50.0, 100.0, 200.0, 500.0, 1000.0, 2000.0, 5000.0, 10000.0, 15000.0, 20000.0)
DC_TEST_HZ = 2.0


def _run(backend, freqs, levels, step_s=0.5, settle_s=0.3, in_channel=1, band=(20.0, 20000.0)):
    """Each step's capture and analysis; a step a stream fault (a dropout,
    reported or heard: :func:`benchkit.record.step_fault`) touched is played again, up to MAX_RETRIES times: a dropout must not
    end up in the profile. Returns the first take's capture (its latency)
    and (segment, result) per step, each segment of the take it was
    measured in."""
    results: list = [None] * len(freqs)
    pending = list(range(len(freqs)))
    first = None
    for _take in range(capture.MAX_RETRIES + 1):
        stim = stepped_tones([freqs[i] for i in pending], [levels[i] for i in pending], backend.sample_rate_hz,
                             step_s=step_s, settle_s=settle_s, out_channel=getattr(backend, "drive_output", 1),
                             n_out=backend.n_outputs, lead_s=getattr(backend, "lead_s", 0.05))
        cap = capture.run(backend, stim)
        first = first or cap
        still = []
        for i, seg in zip(pending, stim.segments):
            if step_fault(cap, seg, in_channel):
                still.append(i)
                continue
            x = cap.channel(in_channel)[seg.settled : seg.end]
            r = analyze_tone(x, cap.sample_rate_hz, fundamental_hz=seg.frequency_hz, bandwidth_hz=band)
            if not r.valid:
                raise BenchkitError(f"the calibration tone at {seg.frequency_hz:g} Hz clipped the input: lower --level")
            results[i] = (seg, r)
        pending = still
        if not pending:
            return first, results
    raise BenchkitError(f"stream faults (overflows, underflows or gaps) spoiled the {freqs[pending[0]]:g} Hz calibration "
                        f"step in all {capture.MAX_RETRIES + 1} takes: {capture.FAULT_ADVICE}")


def calibrate(
    backend,
    reading_vrms: float,
    level_dbfs: float = -20.0,
    voltmeter_pct: float = 1.0,
    pad: Pad | None = None,
    input_ohms: float | None = None,
    measure_pad: bool = False,
    in_channel: int = 1,
    wire: Callable[[str], None] = lambda _step: None,
    interface: str = "",
    note: str = "",
    pad_tolerance_pct: float = 1.0,
    load_tolerance_pct: float = 5.0,
) -> Profile:
    """Run the calibration steps and return the profile.

    ``wire(step)`` is called before each step that needs the wiring
    changed: "loopback" (cable from output to input) or "pad" (output through
    the pad into the input).
    """
    if not (reading_vrms > 0 and math.isfinite(reading_vrms)):
        raise BenchkitError("the voltmeter reading must be a positive voltage")
    # 1. output scale: volts peak at the jack per FS
    out_vpk = units.vpk_from_vrms(reading_vrms) / units.ratio_from_db(level_dbfs)
    # 2. input scale, three times over, on a cable from output to input
    wire("loopback")
    cap, takes = _run(backend, [CAL_FREQ_HZ] * 3, [level_dbfs] * 3, in_channel=in_channel)
    amps = np.array([r.fundamental_fs for _, r in takes])
    in_vpk = out_vpk * units.ratio_from_db(level_dbfs) / float(np.mean(amps))
    repeat_db = float(np.std(units.db_from_ratio(amps), ddof=1))
    seg, first = takes[0]
    # polarity: the tone is sin(2 pi f t) from its segment's start, i.e. a
    # cosine of phase 2 pi f (settled - start)/fs - 90 deg at the analysed start
    played = math.degrees(2 * math.pi * seg.frequency_hz * (seg.settled - seg.start) / cap.sample_rate_hz) - 90.0
    delta = (first.fundamental_phase_deg - played + 180.0) % 360.0 - 180.0
    inverts = abs(delta) > 90.0
    floor = {
        "frequency_hz": CAL_FREQ_HZ,
        "level_dbfs": first.fundamental_dbfs,
        "thdn_db": float(np.mean([r.thdn_db for _, r in takes])),
        "noise_dbfs": float(np.mean([r.noise_dbfs for _, r in takes])),
        "bandwidth_hz": list(first.bandwidth_hz),
        "sample_rate_hz": cap.sample_rate_hz,
    }
    # 4. loopback response re 1 kHz
    freqs = [f for f in RESPONSE_HZ if f < 0.45 * backend.sample_rate_hz]
    _cap, sweep = _run(backend, freqs, [level_dbfs] * len(freqs), in_channel=in_channel)
    ref = next(r.fundamental_fs for s, r in sweep if s.frequency_hz == 1000.0)
    response = [[s.frequency_hz, units.db_from_ratio(r.fundamental_fs / ref)] for s, r in sweep]
    # 5. DC coupling: does 2 Hz pass as 1 kHz does?
    _cap, low = _run(backend, [DC_TEST_HZ, 1000.0], [level_dbfs] * 2, step_s=3.0, settle_s=0.5,
                     in_channel=in_channel, band=(0.5, 20000.0))
    g = low[0][1].fundamental_fs / low[1][1].fundamental_fs
    dc_coupled = units.db_from_ratio(g) > -0.5
    corner = None if dc_coupled else DC_TEST_HZ * math.sqrt(max(1.0 / (g * g) - 1.0, 0.0))
    # 3. the pad
    spec = None
    if measure_pad:
        wire("pad")
        _cap, with_pad = _run(backend, [CAL_FREQ_HZ], [level_dbfs], in_channel=in_channel)
        spec = PadSpec(ratio=with_pad[0][1].fundamental_fs / float(np.mean(amps)), measured=True)
    elif pad is not None:
        rin = input_ohms if input_ohms is not None else math.inf
        spec = PadSpec(ratio=pad.ratio(rin), r1_ohms=pad.r1_ohms, r2_ohms=pad.r2_ohms, input_ohms=input_ohms,
                       tolerance_pct=pad_tolerance_pct)
    wire("stage")
    volt_db = units.db_from_ratio(1 + voltmeter_pct / 100.0)
    return Profile(
        interface=interface or backend.name,
        sample_rate_hz=backend.sample_rate_hz,
        out_channel=getattr(backend, "drive_output", 1),
        in_channel=in_channel,
        ref_channel=backend.reference_input(),
        output_vpk_per_fs=out_vpk,
        input_vpk_per_fs=in_vpk,
        pad=spec,
        polarity_inverts=inverts,
        dc_coupled=dc_coupled,
        dc_volts_per_fs=in_vpk if dc_coupled else None,
        ac_corner_hz=corner,
        loopback_floor=floor,
        loopback_response=response,
        latency_samples=cap.latency_samples,
        uncertainty={
            "voltmeter_pct": voltmeter_pct,
            "voltmeter_db": volt_db,
            "repeatability_db": repeat_db,
            "total_db": math.hypot(volt_db, repeat_db),
            "load_tolerance_pct": load_tolerance_pct,
            "repeatability_reads": int(amps.size),
        },
        created=datetime.now(timezone.utc).isoformat(timespec="seconds"),
        note=note,
    )


# --- on the bench ------------------------------------------------------------------


def calibrate_bench(o: dict, say: Callable[[str], None], ask: Callable[[str], str]) -> Profile:
    """``benchkit calibrate`` with its options by key (benchkit.options):
    the output scale from --reading, the virtual bench's own output, or a
    voltmeter read while a real interface plays the tone; the steps
    (``ask`` waits at each wiring step and returns the answer); the profile
    saved to --file."""
    from benchkit import pads
    from benchkit.bench import open_backend
    from benchkit.calibration import save_profile
    from benchkit.units import quantity

    level = units.parse_level(o["level"]).to_dbfs()
    real = dict(sample_rate=o["rate"], in_channel=o["in_channel"], out_channel=o["out_channel"],
                ref_channel=o["ref_channel"])
    backend = open_backend(o["device"], "ideal", [], "demo", o["seed"], say, real)
    virtual = backend.capabilities.simulated
    if o["reading"] is not None:
        volts = units.parse_level(o["reading"]).to_vrms()
    elif virtual:
        volts = backend.output_vrms(level)
        say(f"virtual bench: the voltmeter reads {quantity(volts, 'Vrms', 5)} at the output")
    else:
        volts = units.parse_level(_read_while_playing(backend, level, ask)).to_vrms()

    def wire(step: str) -> None:
        if virtual:
            backend.wiring = step
        elif step != "stage" and not o["yes"]:
            what = {"loopback": "a cable from the output straight to the input",
                    "pad": "the output through the pad into the input"}[step]
            ask(f"wire {what}, then press Enter")

    resistors = pads.parse_pad(o["pad"]) if o["pad"] else None
    profile = calibrate(backend, volts, level, o["voltmeter_pct"], resistors, o["input_ohms"] if resistors else None,
                        o["measure_pad"], o["in_channel"], wire, note=o["note"], pad_tolerance_pct=o["pad_tolerance"],
                        load_tolerance_pct=o["load_tolerance"])
    save_profile(profile, o["file"])
    return profile


def _read_while_playing(backend, level_dbfs: float, ask: Callable[[str], str]) -> str:
    """Play a steady tone on a real interface until the user types the
    voltmeter reading; the tone fades out when the answer comes."""
    import threading

    stim = stepped_tones(CAL_FREQ_HZ, [level_dbfs], backend.sample_rate_hz, step_s=120.0, settle_s=0.0,
                         out_channel=backend.drive_output, n_out=backend.n_outputs, lead_s=0.1)

    def play():
        try:
            backend.play_record(stim)
        except BenchkitError:  # the abort that ends the tone lands here
            pass

    t = threading.Thread(target=play, daemon=True)
    t.start()
    try:
        reading = ""
        while not reading.strip():  # (Enter alone asks again: the tone keeps playing until a value comes)
            reading = ask(f"a {CAL_FREQ_HZ:g} Hz tone plays: voltmeter reading at the output (e.g. 0.1414V)")
        return reading
    finally:
        backend.request_abort()
        t.join(5.0)
