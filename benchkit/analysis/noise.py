"""Output noise with the input terminated: unweighted and A-weighted, SNR,
and the hum lines in it.

The capture's power spectral density (Welch: Hann segments, half
overlapped, averaged) is integrated over the band, as it stands and
weighted by |A(f)|^2 (IEC 61672-1). Hum lines (50 or 60 Hz and their
harmonics) are read from the same spectrum: a line's power is the excess
of its bins over the local floor.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from benchkit import units
from benchkit.analysis import one_channel, refuse_non_finite
from benchkit.analysis.tone import DEFAULT_BAND_HZ, band_limited
from benchkit.analysis.weighting import a_weighting_power
from benchkit.errors import BenchWarning, BenchkitError
from benchkit.analysis.compare import Figure, finite
from benchkit.analysis.documents import Conditions, document
from benchkit.analysis import uncertainty as ua
from benchkit.analysis.uncertainty import Chain

#: Welch segments of about this long: 2 Hz resolution keeps hum lines apart.
SEGMENT_S = 0.5
#: Hum: the mains fundamental and harmonics up to this order are looked at.
HUM_ORDERS = 10
#: A line counts as hum when it stands this far over the local floor.
HUM_OVER_FLOOR_DB = 10.0
#: Peak over RMS of the band's content above which noise is not steady
#: (Gaussian noise reaches about 5 in a few minutes: common practice).
CREST_LIMIT = 20.0


@dataclass(frozen=True)
class HumLine:
    freq_hz: float
    order: int
    level_dbfs: float
    level_vrms: float | None

    def to_dict(self) -> dict:
        return {"freq_hz": self.freq_hz, "order": self.order, "level_dbfs": self.level_dbfs,
                "level_vrms": self.level_vrms}


@dataclass(frozen=True)
class NoiseResult:
    """Noise in the band, unweighted and A-weighted (FS, dBFS, and with a
    scale Vrms and dBV), SNR against a stated output, hum lines."""

    sample_rate_hz: float
    duration_s: float
    bandwidth_hz: tuple[float, float]
    rms_fs: float
    a_rms_fs: float
    volts_per_fs: float | None
    scale_source: str
    mains_hz: float | None
    hum: tuple[HumLine, ...]
    hum_rms_fs: float
    reference_vrms: float | None = None
    reference: str | None = None
    freq_hz: np.ndarray | None = None
    psd_fs2_per_hz: np.ndarray | None = None
    warnings: tuple[str, ...] = ()
    #: the calibration profile its capture's sidecar names (file, hash ...), none without one
    calibration: dict | None = None
    #: relative standard uncertainties of the band powers (type A): unweighted, A-weighted
    power_rel: tuple[float, float] = (0.0, 0.0)
    #: the chain's type-B contributions to the volts (benchkit.analysis.uncertainty.Chain)
    chain: Chain | None = None
    #: relative standard uncertainty of the hum lines' power (type A: the noise under them)
    hum_rel: float = 0.0

    def uncertainty(self) -> dict:
        """The uncertainty block: an RMS's relative u is half its power's;
        the volts take the chain's (the calibration, the pad), the SNR the
        same (the reference output is stated, not measured)."""
        out = ua.Collector()
        for key, rel_p, fs in (("", self.power_rel[0], self.rms_fs), ("_a", self.power_rel[1], self.a_rms_fs)):
            rel = ua.Budget.of(noise=0.5 * rel_p)
            out.put(f"noise{key}_dbfs", rel, ua.DB_PER_REL)
            out.put(f"noise{key}_fs_rms", rel, fs)
            if self.volts_per_fs is not None:
                b = rel.plus(self.chain.volts(None) if self.chain else ua.Budget())
                out.put(f"noise{key}_vrms", b, fs * self.volts_per_fs)
                out.put(f"noise{key}_dbv", b, ua.DB_PER_REL)
                if self.reference_vrms is not None:
                    out.put(f"snr{key}_db", b, ua.DB_PER_REL)
        if self.hum_rms_fs > 0:
            out.put("hum_dbfs", ua.Budget.of(noise=0.5 * self.hum_rel), ua.DB_PER_REL)
        return out.block()

    def _volts(self, fs: float) -> float | None:
        # FS is a peak scale: an RMS in FS times volts peak per FS is Vrms
        return None if self.volts_per_fs is None else fs * self.volts_per_fs

    @property
    def vrms(self) -> float | None:
        return self._volts(self.rms_fs)

    @property
    def a_vrms(self) -> float | None:
        return self._volts(self.a_rms_fs)

    def snr_db(self, weighted: bool) -> float | None:
        v = self.a_vrms if weighted else self.vrms
        if self.reference_vrms is None or not v:
            return None
        return float(units.db_from_ratio(self.reference_vrms / v))

    def to_dict(self) -> dict:
        dbv = (lambda v: None if v is None else float(units.dbv_from_vrms(v)))
        return document("noise", {
            "sample_rate_hz": self.sample_rate_hz, "duration_s": self.duration_s,
            "bandwidth_hz": list(self.bandwidth_hz),
            "noise_fs_rms": self.rms_fs, "noise_dbfs": float(units.dbfs_from_rms(self.rms_fs)),
            "noise_a_fs_rms": self.a_rms_fs, "noise_a_dbfs": float(units.dbfs_from_rms(self.a_rms_fs)),
            "noise_vrms": self.vrms, "noise_dbv": dbv(self.vrms),
            "noise_a_vrms": self.a_vrms, "noise_a_dbv": dbv(self.a_vrms),
            "snr_db": self.snr_db(False), "snr_a_db": self.snr_db(True),
            "snr_reference": None if self.reference_vrms is None else {"vrms": self.reference_vrms, "what": self.reference},
            "mains_hz": self.mains_hz, "hum": [h.to_dict() for h in self.hum],
            "hum_dbfs": float(units.dbfs_from_rms(self.hum_rms_fs)) if self.hum_rms_fs > 0 else None,
            "scale_source": self.scale_source, "volts_per_fs": self.volts_per_fs,
            "warnings": list(self.warnings), "uncertainty": self.uncertainty(),
        }, Conditions(self.sample_rate_hz, self.bandwidth_hz, "Hann", "Welch PSD (Hann, 50 % overlap) integrated over "
                      "the band", None, self.scale_source, self.volts_per_fs,
                      more={"segment_s": SEGMENT_S, "weighting": "A, IEC 61672-1"}).calibrated(self.calibration))


def _segment(size: int, rate: float) -> int:
    """The Welch segment's length: a power of two about SEGMENT_S long."""
    return min(size, int(2 ** math.ceil(math.log2(SEGMENT_S * rate))))


#: The Welch segments' window, a cosine sum (Hann).
HANN = (0.5, 0.5)


def _overlap_rho(n: int) -> float:
    """How far the band powers of two white-noise segments half a segment
    apart correlate under the Hann window: (sum w[i] w[i + n/2])^2 / (sum w^2)^2."""
    w = 0.5 - 0.5 * np.cos(2.0 * np.pi * np.arange(n) / n)
    h = n // 2
    return float(np.sum(w[:-h] * w[h:]) ** 2 / np.sum(w**2) ** 2)


def band_power_var(x_size: int, rate: float, f: np.ndarray, p: np.ndarray, band, weight=None,
                   lines=()) -> tuple[float, float, float]:
    """A band power read from :func:`psd`, and its variance in two parts: the noise's
    (benchkit.analysis.uncertainty.welch_power_rel, each bin's expected
    share taken from the PSD less the part of its square that is the PSD's
    own scatter, E[p^2] = p^2 (1 + 1 / K)), and each steady line's (hum:
    ``lines`` in Hz) cross term with the noise under it, 2 c_w P b / K (P
    its power, b the noise's power in one bin there): a line's own power
    does not scatter as noise does."""
    n = _segment(x_size, rate)
    segments = 1 + max(x_size - n, 0) // (n - n // 2)
    rho = _overlap_rho(n)
    k_eff = segments / (1.0 + 2.0 * rho * (segments - 1) / segments)
    df = f[1] - f[0]
    w = np.ones_like(p) if weight is None else weight
    q = np.where((f >= band[0]) & (f <= band[1]), p * w * df, 0.0)
    noise = q.copy()
    lines_var = 0.0
    for fc in lines:
        k = int(round(fc / df))
        floor = float(np.median(np.r_[q[max(k - 20, 0): max(k - 3, 0)], q[k + 4: k + 21]])) if q[k] > 0 else 0.0
        line = max(float(np.sum(q[max(k - 3, 0): k + 4])) - 7 * floor, 0.0)
        noise[max(k - 3, 0): k + 4] = floor
        lines_var += 2.0 * ua.bin_correlation(HANN) * line * floor / k_eff
    total = float(np.sum(q))
    if total <= 0:
        return 0.0, 0.0, 0.0
    noise_var = (ua.welch_power_rel(noise, segments, rho, HANN) * float(np.sum(noise))) ** 2 / (1.0 + 1.0 / k_eff)
    return total, noise_var, lines_var


def psd(x: np.ndarray, rate: float) -> tuple[np.ndarray, np.ndarray]:
    """One-sided power spectral density, FS^2 per Hz (its integral is the mean square)."""
    import scipy.signal

    n = _segment(x.size, rate)
    return scipy.signal.welch(x, fs=rate, window="hann", nperseg=n, noverlap=n // 2, detrend="constant",
                              scaling="density")


def _band_power(f, p, band, weight=None) -> float:
    sel = (f >= band[0]) & (f <= band[1])
    df = f[1] - f[0]
    w = 1.0 if weight is None else weight[sel]
    return float(np.sum(p[sel] * w) * df)


def hum_lines(f: np.ndarray, p: np.ndarray, volts_per_fs: float | None = None,
              band=DEFAULT_BAND_HZ) -> tuple[float | None, tuple[HumLine, ...], float]:
    """The mains frequency (50 or 60 Hz, whichever family holds more line
    power), its lines standing HUM_OVER_FLOOR_DB over the local floor, and
    their total power (FS^2: the power sum of the lines)."""
    df = f[1] - f[0]
    half = 3  # a Hann window's line spreads over about +-2 bins

    def line(fc):
        k = int(round(fc / df))
        if k - 20 < 1 or k + 20 >= f.size:
            return 0.0
        floor = float(np.median(np.r_[p[k - 20 : k - half], p[k + half + 1 : k + 21]]))
        if float(np.max(p[k - 1 : k + 2])) <= floor * 10 ** (HUM_OVER_FLOOR_DB / 10):
            return 0.0
        return (float(np.sum(p[k - half : k + half + 1])) - floor * (2 * half + 1)) * df

    best = (None, (), 0.0)
    for mains in (50.0, 60.0):
        lines = []
        for order in range(1, HUM_ORDERS + 1):
            fc = mains * order
            if not band[0] <= fc <= band[1]:
                continue
            power = line(fc)
            if power > 0:
                rms = math.sqrt(power)
                lines.append(HumLine(fc, order, float(units.dbfs_from_rms(rms)),
                                     None if volts_per_fs is None else rms * volts_per_fs))
        total = sum(units.rms_from_dbfs(h.level_dbfs) ** 2 for h in lines)
        if total > best[2]:
            best = (mains, tuple(lines), total)
    return best


def analyze_noise(samples, sample_rate: float, *, bandwidth_hz=DEFAULT_BAND_HZ, volts_per_fs: float | None = None,
                  scale_source: str = "none", reference_vrms: float | None = None, reference: str | None = None,
                  traces: bool = False, channel: int | None = None, chain: Chain | None = None) -> NoiseResult:
    """The noise of a capture made with the stage's input terminated.

    Parameters
    ----------
    samples : array_like
        In FS: one channel, or frames x channels (``channel`` picks one);
        at least half a second.
    sample_rate : float
        In Hz.
    bandwidth_hz : (lo, hi) or None
        The band integrated (default 20 Hz to 20 kHz; None: 0 to fs/2).
    volts_per_fs : float, optional
        Volts peak at the measured point per FS, for Vrms and dBV.
    scale_source : str
        Where ``volts_per_fs`` came from.
    reference_vrms, reference : float, str, optional
        The output the SNR is referred to (e.g. 1 W into 8 ohm) and what it is.
    traces : bool
        Keep the PSD the report plots.
    channel : int, optional
        The channel of 2-D ``samples``, from 1.
    chain : Chain, optional
        The chain's type-B contributions to the volts (calibration, pad).

    Returns
    -------
    NoiseResult
        ``rms_fs`` and ``a_rms_fs`` (unweighted and A-weighted), the hum
        lines, and volts and SNR with a scale and a reference.

    References
    ----------
    IEC 61672-1 (A-weighting); Welch, IEEE Trans. Audio Electroacoust. 15
    (1967) (the averaged periodogram).

    Examples
    --------
    White noise of 1 mFS RMS over 0 to 24 kHz holds sqrt(19980 / 24000) of
    it between 20 Hz and 20 kHz, 0.912 mFS (Parseval):

    >>> import numpy as np, benchkit
    >>> x = np.random.default_rng(1).normal(0.0, 0.001, 96000)
    >>> r = benchkit.analyze_noise(x, 48000)
    >>> round(1000 * r.rms_fs, 2)
    0.91
    """
    x, rate = one_channel(samples, channel, "analyze_noise"), float(sample_rate)
    if x.size < int(0.5 * rate):
        raise BenchkitError("a noise measurement needs at least half a second of one channel")
    refuse_non_finite(x)
    band = tuple(bandwidth_hz) if bandwidth_hz is not None else (0.0, rate / 2)
    if band[1] > rate / 2:
        band = (band[0], rate / 2)
    f, p = psd(x - np.mean(x), rate)
    ms = _band_power(f, p, band)
    weight = a_weighting_power(f)
    a_ms = _band_power(f, p, band, weight)
    mains, hum, hum_power = hum_lines(f, p, volts_per_fs, band)
    lines = [h.freq_hz for h in hum]
    plain, weighted = (band_power_var(x.size, rate, f, p, band, w, lines) for w in (None, weight))
    power_rel = tuple(math.sqrt(nv + lv) / t if t > 0 else 0.0 for t, nv, lv in (plain, weighted))
    hum_rel = math.sqrt(plain[2]) / hum_power if hum_power > 0 else 0.0
    warnings = []
    if float(np.max(np.abs(x))) >= 0.999:
        warnings.append(BenchWarning("input-clipped", "the capture reaches full scale: not the noise of a terminated input"))
    elif ms > 0:
        # the crest factor of what was measured: the band's content, its
        # peak against its own RMS (an offset or ultrasonic content, left
        # out of the figures, has no say)
        crest = float(np.max(np.abs(band_limited(x, rate, band)))) / math.sqrt(ms)
        if crest > CREST_LIMIT:
            warnings.append(BenchWarning("bursts", f"crest factor {crest:.0f}: clicks or bursts, not steady noise"))
    if hum_power > 0.5 * ms:
        warnings.append(BenchWarning("hum", f"hum makes up more than half of the noise: {hum_advice(hum)}, before the noise itself"))
    return NoiseResult(rate, x.size / rate, band, math.sqrt(ms), math.sqrt(a_ms), volts_per_fs, scale_source, mains,
                       hum, math.sqrt(hum_power), reference_vrms, reference, f if traces else None,
                       p if traces else None, tuple(warnings), power_rel=power_rel, chain=chain, hum_rel=hum_rel)


def hum_advice(lines: tuple[HumLine, ...]) -> str:
    """Where to look first for these hum lines (common practice): lines at
    twice the mains frequency and its multiples are a full-wave
    rectifier's ripple (supply filtering and regulation); the mains
    frequency and its odd multiples are pickup (ground loops, wiring near
    the transformer)."""
    ripple = sum(units.rms_from_dbfs(h.level_dbfs) ** 2 for h in lines if h.order % 2 == 0)
    total = sum(units.rms_from_dbfs(h.level_dbfs) ** 2 for h in lines)
    if total > 0 and ripple > 0.5 * total:
        return ("the lines at twice the mains frequency and its multiples lead: rectifier ripple, so look at the "
                "supply's filtering and regulation first")
    return "the mains frequency and its odd multiples lead: look at grounding and wiring near the transformer first"


def noise_figures(doc: dict) -> list[Figure]:
    return [f.of(doc, f.name) for f in _noise_figures(doc)]


def _noise_figures(doc: dict) -> list[Figure]:
    scaled = finite(doc.get("noise_vrms")) is not None
    out = [Figure("noise_a_vrms", "noise, A-weighted", finite(doc.get("noise_a_vrms")), "Vrms", "lower", headline=True),
           Figure("noise_vrms", "noise, unweighted", finite(doc.get("noise_vrms")), "Vrms", "lower")] if scaled else [
           Figure("noise_a_dbfs", "noise, A-weighted", finite(doc.get("noise_a_dbfs")), "dBFS", "lower", headline=True),
           Figure("noise_dbfs", "noise, unweighted", finite(doc.get("noise_dbfs")), "dBFS", "lower")]
    ref = (doc.get("snr_reference") or {}).get("what", "")
    out += [Figure("snr_db", "SNR", finite(doc.get("snr_db")), "dB", "higher", at=ref),
            Figure("snr_a_db", "SNR, A-weighted", finite(doc.get("snr_a_db")), "dB", "higher", at=ref),
            Figure("hum_dbfs", "hum, all lines", finite(doc.get("hum_dbfs")), "dBFS", "lower")]
    return out
