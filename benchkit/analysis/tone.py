"""Analysis of a steady tone: fundamental, harmonics, THD, THD+N, noise.

Method, in order (every figure is relative to the fitted fundamental):

1. A windowed FFT of the record finds the strongest line; parabolic
   interpolation of the log spectrum places it within a few hundredths of a
   bin.
2. A least-squares fit of an offset, the fundamental and its harmonics up to
   order 10 (:func:`benchkit.analysis.sinefit.fit_tone`, IEEE Std 1057/1241)
   refines the frequency and gives their amplitudes and phases.
3. The residual is the record less the fitted offset and fundamental: a
   perfect digital notch. Its windowed FFT, limited to the measurement band
   (AES17: 20 Hz to 20 kHz by default), gives THD+N; harmonics above order 10
   are read from that FFT at their exact frequencies; the noise is the band
   power of the residual away from every harmonic.

All levels are in full-scale units (FS = sample value 1.0); volts follow from
a scale in volts peak per FS when one is given.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np

# scipy is imported in the functions that use it: it is slow to load, and the
# command line (which reads this module) starts without it

from benchkit.units import quantity
from benchkit import units
from benchkit.analysis import one_channel, refuse_non_finite
from benchkit.analysis import spectrum as sp
from benchkit.analysis.sinefit import RecordLayout, fit_tone
from benchkit.errors import BenchWarning, BenchkitError, NoToneError
from benchkit.analysis.compare import Figure, finite
from benchkit.analysis.documents import Conditions, document
from benchkit.analysis import uncertainty as ua
from benchkit.analysis.uncertainty import Chain

DEFAULT_BAND_HZ = (20.0, 20000.0)
#: Harmonic orders fitted jointly with the fundamental; higher ones are read
#: from the residual spectrum.
FIT_ORDERS = 10
#: A record must hold at least this many periods of the fundamental.
MIN_PERIODS = 5
#: The strongest line must stand this far above the median spectrum level.
MIN_TONE_PROMINENCE_DB = 30.0
#: Samples at or above this fraction of full scale may be clipped ones.
CLIP_LEVEL_FS = 0.99
#: Consecutive equal samples at the clip level that mark clipping ...
CLIP_RUN = 3
#: ... unless the waveform falls off beside them by no more than this many
#: quantisation steps over the run's length (a slow sine's rounded peak:
#: a parabola falls 9 times its plateau's depth over one plateau more).
PLATEAU_DROP_CODES = 12.0
#: Harmonic power below this fraction of the noise power reads "below noise".
_BURIED_RATIO = 1e-2
#: A harmonic counts (in THD, in the profile) when its power stands at least
#: this far over the local noise floor: pure noise reads that high once in
#: e^10, about 22000 reads (the power of complex Gaussian noise in one read is
#: exponential). With many harmonics the threshold rises to ln(K / odds)
#: times the floor, so that noise alone passes any of K with these odds (the
#: floor is itself an estimate, so the odds met are somewhat worse).
HARMONIC_OVER_FLOOR_DB = 10.0
FALSE_MARK_ODDS = 1e-3
#: The noise floor near a harmonic is the median of this many noise bins.
FLOOR_BINS = 64
#: Below this ratio to the fundamental (-240 dBc) a harmonic is the
#: arithmetic's round-off, not a reading.
ROUNDOFF_DBC_RATIO = 1e-12
#: With no harmonic over the noise, THD is given as a bound: the root-sum
#: of the threshold over orders 2 to this.
BOUND_ORDERS = 10

SCALE_SOURCES = ("none", "profile", "simulation", "given")
METHOD = (
    "least-squares fit of offset, fundamental and harmonics to order {orders} "
    "(IEEE 1057/1241); residual = record less offset and fundamental; "
    "band power from a windowed FFT; higher harmonics read at their exact frequency"
)


@dataclass(frozen=True)
class Harmonic:
    """One harmonic of the fundamental.

    ``phase_deg`` is ``phi_k - k phi_1`` (cosine reference), wrapped to
    [-180, 180): it does not change when the capture is shifted in time.
    ``method`` is "fit" (joint least-squares fit) or "spectrum" (read from
    the residual spectrum).
    """

    order: int
    freq_hz: float
    amplitude_fs: float
    level_dbc: float
    level_dbfs: float
    phase_deg: float
    method: str
    #: stands HARMONIC_OVER_FLOOR_DB over the local noise floor (else it
    #: cannot be told from noise, and THD and the profile leave it out)
    above_noise: bool = True

    def to_dict(self, volts_per_fs: float | None = None) -> dict:
        d = {
            "order": self.order,
            "freq_hz": self.freq_hz,
            "level_dbc": self.level_dbc,
            "level_dbfs": self.level_dbfs,
            "phase_deg": self.phase_deg,
            "method": self.method,
            "above_noise": self.above_noise,
        }
        if volts_per_fs is not None:
            d["level_vrms"] = units.vrms_from_vpk(self.amplitude_fs * volts_per_fs)
        return d


@dataclass(frozen=True)
class ToneTraces:
    """Arrays for the report plots (not part of the JSON result).

    ``spectrum_dbfs`` is the level of a sine at each bin in dBFS (power
    averaged over blocks when averaging); ``residual_fs`` is the residual,
    limited to the measurement band, over two periods of the fundamental
    starting at a positive-going zero crossing; ``fundamental_fs`` is the
    fitted fundamental over the same span.
    """

    freq_hz: np.ndarray
    spectrum_dbfs: np.ndarray
    time_s: np.ndarray
    residual_fs: np.ndarray
    fundamental_fs: np.ndarray


@dataclass(frozen=True)
class ToneResult:
    """The figures of one tone analysis, with the conditions they hold under.

    Levels are in FS units (peak amplitudes for sines, RMS for noise);
    ratios are relative to the fundamental.
    """

    sample_rate_hz: float
    n_samples: int
    fundamental_hz: float
    fundamental_fs: float
    fundamental_phase_deg: float
    harmonics: tuple[Harmonic, ...]
    thd_ratio: float
    thdn_ratio: float
    noise_rms_fs: float
    dc_fs: float
    peak_fs: float
    rms_fs: float
    crest_factor: float
    bandwidth_hz: tuple[float, float]
    clipped: bool
    valid: bool
    warnings: tuple[str, ...]
    harmonic_profile: str
    averages: int
    fit_iterations: int
    fitted_orders: int
    scale_source: str = "none"
    volts_per_fs: float | None = None
    load_ohms: float | None = None
    traces: ToneTraces | None = field(default=None, compare=False, repr=False)
    #: where (s) ``check_dropouts`` found gaps or clicks
    dropouts_s: tuple[float, ...] = ()
    #: no harmonic stands over the noise: ``thd_ratio`` is a bound, not a reading
    thd_upper_bound: bool = False
    #: the figures' standard uncertainties (benchkit.analysis.uncertainty.block)
    uncertainty: dict | None = field(default=None, compare=False)
    #: the chain's type-B contributions it was analysed with (None: none stated)
    chain: Chain | None = field(default=None, compare=False, repr=False)

    # --- derived figures -------------------------------------------------
    @property
    def duration_s(self) -> float:
        return self.n_samples / self.sample_rate_hz

    @property
    def fundamental_dbfs(self) -> float:
        return units.dbfs_from_peak(self.fundamental_fs)

    @property
    def thd_pct(self) -> float:
        return units.pct_from_ratio(self.thd_ratio)

    @property
    def thd_db(self) -> float:
        return units.db_from_ratio(self.thd_ratio)

    @property
    def thdn_pct(self) -> float:
        return units.pct_from_ratio(self.thdn_ratio)

    @property
    def thdn_db(self) -> float:
        return units.db_from_ratio(self.thdn_ratio)

    @property
    def sinad_db(self) -> float:
        return -self.thdn_db

    @property
    def residual_dbfs(self) -> float:
        """The level of what is left without the fundamental (THD+N's numerator), dBFS."""
        return self.fundamental_dbfs + self.thdn_db

    @property
    def noise_dbfs(self) -> float:
        return units.dbfs_from_rms(self.noise_rms_fs)

    @property
    def level_rel_u(self) -> float | None:
        """The fundamental amplitude's relative standard uncertainty, type A
        (None: not known)."""
        u = ((self.uncertainty or {}).get("standard") or {}).get("fundamental_dbfs")
        return None if u is None else ua.rel_from_db(u)

    @property
    def fundamental_vrms(self) -> float | None:
        if self.volts_per_fs is None:
            return None
        return units.vrms_from_vpk(self.fundamental_fs * self.volts_per_fs)

    @property
    def noise_vrms(self) -> float | None:
        return None if self.volts_per_fs is None else self.noise_rms_fs * self.volts_per_fs

    @property
    def power_w(self) -> float | None:
        v = self.fundamental_vrms
        if v is None or self.load_ohms is None:
            return None
        return units.watts_from_vrms(v, self.load_ohms)

    def to_dict(self) -> dict:
        """The JSON layout documented in docs/results-json.md (kind "tone")."""
        d = {
            "sample_rate_hz": self.sample_rate_hz,
            "n_samples": self.n_samples,
            "duration_s": self.duration_s,
            "fundamental_hz": self.fundamental_hz,
            "fundamental_dbfs": self.fundamental_dbfs,
            "fundamental_phase_deg": self.fundamental_phase_deg,
            "thd_pct": self.thd_pct,
            "thd_db": self.thd_db,
            "thd_upper_bound": self.thd_upper_bound,
            "thdn_pct": self.thdn_pct,
            "thdn_db": self.thdn_db,
            "sinad_db": self.sinad_db,
            "noise_dbfs": self.noise_dbfs,
            "dc_fs": self.dc_fs,
            "peak_fs": self.peak_fs,
            "crest_factor": self.crest_factor,
            "bandwidth_hz": list(self.bandwidth_hz),
            "harmonics": [h.to_dict(self.volts_per_fs) for h in self.harmonics],
            "harmonic_profile": self.harmonic_profile,
            "clipped": self.clipped,
            "valid": self.valid,
            "warnings": list(self.warnings),
            "scale_source": self.scale_source,
        }
        if self.volts_per_fs is not None:
            d["fundamental_vrms"] = self.fundamental_vrms
            d["noise_vrms"] = self.noise_vrms
        if self.power_w is not None:
            d["power_w"] = self.power_w
        if self.uncertainty is not None:
            d["uncertainty"] = self.uncertainty
        return document("tone", d, self.conditions())

    def conditions(self) -> Conditions:
        """What this tone was measured under."""
        return Conditions(self.sample_rate_hz, tuple(self.bandwidth_hz), sp.WINDOW_NAME,
                          METHOD.format(orders=self.fitted_orders), self.averages, self.scale_source, self.volts_per_fs,
                          self.load_ohms, more={"fit_iterations": self.fit_iterations})


# --- internals ---------------------------------------------------------------


@dataclass
class _Block:
    freq_hz: float
    amp1: float
    phase1: float
    offset: float
    orders: np.ndarray  # harmonic orders 2..K in the band
    amps: np.ndarray  # their peak amplitudes
    floor2: np.ndarray  # the mean square amplitude noise alone reads at each (nan: unknown)
    phases: np.ndarray  # their phases phi_k (rad)
    methods: list[str]
    res_power: float  # residual mean square in the band
    noise_power: float
    iterations: int
    fitted_orders: int
    floor1: float = math.nan  # the fundamental's floor2
    band_bins: int = 0  # the band's bins (THD+N's band power)
    noise_bins: int = 0  # the bins the noise was read from (0: from the residual less the harmonics)
    energy: float = 0.0  # sum x^2 of its samples
    total: float = 0.0  # sum x
    spec_power: np.ndarray | None = None
    residual: np.ndarray | None = None
    fund_wave: np.ndarray | None = None
    dropouts_s: list[float] = field(default_factory=list)


def _find_tone(x: np.ndarray, sample_rate: float, hint_hz: float | None,
               mean: float) -> tuple[float, complex, np.ndarray, np.ndarray]:
    """Fundamental from the windowed spectrum: fractional bin, complex
    amplitude ``A e^{j phi}`` there, the spectrum and its power (``mean``:
    the record's mean)."""
    n = x.size
    # no offset removal needed: the window puts a DC offset >100 dB down by
    # the first bin searched
    # (both in per-thread buffers: _analyse_block is done with them before
    # the next record; the report's copy of the power is made there)
    spec = sp.windowed_rfft(x, scratch=True)
    power = sp.scratch_power(spec)
    kmin, kmax = MIN_PERIODS + 1, n // 2 - sp.MAIN_LOBE_BINS - 1
    if kmax <= kmin:
        raise BenchkitError(f"the record is too short to analyse ({n} samples)")
    if hint_hz is not None:
        centre = hint_hz * n / sample_rate
        span = max(5.0, 0.02 * centre)
        lo, hi = max(kmin, int(centre - span)), min(kmax, int(math.ceil(centre + span)))
        if lo >= hi:
            raise BenchkitError(
                f"the given fundamental {hint_hz:g} Hz cannot be analysed in this record "
                f"(needs at least {MIN_PERIODS} periods and must lie below {sample_rate / 2:g} Hz)"
            )
    else:
        lo, hi = kmin, kmax
    peak = lo + int(np.argmax(power[lo:hi]))
    if hint_hz is None:
        # a stronger line below the search range means a tone with too few
        # periods in the record; take the offset out of those bins first
        # (the window's DFT at integer bins is a_0 N, -a_1 N/2, a_2 N/2, ...)
        low = spec[1:kmin].copy()
        coeffs = sp.WINDOW_COEFFS
        for k in range(1, min(len(coeffs), kmin)):
            low[k - 1] -= mean * (-1) ** k * coeffs[k] * n / 2.0
        if np.max(np.abs(low) ** 2) > power[peak]:
            raise BenchkitError(
                f"the record is too short for its tone: the strongest line lies below "
                f"{quantity(kmin * sample_rate / n, 'Hz', 4)}, with fewer than {MIN_PERIODS} periods in "
                f"the {quantity(n / sample_rate, 's', 4)} record"
            )
    # median level from ~2000 bins spread over the spectrum: as good a floor
    floor = float(np.median(power[kmin:kmax:max(1, (kmax - kmin) // 2048)]))
    if floor > 0 and power[peak] < floor * 10 ** (MIN_TONE_PROMINENCE_DB / 10):
        where = f" near {hint_hz:g} Hz" if hint_hz is not None else ""
        raise NoToneError(
            f"no tone found{where}: the strongest line stands only "
            f"{units.db_from_power_ratio(power[peak] / floor):.1f} dB above the median spectrum level "
            f"(needs {MIN_TONE_PROMINENCE_DB:g} dB)"
        )
    nu = sp.refine_peak(spec, peak, n)
    return nu, sp.peak_amplitude(spec, peak, nu, n), spec, power


@lru_cache(maxsize=8)
def _layout(n: int) -> RecordLayout:
    """The fit's index layout of a record of ``n`` samples, kept for the next one."""
    return RecordLayout(n)


def _harmonic_orders(f0: float, sample_rate: float, n: int, hi_hz: float, guard_bins: float = sp.MAIN_LOBE_BINS + 1) -> np.ndarray:
    """Orders 2..K below ``hi_hz`` and at least ``guard_bins`` clear of fs/2."""
    limit = min(hi_hz, sample_rate / 2.0 - guard_bins * sample_rate / n)
    kmax = int(math.floor(limit / f0 * (1 + 1e-9)))
    return np.arange(2, kmax + 1) if kmax >= 2 else np.zeros(0, dtype=int)


def _analyse_block(
    x: np.ndarray,
    sample_rate: float,
    band: tuple[float, float],
    hint_hz: float | None,
    fit_orders: int,
    keep: bool,
    dropouts: bool = False,
) -> _Block:
    n = x.size
    energy, total = float(x @ x), float(np.sum(x))
    nu0, amp0, spec, power = _find_tone(x, sample_rate, hint_hz, total / n)
    f_start = nu0 * sample_rate / n
    # the fit models the signal, harmonics above the band included (they
    # would bias the fundamental otherwise); the band decides what is reported
    below_nyquist = _harmonic_orders(f_start, sample_rate, n, sample_rate / 2.0, guard_bins=2.0)
    k_fit = max(1, min(fit_orders, int(below_nyquist[-1]) if below_nyquist.size else 1))
    layout = _layout(n)
    fit = fit_tone(x, layout, nu0 / n, k_fit, start=amp0, energy=energy)
    if abs(fit.cycles * n - nu0) > 1.5:
        raise BenchkitError("the sine fit did not settle on the tone found in the spectrum; give --fundamental")
    f0 = fit.cycles * sample_rate
    if f0 * n / sample_rate < MIN_PERIODS:
        raise BenchkitError(
            f"the record holds only {f0 * n / sample_rate:.1f} periods of {quantity(f0, 'Hz', 4)}; "
            f"at least {MIN_PERIODS} are needed"
        )
    orders = _harmonic_orders(f0, sample_rate, n, band[1])
    orders = orders[orders * f0 >= band[0]]  # one band rule: THD and THD+N count the same harmonics

    # the residual's windowed spectrum: the record's, less the fitted offset
    # and fundamental (exact kernel), which spares a second FFT
    amp1 = complex(float(fit.cos[0]), -float(fit.sin[0]))  # A e^{j phi}
    # (in place: the record's own spectrum is not needed again; its power,
    # where the report keeps it, is copied first)
    spec_power = power.copy() if keep else None
    rspec = sp.remove_tone(spec, n, fit.cycles * n, amp1, fit.offset, out=spec)
    rpow = power  # the residual's power: the record's, but where the tone came out
    for changed in sp.removal_bins(n, fit.cycles * n, rspec.size):
        rpow[changed] = sp.power(rspec[changed])
    in_band = sp.band_bins(n, sample_rate, *band)
    pscale = sp.power_scale(n)
    res_power = pscale * float(np.sum(rpow[in_band]))
    # a harmonic whose main lobe straddles a band edge would count in part:
    # its lobe's bins inside the band are taken out, and its whole power put
    # back below (when it counts, lo <= k f0 <= hi)
    straddling, cut = _straddling(fit.cycles * n, in_band, rspec.size)
    if straddling.size:
        res_power = max(res_power - pscale * float(np.sum(rpow[cut])), 0.0)

    amp_fit, ph_fit = fit.amplitude(), fit.phase_rad()
    amps = np.empty(orders.size)
    phases = np.empty(orders.size)
    from_fit = orders <= k_fit
    amps[from_fit] = amp_fit[orders[from_fit] - 1]
    phases[from_fit] = ph_fit[orders[from_fit] - 1]
    if np.any(~from_fit):
        z = sp.read_components(rspec, n, orders[~from_fit] * fit.cycles * n)
        amps[~from_fit] = np.abs(z)
        phases[~from_fit] = np.angle(z)
    methods = ["fit" if f else "spectrum" for f in from_fit]

    if straddling.size:
        res_power += 0.5 * float(np.sum(amps[np.isin(orders, straddling)] ** 2))
    # (the fundamental's floor too: its amplitude's type-A uncertainty)
    floors = noise_floor_amp2(rspec, n, fit.cycles * n, np.r_[1, orders], np.r_[True, from_fit])
    floor1, floor2 = float(floors[0]), floors[1:]
    heard = above_noise(amps, floor2)
    noise_power, noise_bins = _noise_power(rpow, in_band, fit.cycles * n, orders[heard], pscale)
    if noise_power is None:
        noise_power = max(res_power - 0.5 * float(np.sum(amps[heard] ** 2)), 0.0)

    block = _Block(
        freq_hz=f0,
        amp1=float(amp_fit[0]),
        phase1=float(ph_fit[0]),
        offset=fit.offset,
        orders=orders,
        amps=amps,
        floor2=floor2,
        phases=phases,
        methods=methods,
        res_power=res_power,
        noise_power=noise_power,
        iterations=fit.iterations,
        fitted_orders=k_fit,
        floor1=floor1,
        band_bins=in_band.stop - in_band.start,
        noise_bins=noise_bins,
        energy=energy,
        total=total,
    )
    if keep or dropouts:
        fund = layout.sine(fit.cycles, float(fit.cos[0]), float(fit.sin[0]))
        residual = x - fit.offset - fund
        if dropouts:
            block.dropouts_s = find_dropouts(x, residual, sample_rate, f0, float(amp_fit[0]))
        if keep:
            block.spec_power = spec_power
            block.residual = band_limited(residual, sample_rate, band)
            block.fund_wave = fund
    return block


def _straddling(nu1: float, in_band: slice, size: int) -> tuple[np.ndarray, np.ndarray]:
    """The harmonic orders whose main lobe (centre +- MAIN_LOBE_BINS + 1)
    crosses an edge of the band's bins, and a mask of their bins inside it
    (each bin once, where close lobes overlap)."""
    lobe = sp.MAIN_LOBE_BINS + 1
    k = np.arange(2, int((size - 1 + lobe) // nu1) + 1)
    lo, hi = np.ceil(k * nu1 - lobe).astype(int), np.floor(k * nu1 + lobe).astype(int) + 1  # [lo, hi)
    start, stop = in_band.start, in_band.stop
    cross = ((lo < start) & (hi > start)) | ((lo < stop) & (hi > stop))
    mask = np.zeros(size, dtype=bool)
    for a, b in zip(lo[cross], hi[cross]):
        mask[max(a, start) : min(b, stop)] = True
    return k[cross], mask


def noise_floor_amp2(rspec: np.ndarray, n: int, nu1: float, orders: np.ndarray,
                     fitted: np.ndarray | None = None) -> np.ndarray:
    """The mean square amplitude that noise alone gives the read of each
    harmonic (:func:`benchkit.analysis.spectrum.read_components`): the
    median power of the FLOOR_BINS noise bins nearest the harmonic (bins
    clear of the main lobes of the fundamental and every harmonic), over
    ln 2 (the median of an exponential variable, the power of complex
    Gaussian noise in one bin; the median resists a stray line), times what
    the read makes of white noise against one bin
    (:func:`benchkit.analysis.spectrum.read_noise_gain`; for the orders
    ``fitted`` jointly with the fundamental, what the least-squares fit
    makes of it, :func:`benchkit.analysis.spectrum.fit_noise_gain`). NaN
    where the harmonics lie too close together to leave noise bins
    between them."""
    out = np.full(orders.size, np.nan)
    lobe = sp.MAIN_LOBE_BINS + 1
    if orders.size == 0 or nu1 < 2 * lobe + 2:
        return out
    size = rspec.size
    starts, lengths = _noise_gaps(size, nu1, int(orders[-1]) + 1, lobe)
    ends = np.cumsum(lengths)  # noise bins up to the end of each gap
    total = int(ends[-1])
    if total < 5:
        return out
    width = min(FLOOR_BINS, total)
    at = orders * nu1
    # the noise bins below each harmonic (below ceil(at): the bins are whole)
    # (one bisection a harmonic: the run at or before ceil(at), the runs
    # below it whole and its own part)
    c = np.ceil(at)
    run = np.maximum(np.searchsorted(starts, c, side="right") - 1, 0)
    below = ((ends - lengths)[run] + np.clip(c - starts[run], 0, lengths[run])).astype(np.int64)
    first = np.clip(below - width // 2, 0, total - width)
    pools = sp.power(rspec[_noise_bin(first[:, None] + np.arange(width)[None, :], starts, lengths, ends)])
    # the read's gain varies by under 0.1 % with the fraction of a bin: one will do
    gain = np.full(orders.size, _read_gain(n, int(round(float(at[0]) * 64))))
    if fitted is not None:
        gain[fitted] = sp.fit_noise_gain(n)
    return _row_medians(pools) / math.log(2.0) * gain


def _row_medians(a: np.ndarray) -> np.ndarray:
    """``np.median(a, axis=1)``, by one partition of the rows."""
    k = a.shape[1] // 2
    if a.shape[1] % 2:
        return np.partition(a, k, axis=1)[:, k]
    part = np.partition(a, (k - 1, k), axis=1)
    return (part[:, k - 1] + part[:, k]) / 2.0


def _noise_gaps(size: int, nu1: float, count: int, lobe: int) -> tuple[np.ndarray, np.ndarray]:
    """The noise bins of a spectrum of ``size`` bins as runs (first bin,
    length): every bin but DC with the offset's lobe (bins 0..lobe) and the
    main lobe (centre +- lobe) of each of the first ``count`` multiples of
    ``nu1``; a lobe reaching past the last bin takes that bin. The runs lie
    between the lobes, so the i-th noise bin is found without listing them
    all."""
    centres = np.rint(np.arange(1, count + 1) * nu1).astype(np.int64)
    lo = np.minimum(np.concatenate([[0], centres - lobe]), size - 1)
    hi = np.minimum(np.concatenate([[lobe], centres + lobe]), size - 1)
    starts = np.maximum.accumulate(hi) + 1  # a run after each lobe, up to the next one
    stops = np.concatenate([lo[1:], [size]])
    return starts, np.maximum(stops - starts, 0)


def _noise_bin(rank: np.ndarray, starts: np.ndarray, lengths: np.ndarray, ends: np.ndarray) -> np.ndarray:
    """The noise bin of each ``rank`` (0: the lowest) in the runs of :func:`_noise_gaps`."""
    run = np.searchsorted(ends, rank, side="right")
    return starts[run] + rank - (ends[run] - lengths[run])


@lru_cache(maxsize=64)
def _read_gain(n: int, sixty_fourths: int) -> float:
    """:func:`benchkit.analysis.spectrum.read_noise_gain` at a bin given to
    1/64 (closer than the gain moves by), kept for the next record."""
    return float(sp.read_noise_gain(n, np.array([sixty_fourths / 64.0]), n // 2 + 1)[0])


def over_floor_ratio(k: int) -> float:
    """The power ratio over its noise floor a harmonic must reach, of ``k``
    harmonics tested (see HARMONIC_OVER_FLOOR_DB)."""
    return max(10 ** (HARMONIC_OVER_FLOOR_DB / 10), math.log(max(k, 1) / FALSE_MARK_ODDS))


def above_noise(amps: np.ndarray, floor2: np.ndarray) -> np.ndarray:
    """Which harmonics stand over their local noise floor by
    :func:`over_floor_ratio` (all of them where the floor is unknown)."""
    known = np.isfinite(floor2)
    return ~known | (np.asarray(amps) ** 2 > np.where(known, floor2, 0.0) * over_floor_ratio(len(floor2)))


def _noise_power(rpow: np.ndarray, in_band: slice, nu1: float, orders: np.ndarray,
                 pscale: float) -> tuple[float | None, int]:
    """Band power of the residual away from the fundamental and every
    harmonic, scaled up to the whole band, and the number of bins it was
    read from; None when the harmonics leave too few bins to judge by."""
    keep = np.zeros(rpow.size, dtype=bool)
    keep[in_band] = True
    total = int(np.count_nonzero(keep))
    guard = np.arange(-sp.MAIN_LOBE_BINS - 1, sp.MAIN_LOBE_BINS + 2)
    centres = np.rint(np.concatenate([[1], orders]) * nu1).astype(int)
    keep[np.clip(np.add.outer(centres, guard), 0, keep.size - 1)] = False
    kept = int(np.count_nonzero(keep))
    if kept < 8 or kept < 0.2 * total:
        return None, 0
    return pscale * float(np.sum(rpow[keep])) * total / kept, kept


def find_dropouts(x: np.ndarray, residual: np.ndarray, sample_rate: float, f0: float, amp1: float) -> list[float]:
    """Times (s) where the capture breaks: a gap, a skipped or repeated
    block, a click.

    Two checks (common practice for spotting dropouts; the thresholds are
    this project's): blocks of two periods (at least 2 ms) whose residual
    RMS exceeds ten times the median block's and -60 dB re the fundamental;
    and chunks of at least 8 periods whose fundamental, projected at the
    fitted frequency, departs from the median chunk's in phase (0.02 rad) or
    level (2 %), as a skipped block does.
    """
    found = set()
    size = max(int(round(0.002 * sample_rate)), int(round(2 * sample_rate / f0)))
    nblk = residual.size // size
    if nblk >= 4:
        rms = np.sqrt(np.mean(residual[: nblk * size].reshape(nblk, size) ** 2, axis=1))
        limit = max(10.0 * float(np.median(rms)), 1e-3 * amp1 / math.sqrt(2))
        found.update(float(i * size / sample_rate) for i in np.flatnonzero(rms > limit))
    chunks = min(16, int(x.size * f0 / sample_rate // 8))
    if chunks >= 4:
        # whole periods a chunk, so the projection's image at -f0 cancels
        # (with a fraction of a period left over it moves each chunk's
        # phasor by up to 1/(4 pi periods): 1 % at 8 periods, a false alarm)
        step = int(round(math.floor(x.size / chunks * f0 / sample_rate) * sample_rate / f0))
        chunks = min(chunks, x.size // step)
        n = np.arange(chunks * step)
        ph = np.exp(-2j * np.pi * np.mod(f0 / sample_rate * n, 1.0))
        z = (x[: n.size] * ph).reshape(chunks, step).sum(axis=1) * (2.0 / step)
        ref = complex(np.median(z.real), np.median(z.imag))
        noise = float(np.sqrt(np.mean(residual**2))) / max(amp1 * math.sqrt(step / 2.0), 1e-300)
        off_phase = np.abs(np.angle(z / ref)) > max(0.02, 5 * noise)
        off_level = np.abs(np.abs(z) / abs(ref) - 1.0) > max(0.02, 5 * noise)
        found.update(float(i * step / sample_rate) for i in np.flatnonzero(off_phase | off_level))
    return sorted(found)


def band_limited(x: np.ndarray, sample_rate: float, band: tuple[float, float]) -> np.ndarray:
    """``x`` with everything outside ``band`` (Hz) removed (its FFT, cut)."""
    import scipy.fft
    spec = scipy.fft.rfft(x)
    keep = sp.band_bins(x.size, sample_rate, *band)
    spec[: keep.start] = 0.0
    spec[keep.stop :] = 0.0
    return scipy.fft.irfft(spec, x.size)


def detect_clipping(x: np.ndarray, full_scale: float = 1.0, peak: float | None = None) -> tuple[bool, str | None]:
    """Whether a capture shows clipping at the converter's full scale.

    Clipping shows as samples beyond full scale, or as runs of at least
    ``CLIP_RUN`` equal samples at or above ``CLIP_LEVEL_FS`` of it (a flat
    top; common practice) beside which the waveform falls off faster than
    a rounded smooth peak does (``PLATEAU_DROP_CODES``: a slow sine
    quantised to 16 bits rests on its top code for several samples). A
    stage that clips below the converter's full scale is distortion to be
    measured, not a clipped capture.

    Parameters
    ----------
    x : ndarray
    full_scale : float
    peak : float, optional
        ``max(abs(x))`` when already known.

    Returns
    -------
    clipped : bool
    reason : str or None
        A sentence for the warning.
    """
    if peak is None:
        peak = float(np.max(np.abs(x)))
    if peak < CLIP_LEVEL_FS * full_scale:
        return False, None
    a = np.abs(x)
    if peak > full_scale * (1.0 + 1e-9):
        over = int(np.count_nonzero(a > full_scale * (1.0 + 1e-9)))
        return True, f"{over} samples exceed full scale (peak {peak:.4f} FS): the capture is clipped"
    top = a >= peak - 1e-9 * full_scale
    flat = top[:-1] & top[1:] & (x[:-1] == x[1:])
    # runs of equal samples at the peak: where consecutive equal pairs start and stop
    edges = np.diff(np.concatenate([[0], flat.astype(np.int8), [0]]))
    starts, stops = np.flatnonzero(edges == 1), np.flatnonzero(edges == -1) + 1  # samples [start, stop)
    long = stops - starts >= CLIP_RUN
    if not long.any():
        return False, None
    # a slow sine's peak, quantised, rests on its top code for a few samples
    # too; beyond such a plateau it falls off as a parabola, by at most about
    # 9.5 codes over the plateau's own length (clipping: far more)
    near = np.unique(a[a >= CLIP_LEVEL_FS * peak])
    step = float(np.min(np.diff(near))) if near.size > 1 else 0.0
    flat_tops = 0
    for i, j in zip(starts[long], stops[long]):
        n = j - i
        beside = np.concatenate([a[max(0, i - n) : i], a[j : j + n]])
        drop = peak - float(np.min(beside)) if beside.size else math.inf
        flat_tops += not (step > 0 and drop <= PLATEAU_DROP_CODES * step)
    if flat_tops:
        return True, f"{flat_tops} flat tops at {peak:.4f} FS: the capture is clipped"
    return False, None


def classify_harmonics(orders: np.ndarray, amps: np.ndarray, noise_power: float) -> str:
    """A plain reading of the harmonic profile.

    Returns one of "even-order", "odd-order", "high-order-tail" (over 5 % of
    the harmonic power in orders 5 and up), "mixed", "below-noise" (common
    practice: a smooth asymmetric curve gives mostly H2, a symmetric one
    mostly H3, hard clipping or a sharp kink a long tail of high orders).
    """
    p = 0.5 * np.asarray(amps) ** 2
    total = float(np.sum(p))
    if total <= _BURIED_RATIO * noise_power or total == 0.0:
        return "below-noise"
    if float(np.sum(p[orders >= 5])) > 0.05 * total:
        return "high-order-tail"
    even = float(np.sum(p[orders % 2 == 0]))
    odd = total - even
    if even > 2.0 * odd:
        return "even-order"
    if odd > 2.0 * even:
        return "odd-order"
    return "mixed"


def _wrap_deg(rad: np.ndarray) -> np.ndarray:
    return (np.degrees(rad) + 180.0) % 360.0 - 180.0


def _resolve_band(bandwidth_hz, sample_rate: float, warnings: list[str]) -> tuple[float, float]:
    nyq = sample_rate / 2.0
    if bandwidth_hz is None:
        return 0.0, nyq
    lo, hi = (float(v) for v in bandwidth_hz)
    if not (0.0 <= lo < hi) or not math.isfinite(hi):
        raise BenchkitError(f"bandwidth must be LO:HI in Hz with 0 <= LO < HI, got {lo:g}:{hi:g}")
    if lo >= nyq:
        raise BenchkitError(f"bandwidth {lo:g}:{hi:g} Hz lies above half the sample rate ({nyq:g} Hz)")
    if hi > nyq:
        warnings.append(BenchWarning("outside-band", f"band upper edge {hi:g} Hz is above half the sample rate; using {nyq:g} Hz"))
        hi = nyq
    return lo, hi


def analyze_tone(
    samples,
    sample_rate: float,
    *,
    fundamental_hz: float | None = None,
    bandwidth_hz: tuple[float, float] | None = DEFAULT_BAND_HZ,
    averages: int = 1,
    volts_per_fs: float | None = None,
    scale_source: str | None = None,
    load_ohms: float | None = None,
    traces: bool = False,
    fit_orders: int = FIT_ORDERS,
    check_dropouts: bool = False,
    channel: int | None = None,
    chain: Chain | None = None,
) -> ToneResult:
    """Analyse a steady tone: frequency, level, harmonics, THD, THD+N, noise.

    Parameters
    ----------
    samples : array_like
        In FS units (1.0 = full scale): one channel, or frames x channels
        (``channel`` picks one).
    sample_rate : float
        In Hz.
    fundamental_hz : float, optional
        Where to look for the fundamental (within 2 % or 5 bins); by default
        the strongest line.
    bandwidth_hz : (lo, hi) or None
        Measurement band for THD+N, noise and harmonics; None is the full
        band, 0 to fs/2. Default 20 Hz to 20 kHz (AES17).
    averages : int
        Split the record into this many equal blocks, analyse each and
        power-average the figures.
    volts_per_fs : float, optional
        Volts peak at the measured point per FS; adds volts to the result.
    scale_source : str, optional
        Where ``volts_per_fs`` came from: "profile", "simulation" or "given"
        (default "given" when a scale is set, else "none").
    load_ohms : float, optional
        Load resistance; with a scale it adds the power into it.
    traces : bool
        Keep the arrays the report plots need (``result.traces``).
    fit_orders : int
        Harmonic orders fitted jointly with the fundamental.
    check_dropouts : bool
        Look for gaps and clicks in the capture (:func:`find_dropouts`);
        any found make the result not valid.
    channel : int, optional
        The channel of 2-D ``samples`` to analyse, from 1.
    chain : Chain, optional
        The type-B contributions of the chain (calibration, pad, the
        interface's flatness, the load) to the volts and watts; without
        one, their uncertainty is the data's alone.

    Returns
    -------
    ToneResult
        Figures in the keys of docs/results-json.md (``to_dict()``).

    Raises
    ------
    BenchkitError
        Empty, non-finite or silent input, no detectable tone, a record too
        short for the tone, or a fundamental outside the band.

    References
    ----------
    IEEE Std 1057-2017 and IEEE Std 1241-2010 (sine fitting; SINAD);
    AES17-2015 (dBFS, THD+N bandwidth).

    Examples
    --------
    A 1 kHz tone at half scale with 1 % second harmonic (-40 dBc):

    >>> import numpy as np, benchkit
    >>> t = np.arange(48000) / 48000
    >>> x = 0.5 * np.sin(2 * np.pi * 1000 * t) + 0.005 * np.sin(2 * np.pi * 2000 * t)
    >>> r = benchkit.analyze_tone(x, 48000)
    >>> round(r.fundamental_dbfs, 2), round(r.harmonics[0].level_dbc, 2), round(r.thd_pct, 3)
    (-6.02, -40.0, 1.0)
    """
    x = one_channel(samples, channel, "analyze_tone")
    if x.size == 0:
        raise BenchkitError("the capture holds no samples")
    xmax, xmin = float(np.max(x)), float(np.min(x))  # NaN if any sample is
    if not (math.isfinite(xmax) and math.isfinite(xmin)):
        refuse_non_finite(x)
    if not (sample_rate > 0 and math.isfinite(sample_rate)):
        raise BenchkitError(f"sample rate must be a positive number of Hz, got {sample_rate}")
    if xmax == xmin:
        raise BenchkitError(
            "the capture is silent (every sample is zero)" if xmax == 0 else "the capture is constant: no tone in it"
        )
    if averages < 1 or int(averages) != averages:
        raise BenchkitError(f"averages must be a whole number of blocks >= 1, got {averages}")
    if scale_source is None:
        scale_source = "none" if volts_per_fs is None else "given"
    if scale_source not in SCALE_SOURCES:
        raise BenchkitError(f"scale_source must be one of {', '.join(SCALE_SOURCES)}")
    if volts_per_fs is not None and not (volts_per_fs > 0 and math.isfinite(volts_per_fs)):
        raise BenchkitError(f"volts per FS must be a positive number, got {volts_per_fs}")
    if load_ohms is not None and not (load_ohms > 0 and math.isfinite(load_ohms)):
        raise BenchkitError(f"load must be a positive resistance in ohms, got {load_ohms}")

    warnings: list[str] = []
    band = _resolve_band(bandwidth_hz, sample_rate, warnings)
    clipped, reason = detect_clipping(x, peak=max(xmax, -xmin))
    if clipped:
        warnings.append(BenchWarning("input-clipped", reason + "; its figures are not valid"))

    nblk = x.size // int(averages)
    blocks = [
        _analyse_block(x[i * nblk : (i + 1) * nblk], sample_rate, band, fundamental_hz, fit_orders, traces, check_dropouts)
        for i in range(int(averages))
    ]
    f0 = float(_avg([b.freq_hz for b in blocks]))
    tol = 0.005 * f0
    if f0 > band[1] + tol or f0 < band[0] - tol:
        raise BenchkitError(
            f"the fundamental ({quantity(f0, 'Hz', 6)}) lies outside the measurement band "
            f"({band[0]:g} to {band[1]:g} Hz); widen it with --bandwidth"
        )
    first = blocks[0]
    nh = min(b.orders.size for b in blocks)
    orders = first.orders[:nh]
    p1 = float(_avg([b.amp1**2 for b in blocks]))
    amp1 = math.sqrt(p1)
    pk = _avg([b.amps[:nh] ** 2 for b in blocks]) if nh else np.zeros(0)
    amps = np.sqrt(pk)
    floor2 = _avg([b.floor2[:nh] for b in blocks]) if nh else np.zeros(0)
    heard = above_noise(amps, floor2) & (amps > ROUNDOFF_DBC_RATIO * amp1)
    rel = np.array([b.phases[:nh] - orders * b.phase1 for b in blocks])
    weights = np.array([b.amps[:nh] for b in blocks]) + 1e-300
    rel_phase = np.angle(np.sum(weights * np.exp(1j * rel), axis=0)) if nh else np.zeros(0)
    res_power = float(_avg([b.res_power for b in blocks]))
    noise_power = float(_avg([b.noise_power for b in blocks]))

    level_dbc = units.db_from_ratio(amps / amp1) if nh else []
    level_dbfs = units.dbfs_from_peak(amps) if nh else []
    phase_deg = _wrap_deg(rel_phase)
    harmonics = tuple(
        Harmonic(order=k, freq_hz=f, amplitude_fs=a, level_dbc=dbc, level_dbfs=dbfs, phase_deg=ph, method=m, above_noise=h)
        for k, f, a, dbc, dbfs, ph, m, h in zip(orders.tolist(), (orders * f0).tolist(), amps.tolist(),
                                                 np.asarray(level_dbc).tolist(), np.asarray(level_dbfs).tolist(),
                                                 phase_deg.tolist(), first.methods, heard.tolist())
    )
    thd_bound = False
    if harmonics and not np.isfinite(floor2).all():
        warnings.append(BenchWarning("crowded", "the harmonics lie too close together to judge them against the noise between them (a short "
                        "record for the tone): THD may hold noise"))
    if not harmonics:
        warnings.append(BenchWarning("outside-band", f"every harmonic of {quantity(f0, 'Hz', 6)} lies above the band (up to {band[1]:g} Hz): THD is not "
                        "defined and reads as zero"))
        thd = 0.0
    elif heard.any() or not np.isfinite(floor2[orders <= BOUND_ORDERS]).any():
        # (with no floor to judge by, every harmonic counts, as it reads)
        thd = math.sqrt(float(np.sum(pk[heard])) / p1)
    else:
        # nothing stands over the noise: THD is below what the first orders
        # could hide under it
        first_orders = (orders <= BOUND_ORDERS) & np.isfinite(floor2)
        thd = math.sqrt(float(np.sum(floor2[first_orders])) * over_floor_ratio(nh) / p1)
        thd_bound = True
        warnings.append(BenchWarning("below-noise", f"no harmonic stands clear of the noise: THD is an upper bound "
                        f"(orders 2 to {min(BOUND_ORDERS, int(orders[-1]))})"))

    gaps = [i * nblk / sample_rate + t for i, b in enumerate(blocks) for t in b.dropouts_s]
    if gaps:
        where = ", ".join(f"{t:.3f} s" for t in gaps[:5]) + (" ..." if len(gaps) > 5 else "")
        warnings.append(BenchWarning("dropout", f"the capture has dropouts or clicks (at {where}); its figures are not valid"))

    thdn = max(math.sqrt(res_power / (p1 / 2.0)), 0.0 if thd_bound else thd)
    u_block = _uncertainty(blocks, nblk, f0, amp1, orders, amps, floor2, heard, thd if not thd_bound and harmonics else None,
                           thdn, res_power, noise_power, sample_rate, volts_per_fs, load_ohms, chain)

    dc = float(_avg([b.offset for b in blocks]))
    # (one block spans the record: its sums are the record's)
    energy, total = (first.energy, first.total) if len(blocks) == 1 else (float(x @ x), float(np.sum(x)))
    mean_sq = energy / x.size
    ac_rms = math.sqrt(max(mean_sq - 2.0 * dc * (total / x.size) + dc * dc, 0.0))
    result_traces = _traces(blocks, sample_rate, nblk) if traces else None
    return ToneResult(
        sample_rate_hz=float(sample_rate),
        n_samples=int(x.size),
        fundamental_hz=f0,
        fundamental_fs=amp1,
        fundamental_phase_deg=float(_wrap_deg(first.phase1)),
        harmonics=harmonics,
        thd_ratio=thd,
        thd_upper_bound=thd_bound,
        # THD+N holds THD by definition: the residual in the band includes
        # every harmonic THD counts (a rounding of the reads apart)
        thdn_ratio=thdn,
        noise_rms_fs=math.sqrt(noise_power),
        dc_fs=dc,
        peak_fs=max(xmax, -xmin),
        rms_fs=math.sqrt(mean_sq),
        crest_factor=max(xmax - dc, dc - xmin) / ac_rms if ac_rms > 0 else 0.0,
        bandwidth_hz=band,
        clipped=clipped,
        valid=not clipped and not gaps,
        warnings=tuple(warnings),
        harmonic_profile=classify_harmonics(orders, np.where(heard, amps, 0.0), noise_power),
        averages=int(averages),
        fit_iterations=max(b.iterations for b in blocks),
        fitted_orders=first.fitted_orders,
        scale_source=scale_source,
        volts_per_fs=volts_per_fs,
        load_ohms=load_ohms,
        traces=result_traces,
        dropouts_s=tuple(gaps),
        uncertainty=u_block,
        chain=chain,
    )


def _avg(values: list):
    """The mean over the blocks of a figure or an array of them (one
    block's own, as it is)."""
    return values[0] if len(values) == 1 else np.mean(values, axis=0)


def _uncertainty(blocks: list[_Block], nblk: int, f0: float, amp1: float, orders: np.ndarray, amps: np.ndarray,
                 floor2: np.ndarray, heard: np.ndarray, thd: float | None, thdn: float, res_power: float,
                 noise_power: float, sample_rate: float, volts_per_fs: float | None, load_ohms: float | None,
                 chain: Chain | None) -> dict:
    """The result's uncertainty block (benchkit.analysis.uncertainty).

    Type A: an amplitude's from the noise its least-squares read takes in
    (the floor beside it, E|e|^2: u(A) = sqrt(E|e|^2 / 2), the Cramer-Rao
    bound 2 sigma^2 / N for white noise), the frequency's from the
    Cramer-Rao bound var(omega) = 12 / (SNR N^3), a band power's from its
    degrees of freedom, the harmonics' share of the residual from their
    reads' (u(A^2 / 2) = A u(A)); each over the blocks averaged. Type B:
    the chain's, on volts and watts only (ratios do not see the scale), and
    the interface's flatness between a harmonic and its fundamental."""
    nb = len(blocks)
    band_bins = int(_avg([b.band_bins for b in blocks]))
    # where no noise bins lie beside a read (harmonics crowded: a short record, a low tone), the
    # band's noise taken as white: a fitted read's E|e|^2 = 4 sigma^2 / N = 2 P_noise / (band bins)
    white = 2.0 * noise_power / max(band_bins, 1)
    floor1 = float(_avg([b.floor1 for b in blocks]))
    floor1 = floor1 if math.isfinite(floor1) else white
    floor2 = np.where(np.isfinite(floor2), floor2, white)
    rel1 = math.sqrt(max(floor1, 0.0) / 2.0 / nb) / amp1
    uk = np.sqrt(np.maximum(floor2, 0.0) / 2.0 / nb)
    out = ua.Collector()
    out.put("fundamental_dbfs", ua.Budget.of(noise=ua.db_from_rel(rel1)))
    out.put("fundamental_hz", ua.Budget.of(
        noise=sample_rate / (2 * math.pi) * math.sqrt(6.0 * floor1 / nb) / (amp1 * nblk)))
    known = heard & (amps > 0)
    flat = np.zeros(orders.size) if chain is None else np.array([chain.flatness_db(float(k) * f0, f0) for k in orders])
    rel_k = np.where(known, uk / np.where(known, amps, 1.0), np.nan)
    out.put_columns("harmonics.level_dbc", known, noise=ua.db_from_rel(np.hypot(rel_k, rel1)), flatness=flat)
    out.put_columns("harmonics.level_dbfs", known, noise=ua.db_from_rel(rel_k))
    harm_var = float(np.sum((amps[known] * uk[known]) ** 2))  # of their power A^2 / 2
    if thd is not None and thd > 0:
        s = 0.5 * float(np.sum(amps[known] ** 2))
        rel = 0.5 * math.hypot(math.sqrt(harm_var) / s, 2.0 * rel1) if s > 0 else 0.0
        share = 0.5 * amps[known] ** 2 / s if s > 0 else np.zeros(0)
        b = ua.Budget.of(noise=ua.db_from_rel(rel), flatness=float(np.sum(share * flat[known])))
        out.put("thd_db", b)
        out.put("thd_pct", b, 100.0 * thd * ua.rel_from_db(1.0))
    else:
        out.bound("thd_db", "thd_pct")
    # in the band's sum a line's cross term with the noise weighs as the window's bin correlation says
    cross = ua.bin_correlation(sp.WINDOW_COEFFS) * harm_var
    u_res = math.hypot(ua.band_power_rel(band_bins, sp.WINDOW_COEFFS, nb) * noise_power, math.sqrt(cross))
    rel_thdn = ua.Budget.of(noise=0.5 * math.hypot(u_res / res_power, 2.0 * rel1) if res_power > 0 else 0.0)
    for key in ("thdn_db", "sinad_db"):
        out.put(key, rel_thdn, ua.DB_PER_REL)
    out.put("thdn_pct", rel_thdn, 100.0 * thdn)
    kept = int(_avg([b.noise_bins or b.band_bins for b in blocks]))
    rel_noise = 0.5 * ua.band_power_rel(kept, sp.WINDOW_COEFFS, nb)  # of the RMS: half the power's
    out.put("noise_dbfs", ua.Budget.of(noise=ua.db_from_rel(rel_noise)))
    if volts_per_fs is not None:
        none = ua.Budget()
        vrms = units.vrms_from_vpk(amp1 * volts_per_fs)
        out.put("fundamental_vrms", ua.Budget.of(noise=rel1).plus(chain.volts(f0) if chain else none), vrms)
        out.put("noise_vrms", ua.Budget.of(noise=rel_noise).plus(chain.volts(None) if chain else none),
                math.sqrt(noise_power) * volts_per_fs)
        if load_ohms is not None:
            out.put("power_w", ua.Budget.of(noise=2.0 * rel1).plus(chain.watts(f0) if chain else none),
                    units.watts_from_vrms(vrms, load_ohms))
    return out.block()


def _traces(blocks: list[_Block], sample_rate: float, n: int) -> ToneTraces:
    first = blocks[0]
    power = _avg([b.spec_power for b in blocks])
    scale = sp.sine_amplitude_scale(n)
    freq = np.arange(power.size) * sample_rate / n
    spectrum_dbfs = units.db_from_ratio(np.sqrt(power) * scale)
    # two periods from the middle of the first block, from a rising zero crossing
    period = sample_rate / first.freq_hz
    mid = n // 2
    cycles = first.freq_hz / sample_rate
    phase_mid = (cycles * mid + first.phase1 / (2 * np.pi)) % 1.0  # of cos
    # cos(2 pi u) rises through zero at u = 0.75
    start = int(round(mid + ((0.75 - phase_mid) % 1.0) * period))
    stop = min(n, start + int(math.ceil(2 * period)) + 1)
    start = max(0, min(start, stop - 2))
    idx = np.arange(start, stop)
    return ToneTraces(
        freq_hz=freq,
        spectrum_dbfs=spectrum_dbfs,
        time_s=(idx - start) / sample_rate,
        residual_fs=first.residual[idx],
        fundamental_fs=first.fund_wave[idx],
    )


def step_figures(doc: dict) -> list[Figure]:
    steps = [(i, s) for i, s in enumerate(doc.get("steps") or []) if isinstance(s, dict)]
    out = []
    for i, s in steps:
        drive = finite(s.get("drive_dbfs"))
        if drive is None:
            continue
        at = f"drive {drive:g} dBFS"
        key = f"@{drive:+g}dBFS"
        out += [
            Figure(f"thdn_db{key}", "THD+N", finite(s.get("thdn_db")), "dB", "lower", at=at).of(doc, "steps.thdn_db", i),
            Figure(f"thd_db{key}", "THD", finite(s.get("thd_db")), "dB", "lower", at=at).of(doc, "steps.thd_db", i),
        ]
        for j, h in enumerate((s.get("harmonics") or [])[:2]):
            out.append(Figure(f"h{h['order']}_dbc{key}", f"H{h['order']}", finite(h.get("level_dbc")), "dBc", "lower",
                              at=at).of(doc, "steps.harmonics.level_dbc", i, j))
        out.append(Figure(f"noise_dbfs{key}", "noise", finite(s.get("noise_dbfs")), "dBFS", "lower",
                          at=at).of(doc, "steps.noise_dbfs", i))
        if finite(s.get("fundamental_vrms")) is not None:
            out.append(Figure(f"level_vrms{key}", "level", finite(s.get("fundamental_vrms")), "Vrms", None,
                              at=at).of(doc, "steps.fundamental_vrms", i))
        if finite(s.get("power_w")) is not None:
            out.append(Figure(f"power_w{key}", "power", finite(s.get("power_w")), "W", None,
                              at=at).of(doc, "steps.power_w", i))
    valid = [(i, s) for i, s in steps if s.get("valid", True) and finite(s.get("thdn_db")) is not None]
    if valid:
        i, top = max(valid, key=lambda p: p[1]["drive_dbfs"])
        out.append(Figure("thdn_db", "THD+N at the top valid step", finite(top["thdn_db"]), "dB", "lower",
                          at=f"drive {top['drive_dbfs']:g} dBFS", headline=True).of(doc, "steps.thdn_db", i))
        i, low = min(valid, key=lambda p: p[1]["drive_dbfs"])
        noise = "noise_vrms" if finite(low.get("noise_vrms")) is not None else "noise_dbfs"
        out.append(Figure(noise, "noise at the lowest step", finite(low.get(noise)), noise.rpartition("_")[2].replace(
            "vrms", "Vrms").replace("dbfs", "dBFS"), "lower", at=f"drive {low['drive_dbfs']:g} dBFS",
            headline=True).of(doc, f"steps.{noise}", i))
    return out


def _rel(u_db: float | None) -> float | None:
    return None if u_db is None else ua.rel_from_db(u_db)


def step_readings(doc: dict) -> list:
    """A stepped-tone result's step levels (FS), as output readings for an
    output impedance from two logged runs (:mod:`benchkit.analysis.zout`)."""
    from benchkit.analysis.zout import Reading

    return [Reading(float(s["fundamental_hz"]), complex(units.ratio_from_db(float(s["fundamental_dbfs"]))),
                    s.get("drive_dbfs"), bool(s.get("valid", True)),
                    rel_u=_rel(ua.lookup(doc, "steps.fundamental_dbfs", i)))
            for i, s in enumerate(doc.get("steps") or [])]
