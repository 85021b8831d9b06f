"""Sweep: the frequency response (a synchronized sweep or stepped sines),
magnitude and phase, the corners, and the harmonics against frequency.

A run: a sweep or stepped sines -> capture -> on disk ->
:class:`benchkit.analysis.response.ResponseResult`.

The interface's own response comes out in one of three ways, in this
order: the reference input, wired straight from the driven output
(response = output / reference); the calibration profile's loopback
response divided out (magnitude only); or nothing, with the response
given relative to its level at a reference frequency (1 kHz).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from benchkit import capture, units
from benchkit.analysis import response as resp, sweep as sw, uncertainty as ua
from benchkit.analysis.response import response_figures, response_readings
from benchkit.analysis.tone import analyze_tone, DEFAULT_BAND_HZ
from benchkit.errors import BenchkitError, BenchWarning
from benchkit.kinds import Live, Measured, Analysed, CAPTURE_WAV, Kind, Offline, run_capture, RunParams
from benchkit.recordings import read_capture, Recording, write_capture
from benchkit.signals import stepped_tones, sweep_stimulus
from benchkit.units import quantity


#: A stepped-sine step: at least this long, and this many periods.
STEP_MIN_S, STEP_PERIODS = 0.25, 10.0
SETTLE_MIN_S, SETTLE_PERIODS = 0.2, 4.0
HARMONIC_ORDERS = (2, 3, 4, 5)
#: A clock offset worth saying so, ppm.
CLOCK_NOTE_PPM = 2.0
#: The stretch before a sweep searched for steady lines (hum, ripple), s.
QUIET_S = 0.45


def stepped_frequencies(lo_hz: float, hi_hz: float, per_octave: int) -> list[float]:
    """Log-spaced frequencies, ``per_octave`` to the octave, from lo to hi."""
    if not (0 < lo_hz < hi_hz) or per_octave < 1:
        raise BenchkitError("stepped sines need 0 < F1 < F2 and at least one point per octave")
    return [float(f) for f in sw.log_grid(lo_hz, hi_hz, per_octave)]


def stepped_stimulus(freqs: list[float], level_dbfs: float, rate: float, out_channel: int = 1, n_out: int = 2,
                     lead_s: float = 0.05):
    """Stepped sines: each long enough to settle and to hold ten periods."""
    steps = [max(STEP_MIN_S, STEP_PERIODS / f) for f in freqs]
    settles = [max(SETTLE_MIN_S, SETTLE_PERIODS / f) for f in freqs]
    stim = stepped_tones(list(freqs), [level_dbfs] * len(freqs), rate, step_s=steps, settle_s=settles,
                         out_channel=out_channel, n_out=n_out, lead_s=lead_s)
    stim.description["purpose"] = "response"
    return stim


def is_response(rec: Recording) -> bool:
    stim = rec.sidecar.get("stimulus") or {}
    return isinstance(stim, dict) and (stim.get("kind") == "sweep" or stim.get("purpose") == "response")


@dataclass(frozen=True)
class _Reference:
    """How the output is referred: samples of the reference input (or
    None for the played signal), its scale, and what it is."""

    samples: np.ndarray | None
    volts_per_fs: float | None
    source: str


def _reference(rec: Recording, ref_channel: int | None) -> _Reference:
    if ref_channel is None:
        return _Reference(None, None, "played")
    if ref_channel == rec.channel:
        raise BenchkitError("the reference channel cannot be the measured channel")
    if not 1 <= ref_channel <= rec.n_channels:
        raise BenchkitError(f"{rec.path}: reference channel {ref_channel} does not exist (1 to {rec.n_channels})")
    other = read_capture(rec.path, ref_channel)
    return _Reference(other.samples, other.channel_scale()[0], "reference-channel")


def _profile_gain(freqs: np.ndarray, cal: dict) -> np.ndarray | None:
    """The loopback's gain re 1 kHz at ``freqs`` from a profile's stepped
    measurement, extended below it by its first-order input coupling."""
    pts = cal.get("loopback_response") or []
    if len(pts) < 2:
        return None
    f_pts = np.array([p[0] for p in pts], float)
    g_pts = np.array([p[1] for p in pts], float)
    order = np.argsort(f_pts)
    f_pts, g_pts = f_pts[order], g_pts[order]
    g = np.interp(np.log(freqs), np.log(f_pts), g_pts)
    fc = cal.get("ac_corner_hz")
    if fc:
        def hp(f):
            return -10 * np.log10(1 + (fc / f) ** 2)
        low = freqs < f_pts[0]
        g[low] = g_pts[0] + hp(freqs[low]) - hp(f_pts[0])
    return g


def _finish(method, freqs, h_fs, curves, thd, thdn, rec: Recording, ref: _Reference, reference_hz, load_ohms,
            band, warnings, info, rel_u=None) -> resp.ResponseResult:
    """Turn output/reference ratios into the reported magnitude and phase
    (``rel_u``: their relative standard uncertainty, type A)."""
    warnings = list(warnings)
    out_vpf = rec.channel_scale()[0]
    cal = rec.sidecar.get("calibration") or {}
    mag = units.db_from_ratio(np.abs(h_fs))
    phase = np.angle(h_fs, deg=True)
    source, mag_units = ref.source, None
    if ref.samples is not None:
        if out_vpf is not None and ref.volts_per_fs is not None:
            mag = mag + units.db_from_ratio(out_vpf / ref.volts_per_fs)
            mag_units = "dB re 1 V/V"
    else:
        loop = _profile_gain(freqs, cal)
        out_vpk = (rec.sidecar.get("output_vpk_per_fs") or cal.get("output_vpk_per_fs"))
        if loop is not None:
            source = "profile"
            mag = mag - loop
            warnings.append(BenchWarning("no-reference", "no reference input: the profile's loopback magnitude is divided out; the phase "
                            "includes the interface's own"))
            lo = min(p[0] for p in cal["loopback_response"])
            if freqs[0] < lo and not cal.get("ac_corner_hz"):
                warnings.append(BenchWarning("profile-range", f"the profile's loopback response starts at {lo:g} Hz: below it, it is held constant"))
            if out_vpf is not None and out_vpk:
                mag = mag + units.db_from_ratio(out_vpf / out_vpk)
                mag_units = "dB re 1 V/V"
        else:
            source = "reference-frequency"
    if mag_units is None:
        ref_level = resp.level_at(freqs, mag, reference_hz)
        if ref_level is None:
            raise BenchkitError(f"the reference frequency {reference_hz:g} Hz lies outside the measured range "
                                f"{freqs[0]:.3g}-{quantity(freqs[-1], 'Hz', 5)}: give --ref-freq")
        mag = mag - ref_level
        mag_units = f"dB re the level at {reference_hz:g} Hz"
    return resp.ResponseResult(method, freqs, np.asarray(mag, float), phase, tuple(curves), thd, thdn, source,
                               mag_units, reference_hz, load_ohms, band, tuple(warnings), info,
                               None if rel_u is None else ua.db_from_rel(np.asarray(rel_u, float)))


def _info(rec: Recording, ref: _Reference, ref_channel) -> dict:
    side = rec.sidecar
    return {"file": str(rec.path), "channel": rec.channel, "sample_rate_hz": rec.sample_rate_hz,
            "ref_channel": ref_channel if ref.samples is not None else None,
            "device": side.get("device"), "latency_samples": side.get("latency_samples"),
            "calibration": side.get("calibration")}


def analyze_response(
    rec: Recording,
    ref_channel: int | None = None,
    sweep: sw.SyncSweep | None = None,
    reference_hz: float = resp.REFERENCE_HZ,
    load_ohms: float | None = None,
    bandwidth_hz: tuple[float, float] | None = DEFAULT_BAND_HZ,
) -> resp.ResponseResult:
    """The response in a capture on disk: a sweep or stepped sines that
    benchkit played (from the sidecar), or ``sweep``, a synchronized sweep
    of unit amplitude made elsewhere, after unknown silence."""
    ref = _reference(rec, ref_channel)
    if sweep is not None:
        return _sweep_response(rec, ref, ref_channel, sweep, None, 1.0, reference_hz, load_ohms, bandwidth_hz)
    stim = rec.sidecar.get("stimulus") or {}
    if stim.get("kind") == "sweep":
        seg = (stim.get("segments") or [{}])[0]
        try:
            start, level = int(seg["start"]), float(stim["level_dbfs"])
        except (KeyError, TypeError, ValueError) as exc:
            raise BenchkitError(f"{rec.path}: the sidecar's sweep description is damaged") from exc
        s = sw.SyncSweep.from_dict(stim, rec.sample_rate_hz)
        return _sweep_response(rec, ref, ref_channel, s, start, units.ratio_from_db(level), reference_hz, load_ohms,
                               bandwidth_hz)
    if stim.get("purpose") == "response":
        return _stepped_response(rec, ref, ref_channel, reference_hz, load_ohms, bandwidth_hz)
    raise BenchkitError(f"{rec.path}: not a response capture: give --sweep F1:F2:SECONDS for a sweep made elsewhere")


def analyze_sweep(samples, sample_rate: float, *, start_hz: float, stop_hz: float, seconds: float,
                  channel: int | None = None, reference_channel: int | None = None,
                  volts_per_fs: float | None = None, reference_hz: float = resp.REFERENCE_HZ,
                  load_ohms: float | None = None, bandwidth_hz: tuple[float, float] | None = DEFAULT_BAND_HZ,
                  ) -> resp.ResponseResult:
    """The response and the harmonic distortion of a stage from a
    synchronized exponential sweep made elsewhere (exactly the formula,
    after unknown silence; levels are referred to a sweep played at full
    scale).

    Parameters
    ----------
    samples : array_like
        The recording in FS: one channel, or frames x channels.
    sample_rate : float
        In Hz.
    start_hz, stop_hz, seconds : float
        The sweep played: its band and its length (the length is rounded
        so that its harmonics stay in phase, as the sweep played must be).
    channel : int, optional
        The stage's output, a channel of 2-D ``samples`` from 1.
    reference_channel : int, optional
        A channel that recorded the sweep as played (a loopback): the
        response is referred to it (the interface's own response and a
        clock offset cancel).
    volts_per_fs : float, optional
        Volts peak per FS of the measured channel: levels in dBV.
    reference_hz : float
        The frequency the response is referred to (0 dB).
    load_ohms : float, optional
        The load, recorded with the result.
    bandwidth_hz : (lo, hi) or None
        The band of the distortion figures.

    Returns
    -------
    ResponseResult
        ``freq_hz``, ``mag_db`` and ``phase_deg`` on a log grid, the
        harmonic curves and THD, ``corners_3db`` and ``corners_1db``.

    References
    ----------
    A. Farina, "Simultaneous measurement of impulse response and
    distortion with a swept-sine technique", AES 108th Convention (2000),
    preprint 5093; A. Novak et al., "Synchronized swept-sine: theory,
    application and implementation", J. AES 63(10) (2015).

    Examples
    --------
    A digital first-order low-pass: its upper -3 dB point re 1 kHz where
    ``scipy.signal.freqz`` puts it:

    >>> import numpy as np, scipy.signal, benchkit
    >>> from benchkit.analysis.sweep import SyncSweep
    >>> played = SyncSweep.design(10.0, 24000.0, 4.0, 48000.0, faded=False).samples()
    >>> b, a = scipy.signal.bilinear([1.0], [1 / (2 * np.pi * 5000.0), 1.0], 48000.0)
    >>> x = np.concatenate([np.zeros(4800), scipy.signal.lfilter(b, a, 0.5 * played), np.zeros(48000)])
    >>> r = benchkit.analyze_sweep(x, 48000.0, start_hz=10.0, stop_hz=24000.0, seconds=4.0)
    >>> f, h = scipy.signal.freqz(b, a, worN=np.linspace(1000.0, 10000.0, 90001), fs=48000.0)
    >>> want = f[np.argmin(np.abs(20 * np.log10(np.abs(h / h[0])) + 3.0))]
    >>> low, high = r.corners_3db
    >>> low is None, round(float(high / want), 3)
    (True, 1.0)
    """
    from benchkit.analysis import one_channel

    n = np.asarray(samples).shape[1] if np.ndim(samples) == 2 else 1
    if n == 2 and channel is None and reference_channel in (1, 2):
        channel = 3 - reference_channel  # the other one (with more, one_channel asks which)
    out = one_channel(samples, channel, "analyze_sweep")
    side = {} if volts_per_fs is None else {"channels": [{"number": channel or 1, "volts_per_fs": volts_per_fs}],
                                            "scale_source": "given"}
    rec = Recording(Path("samples"), out, float(sample_rate), channel or 1, n, side)
    ref = _Reference(None, None, "played")
    if reference_channel is not None:
        if reference_channel == (channel or 1):
            raise BenchkitError("the reference channel cannot be the measured channel")
        ref = _Reference(one_channel(samples, reference_channel, "analyze_sweep"), None, "reference-channel")
    sweep = sw.SyncSweep.design(start_hz, stop_hz, seconds, float(sample_rate), faded=False)
    return _sweep_response(rec, ref, reference_channel, sweep, None, 1.0, reference_hz, load_ohms, bandwidth_hz)


def _sweep_response(rec, ref, ref_channel, sweep, start, amplitude, reference_hz, load_ohms, band):
    rate = rec.sample_rate_hz
    if abs(sweep.rate - rate) > 1e-6:
        sweep = sw.SyncSweep.design(sweep.f1_hz, sweep.f2_hz, sweep.seconds, rate, sweep.faded)
    info = {**_info(rec, ref, ref_channel), "sweep": {**sweep.to_dict(), "level_dbfs": units.db_from_ratio(amplitude)}}
    warnings = list(rec.all_warnings())
    frac = 0.0
    elsewhere = start is None  # a sweep made elsewhere, after unknown silence
    if elsewhere:
        at = sw.find_start(rec.samples if ref.samples is None else ref.samples, sweep)
        start, frac = int(math.floor(at)), at - math.floor(at)
        info["sweep_start_s"] = at / rate
    short = start + sweep.n_samples - rec.samples.size
    if short > 0:
        raise BenchkitError(f"{rec.path}: the capture ends {short / rate:.2f} s before the sweep does: truncated")
    out = rec.samples[start:]
    if np.max(np.abs(out[: sweep.n_samples])) >= capture.CLIP_STOP_FS:
        warnings.append(BenchWarning("input-clipped", "the input clipped during the sweep: the response and distortion are not valid"))
    freqs = sw.log_grid(*sweep.band_hz)
    got = sw.measure(out, sweep, None if ref.samples is None else ref.samples[start:], freqs=freqs,
                     band_hz=band or (sweep.band_hz[0], 0.45 * rate), amplitude=amplitude)
    late = np.exp(2j * np.pi * freqs * frac / rate)  # the fraction of a sample the start lies late
    h = got.linear * (late if ref.samples is None else 1.0)  # (referred to an input, it cancels)
    if elsewhere:
        # most likely played and recorded on two clocks. A stage's own phase
        # (a peaking filter, a low-pass) bends just as a clock offset does,
        # so the offset is read only where no stage can fake it: the
        # reference input's loopback against the sweep played (the output
        # is then referred to the reference, which the offset leaves alone)
        if ref.samples is None:
            info["clock_offset_ppm"] = None
            warnings.append(BenchWarning("no-reference", "no reference input: a clock offset between the player and the recorder cannot be told "
                            "from the stage's own phase, so none is estimated and the phase is as measured (two "
                            "clocks add a delay and a bend to it; wire the loopback to a second input and give "
                            "--ref-channel to measure the offset)"))
        else:
            loop = sw.measure(ref.samples[start:], sweep, None, freqs=freqs, band_hz=(sweep.band_hz[0], 0.45 * rate),
                              amplitude=amplitude).linear * late
            est = sw.clock_offset(freqs, np.angle(loop), sweep, max(100.0, sweep.band_hz[0] * 4),
                                  min(20000.0, 0.4 * rate))
            info["clock_offset_ppm"] = None if est is None else est[0]
            if est is not None and abs(est[0]) > CLOCK_NOTE_PPM:
                warnings.append(BenchWarning("clock-offset", f"the recorder's clock ran {est[0]:+.1f} ppm against the player's (read from the "
                                "reference input's loopback); the response, referred to that input, is not affected"))
    # each harmonic's curve starts where the sweep's pace lets it be read;
    # the response itself is flagged where its start is too close
    info["harmonic_lowest_hz"] = {str(k): v for k, v in got.lowest_hz.items()}
    info["response_lowest_hz"] = flat = sw.lowest_flat_hz(sweep)
    if flat > sweep.band_hz[0] * 1.01:
        warnings.append(BenchWarning("sweep-start", f"below {quantity(flat, 'Hz', 3)}, this close to the sweep's start, the response may read a "
                        "few tenths of a dB off where it changes fast (a low corner): start the sweep lower or make it "
                        "longer"))
    own = {k: sw.lowest_valid_hz(sweep, k) for k in got.lowest_hz}
    if own and own[2] > max(sweep.band_hz[0], (band or (0.0,))[0]) * 1.01:
        longer = sw.paced_by_length(sweep, 2)
        warnings.append(BenchWarning("sweep-start", "this close to the sweep's start the harmonics cannot be read: the curves start at "
                        + ", ".join(f"H{k} {quantity(v, 'Hz', 3)}" for k, v in sorted(own.items()))
                        + (" (a longer sweep reaches lower)" if longer else " (a lower start frequency reaches lower)")))
    # steady tones in the quiet before the sweep would pass for harmonics
    quiet = rec.samples[max(0, start - int(QUIET_S * rate)): max(0, start - int(0.02 * rate))]
    lines = sw.steady_lines(quiet, rate)
    curves, blanked = [], np.zeros(freqs.size, bool)
    for k, z in got.harmonics.items():
        level = np.where(np.isfinite(z), units.db_from_ratio(np.abs(np.nan_to_num(z))), np.nan)
        if lines:
            hit = sw.line_mask(freqs, k, lines, 4 * rate / max(quiet.size, 1)) & np.isfinite(level)
            level[hit] = np.nan
            blanked |= hit
        floor = got.harmonic_floor.get(k)
        curves.append(resp.HarmonicCurve(k, freqs, level, None if floor is None else units.db_from_ratio(floor)))
    if lines:
        shown = ", ".join(f"{x:.0f}" for x in lines[:6])
        warnings.append(BenchWarning("hum", f"steady lines at {shown} Hz (hum or ripple) before the sweep: the harmonic curves are blanked "
                        "where k f falls on them (a sweep cannot tell them from distortion; stepped sines can)"))
    thd = resp.thd_db_from_harmonics(tuple(curves), freqs.size)
    thd[blanked] = np.nan  # a sum with an order missing
    return _finish("sweep", freqs, h, curves, thd, None, rec, ref, reference_hz, load_ohms, band, warnings, info,
                   got.linear_rel_u)


def _stepped_response(rec, ref, ref_channel, reference_hz, load_ohms, band):
    rate = rec.sample_rate_hz
    segs = rec.sidecar["stimulus"].get("segments") or []
    freqs, h, thd, thdn, warnings, rel_u = [], [], [], [], list(rec.all_warnings()), []
    buried = 0
    levels = {k: [] for k in HARMONIC_ORDERS}
    for seg in segs:
        try:
            lo, hi, f0, start = int(seg["settled"]), int(seg["end"]), float(seg["frequency_hz"]), int(seg["start"])
            drive = float(seg["level_dbfs"])
        except (KeyError, TypeError, ValueError) as exc:
            raise BenchkitError(f"{rec.path}: the sidecar's step list is damaged") from exc
        if not 0 <= lo < hi <= rec.samples.size:
            raise BenchkitError(f"{rec.path}: a step lies outside the capture (samples {lo} to {hi}): truncated")
        # a step outside the band widens it for its own analysis
        b = None if band is None else (min(band[0], f0 / 2), max(band[1], min(0.49 * rate, 1.05 * f0)))
        r = analyze_tone(rec.samples[lo:hi], rate, fundamental_hz=f0, bandwidth_hz=b)
        if not r.valid:
            warnings.append(BenchWarning("not-valid", f"the {quantity(f0, 'Hz', 4)} step is not valid ({'clipped' if r.clipped else 'see its warnings'})"))
        if ref.samples is not None:
            q = analyze_tone(ref.samples[lo:hi], rate, fundamental_hz=f0, bandwidth_hz=b)
            den = q.fundamental_fs * np.exp(1j * np.radians(q.fundamental_phase_deg))
        else:
            # the step is a sine from phase 0 at its start: in cosine terms,
            # 2 pi f (settled - start) / fs - 90 degrees where analysis begins
            den = units.ratio_from_db(drive) * np.exp(1j * (2 * np.pi * f0 * (lo - start) / rate - np.pi / 2))
        freqs.append(f0)
        h.append(r.fundamental_fs * np.exp(1j * np.radians(r.fundamental_phase_deg)) / den)
        rel_u.append(math.hypot(*(math.nan if t.level_rel_u is None else t.level_rel_u
                                  for t in ((r, q) if ref.samples is not None else (r,))), 0.0))
        # distortion against frequency: fundamentals in the band, harmonics in it
        lo, top = band if band else (0.0, 0.45 * rate)
        in_band = lo <= f0 and 2 * f0 <= top
        # a THD that is only a bound (no harmonic over the noise), and
        # harmonics that cannot be told from the noise, are left blank
        buried += bool(in_band and r.thd_upper_bound)
        thd.append(r.thd_db if in_band and not r.thd_upper_bound else np.nan)
        thdn.append(r.thdn_db if lo <= f0 <= top else np.nan)
        by_order = {x.order: x for x in r.harmonics if x.above_noise}
        for k in HARMONIC_ORDERS:
            x = by_order.get(k)
            levels[k].append(x.level_dbc if x is not None and lo <= f0 and k * f0 <= top else np.nan)
    if len(freqs) < 2:
        raise BenchkitError(f"{rec.path}: a response needs at least two steps")
    if buried:
        warnings.append(BenchWarning("below-noise", f"at {units.count(buried, 'frequency', 'frequencies')} no harmonic stands over the noise: "
                        "THD is left blank there"))
    f = np.array(freqs)
    order = np.argsort(f)
    curves = [resp.HarmonicCurve(k, f[order], np.array(v)[order]) for k, v in levels.items()]
    info = _info(rec, ref, ref_channel)
    return _finish("stepped", f[order], np.array(h)[order], curves, np.array(thd)[order], np.array(thdn)[order],
                   rec, ref, reference_hz, load_ohms, band, warnings, info, np.array(rel_u)[order])


def response_run(
    backend: capture.Backend,
    folder: Path,
    level_dbfs: float,
    span_hz: tuple[float, float],
    seconds: float = 5.0,
    stepped: bool = False,
    per_octave: int = 3,
    freqs: list[float] | None = None,
    channel: int = 1,
    ref_channel: int | None = None,
    load_ohms: float | None = None,
    bandwidth_hz: tuple[float, float] | None = DEFAULT_BAND_HZ,
    reference_hz: float = resp.REFERENCE_HZ,
    calibration=None,
    calibration_file: str | None = None,
    note: str = "",
    warnings: tuple[str, ...] = (),
    name: str = "capture",
) -> resp.ResponseResult:
    """Play a sweep (or stepped sines), store the capture and its sidecar,
    then analyse the stored capture.

    The raw recording streams to ``NAME.partial.wav``; an input that clips
    stops the run (the partial capture is kept) with a clear error.
    """
    from benchkit.record import Recorder

    rate = backend.sample_rate_hz
    out_ch = getattr(backend, "drive_output", 1)
    lead = getattr(backend, "lead_s", 0.05)
    if stepped:
        stim = stepped_stimulus(freqs or stepped_frequencies(*span_hz, per_octave), level_dbfs, rate, out_ch,
                                backend.n_outputs, lead)
    else:
        stim = sweep_stimulus(sw.SyncSweep.design(span_hz[0], span_hz[1], seconds, rate), level_dbfs, out_ch,
                              backend.n_outputs, lead)
    recorder = Recorder(backend, folder, channel, note, calibration, calibration_file, {"reference_channel": ref_channel})
    recorder.journal(stim, name)

    def sidecar(cap, notes):
        return {**recorder.sidecar(cap, stim), "warnings": list(notes)}

    def keep_spoiled(cap, take):  # kept, not analysed: a stream fault touched it
        write_capture(folder / f"{name}.spoiled{take}.wav", cap.samples, cap.sample_rate_hz,
                      sidecar(cap, [BenchWarning("dropout", "a stream fault (overflow or underflow) touched this take: it was "
                                                  "played again")]))

    cap = capture.run_clean(backend, stim, recorder.partial(name), keep_spoiled)
    path = recorder.store(name, cap.samples, sidecar(cap, warnings))
    if cap.stopped_at is not None:
        at = cap.stopped_at / rate
        raise BenchkitError(f"the input clipped at {at:.2f} s into the run: lower the level or use a larger pad "
                            f"(capture kept: {path})")
    return analyze_response(read_capture(path, channel), ref_channel, reference_hz=reference_hz,
                            load_ohms=load_ohms, bandwidth_hz=bandwidth_hz)


@dataclass(frozen=True)
class SweepParams(RunParams):
    """What a response run plays and how it is analysed (run.json's ``params``)."""

    channel: int = 1
    ref_channel: int | None = None
    ref_freq_hz: float | None = None
    load_ohms: float | None = None
    bandwidth_hz: tuple[float, float] | None = (20.0, 20000.0)
    smooth: int | None = None
    span_hz: tuple[float, float] | None = None
    level_dbfs: float | None = None
    stepped: bool = False


def summary(result, title: str) -> str:
    from benchkit.report import sweep as report

    return report.response_summary(result, title)


def reports(result, folder: Path, channel: int = 1, **options) -> list[Path]:
    from benchkit.report import sweep as report

    return report.response_reports(result, folder / CAPTURE_WAV, channel, folder, options.get("smooth"))


def reanalyse(folder: Path, record: dict, say) -> tuple[dict, list[Path]]:
    from benchkit.analysis.response import REFERENCE_HZ

    p = SweepParams.from_dict(record.get("params"))
    rec = run_capture(folder, int(p.channel or 1), say)
    result = analyze_response(rec, p.ref_channel, reference_hz=p.ref_freq_hz or REFERENCE_HZ, load_ohms=p.load_ohms,
                              bandwidth_hz=p.band())
    return result.to_dict(), reports(result, folder, rec.channel, smooth=p.smooth)


def overlay(comparison, docs: list[dict], entries, out: Path, title: str) -> list[Path]:
    from benchkit.report import sweep as report

    return [report.responses_png(docs, comparison.labels, out / "overlay.png", title, comparison.warnings)]


def recognises(rec) -> bool:

    return is_response(rec)


def analyse(rec, o: Offline) -> Analysed:
    """A sweep or stepped sines benchkit played, or (``--sweep``) a
    synchronized sweep made elsewhere."""
    from benchkit.analysis.sweep import SyncSweep
    from benchkit.report import sweep as report

    spec = None if o.sweep is None else SyncSweep.design(*o.sweep, rec.sample_rate_hz, faded=False)
    ref_channel = o.ref_channel
    if ref_channel is None and o.sweep is None:
        ref_channel = rec.sidecar.get("reference_channel")
    result = analyze_response(rec, ref_channel, spec, o.ref_freq_hz, o.load_ohms, o.bandwidth_hz)
    text = report.response_summary(result, f"{rec.path} channel {rec.channel}: {result.method} response")
    return Analysed(result.to_dict(), text,
                    lambda out: report.response_reports(result, Path(rec.path), rec.channel, out, o.smooth))


# --- on the bench ----------------------------------------------------------------

#: the longest sweep, seconds
LONGEST_S = 120.0


def _opens(o: dict) -> dict:
    from benchkit.analysis.sweep import SyncSweep
    from benchkit.bench import at_most, check_within, given_band

    at_most(o, "duration", LONGEST_S, "a sweep")
    f1, f2 = units.parse_band(o["span"])
    within = (("--span", (f1, f2)), ("--at", o["at"]), ("--bandwidth", given_band(o["bandwidth"])))
    if not o["stepped"]:  # the sweep it will play, designed before anything plays (too short for F1 ...)
        check_within(o["rate"], within)  # (the span first: a span past half the rate is named as such)
        SyncSweep.design(f1, f2, o["duration"], o["rate"])
    return dict(ref=o["ref_channel"], load=o["load"], within=within,
                keep=dict(span=(f1, f2)))


def _prepare(s) -> dict:
    from benchkit.bench import preflight

    o = s.o
    s.ref_channel = o["ref_channel"]
    if s.ref_channel is None:
        s.ref_channel = s.backend.reference_input() or (s.profile.ref_channel if s.profile else None)
    preflight(s, [o["level"]], o["ref_freq"], o["load"])
    return dict(channel=s.channel, ref_channel=s.ref_channel, ref_freq_hz=o["ref_freq"], load_ohms=o["load"],
                bandwidth_hz=s.band, smooth=o["smooth"], span_hz=list(s.more["span"]), level_dbfs=s.drive[0], stepped=o["stepped"])


def _measure(s, folder: Path) -> Measured:
    o, (f1, f2) = s.o, s.more["span"]
    result = response_run(s.backend, folder, s.drive[0], (f1, f2), o["duration"], o["stepped"], o["per_octave"],
                          [float(f) for f in o["at"]] or None, s.channel, s.ref_channel, o["load"],
                          s.band, o["ref_freq"], **s.stored())
    return Measured(result, f"{result.method} response, {f1:g} to {f2:g} Hz at {s.drive[0]:g} dBFS",
                    report=dict(smooth=o["smooth"]))


#: the command's help
ABOUT = """Measure frequency response and distortion against frequency: a synchronized sweep, or stepped sines.

    Gives magnitude, phase and group delay, the -3 dB and -1 dB points,
    passband ripple, the levels at 20 Hz and 20 kHz, the coupling capacitor
    when the low corner is first order (with --load), and THD, H2 and H3
    against frequency. The capture is on disk before it is analysed.

    Example: benchkit sweep --span 2:22000 --duration 10 --load 8 --tag bias=1.2A

    Safety: a sweep puts full level at every frequency, the highest too:
    measure into a dummy load, never a speaker (tweeters burn first), and
    keep the level low until the stage's gain is known. Ctrl-C fades the
    output to silence and keeps the partial capture.
    """

#: how it measures on a bench: the command's options (benchkit.options) and help
ON_BENCH = Live(
    _opens, _prepare, _measure,
    options="span level stepped per_octave at ref_channel ref_freq load bandwidth smooth json",
    defaults=dict(duration=5.0),
    helps=dict(duration="The sweep's duration, seconds (rounded so its harmonics line up), at most 120."),
    about=ABOUT,
)

KIND = Kind("sweep", reanalyse, SweepParams, summary, reports, figures=response_figures, overlay=overlay, recognises=recognises,
            chosen=lambda o: o.sweep is not None, analyse=analyse, readings=response_readings, live=ON_BENCH, rank=50)
