"""What `benchkit pad` shows: the pads it designed or judged, one line
each, with the warnings that go with them."""

from __future__ import annotations

from benchkit import units


def pads_lines(reports, normal_vpk: float, rail_v: float | None, input_fs_vpk: float, input_ohms: float,
               input_max_vpk: float | None, headroom_db: float, input_noise_dbfs: float) -> list[str]:
    """The table of ``reports`` (:class:`benchkit.pads.PadReport` each):
    ratio, where the normal swing and a rail fault land at the input, the
    highest safe stage voltage, each resistor's power and rating, and the
    noise floor the pad lifts at the stage."""
    basis = f"{normal_vpk:g} V peak normal swing" + (f"; a fault: the whole {rail_v:g} V rail" if rail_v is not None else "")
    lines = [f"{basis}; input full scale {input_fs_vpk:g} V peak, {input_ohms:g} ohm; headroom {headroom_db:g} dB",
             "    R1 ohm    R2 ohm    ratio      normal at input  fault at input   safe to (V pk)   P(R1) -> rating   "
             "P(R2) -> rating   noise floor at the stage"]
    for r in reports:
        floor_uv = units.rms_from_dbfs(input_noise_dbfs) * input_fs_vpk / r.ratio * 1e6
        fault = "-" if r.fault_peak_fs is None else f"{units.db_from_ratio(r.fault_peak_fs):+.1f} dBFS"
        lines.append(f"  {r.pad.r1_ohms:8g}  {r.pad.r2_ohms:8g}  1:{1 / r.ratio:<8.4g}  "
                     f"{units.db_from_ratio(r.input_peak_fs):7.1f} dBFS     {fault:>10}       {r.max_safe_stage_vpk:10.4g}       "
                     f"{r.r1_watts:7.3g} W -> {r.r1_rating_w:g} W   {r.r2_watts:7.3g} W -> {r.r2_rating_w:g} W   "
                     f"+{r.noise_penalty_db:.1f} dB ({floor_uv:.3g} uVrms)")
        if r.input_peak_fs > 10 ** (-headroom_db / 20) * (1 + 1e-9):
            lines.append(f"  warning: the normal swing lands at {units.db_from_ratio(r.input_peak_fs):.1f} dBFS: less than "
                         f"{headroom_db:g} dB of headroom (the pre-flight refuses a run past its --margin, 3 dB by default)")
        if r.fault_v is not None and input_max_vpk is not None and r.fault_v * r.ratio > input_max_vpk:
            lines.append(f"  warning: a rail fault would put {r.fault_v * r.ratio:.3g} V peak on the input, over its "
                         f"stated maximum of {input_max_vpk:g} V peak: the pre-flight refuses this pad with --rail {rail_v:g}")
    lines.append("  ratings are at least twice the power held at the worst case; balanced inputs need the pad on both "
                 "legs; keep the interface's ground and a bridged output apart")
    return lines

