"""benchkit: a calibrated bench analyzer for audio amplifier stages.

The analysis is usable on its own, one entry point a measurement, each
named ``analyze_<kind>`` (data first, every option by keyword)::

    import benchkit, soundfile
    x, rate = soundfile.read("capture.wav")          # frames x channels
    r = benchkit.analyze_tone(x, rate, channel=1)
    print(r.thdn_db, r.to_dict()["harmonics"][:3])

``import benchkit`` loads nothing heavy: each name is imported from its
module the first time it is used.
"""

from __future__ import annotations

import importlib

__version__ = "0.1.0"

#: Every name the package exports, and the module that holds it.
_EXPORTS = {
    "analyze_tone": "benchkit.analysis.tone",
    "analyze_imd": "benchkit.analysis.imd",
    "analyze_noise": "benchkit.analysis.noise",
    "analyze_power": "benchkit.analysis.power",
    "analyze_gain": "benchkit.analysis.gain",
    "analyze_zout": "benchkit.analysis.zout",
    "analyze_crosstalk": "benchkit.analysis.crosstalk",
    "analyze_drift": "benchkit.analysis.drift",
    "analyze_sweep": "benchkit.kinds.sweep",
    "analyze_grid": "benchkit.kinds.grid",
    "analyze_power_bandwidth": "benchkit.kinds.power_bandwidth",
    "analyze_loopback": "benchkit.analysis.loopback",
    "ToneResult": "benchkit.analysis.tone",
    "Harmonic": "benchkit.analysis.tone",
    "ImdResult": "benchkit.analysis.imd",
    "NoiseResult": "benchkit.analysis.noise",
    "PowerResult": "benchkit.analysis.power",
    "GainResult": "benchkit.analysis.gain",
    "ZoutResult": "benchkit.analysis.zout",
    "Reading": "benchkit.analysis.zout",
    "Leak": "benchkit.analysis.crosstalk",
    "DriftResult": "benchkit.analysis.drift",
    "ResponseResult": "benchkit.analysis.response",
    "GridResult": "benchkit.kinds.grid",
    "BandwidthResult": "benchkit.kinds.power_bandwidth",
    "LoopbackResult": "benchkit.analysis.loopback",
    "BenchkitError": "benchkit.errors",
    "BenchWarning": "benchkit.errors",
}

__all__ = [*_EXPORTS, "__version__"]


def __getattr__(name: str):
    module = _EXPORTS.get(name)
    if module is None:
        raise AttributeError(f"module 'benchkit' has no attribute {name!r}")
    value = getattr(importlib.import_module(module), name)
    globals()[name] = value  # once imported, an attribute as any other
    return value


def __dir__() -> list[str]:
    return sorted({*globals(), *_EXPORTS})
