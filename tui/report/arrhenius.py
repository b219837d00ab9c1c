"""The report's figure of a model over temperature: IS(T) as an Arrhenius plot with the
global fit, and N and RS against temperature.

Drawn from model.json alone: its ``temperatures`` rows (each temperature's own fit, with
sigmas) are the points, and the card's temperature law (modeling.temperature) with its
EG, XTI, N and TRS at TNOM is the line. A model without two temperatures has no figure.
"""

from __future__ import annotations

import math
import re

import numpy as np

from pnbench.modeling import junction
from pnbench.modeling import temperature as tm
from pnbench.tui.report.analysis import Analysis
from pnbench.tui.report.plotstyle import (
    ACCENT,
    MEASURED,
    MODEL,
    colours,
    grids,
    log_axis,
    marks,
    new_figure,
    title,
)

NAME = "arrhenius"
IV_NAME = "iv_over_temperature"
IV_TITLE = "Forward I\u2013V at every temperature"
IV_CAPTION = ("Forward I\u2013V of every stage set point with the model moved to that "
              "temperature by the card's temperature law (EG, XTI, TRS at TNOM).")
_AT = re.compile(r"@([0-9.]+)K$")
TITLE = "IS against temperature (Arrhenius)"
CAPTION = ("Saturation current of each temperature's own fit against 1000/T with one "
           "sigma, and the model's IS(T) from EG and XTI (the line); below, N and RS of "
           "each temperature with the model's N and RS(T).")


def rows(an: Analysis) -> list[dict]:
    """The per-temperature rows with an IS, in order of temperature."""
    model = an.model
    raw = model.extras.get("temperatures") if model is not None else None
    if not isinstance(raw, list):
        return []
    out = [r for r in raw if isinstance(r, dict) and _num(r.get("temperature_K"))
           and _num(r.get("IS"))]
    return sorted(out, key=lambda r: r["temperature_K"])


def _num(x) -> bool:
    return isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x) \
        and x > 0


def arrhenius(an: Analysis, device: str):
    data = rows(an)
    if len(data) < 2 or an.model is None:
        return None
    m = an.model
    t = np.array([r["temperature_K"] for r in data])
    is_t = np.array([r["IS"] for r in data])
    sd = np.array([r.get("IS_sigma") if _num(r.get("IS_sigma")) else 0.0 for r in data])
    fig, axes = new_figure(2, 1, height_ratios=(3, 1.6))
    fig.subplots_adjust(hspace=0.5, right=0.9)
    top, low = axes[0, 0], axes[1, 0]
    x = 1000.0 / t
    top.errorbar(x, is_t, yerr=np.minimum(sd, 0.9 * is_t), fmt="none", ecolor=MEASURED,
                 elinewidth=0.8)
    marks(top, x, is_t, "o", MEASURED, label="each temperature's fit")
    tnom = m.temperature_K
    have_law = all(k in m.values for k in ("IS", "N", "EG"))
    if have_law:
        grid = np.linspace(t.min() - 0.05 * np.ptp(t), t.max() + 0.05 * np.ptp(t), 200)
        xti = m.values.get("XTI", 3.0)
        law = [m.values["IS"] * math.exp(tm.log_saturation_ratio(
            m.values["N"], m.values["EG"], xti, g, tnom)) for g in grid]
        sig = m.sigma("EG")
        label = f"model: EG {m.values['EG']:.4g} eV" + (f" \u00b1 {sig:.2g}" if sig else "")
        label += f", XTI {xti:.3g}" + ("" if "XTI" in m.values else " (held)")
        top.plot(1000.0 / grid, law, "-", color=MODEL, label=label)
    top.set_yscale("log")
    top.set_xlabel("1000 / T (1/K)")
    top.set_ylabel("IS (A)")
    top.legend(loc="upper right")
    handles = []
    n = [(r["temperature_K"], r["N"], r.get("N_sigma")) for r in data if _num(r.get("N"))]
    if n:
        handles += marks(low, [a for a, _, _ in n], [b for _, b, _ in n], "o", MEASURED, label="N")
        if "N" in m.values:
            low.axhline(m.values["N"], color=MODEL, linewidth=1.0)
    low.set_xlabel("Temperature T (K)")
    low.set_ylabel("N")
    rs = [(r["temperature_K"], r["RS"]) for r in data if _num(r.get("RS"))]
    if rs:
        twin = low.twinx()
        handles += marks(twin, [a for a, _ in rs], [b for _, b in rs], "s", ACCENT, label="RS")
        if "RS" in m.values:
            g = np.linspace(t.min(), t.max(), 50)
            twin.plot(g, [tm.series_resistance(m.values["RS"], m.values.get("TRS", 0.0),
                                               m.values.get("TRS2", 0.0), a, tnom)
                          for a in g], "--", color=ACCENT, linewidth=1.0)
        twin.set_ylabel("RS (\u03a9)")
    if handles:
        low.legend(handles=handles, loc="upper left", fontsize=7)
    for ax in (top, low):
        grids(ax)
    title(fig, TITLE, f"{device}: {len(data)} temperatures, {t.min():.5g} to {t.max():.5g} K; "
          f"model values at TNOM = {tnom:.5g} K")
    return fig


def set_point_of(step: str) -> float | None:
    """The set point in a step name of a run over temperature ("forward@248.15K")."""
    m = _AT.search(step)
    return float(m.group(1)) if m else None


def keep_tnom(an: Analysis) -> None:
    """A run over temperature: the I-V figures keep the points at the set point nearest
    TNOM (and say the model's TNOM); every forward point stays for the I-V figure at every
    temperature. Nothing changes for a run at one temperature."""
    model = an.model
    if model is None or "temperatures" not in model.extras:
        return
    tnom = model.temperature_K
    for attr in ("forward", "reverse"):
        pts = getattr(an, attr)
        if pts is None:
            continue
        sps = {set_point_of(s) for s in pts.step} - {None}
        if len(sps) < 2:
            continue
        nearest = min(sps, key=lambda t: abs(t - tnom))
        if attr == "forward":
            an.forward_all_temperatures = pts
        setattr(an, attr, pts.subset(np.array([set_point_of(s) == nearest
                                               for s in pts.step])))
    an.temperature_K = tnom


def iv_over_temperature(an: Analysis, device: str):
    pts, model = an.forward_all_temperatures, an.model
    if pts is None or model is None:
        return None
    groups: dict[float, np.ndarray] = {}
    for sp in sorted({set_point_of(s) for s in pts.step} - {None}):
        groups[sp] = np.array([set_point_of(s) == sp for s in pts.step])
    fig, axes = new_figure(1, 1)
    ax = axes[0, 0]
    params = model.to_params()
    for (sp, mask), colour in zip(groups.items(), colours(len(groups)), strict=True):
        v, i = pts.voltage_V[mask], np.abs(pts.current_A[mask])
        marks(ax, v, i, "o", colour, label=f"{sp:.5g} K")
        try:
            p = tm.params_at(params, sp, model.temperature_K)
        except ValueError:
            continue
        grid = np.linspace(v.min(), v.max(), 200)
        ax.plot(grid, np.abs(np.asarray(junction.current(grid, p, sp))), "-",
                color=colour, linewidth=1.0)
    log_axis(ax, "y", np.abs(pts.current_A))
    ax.set_xlabel("Voltage V (V)")
    ax.set_ylabel("Current |I| (A)")
    ax.legend(title="set point", loc="lower right")
    grids(ax)
    title(fig, IV_TITLE, f"{device}: markers measured, lines the model at each set point "
          f"(values at TNOM = {model.temperature_K:.5g} K)")
    return fig
