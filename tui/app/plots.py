"""What each plot view shows, computed from a RunState and the fitted parameters.

Pure numpy over `modeling`: a view becomes a `PlotData` (series of x/y values, axis
titles, which axes are logarithmic). Log axes carry log10 of the value; the plot widget
labels them in decades. The fitted curves come from the model itself (junction current,
device admittance), evaluated on a grid; no fitting happens here.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from pnbench.modeling import junction, smallsignal
from pnbench.modeling.params import DiodeParams
from pnbench.sweeps.quantities import format_quantity
from pnbench.tui.app.state import Estimate, RunState, Snapshot

#: (key, title) of every view, in the order the view key cycles through them.
VIEWS: tuple[tuple[str, str], ...] = (
    ("fwd", "I-V forward"),
    ("rev", "I-V reverse"),
    ("resid", "I-V residual"),
    ("cv", "C-V"),
    ("mott", "Mott-Schottky"),
    ("yc", "admittance C"),
    ("yg", "admittance G"),
    ("arr", "Arrhenius IS(T)"),
)
#: Views only a model over several temperatures fills.
OVER_TEMPERATURE_VIEWS = ("arr",)

#: The view that shows a step kind best (the run screen follows the running step).
VIEW_OF_KIND = {"iv_forward": "fwd", "iv_reverse": "rev", "cv": "cv", "admittance": "yc"}

#: Decades shown below the largest current on the semilog I-V plot; smaller currents
#: (such as the exact zero of a point at 0 V) would squash the rest into a few rows.
IV_DECADES = 14
#: No current below this is drawn (far under any bench SMU's resolution).
IV_FLOOR_A = 1e-16

#: Most points drawn per series. A terminal plot has a few thousand character cells:
#: beyond this, points that would land in the same spot of a fine grid are drawn once,
#: then every k-th point. Drawing is the costly part of a redraw (textual-plot draws
#: point by point), so this keeps keys answered while a long sweep streams in.
MAX_DRAWN = 800
THIN_GRID = 400

#: Markers for data series, distinct without colour.
MARKERS = ("o", "+", "x", "*", "#", "@", "%", "&", "=", "$")
STYLES = ("bold",) * len(MARKERS)


@dataclass
class Series:
    x: np.ndarray
    y: np.ndarray
    label: str
    line: bool = False
    marker: str = "o"


@dataclass
class PlotData:
    view: str
    title: str
    x_title: str
    y_title: str
    x_unit: str = ""
    y_unit: str = ""
    x_log: bool = False
    y_log: bool = False
    series: list[Series] = field(default_factory=list)
    note: str = ""

    @property
    def empty(self) -> bool:
        return not any(len(s.x) for s in self.series)


def model_params(parameters: dict[str, Estimate]) -> DiodeParams | None:
    """A DiodeParams from the estimates known so far (absent ones take the card
    defaults); None while IS or N is missing or the set is not a valid model."""
    values = {}
    for name, estimate in parameters.items():
        if name.upper() in DiodeParams.__dataclass_fields__ and math.isfinite(estimate.value):
            values[name.upper()] = estimate.value
    try:
        return DiodeParams.from_mapping(values)
    except (ValueError, KeyError):
        return None


def has_dc_fit(parameters: dict[str, Estimate]) -> bool:
    return "IS" in parameters and "N" in parameters


def has_cv_fit(parameters: dict[str, Estimate]) -> bool:
    return "CJO" in parameters


def _thin(x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """At most MAX_DRAWN points that look the same as (x, y) on a terminal plot."""
    n = len(x)
    if n <= MAX_DRAWN:
        return x, y
    finite = np.isfinite(x) & np.isfinite(y)
    x, y = x[finite], y[finite]
    if len(x) == 0:
        return x, y

    def cell(values: np.ndarray) -> np.ndarray:
        lo, hi = float(values.min()), float(values.max())
        span = hi - lo if hi > lo else 1.0
        return np.minimum(((values - lo) / span * THIN_GRID).astype(np.int64), THIN_GRID)

    _, first = np.unique(cell(x) * (THIN_GRID + 1) + cell(y), return_index=True)
    keep = np.sort(first)
    if len(keep) > MAX_DRAWN:
        keep = keep[:: int(math.ceil(len(keep) / MAX_DRAWN))]
    return x[keep], y[keep]


def _log10_abs(values: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore"):
        out = np.log10(np.abs(values))
    out[~np.isfinite(out)] = np.nan
    return out


def _grid(values: np.ndarray, count: int = 160) -> np.ndarray:
    finite = values[np.isfinite(values)]
    if finite.size == 0:
        return np.empty(0)
    lo, hi = float(finite.min()), float(finite.max())
    if hi <= lo:
        return np.array([lo])
    return np.linspace(lo, hi, count)


def _admittance_split(state: RunState) -> tuple[np.ndarray, np.ndarray]:
    """Boolean masks over state.cv: (C-V points, admittance-vs-frequency points)."""
    adm = state.cv.step_mask(lambda step: "adm" in state.step_kind(step).lower())
    if adm.any():
        return ~adm, adm
    # No step says which is which: biases measured at 3 or more frequencies are
    # admittance points; all points also stay in the C-V view.
    v = np.round(state.cv.column("voltage_V"), 4)
    f = state.cv.column("frequency_Hz")
    multi = np.zeros(len(v), dtype=bool)
    for bias in np.unique(v[np.isfinite(v)]):
        at = v == bias
        if np.unique(f[at]).size >= 3:
            multi |= at
    return np.ones(len(v), dtype=bool), multi


def plot_data(view: str, state: RunState | Snapshot) -> PlotData:
    """The series of one view (see VIEWS) for the run as it stands (a RunState on the
    UI thread, or a Snapshot of one on any thread)."""
    params = model_params(state.parameters)
    builder = {"fwd": _iv, "rev": _iv, "resid": _residual, "cv": _cv, "mott": _mott,
               "yc": _admittance, "yg": _admittance, "arr": _arrhenius}[view]
    return builder(view, state, params)


def _reverse_mask(state: RunState) -> np.ndarray:
    """I-V points of reverse steps (by step kind; by the sign of V when unknown)."""
    v = state.iv.column("voltage_V")
    known = state.iv.step_mask(lambda step: state.step_kind(step).startswith("iv_"))
    by_kind = state.iv.step_mask(lambda step: state.step_kind(step) == "iv_reverse")
    return np.where(known, by_kind, v < 0)


def _iv(view: str, state: RunState, params: DiodeParams | None) -> PlotData:
    data = PlotData(view, dict(VIEWS)[view], "V", "|I|", "V", "A", y_log=True)
    reverse = _reverse_mask(state)
    keep = reverse if view == "rev" else ~reverse
    v, i = state.iv.column("voltage_V")[keep], state.iv.column("current_A")[keep]
    compliance = state.iv.column("compliance")[keep] > 0
    ok = ~compliance
    data.series.append(Series(*_thin(v[ok], _log10_abs(i[ok])), "measured", marker="o"))
    if compliance.any():
        data.series.append(Series(v[compliance], _log10_abs(i[compliance]),
                                  "in compliance", marker="!"))
        data.note = f"{int(compliance.sum())} in compliance (!)"
    if params is not None and has_dc_fit(state.parameters) and len(v):
        grid = _grid(v)
        fit = junction.current(grid, params, state.temperature_K)
        data.series.append(Series(grid, _log10_abs(np.asarray(fit)), "fit", line=True))
    elif len(v):
        data.note = data.note or "no I-V fit yet"
    if not len(v):
        data.note = f"no {'reverse' if view == 'rev' else 'forward'} I-V points yet"
    _clip_decades(data)
    return data


def _clip_decades(data: PlotData) -> None:
    """Hide log values more than IV_DECADES under the largest measured one."""
    measured = [s.y[np.isfinite(s.y)] for s in data.series if not s.line]
    tops = [float(y.max()) for y in measured if y.size]
    if not tops:
        return
    floor = max(max(tops) - IV_DECADES, math.log10(IV_FLOOR_A))
    for series in data.series:
        series.y = np.where(series.y >= floor, series.y, np.nan)


def iv_residuals(state: RunState | Snapshot, params: DiodeParams,
                 reverse: bool | None = None) -> tuple[np.ndarray, np.ndarray]:
    """(V, log10(|I measured| / |I fit|)) for the points both are nonzero at; only the
    forward (False) or reverse (True) points when `reverse` says which."""
    v, i = state.iv.column("voltage_V"), state.iv.column("current_A")
    fit = np.asarray(junction.current(v, params, state.temperature_K), dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        r = np.log10(np.abs(i) / np.abs(fit))
    keep = np.isfinite(r) & (state.iv.column("compliance") == 0)
    if reverse is not None:
        keep &= _reverse_mask(state) == reverse
    return v[keep], r[keep]


def _residual(view: str, state: RunState, params: DiodeParams | None) -> PlotData:
    """Forward points against the fit; reverse points too once the fit has a reverse
    part (RSH or BV): before that the model cannot be expected to meet them. The rms is
    that of the forward points: reverse points sit mostly at the meter's noise floor,
    where the ratio to a femtoampere fit says nothing about the fit."""
    data = PlotData(view, dict(VIEWS)[view], "V", "log10(I/Ifit)", "V", "dec")
    if params is None or not has_dc_fit(state.parameters) or len(state.iv) == 0:
        data.note = "needs I-V points and an I-V fit"
        return data
    v, r = iv_residuals(state, params, reverse=False)
    data.series.append(Series(*_thin(v, r), "forward", marker="o"))
    rms = float(np.sqrt(np.mean(r ** 2))) if len(r) else math.nan
    if {"RSH", "BV"} & set(state.parameters):
        v_rev, r_rev = iv_residuals(state, params, reverse=True)
        data.series.append(Series(*_thin(v_rev, r_rev), "reverse", marker="+"))
        v = np.concatenate([v, v_rev])
    if len(v):
        data.series.append(Series(np.array([v.min(), v.max()]), np.zeros(2), "zero",
                                  line=True))
        data.note = (f"forward rms {rms:.3f} decades" if math.isfinite(rms)
                     else "no forward points")
    return data


def _cv_points(state: RunState) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    cv_mask, _ = _admittance_split(state)
    v = state.cv.column("voltage_V")[cv_mask]
    c = state.cv.column("capacitance_F")[cv_mask]
    f = state.cv.column("frequency_Hz")[cv_mask]
    return v, c, f


def _main_frequency(f: np.ndarray) -> float:
    finite = f[np.isfinite(f)]
    if finite.size == 0:
        return math.nan
    values, counts = np.unique(finite, return_counts=True)
    return float(values[np.argmax(counts)])


def _fixture_F(state: RunState, name: str = "CFIX") -> float:
    """The fitted fixture capacitance (or with ``name`` RFIX its series resistance; shown
    as the bench's), else 0: a model curve drawn over the meter's readings includes it,
    since the meter saw it too."""
    est = state.parameters.get(name)
    value = getattr(est, "value", None)
    return float(value) if isinstance(value, (int, float)) and math.isfinite(value) else 0.0


def _cp_fit(v: np.ndarray, frequency_Hz: float, params: DiodeParams,
            temperature_K: float, fixture_F: float = 0.0,
            fixture_ohm: float = 0.0) -> np.ndarray:
    y = smallsignal.device_admittance(v, frequency_Hz, params, temperature_K,
                                      fixture_F=fixture_F, fixture_ohm=fixture_ohm)
    cp, _ = smallsignal.parallel_from_admittance(y, frequency_Hz)
    return np.asarray(cp, dtype=float)


def _cv(view: str, state: RunState, params: DiodeParams | None) -> PlotData:
    data = PlotData(view, dict(VIEWS)[view], "V", "Cp", "V", "F")
    v, c, f = _cv_points(state)
    for n, freq in enumerate(np.unique(f[np.isfinite(f)])[:len(MARKERS)]):
        at = f == freq
        data.series.append(Series(*_thin(v[at], c[at]), f"{_si(freq, 'Hz')}",
                                  marker=MARKERS[n]))
    if params is not None and has_cv_fit(state.parameters) and len(v):
        freq = _main_frequency(f)
        if math.isfinite(freq):
            grid = _grid(v)
            data.series.append(Series(grid, _cp_fit(grid, freq, params, state.temperature_K,
                                                      _fixture_F(state),
                                                      _fixture_F(state, "RFIX")),
                                      "fit", line=True))
    elif len(v):
        data.note = "no C-V fit yet"
    return data


def _mott(view: str, state: RunState, params: DiodeParams | None) -> PlotData:
    data = PlotData(view, dict(VIEWS)[view], "V", "1/C^2", "V", "1/F^2")
    v, c, _ = _cv_points(state)
    with np.errstate(divide="ignore"):
        inv = 1.0 / c ** 2
    good = np.isfinite(inv) & (c > 0)
    data.series.append(Series(*_thin(v[good], inv[good]), "measured", marker="o"))
    if params is not None and has_cv_fit(state.parameters) and good.any():
        grid = _grid(v[good])
        grid = grid[grid < params.FC * params.VJ]
        cj = np.asarray(smallsignal.depletion_capacitance(grid, params), dtype=float)
        data.series.append(Series(grid, 1.0 / cj ** 2, "fit (Cj)", line=True))
        data.note = f"intercept near VJ = {params.VJ:.3g} V for an abrupt junction (M=0.5)"
    return data


def _admittance(view: str, state: RunState, params: DiodeParams | None) -> PlotData:
    capacitive = view == "yc"
    data = PlotData(view, dict(VIEWS)[view], "f", "Cp" if capacitive else "Gp", "Hz",
                    "F" if capacitive else "S", x_log=True, y_log=True)
    _, mask = _admittance_split(state)
    v = np.round(state.cv.column("voltage_V")[mask], 4)
    f = state.cv.column("frequency_Hz")[mask]
    y = state.cv.column("capacitance_F" if capacitive else "conductance_S")[mask]
    biases = np.unique(v[np.isfinite(v)])
    every = biases.size
    if biases.size > len(MARKERS):  # show a spread of biases, lowest to highest
        biases = biases[np.linspace(0, biases.size - 1, len(MARKERS)).round().astype(int)]
        data.note = f"{biases.size} of {every} biases shown, lowest to highest"
    for n, bias in enumerate(biases):
        at = (v == bias) & np.isfinite(f) & (f > 0)
        order = np.argsort(f[at])
        data.series.append(Series(np.log10(f[at][order]), _log10_abs(y[at][order]),
                                  f"{bias:+.3g} V", marker=MARKERS[n]))
        if params is not None and has_dc_fit(state.parameters) and at.sum() >= 2:
            grid = np.linspace(f[at].min(), f[at].max(), 80)
            adm = smallsignal.device_admittance(float(bias), grid, params,
                                                state.temperature_K, fixture_F=_fixture_F(state),
                                                fixture_ohm=_fixture_F(state, "RFIX"))
            cp, gp = smallsignal.parallel_from_admittance(adm, grid)
            data.series.append(Series(np.log10(grid), _log10_abs(cp if capacitive else gp),
                                      "", line=True))
    if not biases.size:
        data.note = "no admittance points (bias x frequency) yet"
    return data


def _si(value: float, unit: str) -> str:
    return format_quantity(value, unit, prec=3)


def _arrhenius(view: str, state: RunState | Snapshot, params: DiodeParams | None) -> PlotData:
    """log10 IS of each temperature's own fit against 1000/T, and the model's IS(T)."""
    from pnbench.modeling import temperature as tm

    data = PlotData(view, dict(VIEWS)[view], "1000/T", "IS", "1/K", "A", y_log=True)
    rows = [r for r in state.temperatures
            if isinstance(r.get("temperature_K"), (int, float)) and r["temperature_K"] > 0
            and isinstance(r.get("IS"), (int, float)) and r["IS"] > 0]
    if len(rows) < 2:
        data.note = "a model over two temperatures or more (a run over temperature)"
        return data
    t = np.array([r["temperature_K"] for r in rows])
    data.series.append(Series(1000.0 / t, np.log10([r["IS"] for r in rows]),
                              "each temperature", marker="o"))
    p, tnom = state.parameters, state.model_temperature_K
    if tnom and all(k in p for k in ("IS", "N", "EG")):
        xti = p["XTI"].value if "XTI" in p else 3.0
        grid = np.linspace(t.min(), t.max(), 80)
        law = [math.log10(p["IS"].value) + tm.log_saturation_ratio(
            p["N"].value, p["EG"].value, xti, g, tnom) / math.log(10.0) for g in grid]
        data.series.append(Series(1000.0 / grid, np.array(law), "fit", line=True))
        data.note = f"EG {p['EG'].value:.4g} eV, XTI {xti:.3g}"
    return data
