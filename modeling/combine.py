"""Figures of the final model that several fits contribute to (pure functions).

* RSH: the forward and reverse fits each may see the shunt. Two consistent estimates
  are combined by inverse variance on the conductance 1/RSH (in which both fits are
  linear); inconsistent ones (more than three standard errors apart) are not averaged:
  the better determined wins and the message says so.
* BV at the junction: the reverse fit reads BV on the terminal voltage at IBV; the
  junction sits IBV*RS closer to zero, so BV(junction) = BV(terminal) - IBV*RS, with
  the variance of both terms (the fits are independent).
* Leakage: a current within two standard errors of zero (or of the wrong sign) is below
  what the instrument resolves; it is stated as an upper bound, never as a negative.
"""

from __future__ import annotations

import math
from typing import Any


def combine_shunt(estimates: list[tuple[str, float, float]]) -> tuple[float, float, str] | None:
    """(RSH, sigma, how) from (source, RSH, sigma) estimates, or None without any."""
    good = [(k, r, s) for k, r, s in estimates
            if r > 0 and math.isfinite(r) and s > 0 and math.isfinite(s)]
    if not good:
        return None
    if len(good) == 1:
        k, r, s = good[0]
        return r, s, f"RSH from the {k} fit"
    conductances = [(k, 1.0 / r, s / r**2) for k, r, s in good]
    best = min(conductances, key=lambda c: c[2])
    consistent = all(abs(a[1] - b[1]) <= 3 * math.hypot(a[2], b[2])
                     for a in conductances for b in conductances)
    if not consistent:
        r = 1.0 / best[1]
        return r, best[2] * r**2, (
            f"RSH from the {best[0]} fit, the better determined; the estimates "
            + ", ".join(f"{k} {1 / g:.4g} ohm" for k, g, _ in conductances)
            + " disagree by more than three standard errors")
    w = [1.0 / s**2 for _, _, s in conductances]
    g = sum(wi * c[1] for wi, c in zip(w, conductances, strict=True)) / sum(w)
    sd = 1.0 / math.sqrt(sum(w))
    r = 1.0 / g
    return r, sd * r**2, ("RSH combined by inverse variance from the "
                          + " and ".join(k for k, _, _ in conductances) + " fits")


def junction_bv(bv_terminal: float, bv_sigma: float | None, ibv: float,
                rs: float | None, rs_sigma: float | None) -> tuple[float, float | None]:
    """BV at the junction from the terminal value and the series resistance."""
    if rs is None or not math.isfinite(rs):
        return bv_terminal, bv_sigma
    value = bv_terminal - ibv * rs
    if bv_sigma is None or not math.isfinite(bv_sigma):
        return value, None
    return value, math.hypot(bv_sigma, ibv * (rs_sigma or 0.0))


def leakage_figure(extras: dict[str, Any]) -> dict[str, Any] | None:
    """The model's leakage entry from a reverse fit's extras (an upper bound when the
    current is below the noise)."""
    if "leakage_A" not in extras:
        return None
    v, value, sd = extras["leakage_voltage_V"], extras["leakage_A"], extras.get(
        "leakage_sigma_A")
    if sd is not None and math.isfinite(sd) and value <= 2 * sd:
        bound = max(value, 0.0) + 2 * sd
        return {"voltage_V": v, "below_A": bound,
                "note": f"below {bound:.3g} A at {v:.4g} V: within two standard errors "
                        f"of zero, the current is below what the instrument resolves"}
    if sd is None and value <= 0:
        return {"voltage_V": v, "below_A": abs(value),
                "note": "below the instrument's resolution"}
    return {"voltage_V": v, "current_A": value, "sigma_A": sd}
