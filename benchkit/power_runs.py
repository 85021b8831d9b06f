"""Power runs: the power figures of a stepped-level capture on disk.

A stepped capture that benchkit wrote (``benchkit tone`` with rising
levels, or a power run) is analysed step by step with the tone core, in
volts into the stated load, then summarised by
:func:`benchkit.analysis.power.analyze_power`; the clipped half is read
from the samples of the first step past the clipping onset.
"""

from __future__ import annotations

from pathlib import Path

from benchkit.analysis.power import DEFAULT_LIMITS_PCT, ONSET_DB, PowerResult, analyze_power
from benchkit.budget import ClassABudget
from benchkit.errors import BenchkitError
from benchkit.recordings import read_capture
from benchkit.runs import StepsResult


def power_from_steps(steps: StepsResult, load_ohms: float, metric: str = "thdn", limits_pct=DEFAULT_LIMITS_PCT,
                     onset_db: float = ONSET_DB, supply_v: float | None = None, supply_a: float | None = None,
                     budget: ClassABudget | None = None, polarity_inverts: bool = False) -> PowerResult:
    """The power figures of an analysed stepped capture (``steps``, from
    :func:`benchkit.runs.analyze_steps` with the load)."""
    if len(steps.steps) < 2:
        raise BenchkitError("power at a set distortion needs at least two steps")
    if any(s.result.power_w is None for s in steps.steps):
        raise BenchkitError("power needs volts at the stage: give --calibration or --volts-per-fs, and --load")
    ordered = sorted(steps.steps, key=lambda s: s.drive_dbfs)
    warnings = list(steps.warnings)
    if [s.drive_dbfs for s in ordered] != [s.drive_dbfs for s in steps.steps]:
        warnings.append("the steps did not rise in order: sorted by drive")
    side = read_capture(steps.file, steps.channel).sidecar
    segs = sorted((side.get("stimulus") or {}).get("segments") or [], key=lambda s: float(s["level_dbfs"]))
    takes = {}

    def samples_of(i: int):
        if i >= len(segs):
            return None
        seg = segs[i]
        name = seg.get("file")
        if name not in takes:
            path = Path(steps.file) if name is None else Path(steps.file).parent / Path(str(name)).name
            takes[name] = read_capture(path, steps.channel).samples
        x = takes[name][int(seg["settled"]): int(seg["end"])]
        r = ordered[i].result
        x = -x if polarity_inverts else x
        return x, (-r.dc_fs if polarity_inverts else r.dc_fs)

    top = ordered[-1].result
    if max(s.result.thdn_pct for s in ordered) < max(limits_pct):
        warnings.append(f"the steps stop at {top.thdn_pct:.3g} % THD+N ({top.power_w:.3g} W), short of the "
                        f"{max(limits_pct):g} % limit")
    expected = budget.to_dict() if budget is not None else None
    info = {"file": steps.file, "channel": steps.channel, "device": steps.device,
            "calibration": steps.calibration}
    return analyze_power([(s.drive_dbfs, s.result) for s in ordered], load_ohms, metric, limits_pct, onset_db,
                         supply_v, supply_a, samples_of, expected, info, tuple(warnings))
