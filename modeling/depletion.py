"""Depletion capacitance and doping: Mott-Schottky line, doping profile, built-in voltage.

One-sided abrupt junction or Schottky barrier of area A, permittivity eps (docs/physics.md §7,
after Sze & Ng, *Physics of Semiconductor Devices*, 3rd ed., 2007, ch. 2-3):

    C/A     = sqrt(q*eps*N / (2*(Vbi - V - kT/q)))
    1/C**2  = 2*(Vbi - V - kT/q) / (q*eps*N*A**2)         # straight line in V
    N(W)    = -2 / (q*eps*A**2 * d(1/C**2)/dV),  W = eps*A/C

The line's intercept with the V axis is Vbi - kT/q. For a p+n step junction
Vbi = (kT/q)*ln(Na*Nd/ni**2). Inputs and outputs are SI: doping per m^3, area m^2.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import constants

__all__ = [
    "DopingProfile", "MottSchottkyLine", "MottSchottkyResult", "abrupt_capacitance",
    "abrupt_card_values", "abrupt_doping", "doping_from_slope", "doping_profile", "local_slopes",
    "mott_schottky", "mott_schottky_line", "permittivity", "step_junction_built_in_voltage",
]

from pnbench.errors import BadInput
from pnbench.modeling.junction import thermal_voltage
from pnbench.modeling.materials import TABLE_TEMPERATURE_K, Material, material, permittivity

_Q = constants.e


@dataclass(frozen=True)
class MottSchottkyResult:
    """The straight line 1/C**2 = intercept + slope*V and what it says about the junction."""

    doping_per_m3: float
    doping_sigma_per_m3: float
    built_in_voltage_V: float
    built_in_sigma_V: float
    intercept_voltage_V: float      # where 1/C**2 reaches 0 (= Vbi - kT/q)
    slope_per_F2V: float
    intercept_per_F2: float
    n_points: int
    relative_rms_residual: float    # rms of (fit - data)/data in 1/C**2
    area_m2: float
    material: str
    temperature_K: float

    @property
    def doping_per_cm3(self) -> float:
        return self.doping_per_m3 * 1e-6


@dataclass(frozen=True)
class MottSchottkyLine:
    """1/C**2 = intercept + slope*V; needs neither area nor material."""

    slope: float                    # 1/(F^2 V)
    intercept: float                # 1/F^2
    intercept_V: float              # where 1/C**2 reaches 0 (= Vbi - kT/q)
    vbi_V: float                    # intercept_V + kT/q
    slope_sigma: float
    intercept_V_sigma: float
    n_points: int
    relative_rms_residual: float    # rms of (fit - data)/data in 1/C**2
    temperature_K: float


@dataclass(frozen=True)
class DopingProfile:
    """Doping against depletion depth from C-V data (arrays sorted by voltage).

    Unpacks as ``depth_m, doping_per_m3 = profile``.
    """

    voltage_V: np.ndarray
    depth_m: np.ndarray
    doping_per_m3: np.ndarray
    window: int
    area_m2: float
    material: str

    def __iter__(self):
        return iter((self.depth_m, self.doping_per_m3))


def _clean_cv(voltage_V, capacitance_F, min_points: int) -> tuple[np.ndarray, np.ndarray]:
    v = np.asarray(voltage_V, dtype=float).ravel()
    c = np.asarray(capacitance_F, dtype=float).ravel()
    if v.shape != c.shape:
        raise BadInput(f"C-V data: {v.size} voltages but {c.size} capacitances")
    if not (np.all(np.isfinite(v)) and np.all(np.isfinite(c))):
        raise BadInput("C-V data: voltages and capacitances must be finite numbers")
    if np.any(c <= 0):
        raise BadInput(f"C-V data: capacitance must be > 0 F; found {c[c <= 0][0]!r} "
                       f"at {v[c <= 0][0]!r} V")
    if np.unique(v).size < min_points:
        raise BadInput(f"C-V data: need at least {min_points} distinct bias voltages, "
                       f"found {np.unique(v).size}")
    order = np.argsort(v, kind="stable")
    return v[order], c[order]


def _check_area(area_m2: float) -> float:
    if not (isinstance(area_m2, (int, float)) and math.isfinite(area_m2) and area_m2 > 0):
        raise BadInput(f"device area must be a number > 0 m^2, got {area_m2!r}")
    return float(area_m2)


def mott_schottky_line(voltage_V, capacitance_F,
                       temperature_K: float = TABLE_TEMPERATURE_K) -> MottSchottkyLine:
    """Fit 1/C**2 against V with a straight line (ordinary least squares).

    Give only points of the depletion region (reverse and low forward bias, where the
    diffusion capacitance is negligible). Sigmas come from the scatter about the line.
    BadInput if 1/C**2 does not fall with V (not a depletion capacitance).
    """
    v, c = _clean_cv(voltage_V, capacitance_F, 3)
    y = 1.0 / c**2
    scale = float(np.mean(y))
    coef, cov = _line_fit(v, y / scale)
    slope_s, intercept_s = float(coef[0]), float(coef[1])
    slope, intercept = slope_s * scale, intercept_s * scale
    if not slope < 0:
        raise BadInput(f"C-V data: 1/C^2 does not fall with voltage (slope {slope:.3g} "
                       f"1/(F^2 V)); these points are not a depletion capacitance")
    v0 = -intercept / slope
    # Var(v0) from the covariance of (slope, intercept): v0 = -b/a.
    grad = np.array([intercept_s / slope_s**2, -1.0 / slope_s])
    fit = intercept + slope * v
    return MottSchottkyLine(
        slope=slope,
        intercept=intercept,
        intercept_V=v0,
        vbi_V=v0 + thermal_voltage(temperature_K),
        slope_sigma=math.sqrt(max(float(cov[0, 0]), 0.0)) * scale,
        intercept_V_sigma=math.sqrt(max(float(grad @ cov @ grad), 0.0)),
        n_points=int(v.size),
        relative_rms_residual=float(np.sqrt(np.mean(((fit - y) / y) ** 2))),
        temperature_K=float(temperature_K),
    )


def doping_from_slope(slope: float, area_m2: float, permittivity_F_per_m: float) -> float:
    """N = -2/(q*eps*A**2*slope) [per m^3] from a Mott-Schottky slope [1/(F^2 V)]."""
    return float(-2.0 / (_Q * permittivity_F_per_m * _check_area(area_m2) ** 2 * slope))


def mott_schottky(voltage_V, capacitance_F, area_m2: float,
                  semiconductor: str | Material | float = "Si",
                  temperature_K: float = TABLE_TEMPERATURE_K) -> MottSchottkyResult:
    """The Mott-Schottky line with doping and built-in voltage for an area and material.

    ``semiconductor`` is a table name, a Material, or a permittivity in F/m.
    """
    area = _check_area(area_m2)
    eps, name = _permittivity_of(semiconductor)
    line = mott_schottky_line(voltage_V, capacitance_F, temperature_K)
    doping = doping_from_slope(line.slope, area, eps)
    return MottSchottkyResult(
        doping_per_m3=doping,
        doping_sigma_per_m3=abs(doping) * line.slope_sigma / abs(line.slope),
        built_in_voltage_V=line.vbi_V,
        built_in_sigma_V=line.intercept_V_sigma,
        intercept_voltage_V=line.intercept_V,
        slope_per_F2V=line.slope,
        intercept_per_F2=line.intercept,
        n_points=line.n_points,
        relative_rms_residual=line.relative_rms_residual,
        area_m2=area,
        material=name,
        temperature_K=float(temperature_K),
    )


def _permittivity_of(semiconductor: str | Material | float) -> tuple[float, str]:
    if isinstance(semiconductor, (int, float)) and not isinstance(semiconductor, bool):
        if not (math.isfinite(semiconductor) and semiconductor > 0):
            raise BadInput(f"permittivity must be > 0 F/m, got {semiconductor!r}")
        return float(semiconductor), f"eps={float(semiconductor):.4g} F/m"
    mat = material(semiconductor)
    return mat.permittivity_F_per_m, mat.name


def _line_fit(x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Least-squares (slope, intercept) and their covariance from the residual scatter."""
    design = np.column_stack([x, np.ones_like(x)])
    coef, *_ = np.linalg.lstsq(design, y, rcond=None)
    dof = max(x.size - 2, 1)
    s2 = float(np.sum((design @ coef - y) ** 2)) / dof
    cov = s2 * np.linalg.inv(design.T @ design)
    return coef, cov


def doping_profile(voltage_V, capacitance_F, area_m2: float,
                   semiconductor: str | Material | float = "Si",
                   window: int = 5) -> DopingProfile:
    """N(W) from C-V data, d(1/C**2)/dV from local straight-line fits.

    Each point's slope is the least-squares slope of 1/C**2 against V over the
    ``window`` nearest points in voltage (centred where possible), which tolerates noise
    and uneven voltage steps better than a two-point difference. A wider window
    smooths more and resolves less depth. ``semiconductor``: table name, Material, or
    permittivity in F/m.
    """
    area = _check_area(area_m2)
    eps, name = _permittivity_of(semiconductor)
    if not (isinstance(window, int) and window >= 2):
        raise BadInput(f"doping profile window must be an integer >= 2, got {window!r}")
    v, c = _clean_cv(voltage_V, capacitance_F, window)
    y = 1.0 / c**2
    slopes = local_slopes(v, y, window)
    with np.errstate(divide="ignore"):
        doping = -2.0 / (_Q * eps * area**2 * slopes)
    return DopingProfile(voltage_V=v, depth_m=eps * area / c, doping_per_m3=doping,
                         window=window, area_m2=area, material=name)


def local_slopes(x: np.ndarray, y: np.ndarray, window: int) -> np.ndarray:
    """dy/dx at each x: slope of the least-squares line through ``window`` neighbours.

    x must be sorted. The window is centred on each point and shifted inwards at the ends.
    """
    n = x.size
    window = min(window, n)
    start = np.clip(np.arange(n) - window // 2, 0, n - window)
    idx = start[:, None] + np.arange(window)[None, :]
    xs, ys = x[idx], y[idx]
    xm, ym = xs.mean(axis=1, keepdims=True), ys.mean(axis=1, keepdims=True)
    sxx = np.sum((xs - xm) ** 2, axis=1)
    sxy = np.sum((xs - xm) * (ys - ym), axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        return sxy / sxx


def step_junction_built_in_voltage(acceptor_per_m3: float, donor_per_m3: float,
                                   semiconductor: str | Material = "Si",
                                   temperature_K: float = TABLE_TEMPERATURE_K,
                                   intrinsic_density_per_m3: float | None = None) -> float:
    """Vbi = (kT/q)*ln(Na*Nd/ni**2) [V] of a step junction (non-degenerate doping).

    ni comes from the materials table, which holds 300 K values; at another temperature
    give ``intrinsic_density_per_m3``.
    """
    mat = material(semiconductor)
    if intrinsic_density_per_m3 is None:
        if abs(temperature_K - TABLE_TEMPERATURE_K) > 0.5:
            raise BadInput(f"the table's ni is for {TABLE_TEMPERATURE_K:g} K; at "
                           f"{temperature_K:g} K give intrinsic_density_per_m3")
        intrinsic_density_per_m3 = mat.intrinsic_density_per_m3.value
    for label, value in (("acceptor", acceptor_per_m3), ("donor", donor_per_m3),
                         ("intrinsic", intrinsic_density_per_m3)):
        if not (math.isfinite(value) and value > 0):
            raise BadInput(f"{label} density must be > 0 per m^3, got {value!r}")
    ni = intrinsic_density_per_m3
    return thermal_voltage(temperature_K) * math.log(acceptor_per_m3 * donor_per_m3 / ni**2)


def abrupt_capacitance(voltage_V, doping_per_m3: float, built_in_voltage_V: float,
                       area_m2: float, semiconductor: str | Material | float = "Si",
                       temperature_K: float = TABLE_TEMPERATURE_K):
    """C [F] of a one-sided abrupt junction (the §5 formula); nan where V >= Vbi - kT/q."""
    eps, _ = _permittivity_of(semiconductor)
    v = np.asarray(voltage_V, dtype=float)
    span = built_in_voltage_V - v - thermal_voltage(temperature_K)
    with np.errstate(invalid="ignore", divide="ignore"):
        c = area_m2 * np.sqrt(_Q * eps * doping_per_m3 / (2.0 * span))
    c = np.where(span > 0, c, np.nan)
    return c if c.ndim else float(c)


def abrupt_card_values(doping_per_m3: float, built_in_voltage_V: float, area_m2: float,
                       semiconductor: str | Material | float = "Si",
                       temperature_K: float = TABLE_TEMPERATURE_K) -> dict[str, float]:
    """CJO, VJ, M of the model card that reproduces `abrupt_capacitance` exactly.

    CJO*(1 - V/VJ)**-0.5 equals the §5 formula with VJ = Vbi - kT/q.
    """
    vj = built_in_voltage_V - thermal_voltage(temperature_K)
    if not vj > 0:
        raise BadInput(f"built-in voltage {built_in_voltage_V!r} V is not above kT/q")
    cjo = float(abrupt_capacitance(0.0, doping_per_m3, built_in_voltage_V, area_m2,
                                   semiconductor, temperature_K))
    return {"CJO": cjo, "VJ": vj, "M": 0.5}


def abrupt_doping(CJO: float, VJ: float, area_m2: float,  # noqa: N803 - card names
                  semiconductor: str | Material | float = "Si",
                  temperature_K: float = TABLE_TEMPERATURE_K) -> tuple[float, float]:
    """The inverse of `abrupt_card_values`: (doping per m^3, Vbi) of the abrupt junction
    whose card is CJO*(1 - V/VJ)**-0.5, N = 2*VJ*CJO**2/(q*eps*A**2), Vbi = VJ + kT/q."""
    eps, _ = _permittivity_of(semiconductor)
    area = _check_area(area_m2)
    return (2.0 * VJ * CJO**2 / (constants.e * eps * area**2),
            VJ + thermal_voltage(temperature_K))
