"""Plain-text lines for a run over temperature: what the stage is doing, and at which
temperature a step runs (headless progress and the run log say the same)."""

from __future__ import annotations

import math

ZERO_C_K = 273.15


def temperature_text(t_K: float | None) -> str:
    """"398.15 K (125 degC)"; "?" when unknown."""
    if t_K is None or not isinstance(t_K, (int, float)) or not math.isfinite(t_K):
        return "?"
    return f"{t_K:.6g} K ({t_K - ZERO_C_K:.4g} degC)"


def stage_line(kind: str, data: dict) -> str:
    """One line for a stage event (stage_ramping, stage_stable, stage_drifting)."""
    sp = temperature_text(data.get("set_point_K"))
    now = temperature_text(data.get("temperature_K"))
    if kind == "stage_ramping":
        rate = data.get("ramp_K_per_min")
        how = f" at {rate:g} K/min" if isinstance(rate, (int, float)) else ""
        return f"stage: to {sp}{how}, now {now}"
    if kind == "stage_stable":
        waited = data.get("waited_s")
        after = f" after {waited:.0f} s" if isinstance(waited, (int, float)) else ""
        return f"stage: stable at {sp}{after} (reads {now}); soaking"
    if kind == "stage_drifting":
        band = data.get("band_K")
        return (f"WARNING stage drifting during {data.get('during', 'the run')}: reads {now}, "
                f"set point {sp}" + (f", beyond +-{band:g} K" if band else ""))
    return f"stage: {kind} {data}"
