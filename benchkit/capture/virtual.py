"""The virtual bench: a simulated interface, pad and stage behind the
capture protocol, the embedded default device.

Signal path (docs/virtual-bench.md):

    output 1 --DAC--> stage input --stage--> load --pad--> input 1 --ADC
           \\________________________________________--> input 2 (reference loopback)

The analog part runs at 8x the interface rate: the DAC's reconstruction and
the ADC's anti-alias filter are the same linear-phase low-pass (flat to
about 0.41 fs, -6 dB at 0.46 fs, about 110 dB down from 0.52 fs). The DAC and ADC add
their noise floors and a small residual distortion; the input is AC coupled
(first-order high-pass) unless DC coupled; the ADC clips at full scale;
optional mains hum joins at the input; the round trip is a latency that
differs run to run (seeded) and an optional clock offset between DAC and
ADC. It computes; it does not wait.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, replace
from fractions import Fraction
from functools import lru_cache
from pathlib import Path

import numpy as np
import scipy.signal

from benchkit.capture import Capabilities, CLIP_STOP_FS, InputChannel, RawRecording, count_stream
from benchkit.capture.stages import StageModel, StereoCoupling, first_order_highpass, make_stage, split_stereo
from benchkit.errors import BenchkitError
from benchkit.pads import Pad
from benchkit.recordings import WavStreamWriter
from benchkit.signals import MAX_DBFS, Stimulus

OVERSAMPLE = 8
#: The round trip drawn for each run, samples.
LATENCY_RANGE = (300, 3000)
_BAND_HZ = 19980.0


@dataclass(frozen=True)
class InterfaceSpec:
    """Parameters of the simulated interface (all overridable)."""

    sample_rate_hz: float = 48000.0
    n_inputs: int = 2
    n_outputs: int = 2
    output_vpk_per_fs: float = 2.0
    input_vpk_per_fs: float = 2.0
    #: the most the input takes without damage, volts peak (invented, as a manual would state it)
    input_max_vpk: float = 10.0
    input_ohms: float = 10e3
    dac_noise_dbfs: float = -110.0  # over 20 Hz to 20 kHz
    adc_noise_dbfs: float = -110.0
    residual_h2_dbc: float = -115.0  # at full scale, growing with level
    residual_h3_dbc: float = -120.0
    ac_coupling_hz: float | None = 3.0  # None: DC coupled
    antialias_fraction: float = 0.46  # -6 dB point of the converters' filter
    clock_ppm: float = 0.0
    hum_hz: float | None = None  # 50 or 60
    hum_dbfs: float = -100.0
    adc_bits: int = 24

    def __post_init__(self):
        if self.n_inputs < 2 or self.n_outputs < 2:
            raise BenchkitError("the virtual interface has at least 2 inputs and 2 outputs")
        if not (8000 <= self.sample_rate_hz <= 384000):
            raise BenchkitError(f"sample rate {self.sample_rate_hz:g} Hz is outside 8 kHz to 384 kHz")
        if self.output_vpk_per_fs <= 0 or self.input_vpk_per_fs <= 0 or self.input_ohms <= 0:
            raise BenchkitError("interface scales and input impedance must be positive")


# demo pad: a 10:1 divider loaded by the interface's 10 k input
DEMO_PAD = Pad(1800.0, 200.0)


@lru_cache(maxsize=4)
def _lowpass(fraction: float) -> np.ndarray:
    """Linear-phase FIR at the oversampled rate: the converters' filter,
    -6 dB at ``fraction`` x fs, about 110 dB down 0.05 fs beyond it."""
    cutoff = fraction / (OVERSAMPLE / 2.0)  # relative to the oversampled Nyquist
    # unit DC gain: resample_poly itself scales by the up factor
    return scipy.signal.firwin(64 * OVERSAMPLE + 1, cutoff, window=("kaiser", 11.0))


def _decimate(v: np.ndarray, h: np.ndarray) -> np.ndarray:
    """``resample_poly(v, 1, OVERSAMPLE, window=h)``: the same samples (to
    rounding) by one FFT convolution, kept at every OVERSAMPLE-th point
    (h's centre tap lands on one: its half length is a multiple of
    OVERSAMPLE), in about half the time on a long record."""
    half = (h.size - 1) // 2
    return scipy.signal.oaconvolve(v, h)[half::OVERSAMPLE][: -(-v.size // OVERSAMPLE)]


def _white(rng: np.random.Generator, n: int, dbfs_in_band: float, rate: float) -> np.ndarray:
    """White noise whose level over 20 Hz-20 kHz is ``dbfs_in_band`` (AES17)."""
    rms = 10 ** (dbfs_in_band / 20) / math.sqrt(2)
    return rms * math.sqrt((rate / 2) / _BAND_HZ) * rng.standard_normal(n)


def _residual(x: np.ndarray, h2_dbc: float, h3_dbc: float) -> np.ndarray:
    """A converter's small curvature: H2 and H3 at full scale as given,
    falling with level (power-reduction identities: a2 = 2 H2, a3 = 4 H3)."""
    a2 = 2 * 10 ** (h2_dbc / 20)
    a3 = 4 * 10 ** (h3_dbc / 20)
    return x + a2 * x * x + a3 * x * x * x


class VirtualBench:
    """Simulated interface + pad + stage; a capture backend.

    Parameters
    ----------
    stage : StageModel, optional
        Default: the ``se-class-a`` model of the demo stage.
    pad : Pad or None
        Between the load and input 1; None for no pad.
    spec : InterfaceSpec
    seed : int
        Draws the latency and noise of each run, run after run.
    """

    name = "virtual"
    capabilities = Capabilities(simulated=True, switchable_load=True, stereo_channels=((1, 3), (1, 2)))
    #: a simulated interface takes what any output may be given
    drive_cap_dbfs = MAX_DBFS
    drive_output = 1
    lead_s = 0.05

    def __init__(
        self,
        stage: StageModel | None = None,
        pad: Pad | None = DEMO_PAD,
        spec: InterfaceSpec | None = None,
        seed: int = 1,
        stereo: StereoCoupling | None = None,
    ):
        self.spec = spec or InterfaceSpec()
        self.stage = stage if stage is not None else make_stage("se-class-a", seed=seed)
        #: a stereo stage: channel B (output 2 -> stage B -> pad -> input 3,
        #: output 2 looped back to input 4) and what couples the channels
        self.stereo = stereo
        if stereo is not None:
            if self.spec.n_inputs < 4:
                self.spec = replace(self.spec, n_inputs=4)
            self.stage_b = type(self.stage)(seed=self.stage.seed + 101, **self.stage.params)
        self.pad = pad
        self._rng = np.random.default_rng(seed)
        #: "stage": output 1 -> stage -> pad -> input 1 (the bench set up to
        #: measure); "loopback": a cable from output 1 to input 1; "pad":
        #: output 1 -> pad -> input 1 (calibrating the pad's ratio)
        self.wiring = "stage"
        #: stop a run once the measuring input clips, as a real run does
        self.stop_on_clip = True
        self.last_latency_samples: int | None = None
        self.effective_clock_ppm = 0.0
        #: the dummy load on the stage's output, ohms (None: disconnected,
        #: the pad alone loads it); by default the load the model was given
        self.load_ohms: float | None = self.wired_load_ohms

    @property
    def wired_load_ohms(self) -> float:
        """The load the stage model's output is across (its ``load``
        parameter, else 8 ohm)."""
        return float(self.stage.params.get("load", 8.0))

    def connect_load(self, ohms: float | None) -> None:
        """Switch the dummy load on the stage's output (None: off)."""
        if ohms is not None and not ohms > 0:
            raise BenchkitError(f"a load must be positive, got {ohms:g} ohm")
        self.load_ohms = ohms

    def pad_input_ohms(self) -> float:
        """What the pad and input present to the stage's output."""
        return self.spec.input_ohms if self.pad is None else self.pad.input_impedance(self.spec.input_ohms)

    def _stereo(self, analog_a: np.ndarray, analog_b: np.ndarray, rate: float) -> list[np.ndarray]:
        """The two channels of a stereo stage at its pads' outputs: each
        stage's output as its load takes it, channel B's gain off by the
        balance, and each coupled into the other (StereoCoupling)."""
        c = self.stereo
        va = self._reload(self.stage.process(analog_a, rate), rate, {})
        vb = self._reload(self.stage_b.process(analog_b, rate), rate, {}) * 10 ** (c.balance_db / 20)
        bz, az = scipy.signal.bilinear(*c.analog(), fs=rate)
        xa = va + scipy.signal.lfilter(bz, az, vb)
        xb = vb + scipy.signal.lfilter(bz, az, va)
        return [xa * self.pad_ratio(), xb * self.pad_ratio()]

    def _reload(self, v: np.ndarray, rate: float, state: dict) -> np.ndarray:
        """The stage's output as its load now takes it: the model's output
        is across its wired load (in parallel with the pad); the stage's
        output impedance (StageModel.reloaded) meets the load switched
        now. ``state`` carries the filter from block to block."""
        from benchkit.pads import parallel

        pad_in = self.pad_input_ohms()
        wired = parallel(self.wired_load_ohms, pad_in)
        now = pad_in if self.load_ohms is None else parallel(self.load_ohms, pad_in)
        if self.stage.params.get("rout", 0.0) == 0.0 and self.stage.OPEN_CIRCUIT:
            return v
        if not self.stage.OPEN_CIRCUIT and now == wired:
            return v  # the stage as the model was given it
        b, a = self.stage.reloaded(now, wired)
        if len(a) == 1:
            return v * (b[0] / a[0])
        bz, az = scipy.signal.bilinear(b, a, fs=rate)
        zi = state.get("zi")
        if zi is None or state.get("ba") != (tuple(bz), tuple(az)):
            zi = scipy.signal.lfilter_zi(bz, az) * v[0] if v.size else np.zeros(1)
        out, state["zi"] = scipy.signal.lfilter(bz, az, v, zi=zi)
        state["ba"] = (tuple(bz), tuple(az))
        return out

    # --- the protocol -----------------------------------------------------
    @property
    def sample_rate_hz(self) -> float:
        return self.spec.sample_rate_hz

    @property
    def n_outputs(self) -> int:
        return self.spec.n_outputs

    @property
    def output_vpk_per_fs(self) -> float:
        return self.spec.output_vpk_per_fs

    @property
    def input_max_vpk(self) -> float:
        return self.spec.input_max_vpk

    def pad_ratio(self) -> float:
        return 1.0 if self.pad is None else self.pad.ratio(self.spec.input_ohms)

    def output_vrms(self, level_dbfs: float) -> float:
        """What a voltmeter reads at output 1 for a sine at ``level_dbfs``."""
        return self.spec.output_vpk_per_fs * 10 ** (level_dbfs / 20) / math.sqrt(2)

    def inputs(self) -> tuple[InputChannel, ...]:
        """Input 1: the stage's load through the pad; input 2: output 1 looped
        back (a stereo stage: inputs 3 and 4 the same for channel B and
        output 2). The bench knows its true scales."""
        stage_scale = self.spec.input_vpk_per_fs / self.pad_ratio()
        pad = "" if self.pad is None else f" through a {1 / self.pad_ratio():.2f}:1 pad"
        side = " A" if self.stereo is not None else ""
        chans = [
            InputChannel(1, f"stage{side} output{pad}", stage_scale, "simulation"),
            InputChannel(2, "reference: output 1 looped back", self.spec.input_vpk_per_fs, "simulation"),
        ]
        if self.stereo is not None:
            chans += [InputChannel(3, f"stage B output{pad}", stage_scale, "simulation"),
                      InputChannel(4, "reference: output 2 looped back", self.spec.input_vpk_per_fs, "simulation")]
        chans += [InputChannel(k, "unused", self.spec.input_vpk_per_fs, "simulation")
                  for k in range(len(chans) + 1, self.spec.n_inputs + 1)]
        return tuple(chans)

    def reference_input(self) -> int | None:
        return 2

    def describe(self) -> dict:
        s = self.spec
        return {
            "device": self.name,
            "interface": {k: getattr(s, k) for k in s.__dataclass_fields__},
            "pad": None if self.pad is None else self.pad.to_dict(s.input_ohms),
            "stage": self.stage.describe(),
            "load_ohms": self.load_ohms,
            "stereo": None if self.stereo is None else {k: getattr(self.stereo, k) for k in self.stereo.PARAMS},
        }

    def play_record(self, stimulus: Stimulus, partial: Path | None = None) -> RawRecording:
        count_stream(self.name, "play_record")
        if hasattr(stimulus, "listen"):
            return self._play_interactive(stimulus, partial)
        s = self.spec
        if stimulus.samples.shape[1] > s.n_outputs:
            raise BenchkitError(f"the stimulus has {stimulus.samples.shape[1]} outputs; the interface has {s.n_outputs}")
        rate = s.sample_rate_hz
        n = stimulus.n_samples
        latency = int(self._rng.integers(*LATENCY_RANGE))
        self.last_latency_samples = latency
        total = n + LATENCY_RANGE[1] + int(0.05 * rate)
        h = _lowpass(s.antialias_fraction)

        def jack(column: int) -> np.ndarray:
            """DAC: curvature, noise, reconstruction filter, volts at the jack."""
            drive = np.zeros(total)
            if column < stimulus.samples.shape[1]:
                drive[:n] = stimulus.samples[:, column]
            dac = _residual(drive, s.residual_h2_dbc, s.residual_h3_dbc) + _white(self._rng, total, s.dac_noise_dbfs, rate)
            return scipy.signal.resample_poly(dac, OVERSAMPLE, 1, window=h) * s.output_vpk_per_fs

        analog = jack(0)
        # the stage at 8x, then the pad into input 1; input 2 is the loopback
        if self.stereo is not None:
            analog_b = jack(1)
            at_input = self._stereo(analog, analog_b, rate * OVERSAMPLE) + [analog_b]
            at_input.insert(1, analog)
        elif self.wiring == "loopback":
            at_input = [analog, analog]
        elif self.wiring == "pad":
            at_input = [analog * self.pad_ratio(), analog]
        else:
            at_input = [self._reload(self.stage.process(analog, rate * OVERSAMPLE), rate * OVERSAMPLE, {})
                        * self.pad_ratio(), analog]
        channels = [self._adc(_decimate(v, h)) for v in at_input]
        channels += [self._adc(np.zeros(total)) for _ in range(len(at_input), s.n_inputs)]
        rec = np.stack(channels, axis=1)
        # the round trip: a delay nobody reports correctly, and clock offset
        rec = np.concatenate([np.zeros((latency, s.n_inputs)), rec[: total - latency]])
        if s.clock_ppm:
            rec = self._clock_offset(rec)
        # a run stops stepping up once the measuring input clips: what a
        # real stream does, the bench does too (a round trip of silence after)
        stopped = None
        hot = np.flatnonzero(np.abs(rec[:, 0]) >= CLIP_STOP_FS) if self.stop_on_clip else np.zeros(0, int)
        if hot.size:
            stopped = int(hot[0])
            rec = rec[: min(rec.shape[0], stopped + int(0.25 * rate))]
        if partial is not None:
            with WavStreamWriter(partial, rate, s.n_inputs) as w:
                w.write(rec)
        return RawRecording(samples=rec, stopped_at=stopped,
                            events=() if stopped is None else (f"frame {stopped}: the input clipped; the run stopped",))

    def hold_tone(self, frequency_hz: float, level_dbfs: float, seconds: float) -> dict:
        """Precondition the stage with a steady tone: the models' thermal
        state follows time and bias alone (class A draws the same supply
        power at any level), so the stage's clock moves on by ``seconds``
        without simulating an hour of samples."""
        count_stream(self.name, "hold_tone")
        self.stage.advance(seconds)
        return {"seconds": float(seconds), "level_dbfs": level_dbfs, "frequency_hz": frequency_hz,
                "simulated": "the stage's clock advanced"}

    def _play_interactive(self, stimulus, partial: Path | None) -> RawRecording:
        """A stimulus that listens (it decides what comes next from what
        came back) runs block by block through the same chain, with
        state carried from block to block, as a stream would."""
        s = self.spec
        if s.clock_ppm or self.stereo is not None:
            raise BenchkitError("the virtual bench simulates a clock offset and a stereo stage only for stimuli "
                                "known in advance (not for power runs or a watch)")
        rate = s.sample_rate_hz
        latency = int(self._rng.integers(*LATENCY_RANGE))
        self.last_latency_samples = latency
        chain = _StreamChain(self, rate)
        realtime = getattr(stimulus, "realtime", False)
        block = int((0.02 if realtime else 0.05) * rate)  # a live readout's blocks as a stream's, 20 ms
        pending = np.zeros((latency, s.n_inputs))  # the round trip: what is still on its way back
        got, pos, stopped, events = [], 0, None, ()
        tail = LATENCY_RANGE[1] + int(0.05 * rate)
        writer = WavStreamWriter(partial, rate, s.n_inputs) if partial is not None else None
        # a stream that may run for hours keeps only its last keep_s in memory;
        # one that is watched live runs at the pace of the clock
        keep = getattr(stimulus, "keep_s", None)
        keep_n = int(keep * rate) if keep else None
        started = time.monotonic() if realtime else None
        try:
            while True:
                out = stimulus.render(pos, block)
                if out.shape[0] == 0:
                    if tail <= 0:
                        break
                    out = np.zeros((min(block, tail), out.shape[1]))
                    tail -= out.shape[0]
                rec = chain.process(out[:, 0])
                pending = np.concatenate([pending, rec])
                back, pending = pending[: out.shape[0]], pending[out.shape[0]:]
                got.append(back)
                if keep_n is not None and sum(g.shape[0] for g in got) > keep_n + block:
                    got = [np.concatenate(got)[-keep_n:]]
                if writer is not None:
                    writer.write(back)
                hot = np.flatnonzero(np.abs(back[:, 0]) >= CLIP_STOP_FS) if self.stop_on_clip else ()
                if len(hot) and stopped is None:
                    stopped = pos + int(hot[0])
                    events = (f"frame {stopped}: the input clipped; the run stopped",)
                    stimulus.stop("the input clipped")
                if started is not None:  # a block is heard once its last frame has been recorded
                    time.sleep(max(0.0, started + (pos + out.shape[0]) / rate - time.monotonic()))
                stimulus.listen(back, pos)
                pos += out.shape[0]
        finally:
            if writer is not None:
                writer.close()
        return RawRecording(samples=np.concatenate(got), stopped_at=stopped, events=events)

    # --- the converter ----------------------------------------------------
    def _adc(self, volts: np.ndarray, start: int = 0, state: dict | None = None) -> np.ndarray:
        """Volts at an input to FS; ``start`` (samples) and ``state`` (the
        coupling filter's) carry a stream from block to block."""
        s = self.spec
        rate = s.sample_rate_hz
        x = volts / s.input_vpk_per_fs
        if s.hum_hz:
            t = (start + np.arange(x.size)) / rate
            amp = 10 ** (s.hum_dbfs / 20)
            x = x + amp * (np.sin(2 * np.pi * s.hum_hz * t) + 0.3 * np.sin(6 * np.pi * s.hum_hz * t + 1.0))
        if s.ac_coupling_hz:
            b, a = first_order_highpass(s.ac_coupling_hz, rate)
            if state is None:
                x = scipy.signal.lfilter(b, a, x)
            else:
                x, state["zi"] = scipy.signal.lfilter(b, a, x, zi=state.get("zi", np.zeros(1)))
        x = _residual(x, s.residual_h2_dbc, s.residual_h3_dbc) + _white(self._rng, x.size, s.adc_noise_dbfs, rate)
        lsb = 2.0 ** (1 - s.adc_bits)
        return np.clip(np.round(x / lsb) * lsb, -1.0, 1.0 - lsb)

    def _clock_offset(self, rec: np.ndarray) -> np.ndarray:
        """The ADC's clock runs clock_ppm fast: the recording is resampled
        by the nearest ratio p/q (q <= 20000) to 1 + ppm 1e-6, which is
        kept as ``effective_clock_ppm``."""
        ratio = Fraction(1.0 + self.spec.clock_ppm * 1e-6).limit_denominator(20000)
        self.effective_clock_ppm = (float(ratio) - 1.0) * 1e6
        n = rec.shape[0]
        out = scipy.signal.resample_poly(rec, ratio.numerator, ratio.denominator, axis=0)
        return out[:n] if out.shape[0] >= n else np.concatenate([out, np.zeros((n - out.shape[0], rec.shape[1]))])


class _StreamChain:
    """The bench's signal path for a stream, block by block: the same
    converters, filters and stage as a whole-stimulus run, with every
    filter's history kept (causal: the converters' filter delays by half
    its length, which the marker alignment takes out like any latency)."""

    def __init__(self, bench: VirtualBench, rate: float):
        self.bench, self.rate = bench, rate
        self.h = _lowpass(bench.spec.antialias_fraction) * OVERSAMPLE  # upfirdn does not scale by the up factor
        self.hist_in = np.zeros(int(math.ceil(self.h.size / OVERSAMPLE)))
        self.hist_up = [np.zeros(self.h.size - 1) for _ in range(2)]
        self.adc_state = [{}, {}]
        self.load_state: dict = {}
        self.n = 0

    def process(self, drive: np.ndarray) -> np.ndarray:
        b, s = self.bench, self.bench.spec
        n = drive.size
        dac = _residual(drive, s.residual_h2_dbc, s.residual_h3_dbc) + _white(b._rng, n, s.dac_noise_dbfs, self.rate)
        ext = np.concatenate([self.hist_in, dac])
        up = scipy.signal.upfirdn(self.h, ext, up=OVERSAMPLE)
        k0 = self.hist_in.size * OVERSAMPLE
        analog = up[k0 : k0 + n * OVERSAMPLE] * s.output_vpk_per_fs
        self.hist_in = ext[ext.size - self.hist_in.size :]
        if b.wiring == "loopback":
            first = analog
        elif b.wiring == "pad":
            first = analog * b.pad_ratio()
        else:
            first = b._reload(b.stage.process(analog, self.rate * OVERSAMPLE), self.rate * OVERSAMPLE,
                              self.load_state) * b.pad_ratio()
        chans = []
        for i, v in enumerate((first, analog)):
            ext_up = np.concatenate([self.hist_up[i], v])
            down = scipy.signal.oaconvolve(ext_up, self.h / OVERSAMPLE)[::OVERSAMPLE]  # (upfirdn's down, sooner)
            k = self.hist_up[i].size // OVERSAMPLE
            chans.append(b._adc(down[k : k + n], self.n, self.adc_state[i]))
            self.hist_up[i] = ext_up[ext_up.size - self.hist_up[i].size :]
        chans += [b._adc(np.zeros(n)) for _ in range(2, s.n_inputs)]
        self.n += n
        return np.stack(chans, axis=1)


def virtual_bench(
    model: str = "se-class-a",
    params: dict[str, float] | None = None,
    pad: Pad | None = DEMO_PAD,
    seed: int = 1,
    stereo: bool = False,
    **spec: float,
) -> VirtualBench:
    """A virtual bench with the named stage model; ``stereo``: two channels
    of it, coupled (the StereoCoupling parameters among ``params``)."""
    base = InterfaceSpec()
    params, coupling = split_stereo(params or {})
    if coupling and not stereo:
        raise BenchkitError(f"stage parameter {next(iter(coupling))} is for a stereo stage (--sim-stereo)")
    return VirtualBench(make_stage(model, params, seed=seed), pad, replace(base, **spec) if spec else base, seed,
                        StereoCoupling(**coupling) if stereo else None)
