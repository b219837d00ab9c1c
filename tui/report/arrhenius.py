"""The report's figure of a model over temperature: IS(T) as an Arrhenius plot with the
global fit, and N and RS against temperature.

Drawn from model.json alone: its ``temperatures`` rows (each temperature's own fit, with
sigmas) are the points, and the card's temperature law (modeling.temperature) with its
EG, XTI, N and TRS at TNOM is the line. A model without two temperatures has no figure.
"""

from __future__ import annotations

import math

import numpy as np

from pnbench.modeling import temperature as tm
from pnbench.tui.report.analysis import Analysis
from pnbench.tui.report.plotstyle import (
    ACCENT,
    MEASURED,
    MODEL,
    grids,
    marks,
    new_figure,
    title,
)

NAME = "arrhenius"
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
