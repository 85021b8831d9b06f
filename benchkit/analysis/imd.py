"""Intermodulation distortion of a two-tone test.

Two tones f1 < f2 played together through a stage that is not a straight
line come back with products at m f1 + n f2 besides the tones and their
harmonics. Two methods are in use (names as the standards use them):

- ``modulation`` (SMPTE RP120; IEC 60268-3, "modulation distortion"):
  a low tone f1 (60 Hz) and a high tone f2 (7 kHz) at 4:1 in amplitude.
  The low tone modulates the high one; the products are sidebands at
  f2 +- k f1. The distortion of order k + 1 is the sum of the pair's
  amplitudes over the amplitude of f2, and the total is the root sum of
  squares over the orders.
- ``difference`` (IEC 60268-3, "difference-frequency distortion"; the
  twin-tone method): two high tones 1 kHz apart (19 and 20 kHz) at 1:1.
  The second-order product lies at f2 - f1, the third-order ones at
  2 f1 - f2 and 2 f2 - f1, each referred to the sum of the two tones'
  amplitudes; the total is the root sum of squares of d2 and d3.

These definitions are as we remember IEC 60268-3 (edition 4, 2013) and
SMPTE RP120 (1994): the 4:1 ratio, the tones, the sidebands summed in
pairs and the sum-of-amplitudes reference, from memory, not re-read.
The analysis is spectral, not the analog demodulator of the original
method: every component is read at its exact frequency off the windowed
spectrum (:func:`benchkit.analysis.spectrum.read_components`), with the
tones' frequencies found in the record, so a clock offset does not smear
them. For y = g x + a2 x^2 + a3 x^3 and x = A1 cos w1 t + A2 cos w2 t the
power-reduction identities give a2 A1 A2 at f2 +- f1, (3/4) a3 A1^2 A2 at
2 f1 +- f2 and (3/4) a3 A1 A2^2 at 2 f2 +- f1: the tests check those.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from benchkit.units import quantity
from benchkit import units
from benchkit.analysis import one_channel, refuse_non_finite
from benchkit.analysis import spectrum as sp
from benchkit.analysis.tone import detect_clipping
from benchkit.errors import BenchWarning, BenchkitError
from benchkit.analysis.compare import Figure, finite
from benchkit.analysis.documents import Conditions, document
from benchkit.analysis import uncertainty as ua


#: The tones (Hz) and the amplitude ratio f1:f2 each method plays.
METHODS = {"modulation": (60.0, 7000.0, 4.0), "difference": (19000.0, 20000.0, 1.0)}
#: Products up to this order (|m| + |n|) are read.
MAX_ORDER = 5
#: Products are read between these limits: above the band's low edge of
#: the method and below this fraction of the sample rate (the converters'
#: filters roll off above it).
LOWEST_HZ = 10.0
TOP_FRACTION = 0.45
#: A product less than this over the noise floor is marked (noise alone
#: passes it in one bin of 20000: an exponential's tail, e^-10).
FLOOR_MARGIN_DB = 10.0


def _label(m: int, n: int) -> str:
    """'f2-f1', '2f1-f2', 'f2+3f1': the product m f1 + n f2 as written."""
    def term(k, name):
        return name if abs(k) == 1 else f"{abs(k)}{name}"

    parts = [(n, "f2"), (m, "f1")] if n > 0 else [(m, "f1"), (n, "f2")]
    parts = [(k, nm) for k, nm in parts if k]
    text = term(*parts[0])
    for k, nm in parts[1:]:
        text += ("+" if k > 0 else "-") + term(k, nm)
    return text


@dataclass(frozen=True)
class Product:
    """One intermodulation product: m f1 + n f2 at ``frequency_hz``."""

    m: int
    n: int
    frequency_hz: float
    amplitude_fs: float  # peak
    level_db: float  # re the method's reference
    at_floor: bool

    @property
    def order(self) -> int:
        return abs(self.m) + abs(self.n)

    @property
    def label(self) -> str:
        return _label(self.m, self.n)

    def to_dict(self, volts_per_fs: float | None = None) -> dict:
        d = {"label": self.label, "order": self.order, "m": self.m, "n": self.n, "frequency_hz": self.frequency_hz,
             "amplitude_fs": self.amplitude_fs, "level_db": self.level_db, "at_floor": self.at_floor}
        if volts_per_fs is not None:
            d["vrms"] = units.vrms_from_vpk(self.amplitude_fs * volts_per_fs)
        return d


@dataclass(frozen=True)
class ImdResult:
    """The products of one two-tone record and the method's figures.

    ``orders`` maps each distortion order to its ratio (modulation: the
    sideband pair of that order over f2; difference: d2 and d3 over the
    sum of the tones); ``ratio`` is the total.
    """

    method: str
    sample_rate_hz: float
    n_samples: int
    f1_hz: float
    f2_hz: float
    a1_fs: float
    a2_fs: float
    products: tuple[Product, ...]
    orders: dict
    ratio: float
    floor_db: float
    peak_fs: float
    clipped: bool
    valid: bool
    warnings: tuple[str, ...]
    volts_per_fs: float | None = None
    scale_source: str = "none"
    load_ohms: float | None = None
    spectrum: tuple[np.ndarray, np.ndarray] | None = field(default=None, compare=False, repr=False)
    #: orders whose figure lacks a product that could not be read
    partial_orders: tuple[int, ...] = ()
    #: the products the method needs that could not be read, with why
    unmeasured: tuple[str, ...] = ()
    #: the figures' standard uncertainties (benchkit.analysis.uncertainty.block)
    uncertainty: dict | None = field(default=None, compare=False)

    @property
    def reference_fs(self) -> float:
        """What the products are referred to: f2, or the sum of the tones."""
        return self.a2_fs if self.method == "modulation" else self.a1_fs + self.a2_fs

    @property
    def imd_pct(self) -> float:
        return units.pct_from_ratio(self.ratio)

    @property
    def imd_db(self) -> float:
        return units.db_from_ratio(self.ratio)

    @property
    def peak_v(self) -> float | None:
        """The composite's peak at the stage, a1 + a2, in volts."""
        return None if self.volts_per_fs is None else (self.a1_fs + self.a2_fs) * self.volts_per_fs

    @property
    def equivalent_power_w(self) -> float | None:
        """The power of a sine with the composite's peak (peak^2 / 2R): how
        two-tone levels are usually stated against power (common practice)."""
        v = self.peak_v
        return None if v is None or self.load_ohms is None else v * v / (2.0 * self.load_ohms)

    def to_dict(self) -> dict:
        vpf = self.volts_per_fs
        d = {
            "method": self.method,
            "sample_rate_hz": self.sample_rate_hz, "n_samples": self.n_samples,
            "f1_hz": self.f1_hz, "f2_hz": self.f2_hz, "f1_dbfs": units.dbfs_from_peak(self.a1_fs),
            "f2_dbfs": units.dbfs_from_peak(self.a2_fs), "tone_ratio": self.a1_fs / self.a2_fs,
            "imd_pct": self.imd_pct, "imd_db": self.imd_db,
            "orders": {str(k): {"pct": units.pct_from_ratio(v), "db": units.db_from_ratio(v), "partial": k in self.partial_orders}
                       for k, v in self.orders.items()},
            "partial": bool(self.partial_orders), "unmeasured_products": list(self.unmeasured),
            "floor_db": self.floor_db, "peak_fs": self.peak_fs, "clipped": self.clipped, "valid": self.valid,
            "warnings": list(self.warnings), "scale_source": self.scale_source, "volts_per_fs": vpf,
            "load_ohms": self.load_ohms,
            "products": [p.to_dict(vpf) for p in self.products],
            "uncertainty": self.uncertainty,
        }
        if vpf is not None:
            d.update(f1_vrms=units.vrms_from_vpk(self.a1_fs * vpf), f2_vrms=units.vrms_from_vpk(self.a2_fs * vpf),
                     peak_v=self.peak_v)
        if self.equivalent_power_w is not None:
            d["equivalent_power_w"] = self.equivalent_power_w
        return document("imd-record", d, self.conditions())

    def conditions(self) -> Conditions:
        """What this two-tone record was measured under."""
        return Conditions(self.sample_rate_hz, None, sp.WINDOW_NAME,
                          "each component read at its frequency by least squares over the window's exact kernel; "
                          "f1 and f2 found in the record", 1, self.scale_source, self.volts_per_fs, self.load_ohms,
                          more={"max_order": MAX_ORDER, "floor_margin_db": FLOOR_MARGIN_DB})


def method_tones(method: str) -> tuple[float, float, float]:
    """The standard tones and ratio of a method."""
    if method not in METHODS:
        raise BenchkitError(f"unknown intermodulation method {method!r}: modulation or difference")
    return METHODS[method]


def _find(spec: np.ndarray, n: int, rate: float, f_hz: float, what: str) -> float:
    """The frequency of the tone near ``f_hz`` (within 0.5 % or 5 bins),
    refined on the window's exact kernel."""
    centre = f_hz * n / rate
    span = max(5.0, 0.005 * centre)
    lo = max(sp.MAIN_LOBE_BINS + 1, int(centre - span))
    hi = min(n // 2 - sp.MAIN_LOBE_BINS - 1, int(math.ceil(centre + span)))
    if hi <= lo:
        raise BenchkitError(f"the {what} tone at {f_hz:g} Hz cannot be read in this record")
    peak = lo + int(np.argmax(sp.power(spec[lo:hi])))
    return sp.refine_peak(spec, peak, n) * rate / n


def shortest_record_s(method: str, f1_hz: float, f2_hz: float) -> float:
    """The shortest record that separates a two-tone test's products:
    16 periods of the spacing between them (f2 - f1 for the difference
    method, f1 for the modulation method's sidebands)."""
    return 16.0 / (f2_hz - f1_hz if method == "difference" else f1_hz)


def analyze_imd(samples, sample_rate: float, *, method: str, f1_hz: float | None = None,
                f2_hz: float | None = None, volts_per_fs: float | None = None, scale_source: str = "none",
                load_ohms: float | None = None, max_order: int = MAX_ORDER, spectrum: bool = False,
                channel: int | None = None) -> ImdResult:
    """The intermodulation products of a two-tone record and the figures of
    its method.

    Every product m f1 + n f2 with 2 <= |m| + |n| <= ``max_order`` and m, n
    both non-zero is read, between LOWEST_HZ and TOP_FRACTION of the rate,
    if it lies clear of the tones, their harmonics and the other products
    (the window's main lobe and the fit's span, 11 bins).

    Parameters
    ----------
    samples : array_like
        The two-tone record in FS units: one channel, or frames x channels
        (``channel`` picks one).
    sample_rate : float
        In Hz.
    method : {"modulation", "difference"}
        Which figures: sideband pairs of f2 over f2, or d2 and d3 over the
        sum of the tones (see the module's notes).
    f1_hz, f2_hz : float, optional
        Where the tones are (the method's standard tones by default); each
        is found within 0.5 % or 5 bins.
    volts_per_fs : float, optional
        Volts peak per FS; adds volts to the result.
    scale_source : str
        Where ``volts_per_fs`` came from.
    load_ohms : float, optional
        The load, recorded with the result.
    max_order : int
        The highest order of product read.
    spectrum : bool
        Keep the spectrum the report plots.
    channel : int, optional
        The channel of 2-D ``samples``, from 1.

    Returns
    -------
    ImdResult
        ``orders`` (ratio by order), ``ratio`` (the total), ``products``.

    References
    ----------
    SMPTE RP120 and IEC 60268-3 (the methods, from memory, see the module's
    notes); the power-reduction identities for the products of a
    polynomial (the tests' check).

    Examples
    --------
    y = x + 0.01 x^2 with tones of 0.4 and 0.1 FS: each sideband at
    f2 +- f1 is 0.01 x 0.4 x 0.1, the pair over f2 is 2 x 0.01 x 0.4,
    0.8 %:

    >>> import numpy as np, benchkit
    >>> t = np.arange(96000) / 48000
    >>> x = 0.4 * np.cos(2 * np.pi * 60 * t) + 0.1 * np.cos(2 * np.pi * 7000 * t)
    >>> r = benchkit.analyze_imd(x + 0.01 * x * x, 48000, method="modulation")
    >>> round(100 * r.orders[2], 3)
    0.8
    """
    d1, d2, _ratio = method_tones(method)
    f1_hz, f2_hz = float(f1_hz or d1), float(f2_hz or d2)
    if not 0 < f1_hz < f2_hz < sample_rate / 2:
        raise BenchkitError(f"two-tone test: need 0 < f1 < f2 < half the sample rate, got {f1_hz:g} and {f2_hz:g} Hz")
    x = one_channel(samples, channel, "analyze_imd")
    refuse_non_finite(x)
    n = x.size
    if n < shortest_record_s(method, f1_hz, f2_hz) * sample_rate:
        raise BenchkitError(f"the record ({quantity(n / sample_rate, 's', 3)}) is too short to separate the products: "
                            "it needs 16 periods of the spacing between them")
    x = x - float(np.mean(x))
    peak = float(np.max(np.abs(x))) if n else 0.0
    clipped, why = detect_clipping(x, 1.0, peak)
    warnings = [BenchWarning("input-clipped", why)] if why else []
    spec = sp.windowed_rfft(x)
    f1 = _find(spec, n, sample_rate, f1_hz, "f1")
    f2 = _find(spec, n, sample_rate, f2_hz, "f2")
    top = min(TOP_FRACTION * sample_rate, sample_rate / 2 - 2 * sp.MAIN_LOBE_BINS * sample_rate / n)
    # the tones and their harmonics, then the products, as (m, n)
    terms = [(1, 0), (0, 1)] + [(k, 0) for k in range(2, max_order + 1)] + [(0, k) for k in range(2, max_order + 1)]
    terms += [(m, k) for k in range(-max_order, max_order + 1) for m in range(-max_order, max_order + 1)
              if m and k and 2 <= abs(m) + abs(k) <= max_order and (m * f1 + k * f2) > 0]
    freqs = {t: t[0] * f1 + t[1] * f2 for t in terms}
    # the tones are read wherever they lie (a tone near the band's top sits
    # on the converters' filter slope: said); the rest only inside the limits
    kept = [t for t in terms if t in ((1, 0), (0, 1)) or LOWEST_HZ <= freqs[t] <= top]
    for name, f in (("f1", f1), ("f2", f2)):
        if f > top:
            warnings.append(BenchWarning("outside-band", f"{name} ({quantity(f, 'Hz', 5)}) lies above {TOP_FRACTION:g} of the sample rate "
                            f"({quantity(top, 'Hz', 5)}), where the converters' filters roll off: its level may read low"))
    guard = (2 * sp.MAIN_LOBE_BINS + 3) * sample_rate / n
    clear = []
    for t in kept:
        others = [freqs[u] for u in kept if u != t]
        if t in ((1, 0), (0, 1)) or all(abs(freqs[t] - f) >= guard for f in others):
            clear.append(t)
    crowded = [t for t in kept if t not in clear and t[0] and t[1]]
    if crowded:
        warnings.append(BenchWarning("crowded", f"{len(crowded)} product(s) lie too close to another component to be read apart "
                        f"(e.g. {_label(*crowded[0])} at {freqs[crowded[0]]:.1f} Hz): left out"))
    bins = np.array([freqs[t] * n / sample_rate for t in clear])
    amps = np.abs(sp.read_components(spec, n, bins))
    amp = dict(zip(clear, amps))
    gain = dict(zip(clear, sp.read_noise_gain(n, bins, spec.size)))
    a1, a2 = float(amp[(1, 0)]), float(amp[(0, 1)])
    if min(a1, a2) <= 0:
        raise BenchkitError("the two tones were not found in the record")
    ref = a2 if method == "modulation" else a1 + a2
    # the floor: the mean noise power of a bin, from the median of the bins
    # away from every component read (noise power is exponential: mean =
    # median / ln 2), robust to the lines the fit did not list
    pw = sp.power(spec) * sp.sine_amplitude_scale(n) ** 2
    mask = np.ones(pw.size, bool)
    mask[: int(LOWEST_HZ * n / sample_rate) + 1] = False
    for b in bins:
        mask[max(0, int(b) - sp.MAIN_LOBE_BINS - 1): int(b) + sp.MAIN_LOBE_BINS + 2] = False
    band = pw[mask][: int(top * n / sample_rate)]
    floor_amp = math.sqrt(float(np.median(band)) / math.log(2.0)) if band.size else 0.0
    products = tuple(
        Product(t[0], t[1], freqs[t], float(amp[t]), float(units.db_from_ratio(max(amp[t], 1e-300) / ref)),
                bool(amp[t] < floor_amp * 10 ** (FLOOR_MARGIN_DB / 20)))
        for t in sorted((t for t in clear if t[0] and t[1]), key=lambda t: (abs(t[0]) + abs(t[1]), freqs[t])))
    orders, partial, missing = _figures(method, amp, ref, max_order)
    unmeasured = []
    for t in missing:
        f = freqs.get(t, t[0] * f1 + t[1] * f2)
        why = ("too close to another component" if t in kept
               else f"above {TOP_FRACTION:g} of the sample rate" if f > top else f"below {LOWEST_HZ:g} Hz")
        unmeasured.append(f"{_label(*t)} at {quantity(f, 'Hz', 5)} ({why})")
    if unmeasured:
        warnings.append(BenchWarning("outside-band", "cannot be measured: " + "; ".join(unmeasured) + (
            f"; so {', '.join(_order_name(method, k) for k in partial)} {'is' if len(partial) == 1 else 'are'} "
            "partial (the products there are, only)" if partial else "")))
    if not orders:
        raise BenchkitError(f"none of the method's products lies inside the record's band (below {quantity(top, 'Hz', 5)})")
    total = math.sqrt(sum(v * v for v in orders.values()))
    valid = not clipped
    if floor_amp and total * ref < floor_amp * 10 ** (FLOOR_MARGIN_DB / 20):
        warnings.append(BenchWarning("below-noise", f"every product lies within {FLOOR_MARGIN_DB:g} dB of the noise floor: the IMD is at most "
                        "what is shown"))
    trace = None
    if spectrum:
        f = np.arange(pw.size) * sample_rate / n
        trace = (f, units.db_from_power_ratio(np.maximum(pw, 1e-30)))
    # type A: a read's noise, E|e|^2 = the floor's (raw) bin power times what the read makes of it
    u_amp = {t: floor_amp / sp.sine_amplitude_scale(n) * math.sqrt(float(gain[t]) / 2.0) for t in clear}
    u_block = _uncertainty(method, amp, u_amp, ref, orders, products, max_order, floor_amp)
    return ImdResult(method, float(sample_rate), n, f1, f2, a1, a2, products, orders, total,
                     float(units.db_from_ratio(max(floor_amp, 1e-300) / ref)), peak, clipped, valid, tuple(warnings),
                     volts_per_fs, scale_source, load_ohms, trace, tuple(partial), tuple(unmeasured), u_block)


def _uncertainty(method: str, amp: dict, u_amp: dict, ref: float, orders: dict, products: tuple,
                 max_order: int, floor_amp: float) -> dict:
    """The uncertainty block: each read's type A (u(A) = sqrt(E|e|^2 / 2)),
    through the sums and the reference (JCGM 100 5.1.2). An order with a
    product at the floor is a bound (its read is mostly noise), the total
    one when every order is."""
    u_ref = u_amp[(0, 1)] if method == "modulation" else math.hypot(u_amp[(1, 0)], u_amp[(0, 1)])
    at_floor = {(p.m, p.n) for p in products if p.at_floor}
    out = ua.Collector()
    for key, t in (("f1_dbfs", (1, 0)), ("f2_dbfs", (0, 1))):
        out.put(key, ua.Budget.of(noise=ua.db_from_rel(u_amp[t] / amp[t])))
    rel = {}
    for k, terms in _needs(method, max_order).items():
        if k not in orders:
            continue
        got = [t for t in terms if t in amp]
        u_sum = math.sqrt(sum(u_amp[t] ** 2 for t in got))
        rel[k] = math.hypot(u_sum / (orders[k] * ref), u_ref / ref) if orders[k] > 0 else math.inf
        if any(t in at_floor for t in got) or not math.isfinite(rel[k]):
            out.bound(f"orders.{k}.db", f"orders.{k}.pct")
        else:
            out.put(f"orders.{k}.db", ua.Budget.of(noise=rel[k]), ua.DB_PER_REL)
            out.put(f"orders.{k}.pct", ua.Budget.of(noise=rel[k]), 100.0 * orders[k])
    total = math.sqrt(sum(v * v for v in orders.values()))
    heard = [k for k in rel if f"orders.{k}.db" in out.standard]
    if heard and total > 0:
        # d total / d order_k = order_k / total
        u_total = math.sqrt(sum((orders[k] ** 2 / total * rel[k]) ** 2 for k in rel if math.isfinite(rel[k]))) / total
        out.put("imd_db", ua.Budget.of(noise=u_total), ua.DB_PER_REL)
        out.put("imd_pct", ua.Budget.of(noise=u_total), 100.0 * total)
    else:
        out.bound("imd_db", "imd_pct")
    out.put_list("products.level_db", [None if p.at_floor or p.amplitude_fs <= 0 else ua.Budget.of(
        noise=ua.db_from_rel(math.hypot(u_amp[(p.m, p.n)] / p.amplitude_fs, u_ref / ref))) for p in products])
    return out.block()


def _needs(method: str, max_order: int) -> dict:
    """The products (m, n) each order of the method's figure is made of."""
    if method == "modulation":
        return {k + 1: [(-k, 1), (k, 1)] for k in range(1, max_order)}
    return {2: [(-1, 1)], 3: [(2, -1), (-1, 2)]}


def _order_name(method: str, k: int) -> str:
    return f"d{k}" if method == "difference" else f"the order-{k} sidebands"


def _figures(method: str, amp: dict, ref: float, max_order: int) -> tuple[dict, list[int], list[tuple[int, int]]]:
    """The method's distortion of each order (ratios: the products of the
    order summed), the orders with a product that could not be read
    (partial), and the products missing."""
    out, partial, missing = {}, [], []
    for k, terms in _needs(method, max_order).items():
        got = [amp[t] for t in terms if t in amp]
        missing += [t for t in terms if t not in amp]
        if got:
            out[k] = float(sum(got)) / ref
            if len(got) < len(terms):
                partial.append(k)
    return out, partial, missing


def imd_figures(doc: dict) -> list[Figure]:
    steps = [(i, s) for i, s in enumerate(doc.get("steps") or [])
             if isinstance(s, dict) and finite(s.get("drive_dbfs")) is not None]
    out = []
    for i, s in steps:
        at, key = f"drive {s['drive_dbfs']:g} dBFS", f"@{s['drive_dbfs']:+g}dBFS"
        out.append(Figure(f"imd_db{key}", "IMD", finite(s.get("imd_db")), "dB", "lower", at=at).of(doc, "steps.imd_db", i))
        for order, o in sorted((s.get("orders") or {}).items()):
            out.append(Figure(f"imd{order}_db{key}", f"IMD order {order}", finite((o or {}).get("db")), "dB", "lower",
                              at=at).of(doc, f"steps.orders.{order}.db", i))
    valid = [(i, s) for i, s in steps if s.get("valid", True) and finite(s.get("imd_db")) is not None]
    if valid:
        i, top = max(valid, key=lambda p: p[1]["drive_dbfs"])
        out.append(Figure("imd_db", "IMD at the top valid step", finite(top["imd_db"]), "dB", "lower",
                          at=f"drive {top['drive_dbfs']:g} dBFS", headline=True).of(doc, "steps.imd_db", i))
    return out
