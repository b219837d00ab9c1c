"""The depletion part of a report: Mott-Schottky line, doping, doping profile N(W).

Takes the C-V curve with the most biases, keeps its reverse and zero-bias points (forward
bias adds diffusion capacitance), and hands them to `pnbench.modeling.depletion`
(docs/physics.md §7). Doping and N(W) need the junction area and the material's
permittivity; without them the line and the built-in voltage are still shown (they do
not depend on either) and the report says what is missing.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from pnbench.errors import BadInput
from pnbench.modeling import depletion, materials
from pnbench.tui.report.analysis import Analysis
from pnbench.tui.report.data import RunData

#: Fewest zero- or reverse-bias points for a Mott-Schottky line.
MIN_POINTS = 3
#: Points per local slope of the N(W) profile (depletion.doping_profile's window).
PROFILE_WINDOW = 5


@dataclass(frozen=True)
class MottSchottkyView:
    """What the 1/C^2 figure and the report need (SI units)."""

    frequency_Hz: float
    voltage_V: np.ndarray
    capacitance_F: np.ndarray
    used: np.ndarray  # bool, points on the line
    slope: float  # d(1/C^2)/dV [F^-2 V^-1]
    intercept_V: float  # where the line crosses 1/C^2 = 0
    vbi_V: float  # intercept + kT/q
    vbi_sigma_V: float
    relative_rms_residual: float  # how far 1/C^2 is from a straight line
    doping_m3: float | None
    doping_sigma_m3: float | None
    doping_note: str  # why there is no doping, when there is none
    material: str | None


def add_depletion(out: Analysis, data: RunData) -> None:
    """Fill out.mott_schottky and out.profile, or say in out.missing why not."""
    if not out.cv_curves:
        return
    curve = out.cv_curves[0]
    ok = np.isfinite(curve.capacitance_F) & (curve.capacitance_F > 0)
    used = ok & (curve.voltage_V <= 0)
    if np.unique(curve.voltage_V[used]).size < MIN_POINTS:
        out.missing.append("fewer than three C-V points at zero or reverse bias: the "
                           "Mott-Schottky line, doping and N(W) are missing")
        return
    v, c = curve.voltage_V[used], curve.capacitance_F[used]
    area, name = data.area_m2, data.material
    note = ""
    if area is None:
        note = "the junction area is not recorded (device area_m2 in run.json)"
    elif name is None:
        note = "the material is not recorded (device material in run.json)"
    else:
        try:
            materials.material(name)
        except BadInput as exc:
            note = str(exc)
    try:
        # The line and its intercept do not depend on area or material: without them a
        # unit area and silicon stand in, and the doping they would give is not used.
        line = depletion.mott_schottky(v, c, area if not note else 1.0,
                                       name if not note else "Si", out.temperature_K)
    except BadInput as exc:
        out.missing.append(f"no Mott-Schottky line: {exc}")
        return
    doping = None if note else line.doping_per_m3
    out.mott_schottky = MottSchottkyView(
        frequency_Hz=curve.label_value, voltage_V=curve.voltage_V[ok],
        capacitance_F=curve.capacitance_F[ok], used=used[ok], slope=line.slope_per_F2V,
        intercept_V=line.intercept_voltage_V, vbi_V=line.built_in_voltage_V,
        vbi_sigma_V=line.built_in_sigma_V,
        relative_rms_residual=line.relative_rms_residual, doping_m3=doping,
        doping_sigma_m3=None if note else line.doping_sigma_per_m3, doping_note=note,
        material=None if note else line.material,
    )
    if note:
        out.missing.append(f"no doping value and no N(W) profile: {note}")
        return
    try:
        profile = depletion.doping_profile(v, c, area, name, window=PROFILE_WINDOW)
    except BadInput as exc:
        out.missing.append(f"no N(W) profile: {exc}")
        return
    out.profile = (np.asarray(profile.depth_m), np.asarray(profile.doping_per_m3))
