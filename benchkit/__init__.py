"""benchkit: a calibrated bench analyzer for audio amplifier stages.

The analysis is usable on its own::

    import benchkit
    result = benchkit.analyze_tone(samples, 48000)
    print(result.thdn_db, result.to_dict()["harmonics"][:3])
"""

from benchkit.analysis.tone import Harmonic, ToneResult, analyze_tone
from benchkit.errors import BenchkitError

__version__ = "0.1.0"
__all__ = ["analyze_tone", "ToneResult", "Harmonic", "BenchkitError", "__version__"]
