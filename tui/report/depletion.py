"""The depletion part of a report: Mott-Schottky line, doping, doping profile N(W).

Takes the C-V curve with the most biases, keeps its reverse and zero-bias points (forward
bias adds diffusion capacitance), takes the fixture capacitance out of them (the run's
model.json states it), and hands them to `pnbench.modeling.depletion` (docs/physics.md
§7). Where model.json holds the run's doping (its weighted fit of every reverse C-V
point, corrected for the fitted network and the test level), the line, Vbi and N shown
are those. Doping and N(W) need the junction area and the material's permittivity;
without them the line and the built-in voltage are still shown (they do not depend on
either) and the report says what is missing.
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
    fixture_F: float = 0.0  # the fixture capacitance taken out of the readings
    fixture_fitted: str = ""  # who found it ("", "the C-V fit", "the Mott-Schottky fit")
    from_model: bool = False  # line, Vbi and N are the run's fit (model.json's doping)


def _fixture(out: Analysis) -> tuple[float, str]:
    """The fixture capacitance to take out of the readings and who found it: the run's
    Mott-Schottky fit, else the C-V fit, else none."""
    doping = out.model.extras.get("doping") if out.model else None
    own = doping.get("fixture_capacitance_F") if isinstance(doping, dict) else None
    if isinstance(own, dict) and isinstance(own.get("value"), (int, float)):
        return float(own["value"]), "the Mott-Schottky fit"
    return (out.fixture_F, "the C-V fit") if out.fixture_F else (0.0, "")


def _run_doping(view: MottSchottkyView, out: Analysis, v, c) -> MottSchottkyView:
    """The view with the run's own doping and Vbi (model.json) when it has them: they
    come from every reverse C-V point, weighted and corrected, so the report states the
    same numbers as the fit."""
    from dataclasses import replace

    from scipy import constants

    from pnbench.modeling.junction import thermal_voltage

    doping = out.model.extras.get("doping") if out.model else None
    if not (isinstance(doping, dict) and all(isinstance(doping.get(k), (int, float)) for k in (
            "doping_per_m3", "doping_sigma_per_m3", "built_in_voltage_V",
            "built_in_sigma_V", "area_m2")) and view.material):
        return view
    eps = materials.material(view.material).permittivity_F_per_m
    slope = -2.0 / (constants.e * eps * doping["area_m2"] ** 2 * doping["doping_per_m3"])
    v0 = doping["built_in_voltage_V"] - thermal_voltage(out.temperature_K)
    inv = 1.0 / np.asarray(c) ** 2
    rms = float(np.sqrt(np.mean(((slope * (np.asarray(v) - v0) - inv) / inv) ** 2)))
    return replace(view, slope=slope, intercept_V=v0, vbi_V=doping["built_in_voltage_V"],
                   vbi_sigma_V=doping["built_in_sigma_V"], relative_rms_residual=rms,
                   doping_m3=doping["doping_per_m3"],
                   doping_sigma_m3=doping["doping_sigma_per_m3"], from_model=True)


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
    fixture, fitted = _fixture(out)
    v, c = curve.voltage_V[used], curve.capacitance_F[used] - fixture
    if np.any(c <= 0):
        out.missing.append("the fixture capacitance exceeds some reverse-bias readings: "
                           "the Mott-Schottky line, doping and N(W) are missing")
        return
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
    view = MottSchottkyView(
        frequency_Hz=curve.label_value, voltage_V=curve.voltage_V[ok],
        capacitance_F=curve.capacitance_F[ok] - fixture, used=used[ok],
        slope=line.slope_per_F2V, intercept_V=line.intercept_voltage_V,
        vbi_V=line.built_in_voltage_V, vbi_sigma_V=line.built_in_sigma_V,
        relative_rms_residual=line.relative_rms_residual, doping_m3=doping,
        doping_sigma_m3=None if note else line.doping_sigma_per_m3, doping_note=note,
        material=None if note else line.material, fixture_F=fixture, fixture_fitted=fitted,
    )
    out.mott_schottky = _run_doping(view, out, v, c) if not note else view
    if note:
        out.missing.append(f"no doping value and no N(W) profile: {note}")
        return
    try:
        profile = depletion.doping_profile(v, c, area, name, window=PROFILE_WINDOW)
    except BadInput as exc:
        out.missing.append(f"no N(W) profile: {exc}")
        return
    out.profile = (np.asarray(profile.depth_m), np.asarray(profile.doping_per_m3))
