"""The report's figures, drawn with matplotlib's object interface on the Agg canvas.

No pyplot (no global figure state, safe from the runner's thread); matplotlib is imported
inside the functions so the command line starts quickly. Each figure is written as PNG
and SVG into ``run_dir/figures/``; the PNG bytes go back to the caller for embedding.

Look: the project's own. Axes carry quantity, symbol and unit; linear axes are scaled to
one SI prefix named in the label; log axes span whole decades with a label per decade.
"""

from __future__ import annotations

import io
import math
import os
import threading
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from pnbench.modeling import junction, smallsignal

from .report_analysis import Analysis

#: Names of every figure the report can hold, in report order (file stems).
FIGURE_NAMES = ("iv_forward", "iv_reverse", "cv", "mott_schottky", "doping_profile",
                "admittance")

MEASURED = "#24476b"
MODEL = "#d1603d"
COMPLIANCE = "#8f8f8f"
ACCENT = "#6b4c9a"
SERIES = ("#24476b", "#2f8f83", "#b5892e", "#8a3b62", "#4f6d2f", "#5a5a8a")
_STYLE = {
    "font.size": 9, "axes.titlesize": 10, "axes.titleweight": "bold",
    "axes.titlelocation": "left", "axes.labelsize": 9, "axes.grid": True,
    "axes.grid.which": "both", "grid.color": "#dfe3e8", "grid.linewidth": 0.6,
    "axes.edgecolor": "#505860", "axes.linewidth": 0.8, "axes.spines.top": False,
    "axes.spines.right": False, "legend.frameon": False, "legend.fontsize": 8,
    "xtick.labelsize": 8, "ytick.labelsize": 8, "lines.linewidth": 1.6,
    "lines.markersize": 4.5, "svg.fonttype": "path", "svg.hashsalt": "pnbench-report",
    "figure.facecolor": "white", "axes.facecolor": "white",
}
_PNG_DPI = 130
_SIZE_IN = (7.2, 4.5)
_PREFIXES = ((1e-15, "f"), (1e-12, "p"), (1e-9, "n"), (1e-6, "\u00b5"), (1e-3, "m"),
             (1.0, ""), (1e3, "k"), (1e6, "M"), (1e9, "G"))
_LOCK = threading.Lock()  # rc_context changes matplotlib's global settings


@dataclass(frozen=True)
class FigureFile:
    name: str
    png: bytes
    png_path: Path
    svg_path: Path


def prefix_scale(values, unit: str) -> tuple[float, str]:
    """(factor, unit with SI prefix) that puts the largest |value| between 1 and 1000."""
    v = np.abs(np.asarray(values, dtype=float))
    v = v[np.isfinite(v) & (v > 0)]
    if not v.size:
        return 1.0, unit
    top = float(v.max())
    factor, prefix = _PREFIXES[0]
    for f, p in _PREFIXES:
        if top >= f * 0.9999:
            factor, prefix = f, p
    return factor, prefix + unit


def decade_limits(values, pad: float = 1.5) -> tuple[float, float] | None:
    """Whole decades enclosing the positive finite values with a little room."""
    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v) & (v > 0)]
    if not v.size:
        return None
    # A point on a decade would sit on the frame: keep a margin of a factor ``pad``.
    lo = 10.0 ** math.floor(math.log10(v.min() / pad) + 1e-9)
    hi = 10.0 ** math.ceil(math.log10(v.max() * pad) - 1e-9)
    return (lo, hi * 10 if hi <= lo else hi)


def _log_axis(ax, which: str, values, pad: float = 1.5) -> None:
    from matplotlib.ticker import LogLocator, NullFormatter, NullLocator

    limits = decade_limits(values, pad)
    axis = ax.xaxis if which == "x" else ax.yaxis
    (ax.set_xscale if which == "x" else ax.set_yscale)("log")
    if limits is None:
        return
    (ax.set_xlim if which == "x" else ax.set_ylim)(*limits)
    span = round(math.log10(limits[1] / limits[0]))
    step = 1 if span <= 14 else 2
    axis.set_major_locator(LogLocator(base=10.0, subs=(1.0,), numticks=span // step + 2))
    if step > 1:
        decades = 10.0 ** np.arange(math.log10(limits[0]), math.log10(limits[1]) + 1, step)
        from matplotlib.ticker import FixedLocator

        axis.set_major_locator(FixedLocator(decades))
    axis.set_major_formatter(_decade_label)
    if span <= 6:
        axis.set_minor_locator(LogLocator(base=10.0, subs=tuple(range(2, 10)), numticks=99))
        axis.set_minor_formatter(_mantissa_labels if span <= 2 else NullFormatter())
    else:  # minor ticks over many decades only crowd the axis (and cost drawing time)
        axis.set_minor_locator(NullLocator())


_SUPERSCRIPT = str.maketrans("-0123456789", "\u207b\u2070\u00b9\u00b2\u00b3\u2074\u2075\u2076"
                                              "\u2077\u2078\u2079")


def _power(exponent: int) -> str:
    return "10" + str(exponent).translate(_SUPERSCRIPT)


def _decade_label(value: float, _pos=None) -> str:
    """10\u207f with a superscript exponent (plain text: no mathtext to typeset)."""
    if not value > 0:
        return ""
    return _power(round(math.log10(value)))


def _mantissa_labels(value: float, _pos=None) -> str:
    """Labels 2 and 5 of a short log axis as 2\u00d710\u207f."""
    if not value > 0:
        return ""
    exponent = math.floor(math.log10(value) + 1e-9)
    mantissa = round(value / 10.0**exponent)
    return f"{mantissa}\u00d7{_power(exponent)}" if mantissa in (2, 5) else ""


def _new_figure(rows: int = 1, cols: int = 1, **kw):
    from matplotlib.figure import Figure

    fig = Figure(figsize=_SIZE_IN)
    # Fixed margins: room for the title block, tick labels and axis labels. (A layout
    # engine would find them too, at several times the drawing cost.)
    fig.subplots_adjust(left=0.1, right=0.975, top=0.84, bottom=0.11,
                        wspace=0.28 if cols > 1 else 0.2, hspace=0.12)
    axes = fig.subplots(rows, cols, squeeze=False, **kw)
    return fig, axes


def _grids(ax) -> None:
    """Major grid everywhere; minor grid on log axes of a few decades (more would hatch)."""
    ax.grid(True, which="major", color="#d3d8de", linewidth=0.7)
    ax.grid(False, which="minor")
    for name, scale, limits in (("x", ax.get_xscale(), ax.get_xlim()),
                                ("y", ax.get_yscale(), ax.get_ylim())):
        if scale == "log" and min(limits) > 0 and math.log10(max(limits) / min(limits)) <= 6:
            ax.grid(True, which="minor", axis=name, color="#eef0f3", linewidth=0.5)


def _title(fig, text: str, subtitle: str) -> None:
    fig.text(0.012, 0.975, text, ha="left", va="top", fontsize=11, fontweight="bold",
             color="#1d2733")
    fig.text(0.012, 0.918, subtitle, ha="left", va="top", fontsize=8, color="#5a636d")


# --- the figures -----------------------------------------------------------------------

def forward_iv(an: Analysis, device: str):
    pts = an.forward
    if pts is None:
        return None
    fig, axes = _new_figure(2, 1, sharex=True, height_ratios=(3, 1.2))
    top, low = axes[0, 0], axes[1, 0]
    v, i, hit = pts.voltage_V, np.abs(pts.current_A), pts.compliance
    top.plot(v[~hit], i[~hit], "o", color=MEASURED, mfc="none", label="measured")
    if hit.any():
        top.plot(v[hit], i[hit], "s", color=COMPLIANCE, mfc="none", label="at compliance")
    shown = [i]
    p = an.params
    if p is not None and an.model is not None and "IS" in an.model.values:
        grid = np.linspace(v.min(), v.max(), 400)
        model = np.asarray(junction.current(grid, p, an.temperature_K))
        top.plot(grid, np.abs(model), "-", color=MODEL, label="model")
        at = np.asarray(junction.current(v, p, an.temperature_K))
        ok = ~hit & (at > 0) & (i > 0)
        res = 100.0 * (i[ok] / at[ok] - 1.0)
        cap = float(min(100.0, max(1.0, 1.15 * np.max(np.abs(res))))) if res.size else 1.0
        low.axhline(0.0, color="#505860", linewidth=0.8)
        low.plot(v[ok], np.clip(res, -cap, cap), "o", color=MEASURED, mfc="none",
                 markersize=3.5)
        low.set_ylim(-cap, cap)
        beyond = int(np.sum(np.abs(res) > cap))
        if beyond:
            low.text(0.99, 0.05, f"{beyond} beyond \u00b1{cap:.0f} % (drawn at the edge)",
                     transform=low.transAxes, ha="right", fontsize=7, color="#5a636d")
    else:
        low.text(0.5, 0.5, "no model: residuals not available", transform=low.transAxes,
                 ha="center", va="center", color="#5a636d")
    _log_axis(top, "y", np.concatenate(shown) if shown else i)
    top.set_ylabel("Current |I| (A)")
    low.set_ylabel("Residual (%)")
    low.set_xlabel("Voltage V (V)")
    top.legend(loc="upper left")
    for ax in (top, low):
        _grids(ax)
    _title(fig, "Forward I\u2013V", f"{device} at {an.temperature_K:.2f} K; residual = "
           "measured / model \u2212 1")
    return fig


def reverse_iv(an: Analysis, device: str):
    pts = an.reverse
    if pts is None:
        return None
    fig, axes = _new_figure()
    ax = axes[0, 0]
    v, i, hit = pts.voltage_V, np.abs(pts.current_A), pts.compliance
    ax.plot(v[~hit], i[~hit], "o", color=MEASURED, mfc="none", label="measured")
    if hit.any():
        ax.plot(v[hit], i[hit], "s", color=COMPLIANCE, mfc="none", label="at compliance")
    shown = [i]
    p = an.params
    if p is not None and an.model is not None and "IS" in an.model.values:
        grid = np.linspace(v.min(), min(-1e-3, v.max()), 400)
        model = np.abs(np.asarray(junction.current(grid, p, an.temperature_K)))
        ax.plot(grid, model, "-", color=MODEL, label="model")
        shown.append(_near(model, i))
    if an.breakdown_V is not None:
        ax.axvline(an.breakdown_V, color=ACCENT, linestyle="--", linewidth=1.2,
                   label=an.breakdown_label)
    _log_axis(ax, "y", np.concatenate(shown))
    ax.set_xlabel("Voltage V (V)")
    ax.set_ylabel("Reverse current |I| (A)")
    ax.legend(loc="upper right")
    _grids(ax)
    note = an.breakdown_label if an.breakdown_V is not None else \
        f"breakdown not reached down to {an.reverse_extreme_V:.4g} V"
    _title(fig, "Reverse I\u2013V", f"{device} at {an.temperature_K:.2f} K; {note}")
    return fig


def _near(model: np.ndarray, measured: np.ndarray, decades: float = 3.0) -> np.ndarray:
    """Model values within a few decades of the measured range (for the axis limits):
    a model far below the noise floor or far into breakdown should not squash the data."""
    m = measured[np.isfinite(measured) & (measured > 0)]
    if not m.size:
        return model
    lo, hi = m.min() / 10**decades, m.max() * 10
    return model[(model >= lo) & (model <= hi)]


def _colours(n: int) -> list:
    """``n`` line colours: the house series, or a ramp along it for many curves."""
    if n <= len(SERIES):
        return list(SERIES[:n])
    from matplotlib.colors import LinearSegmentedColormap

    ramp = LinearSegmentedColormap.from_list("pnbench", [SERIES[0], SERIES[1], SERIES[2],
                                                         MODEL])
    return [ramp(k / (n - 1)) for k in range(n)]


def _has(an: Analysis, *names: str) -> bool:
    return an.model is not None and any(n in an.model.values for n in names)


def cv(an: Analysis, device: str):
    if not an.cv_curves:
        return None
    fig, axes = _new_figure()
    ax = axes[0, 0]
    factor, unit = prefix_scale(np.concatenate([c.capacitance_F for c in an.cv_curves]), "F")
    for k, (c, colour) in enumerate(zip(an.cv_curves, _colours(len(an.cv_curves)),
                                        strict=True)):
        f_label = _hz(c.label_value)
        if len({x.step for x in an.cv_curves}) > 1:
            f_label += f" ({c.step})"
        ax.plot(c.voltage_V, c.capacitance_F / factor, "o", color=colour, mfc="none",
                label=f"measured, {f_label}")
        if _has(an, "CJO", "TT"):
            grid = np.linspace(c.voltage_V.min(), c.voltage_V.max(), 300)
            y = smallsignal.device_admittance(grid, c.label_value, an.params, an.temperature_K)
            cp, _ = smallsignal.parallel_from_admittance(y, c.label_value)
            ax.plot(grid, cp / factor, "-", color=MODEL if k == 0 else colour,
                    label=f"model, {f_label}")
    ax.set_xlabel("Bias voltage V (V)")
    ax.set_ylabel(f"Capacitance C\u209a ({unit})")
    ax.set_ylim(bottom=0)
    ax.legend(loc="upper left")
    _grids(ax)
    _title(fig, "C\u2013V", f"{device} at {an.temperature_K:.2f} K; parallel capacitance "
           "as the meter reports it")
    return fig


def mott_schottky(an: Analysis, device: str):
    ms = an.mott_schottky
    if ms is None:
        return None
    fig, axes = _new_figure()
    ax = axes[0, 0]
    factor, unit = prefix_scale(ms.capacitance_F, "F")
    y = 1.0 / (ms.capacitance_F / factor) ** 2
    ax.plot(ms.voltage_V[ms.used], y[ms.used], "o", color=MEASURED, mfc="none",
            label="measured, on the line")
    if (~ms.used).any():
        ax.plot(ms.voltage_V[~ms.used], y[~ms.used], "o", color=COMPLIANCE,
                mfc="none", label="measured, forward bias (not used)")
    lo = min(float(ms.voltage_V.min()), ms.intercept_V)
    hi = max(float(ms.voltage_V[ms.used].max()), ms.intercept_V)
    grid = np.linspace(lo, hi, 50)
    ax.plot(grid, ms.slope * (grid - ms.intercept_V) * factor**2, "-", color=MODEL,
            label="Mott\u2013Schottky line")
    ax.axhline(0.0, color="#505860", linewidth=0.8)
    lines = [f"intercept {ms.intercept_V:.3f} V",
             f"Vbi = {ms.vbi_V:.3f} \u00b1 {ms.vbi_sigma_V:.2g} V"]
    if ms.doping_m3 is not None:
        lines.append(f"N = {ms.doping_m3 * 1e-6:.3e} \u00b1 {ms.doping_sigma_m3 * 1e-6:.1e}"
                     " cm\u207b\u00b3")
        lines.append(f"({ms.material}, area from the run)")
    else:
        lines.append("doping: not available")
    ax.text(0.98, 0.95, "\n".join(lines), transform=ax.transAxes, ha="right", va="top",
            fontsize=8, bbox={"boxstyle": "round,pad=0.4", "fc": "white", "ec": "#c9ced6"})
    ax.set_xlabel("Bias voltage V (V)")
    ax.set_ylabel(f"1/C\u00b2 ({unit}\u207b\u00b2)")
    ax.set_ylim(bottom=min(0.0, float(np.min(y))) - 0.02 * float(np.max(y)))
    ax.legend(loc="lower left")
    _grids(ax)
    _title(fig, "Mott\u2013Schottky plot", f"{device}, {_hz(ms.frequency_Hz)}; "
           "1/C\u00b2 is a straight line in V for a uniformly doped junction")
    return fig


def doping_profile(an: Analysis, device: str):
    if an.profile is None:
        return None
    w_m, n_m3 = an.profile
    fig, axes = _new_figure()
    ax = axes[0, 0]
    ok = np.isfinite(n_m3) & (n_m3 > 0) & np.isfinite(w_m)
    ax.plot(w_m[ok] * 1e6, n_m3[ok] * 1e-6, "o-", color=MEASURED, mfc="none",
            linewidth=1.0, label="N(W), local slope of 1/C\u00b2")
    _log_axis(ax, "y", n_m3[ok] * 1e-6)
    ax.set_xlabel("Depletion depth W (\u00b5m)")
    ax.set_ylabel("Doping N (cm\u207b\u00b3)")
    ax.legend(loc="upper left")
    _grids(ax)
    ms = an.mott_schottky
    detail = f", {_hz(ms.frequency_Hz)}" if ms is not None else ""
    _title(fig, "Doping profile N(W)", f"{device}{detail}; N = \u22122 / (q \u03b5 A\u00b2 "
           "d(1/C\u00b2)/dV) at W = \u03b5 A / C")
    return fig


def admittance(an: Analysis, device: str):
    spectra = [s for s in an.spectra if s.label_value > 0] or list(an.spectra)
    if not spectra:
        return None
    fig, axes = _new_figure(1, 2)
    g_ax, c_ax = axes[0, 0], axes[0, 1]
    factor, unit = prefix_scale(np.concatenate([s.capacitance_F for s in spectra]), "F")
    from matplotlib.lines import Line2D

    g_all, f_all, handles = [], [], []
    with_model = _has(an, "IS", "CJO", "TT")
    for s, colour in zip(spectra, _colours(len(spectra)), strict=True):
        g_ax.plot(s.frequency_Hz, s.conductance_S, "o", color=colour, mfc="none",
                  clip_on=False, zorder=3)
        c_ax.plot(s.frequency_Hz, s.capacitance_F / factor, "o", color=colour, mfc="none",
                  clip_on=False, zorder=3)
        g_all.append(s.conductance_S)
        f_all.append(s.frequency_Hz)
        handles.append(Line2D([], [], color=colour, marker="o", mfc="none",
                              linestyle="-" if with_model else "none",
                              label=f"{s.label_value:.4g} V"))
        if with_model:
            grid = np.geomspace(s.frequency_Hz.min(), s.frequency_Hz.max(), 200)
            y = smallsignal.device_admittance(s.label_value, grid, an.params,
                                              an.temperature_K)
            cp, gp = smallsignal.parallel_from_admittance(y, grid)
            g_ax.plot(grid, gp, "-", color=colour)
            c_ax.plot(grid, cp / factor, "-", color=colour)
    for ax in (g_ax, c_ax):
        _log_axis(ax, "x", np.concatenate(f_all), pad=1.0)
        ax.set_xlabel("Frequency f (Hz)")
        _grids(ax)
    g_meas = np.concatenate(g_all)
    if np.isfinite(g_meas).any():
        _log_axis(g_ax, "y", g_meas)
    g_ax.set_ylabel("Conductance G\u209a (S)")
    c_ax.set_ylabel(f"Capacitance C\u209a ({unit})")
    c_ax.set_ylim(bottom=0)
    c_ax.legend(handles=handles, title="bias", loc="best")
    _title(fig, "Admittance against frequency",
           f"{device} at {an.temperature_K:.2f} K; markers measured, lines the model "
           "(RS in series with gd, Cj and Cd)")
    return fig


def _hz(f: float) -> str:
    factor, unit = prefix_scale([f], "Hz")
    return f"{f / factor:.4g} {unit}"


_MAKERS: dict[str, Callable] = {
    "iv_forward": forward_iv, "iv_reverse": reverse_iv, "cv": cv,
    "mott_schottky": mott_schottky, "doping_profile": doping_profile,
    "admittance": admittance,
}


def render_all(an: Analysis, device: str, figures_dir: Path) -> list[FigureFile]:
    """Draw every figure the data allow; write PNG and SVG; remove stale ones of ours."""
    import matplotlib

    figures_dir.mkdir(parents=True, exist_ok=True)
    out = []
    with _LOCK, matplotlib.rc_context(_STYLE):
        for name in FIGURE_NAMES:
            fig = _MAKERS[name](an, device)
            png_path, svg_path = figures_dir / f"{name}.png", figures_dir / f"{name}.svg"
            if fig is None:
                for stale in (png_path, svg_path):
                    stale.unlink(missing_ok=True)
                continue
            buf = io.BytesIO()
            fig.savefig(buf, format="png", dpi=_PNG_DPI, metadata={"Software": None})
            png = buf.getvalue()
            _atomic_write(png_path, png)
            buf = io.BytesIO()
            fig.savefig(buf, format="svg", metadata={"Date": None, "Creator": None})
            _atomic_write(svg_path, buf.getvalue())
            out.append(FigureFile(name, png, png_path, svg_path))
    return out


def _atomic_write(path: Path, payload: bytes) -> None:
    tmp = path.with_name(f".{path.name}.{os.getpid()}.{threading.get_ident()}.tmp")
    tmp.write_bytes(payload)
    tmp.replace(path)
