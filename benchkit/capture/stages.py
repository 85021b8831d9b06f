"""Simulated amplifier stages for the virtual bench.

Each model maps the voltage at its input to the voltage across its load,
sample by sample, at the bench's oversampled rate (the virtual interface
band-limits and decimates around it, so a hard limit does not alias).
Models keep state between calls (coupling capacitors, temperature, time)
and say what their operating point is. docs/virtual-bench.md describes the
physics and parameters of each; `benchkit demo --help` lists them.

Add a model by subclassing :class:`StageModel`, declaring its ``PARAMS``
and registering it in :data:`MODELS`; callers do not change.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np
import scipy.signal

from benchkit.errors import BenchkitError

#: kT/q at 300 K, volts.
THERMAL_VOLTAGE = 0.02585
#: The audio band the noise figures refer to.
_NOISE_BAND_HZ = 19980.0


@lru_cache(maxsize=64)
def first_order_highpass(corner_hz: float, rate: float) -> tuple[np.ndarray, np.ndarray]:
    """(b, a) of a first-order Butterworth high-pass, designed once per
    corner and rate (streams ask for it at every block; do not modify)."""
    return scipy.signal.butter(1, corner_hz, btype="highpass", fs=rate)


@dataclass(frozen=True)
class Param:
    name: str
    default: float
    unit: str
    help: str


#: A stage's output resistance, none unless given (a Thevenin source: the load divides it).
ROUT = Param("rout", 0.0, "ohm", "output resistance (a Thevenin source: the load divides it)")


class StageModel:
    """Base of every simulated stage."""

    NAME = ""
    SUMMARY = ""
    PARAMS: tuple[Param, ...] = ()

    def __init__(self, seed: int = 0, **params: float):
        known = {p.name: p for p in self.PARAMS}
        unknown = sorted(set(params) - set(known))
        if unknown:
            raise BenchkitError(
                f"stage model {self.NAME!r} has no parameter {unknown[0]!r}; it takes: {', '.join(known)}"
            )
        self.params = {name: float(params.get(name, p.default)) for name, p in known.items()}
        for name, value in self.params.items():
            if not math.isfinite(value):
                raise BenchkitError(f"stage parameter {name} must be a finite number")
        self.seed = seed
        if self.params.get("rout", 0.0) < 0:
            raise BenchkitError("stage parameter rout must not be negative")
        self.validate()
        self.reset()

    def validate(self) -> None:
        """Refuse parameter values the model cannot represent."""

    #: what process() returns: the open-circuit (Thevenin) voltage, or
    #: (False) the voltage across the load the model was given
    OPEN_CIRCUIT = True

    def reloaded(self, now_ohms: float, wired_ohms: float) -> tuple[list[float], list[float]]:
        """The analog transfer (numerator, denominator in s) from what
        :meth:`process` returns to the voltage across ``now_ohms``, when
        the model's output was across ``wired_ohms``: a Thevenin source of
        the ``rout`` parameter, R / (R + rout)."""
        r = self.params.get("rout", 0.0)
        if self.OPEN_CIRCUIT:
            return [now_ohms], [now_ohms + r]
        return [now_ohms * (wired_ohms + r)], [wired_ohms * (now_ohms + r)]

    def reset(self) -> None:
        """Back to power-on: cold, discharged, time zero."""
        self.time_s = 0.0
        self._rng = np.random.default_rng(self.seed)

    def process(self, v_in: np.ndarray, rate: float) -> np.ndarray:
        """Volts across the load for input volts ``v_in`` at ``rate``."""
        out = self._transfer(np.asarray(v_in, dtype=float), rate)
        self.time_s += v_in.size / rate
        return out

    def _transfer(self, v_in: np.ndarray, rate: float) -> np.ndarray:
        raise NotImplementedError

    def turn(self, name: str, value: float) -> float:
        """Set parameter ``name`` to ``value`` while it runs (a trimmer
        turned on the bench), refused as the model would refuse it at the
        start (the old value kept); returns the value set."""
        import copy

        if name not in self.params:
            raise BenchkitError(f"stage model {self.NAME!r} has no parameter {name!r}")
        if not math.isfinite(value):
            raise BenchkitError(f"stage parameter {name} must be a finite number")
        trial = copy.copy(self)  # checked on a copy: the stream's thread only ever sees values the model takes
        trial.params = {**self.params, name: float(value)}
        trial.validate()
        self.params = trial.params
        return self.params[name]

    def advance(self, seconds: float) -> None:
        """Let time pass with no signal (warming up, settling)."""
        self.time_s += seconds

    def operating_point(self) -> dict:
        """DC conditions now (supply current, dissipation, temperatures)."""
        return {}

    def describe(self) -> dict:
        return {"model": self.NAME, "params": dict(self.params), "operating_point": self.operating_point()}

    def _positive(self, *names: str) -> None:
        for name in names:
            if not self.params[name] > 0:
                raise BenchkitError(f"stage parameter {name} must be positive, got {self.params[name]:g}")


class Ideal(StageModel):
    NAME = "ideal"
    SUMMARY = "gain only: v_out = gain x v_in"
    PARAMS = (Param("gain", 10.0, "V/V", "voltage gain"),
              ROUT)

    def _transfer(self, v_in, rate):
        return self.params["gain"] * v_in


class Poly(StageModel):
    NAME = "poly"
    SUMMARY = "polynomial: v_out = gain v + a2 v^2 + a3 v^3 + a4 v^4 + a5 v^5 (v = input volts)"
    PARAMS = (
        Param("gain", 10.0, "V/V", "linear gain"),
        *(Param(f"a{k}", 0.0, "1/V" if k == 2 else f"1/V^{k - 1}", f"{word}-order coefficient")
          for k, word in zip(range(2, 6), ("second", "third", "fourth", "fifth"))),
        ROUT,
    )

    def _transfer(self, v_in, rate):
        p = self.params
        return v_in * (p["gain"] + v_in * (p["a2"] + v_in * (p["a3"] + v_in * (p["a4"] + v_in * p["a5"]))))


@lru_cache(maxsize=64)
def first_order_lowpass(corner_hz: float, rate: float) -> tuple[np.ndarray, np.ndarray]:
    """(b, a) of a first-order Butterworth low-pass (bilinear, the corner
    prewarped), designed once per corner and rate (do not modify)."""
    return scipy.signal.butter(1, corner_hz, btype="lowpass", fs=rate)


class LowPassed:
    """A stage part: a first-order low-pass at the ``fc`` parameter, its
    state kept from block to block (back to rest on reset)."""

    params: dict

    def reset(self):
        super().reset()
        self._lp_state, self._lp_rate = None, None

    def _low_pass(self, v, rate):
        if not self.params["fc"] < 0.45 * rate:
            raise BenchkitError(f"stage parameter fc ({self.params['fc']:g} Hz) must lie below the bench's band")
        b, a = first_order_lowpass(self.params["fc"], rate)
        if self._lp_state is None or self._lp_rate != rate:
            self._lp_state, self._lp_rate = np.zeros(1), rate
        out, self._lp_state = scipy.signal.lfilter(b, a, v, zi=self._lp_state)
        return out


class FilteredPoly(LowPassed, Poly):
    """A first-order low-pass, then the polynomial: the harmonics follow
    the filtered amplitude B = A |H(f)|, so distortion falls above the
    corner (H2 as B, H3 as B^2), as a stage whose open-loop gain (and so
    its feedback) falls with frequency is made to behave."""

    NAME = "filtered-poly"
    SUMMARY = ("a first-order low-pass at fc, then the polynomial gain v + a2 v^2 + a3 v^3 + a4 v^4 + a5 v^5 "
               "(distortion that depends on frequency)")
    PARAMS = (*Poly.PARAMS[:-1], Param("fc", 5000.0, "Hz", "the low-pass corner before the polynomial"), ROUT)

    def validate(self):
        self._positive("fc")

    def _transfer(self, v_in, rate):
        return super()._transfer(self._low_pass(v_in, rate), rate)


class HardClip(LowPassed, StageModel):
    NAME = "hard-clip"
    SUMMARY = ("gain with symmetric hard clipping at +-vclip volts; with fc, a first-order low-pass after the "
               "clipper (an output filter: the power it can deliver falls above fc)")
    PARAMS = (
        Param("gain", 10.0, "V/V", "voltage gain"),
        Param("vclip", 9.5, "V", "clipping level, either polarity"),
        Param("fc", 0.0, "Hz", "corner of a first-order low-pass after the clipper; 0: none"),
        ROUT,
    )

    def validate(self):
        self._positive("vclip")
        if self.params["fc"] < 0:
            raise BenchkitError("stage parameter fc must not be negative (0: no low-pass)")

    def _transfer(self, v_in, rate):
        out = np.clip(self.params["gain"] * v_in, -self.params["vclip"], self.params["vclip"])
        return out if not self.params["fc"] else self._low_pass(out, rate)


class SingleEndedClassA(StageModel):
    """Single supply, single-ended class A: the output device pulls down,
    a constant-current source of I_bias pulls up, and the load hangs off
    the output node through a coupling capacitor.

    - Load current v/R_L comes out of the bias current, so the device
      carries I_bias - v/R_L: the positive swing at the load ends where the
      device cuts off, at I_bias x R_L (current-limited half); the negative
      swing ends at the midpoint less the saturation voltage (rail-limited
      half). Nor can the node rise past the rail less the pull-up's
      saturation voltage (the same V_sat): with I_bias x R_L above that, both
      halves end at the rails.
    - The device's V_BE follows the exponential law, V_T ln(i/I_s), plus
      its emitter resistor; the ratio of that curve to its slope at rest is
      the open-loop shape of the stage, whose curvature gives H2 growing
      with level and falling as the bias rises. Negative feedback with loop
      gain T divides the departure from a straight line by T.
    - The coupling capacitor into the load is a first-order high-pass at
      1 / (2 pi R_L C) on the drive the loop delivers; the limits act on
      the load voltage that results.
    - The midpoint drifts as the device warms: junction temperature rises
      towards ambient + R_th x P_device with a first-order time constant,
      and the midpoint moves by its temperature coefficient per degree.
    """

    NAME = "se-class-a"
    SUMMARY = "single-ended class A, constant-current pull-up, capacitor-coupled load (demo stage B-2)"
    PARAMS = (
        Param("rail", 24.0, "V", "single supply rail"),
        Param("bias", 0.8, "A", "constant-current pull-up (bias current)"),
        Param("load", 8.0, "ohm", "load resistance"),
        Param("coupling_uf", 2200.0, "uF", "output coupling capacitor"),
        Param("gain", 10.0, "V/V", "closed-loop voltage gain"),
        Param("loop_gain", 30.0, "V/V", "feedback loop gain that divides the distortion"),
        Param("re", 0.22, "ohm", "emitter resistor of the output device"),
        Param("vsat", 1.0, "V", "saturation voltage of the device and of the pull-up"),
        Param("knee", 0.2, "V", "softness of the rail limits"),
        Param("noise_uv", 60.0, "uVrms", "output noise over 20 Hz to 20 kHz"),
        Param("ripple_mv", 0.3, "mVrms", "supply ripple at the output, at twice the mains frequency"),
        Param("mains_hz", 50.0, "Hz", "mains frequency"),
        Param("ambient_c", 23.0, "degC", "ambient temperature"),
        Param("rth", 1.5, "degC/W", "junction-to-ambient thermal resistance"),
        Param("tau_s", 240.0, "s", "thermal time constant"),
        Param("mid_tc_mv", -10.0, "mV/degC", "midpoint drift per degree of junction temperature"),
        Param("rout", 0.2, "ohm", "output resistance of the loop, before the coupling capacitor"),
    )
    OPEN_CIRCUIT = False

    def validate(self):
        self._positive("rail", "bias", "load", "coupling_uf", "gain", "loop_gain", "knee", "tau_s")
        p = self.params
        if p["vsat"] >= p["rail"] / 2:
            raise BenchkitError("stage parameter vsat must be below half the rail")
        if p["re"] < 0 or p["rth"] < 0 or p["noise_uv"] < 0 or p["ripple_mv"] < 0:
            raise BenchkitError("stage parameters re, rth, noise_uv and ripple_mv must not be negative")
        corner = 1.0 / (2 * math.pi * p["load"] * p["coupling_uf"] * 1e-6)  # circuit theory: f = 1/(2 pi R C)
        if corner > 20000.0:
            raise BenchkitError(f"the coupling capacitor ({p['coupling_uf']:g} uF) into {p['load']:g} ohm cuts off at "
                                f"{corner:.3g} Hz, above the audio band: give coupling_uf of at least "
                                f"{1e6 / (2 * math.pi * p['load'] * 20000.0):.3g}")
        if not 0 < p["mains_hz"] < 1000:
            raise BenchkitError(f"stage parameter mains_hz is a mains frequency (50 or 60), got {p['mains_hz']:g}")

    def reset(self):
        super().reset()
        self._hp_state = None
        self._hp_rate = None

    # --- DC and thermal -------------------------------------------------
    @property
    def current_limit_v(self) -> float:
        """Peak positive swing at the load, I_bias x R_L."""
        return self.params["bias"] * self.params["load"]

    def junction_rise_c(self, t: float | None = None) -> float:
        p = self.params
        t = self.time_s if t is None else t
        steady = p["rth"] * self._device_watts()
        return steady * (1.0 - math.exp(-t / p["tau_s"]))

    def midpoint_v(self, t: float | None = None) -> float:
        """DC voltage of the output node: half the rail, drifting as the
        junction warms."""
        p = self.params
        return p["rail"] / 2.0 + p["mid_tc_mv"] * 1e-3 * self.junction_rise_c(t)

    def _device_watts(self) -> float:
        return self.params["rail"] / 2.0 * self.params["bias"]

    def operating_point(self) -> dict:
        p = self.params
        mid = self.midpoint_v()
        return {
            "time_s": self.time_s,
            "supply_current_a": p["bias"],
            "supply_watts": p["rail"] * p["bias"],
            "device_watts": mid * p["bias"],
            "pullup_watts": (p["rail"] - mid) * p["bias"],
            "junction_c": p["ambient_c"] + self.junction_rise_c(),
            "midpoint_v": mid,
            "positive_limit_v": self.current_limit_v,
            "negative_limit_v": -(mid - p["vsat"]),
            "coupling_corner_hz": 1.0 / (2 * math.pi * p["load"] * p["coupling_uf"] * 1e-6),
        }

    # --- signal ------------------------------------------------------------
    def _shape(self, v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Open-loop shape g(v) (slope 1 at rest) and its derivative."""
        p = self.params
        vi = self.current_limit_v
        kr = p["re"] / p["load"]
        slope0 = THERMAL_VOLTAGE / vi + kr
        y = 1.0 - v / vi
        g = -(THERMAL_VOLTAGE * np.log(y) - kr * v) / slope0
        dg = (THERMAL_VOLTAGE / (vi * y) + kr) / slope0
        return g, dg

    def _node_swing(self, target: np.ndarray) -> np.ndarray:
        """Solve v + (g(v) - v) / T = target for the load voltage v < I R
        (the device carries I_bias - v / R_L)."""
        t_loop = self.params["loop_gain"]
        vi = self.current_limit_v
        top = vi * (1.0 - 1e-12)
        # start from the series of g about rest, g(v) - v = (VT / slope0)(x^2/2 + x^3/3 + x^4/4 ...)
        # with x = v / vi, taken at the target: off by a few tenths of a microvolt at a volt or
        # two, so that one Newton step lands and a second confirms (three from the target itself)
        p = self.params
        x = np.clip(target / vi, -0.5, 0.5)
        scale = THERMAL_VOLTAGE / (THERMAL_VOLTAGE / vi + p["re"] / p["load"]) / t_loop
        v = np.minimum(target - scale * x * x * (0.5 + x * (1.0 / 3.0 + 0.25 * x)), 0.999 * vi)
        # Newton on the samples still moving: near the limit a sample takes
        # tens of steps, at rest two or three
        active = np.arange(v.size)
        for _ in range(60):
            va = v[active]
            g, dg = self._shape(va)
            h = va + (g - va) / t_loop - target[active]
            v_new = va - h / (1.0 + (dg - 1.0) / t_loop)
            # stay on the physical side of the cut-off
            v_new = np.where(v_new >= top, 0.5 * (va + top), v_new)
            v[active] = v_new
            moving = np.abs(v_new - va) >= 1e-13 * vi
            if not moving.any():
                break
            active = active[moving]
        return v

    def _transfer(self, v_in, rate):
        p = self.params
        # the drive the loop asks for, as it reaches the load through the
        # coupling capacitor; the device current follows the load current
        wanted = self._couple(p["gain"] * v_in, rate)
        load_v = self._node_swing(wanted)
        # rail-limited half (the node cannot fall below the saturation
        # voltage; the capacitor holds the midpoint), with a softened knee
        floor = self.midpoint_v() - p["vsat"]
        z = (load_v + floor) / p["knee"]
        near = z < 40.0  # beyond, the knee's term is below 1e-17 of a volt
        load_v[near] = -floor + p["knee"] * np.logaddexp(0.0, z[near])
        # nor can it rise past the rail less the pull-up's saturation
        # voltage (a high bias reaches it before its current runs out)
        ceiling = p["rail"] - self.midpoint_v() - p["vsat"]
        near = load_v > ceiling - 20.0 * p["knee"]  # beyond, the knee's term is below 1e-9 of a volt
        if near.any():
            load_v[near] = ceiling - p["knee"] * np.logaddexp(0.0, (ceiling - load_v[near]) / p["knee"])
        if p["ripple_mv"]:
            t = self.time_s + np.arange(v_in.size) / rate
            ripple = p["ripple_mv"] * 1e-3 * math.sqrt(2)
            f_r = 2.0 * p["mains_hz"]
            load_v += ripple * (np.sin(2 * np.pi * f_r * t) + 0.5 * np.sin(4 * np.pi * f_r * t + 0.7))
        sigma = p["noise_uv"] * 1e-6 * math.sqrt((rate / 2.0) / _NOISE_BAND_HZ)
        return load_v + sigma * self._rng.standard_normal(v_in.size)

    def reloaded(self, now_ohms: float, wired_ohms: float) -> tuple[list[float], list[float]]:
        """The output is the loop's node through rout and the coupling
        capacitor C into the load: across R it is R / (R + rout + 1/sC) of
        the node. From across ``wired_ohms`` to across ``now_ohms``:
        R_now (s C (R_w + rout) + 1) / (R_w (s C (R_now + rout) + 1))."""
        r, c = self.params["rout"], self.params["coupling_uf"] * 1e-6
        return [now_ohms * c * (wired_ohms + r), now_ohms], [wired_ohms * c * (now_ohms + r), wired_ohms]

    def _couple(self, node: np.ndarray, rate: float) -> np.ndarray:
        p = self.params
        fc = 1.0 / (2 * math.pi * p["load"] * p["coupling_uf"] * 1e-6)
        b, a = first_order_highpass(fc, rate)
        if self._hp_state is None or self._hp_rate != rate:
            self._hp_state = np.zeros(1)
            self._hp_rate = rate
        out, self._hp_state = scipy.signal.lfilter(b, a, node, zi=self._hp_state)
        return out


@dataclass(frozen=True)
class StereoCoupling:
    """What couples the two channels of a stereo stage, output to output:
    a capacitive part (stray capacitance into the other channel's input,
    rising 6 dB an octave: ``crosstalk_1k_db`` at 1 kHz) and a resistive
    part (a shared ground return, flat: ``crosstalk_flat_db``); channel
    B's gain stands ``balance_db`` over channel A's. The capacitive part
    is a first-order high-pass far above the band (CORNER_HZ), whose slope
    is 6 dB an octave through the audio band."""

    crosstalk_1k_db: float = -70.0
    crosstalk_flat_db: float = -100.0
    balance_db: float = 0.2

    CORNER_HZ = 100e3
    PARAMS = ("crosstalk_1k_db", "crosstalk_flat_db", "balance_db")

    def __post_init__(self):
        for name in self.PARAMS:
            if not math.isfinite(getattr(self, name)):
                raise BenchkitError(f"stage parameter {name} must be a finite number")
        if self.crosstalk_1k_db > -20 or self.crosstalk_flat_db > -20:
            raise BenchkitError("crosstalk parameters are dB below the driven channel: -20 or lower")

    def analog(self) -> tuple[list[float], list[float]]:
        """The coupling's transfer in s: f + k s / (s + wc), with k set so
        the capacitive part reads ``crosstalk_1k_db`` at 1 kHz."""
        wc = 2 * math.pi * self.CORNER_HZ
        w1 = 2 * math.pi * 1000.0
        k = 10 ** (self.crosstalk_1k_db / 20) / (w1 / math.hypot(w1, wc))
        flat = 10 ** (self.crosstalk_flat_db / 20)
        return [flat + k, flat * wc], [1.0, wc]

    def response(self, frequency_hz) -> np.ndarray:
        """The coupling's complex response at ``frequency_hz``."""
        b, a = self.analog()
        s = 2j * np.pi * np.asarray(frequency_hz, dtype=float)
        return (b[0] * s + b[1]) / (a[0] * s + a[1])


def split_stereo(params: dict[str, float]) -> tuple[dict[str, float], dict[str, float]]:
    """A stage's parameters, and those of its stereo coupling."""
    model = {k: v for k, v in params.items() if k not in StereoCoupling.PARAMS}
    return model, {k: v for k, v in params.items() if k in StereoCoupling.PARAMS}


MODELS: dict[str, type[StageModel]] = {m.NAME: m for m in (Ideal, Poly, FilteredPoly, HardClip, SingleEndedClassA)}


def model_params(name: str) -> tuple[Param, ...]:
    """The parameters the named model takes (none for an unknown name:
    :func:`make_stage` refuses it)."""
    return MODELS[name].PARAMS if name in MODELS else ()


def make_stage(name: str, params: dict[str, float] | None = None, seed: int = 0) -> StageModel:
    """A stage model by name with parameters overridden."""
    if name not in MODELS:
        raise BenchkitError(f"unknown stage model {name!r}; choose one of: {', '.join(MODELS)}")
    return MODELS[name](seed=seed, **(params or {}))


def parse_params(items: list[str]) -> dict[str, float]:
    """``["bias=1.2", "gain=10"]`` -> ``{"bias": 1.2, "gain": 10.0}``."""
    out = {}
    for item in items:
        key, sep, value = item.partition("=")
        if not sep or not key.strip():
            raise BenchkitError(f"cannot read stage parameter {item!r}: expected key=value, e.g. bias=1.2")
        try:
            out[key.strip()] = float(value)
        except ValueError:
            raise BenchkitError(f"stage parameter {key.strip()} needs a number, got {value!r}") from None
    return out


def models_help() -> str:
    """Every model with its parameters, units and defaults (for --help)."""
    lines = []
    for m in MODELS.values():
        params = ", ".join(f"{p.name} [{p.unit}] = {p.default:g} ({p.help})" for p in m.PARAMS)
        lines.append(f"{m.NAME}: {m.SUMMARY}. Parameters: {params}.")
    return "\n\n".join(lines)
