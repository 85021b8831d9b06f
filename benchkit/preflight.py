"""Pre-flight: what a run will do to the interface and the pad, predicted
before a sample is played, and refused when it would overload them.

From the drive levels, the output scale, the stage's gain (given, or
measured first at a low level), the pad and the input's full scale, the
peak at the stage and at the input follow (a linear stage: gain is a
ratio). A run is refused when the top step would come within ``margin_db``
of the input's full scale, or when a pad resistor would see more than its
rating; a stated rail is judged by :func:`rail_rule`, which needs no gain
(so before any probe plays). Each refusal names the number to change.
Warnings cover what cannot be checked by numbers alone.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from benchkit.units import quantity
from benchkit import units
from benchkit.errors import BenchWarning, BenchkitError
from benchkit.pads import Pad

DEFAULT_MARGIN_DB = 3.0


def normal_swing_vpk(rail_v: float, bridged: bool = False) -> float:
    """The largest swing a stage on a supply of ``rail_v`` (rail to rail)
    makes in normal work, volts peak: half the supply either way about
    the output's resting point (circuit theory: an output cannot go past
    its rails), the whole supply across a bridged (BTL) pair."""
    return rail_v if bridged else rail_v / 2


def rail_rule(rail_v: float, ratio: float, input_fs_vpk: float, margin_db: float = DEFAULT_MARGIN_DB,
              input_max_vpk: float | None = None, bridged: bool = False) -> tuple[str, ...]:
    """The one rule for a stated rail, alike in every command (docs/safety.md):

    1. the stage's normal swing (:func:`normal_swing_vpk`) through the pad
       must stay ``margin_db`` below the input's full scale: refused otherwise;
    2. a fault that puts the whole rail on the output, through the pad, is
       compared with the input's stated maximum: refused above it (it would
       damage the input); above full scale with the maximum unknown, or
       under a stated maximum, a warning.

    Returns the warnings; raises BenchkitError on a refusal."""
    normal = normal_swing_vpk(rail_v, bridged) * ratio
    limit = input_fs_vpk * units.ratio_from_db(-margin_db)
    if normal > limit:
        need = normal_swing_vpk(rail_v, bridged) / limit
        raise BenchkitError(
            f"the pad (1:{1 / ratio:.4g}) would let the stage's normal swing on a {rail_v:g} V rail "
            f"({normal_swing_vpk(rail_v, bridged):g} V peak) reach {units.db_from_ratio(normal / input_fs_vpk):+.1f} dBFS at "
            f"the input, over the {-margin_db:g} dBFS limit: use a pad of at least 1:{need:.3g} "
            f"(benchkit pad --rail {rail_v:g}{' --btl' if bridged else ''})")
    fault = rail_v * ratio
    fault_dbfs = units.db_from_ratio(fault / input_fs_vpk)
    if input_max_vpk is not None and fault > input_max_vpk:
        raise BenchkitError(
            f"a fault putting the whole {rail_v:g} V rail on the output would reach {quantity(fault, 'V', 3)} peak at the "
            f"input, over its stated maximum of {input_max_vpk:g} V peak: use a pad of at least 1:{rail_v / input_max_vpk:.3g}")
    if fault > input_fs_vpk:
        within = (f"under the input's stated maximum of {input_max_vpk:g} V peak" if input_max_vpk is not None
                  else "check the interface's maximum input rating (--input-max)")
        return (BenchWarning("safety", f"a fault putting the whole {rail_v:g} V rail on the output would reach "
                             f"{fault_dbfs:+.1f} dBFS at the input ({quantity(fault, 'V', 3)} peak): over full scale, {within}"),)
    return ()
#: The lowest step landing below this at the input is close to a typical
#: interface's floor (common practice: keep 30 dB or more above it).
NEAR_FLOOR_DBFS = -80.0


@dataclass(frozen=True)
class Plan:
    """The predicted levels of a run (FS at the input; volts when known)."""

    input_peak_fs: tuple[float, ...]
    stage_vpk: tuple[float | None, ...]
    gain_fs: float
    warnings: tuple[str, ...]


def check(
    drive_dbfs: list[float],
    gain_fs: float,
    stage_volts_per_fs: float | None = None,
    input_vpk_per_fs: float | None = None,
    pad: Pad | None = None,
    pad_ratio: float | None = None,
    input_ohms: float = math.inf,
    pad_rating_w: float | None = None,
    load_ohms: float | None = None,
    bridged: bool = False,
    margin_db: float = DEFAULT_MARGIN_DB,
) -> Plan:
    """Predict a run and refuse it if it would overload anything.

    Parameters
    ----------
    drive_dbfs : list of float
        The steps, dBFS at the output.
    gain_fs : float
        Input FS per output FS through the stage and pad (measured or given).
    stage_volts_per_fs : float, optional
        Volts peak at the stage per input FS (calibration or simulation).
    input_vpk_per_fs, pad, pad_ratio, input_ohms
        The input's full scale in volts and what is in front of it.
    pad_rating_w : float, optional
        Power rating of the pad resistors.
    load_ohms, bridged
        For the warnings.
    """
    limit = units.ratio_from_db(-margin_db)
    peaks = tuple(units.ratio_from_db(d) * gain_fs for d in drive_dbfs)
    top = max(peaks)
    # (to a part in 1e9: a drive worked out to land on the limit, as a power
    # run's highest is, passes whatever the round trip through dB rounds to)
    if top > limit * (1.0 + 1e-9):
        room = units.db_from_ratio(limit / top)
        raise BenchkitError(
            f"the top step would reach {units.db_from_ratio(top):+.1f} dBFS at the input, over the "
            f"{-margin_db:g} dBFS limit: lower the drive to {max(drive_dbfs) + room:.1f} dBFS or less, "
            "or use a larger pad"
        )
    stage = tuple(p * stage_volts_per_fs if stage_volts_per_fs else None for p in peaks)
    ratio = pad.ratio(input_ohms) if pad is not None else pad_ratio
    if pad is not None and pad_rating_w is not None and stage[0] is not None:
        worst = max(v for v in stage if v is not None)
        p1, p2 = pad.resistor_watts(units.vrms_from_vpk(worst), input_ohms)
        for name, p in (("R1", p1), ("R2", p2)):
            if p > pad_rating_w:
                raise BenchkitError(
                    f"pad resistor {name} would dissipate {quantity(p, 'W', 3)} at the top step, over its {pad_rating_w:g} W "
                    "rating: use a higher rating or lower the drive"
                )
    warnings = []
    if (ratio is None or ratio >= 1.0) and load_ohms is not None:
        warnings.append(BenchWarning("safety", "no pad between a power stage and the input: one fault and the input takes the stage's full swing"))
    low = units.db_from_ratio(min(peaks))
    if low < NEAR_FLOOR_DBFS:
        warnings.append(BenchWarning("near-floor", f"the lowest step lands at {low:.0f} dBFS at the input, close to the interface's floor: "
                        "a smaller pad ratio or more drive would read it better"))
    if load_ohms is None:
        warnings.append(BenchWarning("no-load", "no load given: measure a power stage into a dummy load of the right rating"))
    if bridged:
        warnings.append(BenchWarning("safety", "bridged (BTL) output: its minus terminal is not at ground and must not go to the interface's "
                        "ground; use a balanced (differential) input"))
    return Plan(peaks, stage, gain_fs, tuple(warnings))
