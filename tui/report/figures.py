"""The report's figures, drawn with matplotlib's object interface on the Agg canvas.

No pyplot (no global figure state, safe from the runner's thread); matplotlib is imported
inside the functions so the command line starts quickly. Each figure is written as PNG
and SVG into ``run_dir/figures/``; the PNG bytes go back to the caller for embedding.
The look (palette, axes, labels) lives in `report_plotstyle`.
"""

from __future__ import annotations

import io
import os
import threading
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from pnbench.modeling import junction, smallsignal
from pnbench.tui.report import arrhenius
from pnbench.tui.report.analysis import Analysis
from pnbench.tui.report.plotstyle import (
    ACCENT,
    COMPLIANCE,
    MEASURED,
    MODEL,
    STYLE,
    colours,
    grids,
    hz,
    log_axis,
    marks,
    new_figure,
    prefix_scale,
    title,
)

#: Names of every figure a run at one temperature can get, in report order (file stems).
FIGURE_NAMES = ("iv_forward", "iv_reverse", "cv", "mott_schottky", "doping_profile",
                "admittance")
#: Figures only a model over several temperatures gets (after the others).
OVER_TEMPERATURE_FIGURES = (arrhenius.NAME, arrhenius.IV_NAME)

_PNG_DPI = 130
_LOCK = threading.Lock()  # rc_context changes matplotlib's global settings


@dataclass(frozen=True)
class FigureFile:
    name: str
    png: bytes
    png_path: Path
    svg_path: Path


# --- the figures -----------------------------------------------------------------------

def forward_iv(an: Analysis, device: str):
    pts = an.forward
    if pts is None:
        return None
    fig, axes = new_figure(2, 1, sharex=True, height_ratios=(3, 1.2))
    top, low = axes[0, 0], axes[1, 0]
    v, i, hit = pts.voltage_V, np.abs(pts.current_A), pts.compliance
    any_hit = bool(hit.any())  # (no copies of a long run's columns when none is flagged)
    marks(top, v[~hit] if any_hit else v, i[~hit] if any_hit else i, "o", MEASURED,
          label="measured")
    if any_hit:
        marks(top, v[hit], i[hit], "s", COMPLIANCE, label="at compliance")
    shown = [i]
    p = an.params
    if p is not None and an.model is not None and "IS" in an.model.values:
        grid = np.linspace(v.min(), v.max(), 400)
        model = np.asarray(junction.current(grid, p, an.temperature_K))
        top.plot(grid, np.abs(model), "-", color=MODEL, label="model")
        at = _model_current(v, p, an.temperature_K)
        ok = ~hit & (at > 0) & (i > 0)
        res = i[ok]  # measured / model - 1, in percent, worked in place
        res /= at[ok]
        del at
        res -= 1.0
        res *= 100.0
        cap = float(min(100.0, max(1.0, 1.15 * np.max(np.abs(res))))) if res.size else 1.0
        low.axhline(0.0, color="#505860", linewidth=0.8)
        marks(low, v[ok], np.clip(res, -cap, cap), "o", MEASURED, small=True)
        low.set_ylim(-cap, cap)
        beyond = int(np.sum(np.abs(res) > cap))
        if beyond:
            low.text(0.99, 0.05, f"{beyond} beyond \u00b1{cap:.0f} % (drawn at the edge)",
                     transform=low.transAxes, ha="right", fontsize=7, color="#5a636d")
    else:
        low.text(0.5, 0.5, "no model: residuals not available", transform=low.transAxes,
                 ha="center", va="center", color="#5a636d")
    log_axis(top, "y", np.concatenate(shown) if shown else i)
    top.set_ylabel("Current |I| (A)")
    low.set_ylabel("Residual (%)")
    low.set_xlabel("Voltage V (V)")
    top.legend(loc="upper left")
    for ax in (top, low):
        grids(ax)
    title(fig, "Forward I\u2013V", f"{device} at {an.temperature_K:.2f} K; residual = "
           "measured / model \u2212 1")
    return fig


#: Points per call when the model is evaluated at every measured point (a million
#: points at once would hold a dozen temporaries of their size).
MODEL_CHUNK = 65_536


def _model_current(v: np.ndarray, p, temperature_K: float) -> np.ndarray:
    """The model's current at each measured voltage, a chunk at a time."""
    out = np.empty(len(v))
    for start in range(0, len(v), MODEL_CHUNK):
        part = v[start:start + MODEL_CHUNK]
        out[start:start + len(part)] = junction.current(part, p, temperature_K)
    return out


def reverse_iv(an: Analysis, device: str):
    pts = an.reverse
    if pts is None:
        return None
    fig, axes = new_figure()
    ax = axes[0, 0]
    v, i, hit = pts.voltage_V, np.abs(pts.current_A), pts.compliance
    marks(ax, v[~hit], i[~hit], "o", MEASURED, label="measured")
    if hit.any():
        marks(ax, v[hit], i[hit], "s", COMPLIANCE, label="at compliance")
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
    log_axis(ax, "y", np.concatenate(shown))
    ax.set_xlabel("Voltage V (V)")
    ax.set_ylabel("Reverse current |I| (A)")
    ax.legend(loc="upper right")
    grids(ax)
    note = an.breakdown_label if an.breakdown_V is not None else \
        f"breakdown not reached down to {an.reverse_extreme_V:.4g} V"
    title(fig, "Reverse I\u2013V", f"{device} at {an.temperature_K:.2f} K; {note}")
    return fig


def _near(model: np.ndarray, measured: np.ndarray, decades: float = 3.0) -> np.ndarray:
    """Model values within a few decades of the measured range (for the axis limits):
    a model far below the noise floor or far into breakdown should not squash the data."""
    m = measured[np.isfinite(measured) & (measured > 0)]
    if not m.size:
        return model
    lo, hi = m.min() / 10**decades, m.max() * 10
    return model[(model >= lo) & (model <= hi)]


def _has(an: Analysis, *names: str) -> bool:
    return an.model is not None and any(n in an.model.values for n in names)


def cv(an: Analysis, device: str):
    if not an.cv_curves:
        return None
    fig, axes = new_figure()
    ax = axes[0, 0]
    factor, unit = prefix_scale(np.concatenate([c.capacitance_F for c in an.cv_curves]), "F")
    for k, (c, colour) in enumerate(zip(an.cv_curves, colours(len(an.cv_curves)),
                                        strict=True)):
        f_label = hz(c.label_value)
        if len({x.step for x in an.cv_curves}) > 1:
            f_label += f" ({c.step})"
        marks(ax, c.voltage_V, c.capacitance_F / factor, "o", colour,
                label=f"measured, {f_label}")
        if _has(an, "CJO", "TT"):
            grid = np.linspace(c.voltage_V.min(), c.voltage_V.max(), 300)
            y = smallsignal.device_admittance(grid, c.label_value, an.params, an.temperature_K,
                                              fixture_F=an.fixture_F,
                                              fixture_ohm=an.fixture_ohm)
            cp, _ = smallsignal.parallel_from_admittance(y, c.label_value)
            ax.plot(grid, cp / factor, "-", color=MODEL if k == 0 else colour,
                    label=f"model, {f_label}")
    ax.set_xlabel("Bias voltage V (V)")
    ax.set_ylabel(f"Capacitance C\u209a ({unit})")
    ax.set_ylim(bottom=0)
    ax.legend(loc="upper left")
    grids(ax)
    title(fig, "C\u2013V", f"{device} at {an.temperature_K:.2f} K; parallel capacitance "
           "as the meter reports it (the model with the fitted fixture capacitance)")
    return fig


def mott_schottky(an: Analysis, device: str):
    ms = an.mott_schottky
    if ms is None:
        return None
    fig, axes = new_figure()
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
        lines.append(f"N = {ms.doping_m3 * 1e-6:.4g} \u00b1 {ms.doping_sigma_m3 * 1e-6:.2g}"
                     " cm\u207b\u00b3")  # as the depletion table states it
        lines.append(f"({ms.material}, area from the run)")
    else:
        lines.append("doping: not available")
    ax.text(0.98, 0.95, "\n".join(lines), transform=ax.transAxes, ha="right", va="top",
            fontsize=8, bbox={"boxstyle": "round,pad=0.4", "fc": "white", "ec": "#c9ced6"})
    ax.set_xlabel("Bias voltage V (V)")
    ax.set_ylabel(f"1/C\u00b2 ({unit}\u207b\u00b2)")
    ax.set_ylim(bottom=min(0.0, float(np.min(y))) - 0.02 * float(np.max(y)))
    ax.legend(loc="lower left")
    grids(ax)
    title(fig, "Mott\u2013Schottky plot", f"{device}, {hz(ms.frequency_Hz)}; "
           "1/C\u00b2 is a straight line in V for a uniformly doped junction")
    return fig


def doping_profile(an: Analysis, device: str):
    if an.profile is None:
        return None
    w_m, n_m3 = an.profile
    fig, axes = new_figure()
    ax = axes[0, 0]
    ok = np.isfinite(n_m3) & (n_m3 > 0) & np.isfinite(w_m)
    ax.plot(w_m[ok] * 1e6, n_m3[ok] * 1e-6, "o-", color=MEASURED, mfc="none",
            linewidth=1.0, label="N(W), local slope of 1/C\u00b2")
    log_axis(ax, "y", n_m3[ok] * 1e-6)
    ax.set_xlabel("Depletion depth W (\u00b5m)")
    ax.set_ylabel("Doping N (cm\u207b\u00b3)")
    ax.legend(loc="upper left")
    grids(ax)
    ms = an.mott_schottky
    detail = f", {hz(ms.frequency_Hz)}" if ms is not None else ""
    title(fig, "Doping profile N(W)", f"{device}{detail}; N = \u22122 / (q \u03b5 A\u00b2 "
           "d(1/C\u00b2)/dV) at W = \u03b5 A / C")
    return fig


def admittance(an: Analysis, device: str):
    spectra = [s for s in an.spectra if s.label_value > 0] or list(an.spectra)
    if not spectra:
        return None
    fig, axes = new_figure(1, 2)
    g_ax, c_ax = axes[0, 0], axes[0, 1]
    factor, unit = prefix_scale(np.concatenate([s.capacitance_F for s in spectra]), "F")
    from matplotlib.lines import Line2D

    g_all, f_all, handles = [], [], []
    with_model = _has(an, "IS", "CJO", "TT")
    for s, colour in zip(spectra, colours(len(spectra)), strict=True):
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
                                              an.temperature_K, fixture_F=an.fixture_F,
                                              fixture_ohm=an.fixture_ohm)
            cp, gp = smallsignal.parallel_from_admittance(y, grid)
            g_ax.plot(grid, gp, "-", color=colour)
            c_ax.plot(grid, cp / factor, "-", color=colour)
    for ax in (g_ax, c_ax):
        log_axis(ax, "x", np.concatenate(f_all), pad=1.0)
        ax.set_xlabel("Frequency f (Hz)")
        grids(ax)
    g_meas = np.concatenate(g_all)
    if np.isfinite(g_meas).any():
        log_axis(g_ax, "y", g_meas)
    g_ax.set_ylabel("Conductance G\u209a (S)")
    c_ax.set_ylabel(f"Capacitance C\u209a ({unit})")
    c_ax.set_ylim(bottom=0)
    c_ax.legend(handles=handles, title="bias", loc="best")
    title(fig, "Admittance against frequency",
           f"{device} at {an.temperature_K:.2f} K; markers measured, lines the model "
           "(RS in series with gd, Cj and Cd)")
    return fig


_MAKERS: dict[str, Callable] = {
    "iv_forward": forward_iv, "iv_reverse": reverse_iv, "cv": cv,
    "mott_schottky": mott_schottky, "doping_profile": doping_profile,
    "admittance": admittance, arrhenius.NAME: arrhenius.arrhenius,
    arrhenius.IV_NAME: arrhenius.iv_over_temperature,
}


def render_all(an: Analysis, device: str, figures_dir: Path) -> list[FigureFile]:
    """Draw every figure the data allow; write PNG and SVG; remove stale ones of ours."""
    import matplotlib

    figures_dir.mkdir(parents=True, exist_ok=True)
    out = []
    with _LOCK, matplotlib.rc_context(STYLE):
        for name in FIGURE_NAMES + OVER_TEMPERATURE_FIGURES:
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
