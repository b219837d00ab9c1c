"""Noise models for the fitters: sigma = sqrt((rel*y)**2 + floor**2) per channel.

Instruments state their accuracy as a percent of reading plus a floor; the same two
numbers describe what the fitters see. When the caller does not know them they are
estimated from the residuals of a fit by maximum likelihood (Gaussian residuals), and
the fit is repeated with the new weights (iteratively reweighted least squares).
Weights use the model value, not the reading, so they do not bias the estimates.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np

from pnbench.modeling.stated import StatedNoise, as_stated  # noqa: F401  (re-exported)

#: A log-channel point is used only where the model value exceeds this many floors.
FLOOR_FACTOR = 10.0


@dataclass(frozen=True)
class Noise:
    """Per-channel noise model: sigma = sqrt((rel*y)**2 + floor**2).

    A stated noise may vary from point to point; the per-row arrays are then shaped as
    the fit's rows (m, C) and used in place of the scalar parts: ``floor_rows`` replaces
    ``floor`` (a floor that follows the autoranged range), ``scale_rows`` (m,) multiplies
    the stated part (1/sqrt(NPLC x readings averaged) of each point's step), and
    ``extra_var`` adds a variance in quadrature (the voltage reading's noise carried
    through the slope dI/dV: the effective-variance method, e.g. Orear, *Am. J. Phys.*
    50, 912, 1982, from memory). ``floor`` stays the smallest floor (which points a log
    channel uses).
    """

    rel: tuple[float, ...]
    floor: tuple[float, ...]
    estimated: bool = True
    #: True: sigma = rel*y + floor, as instrument specifications add the two parts
    linear: bool = False
    floor_rows: np.ndarray | None = field(default=None, compare=False, repr=False)
    scale_rows: np.ndarray | None = field(default=None, compare=False, repr=False)
    extra_var: np.ndarray | None = field(default=None, compare=False, repr=False)

    def sigma(self, yhat: np.ndarray) -> np.ndarray:
        rel = np.asarray(self.rel)
        floor = np.asarray(self.floor)
        if self.floor_rows is not None and self.floor_rows.shape == np.shape(yhat):
            floor = self.floor_rows
        if self.linear:
            s = rel * np.abs(yhat) + floor
        else:
            s = np.sqrt((rel * yhat) ** 2 + floor**2)
        if self.scale_rows is not None and self.scale_rows.shape[0] == np.shape(yhat)[0]:
            s = s * self.scale_rows[:, None]
        if self.extra_var is not None and self.extra_var.shape == np.shape(yhat):
            s = np.sqrt(s * s + self.extra_var)
        return s

    @property
    def per_row(self) -> bool:
        return any(a is not None for a in (self.floor_rows, self.scale_rows, self.extra_var))

    def take(self, rows) -> Noise:
        """This noise for a subset of its rows (an index, mask or slice)."""
        if not self.per_row:
            return self
        return replace(self, **{name: None if a is None else a[rows] for name, a in (
            ("floor_rows", self.floor_rows), ("scale_rows", self.scale_rows),
            ("extra_var", self.extra_var))})

    def extended(self, more: Noise) -> Noise:
        """This noise with ``more``'s rows appended (both per row, same parts)."""
        if not (self.per_row and more.per_row):
            return more if more.per_row else self
        parts = {}
        for name in ("floor_rows", "scale_rows", "extra_var"):
            a, b = getattr(self, name), getattr(more, name)
            parts[name] = None if a is None or b is None else np.concatenate([a, b])
        return replace(self, **parts)


def _noise_newton(q, e2, y2, lo, hi, iterations: int = 40):
    """Minimize sum(ln s2 + e2/s2), s2 = exp(q0) y2 + exp(q1), by damped Newton in q."""

    def parts(q):
        a, b = math.exp(q[0]), math.exp(q[1])
        s2 = np.maximum(a * y2 + b, 1e-300)
        f = float(np.sum(np.log(s2) + e2 / s2))
        u = 1.0 / s2 - e2 / s2**2  # df/ds2
        v = -1.0 / s2**2 + 2 * e2 / s2**3  # d2f/ds2^2
        ga, gb = a * float(u @ y2), b * float(u.sum())
        haa = a * a * float(v @ (y2 * y2)) + ga
        hbb = b * b * float(v.sum()) + gb
        hab = a * b * float(v @ y2)
        return f, np.array([ga, gb]), np.array([[haa, hab], [hab, hbb]])

    f, g, h = parts(q)
    lam = 1e-3
    for _ in range(iterations):
        step = None
        while lam < 1e8:
            try:
                step = -np.linalg.solve(h + lam * np.diag(np.abs(np.diag(h)) + 1e-9), g)
            except np.linalg.LinAlgError:
                lam *= 10
                continue
            q_new = np.clip(q + step, lo, hi)
            f_new, g_new, h_new = parts(q_new)
            if f_new <= f:
                break
            lam *= 10
        else:
            break
        moved = float(np.max(np.abs(q_new - q)))
        q, f, g, h = q_new, f_new, g_new, h_new
        lam = max(lam / 10, 1e-9)
        if moved < 1e-6:
            break
    return q


def estimate_noise(model, y: np.ndarray, yhat: np.ndarray,
                   eligible: np.ndarray, previous: Noise) -> Noise:
    """Maximum-likelihood noise model per channel from the residuals y - yhat.

    Minimizes sum(ln s2 + e**2/s2) with s2 = rel**2 yhat**2 + floor**2 (Gaussian
    residuals), over ln rel and ln floor, from moment estimates (median e**2/yhat**2 over
    the larger half of the values, median e**2 over the smaller half).
    """
    rel, floor = list(previous.rel), list(previous.floor)
    for c in range(len(model.channels)):
        ok = eligible[:, c] & np.isfinite(y[:, c]) & np.isfinite(yhat[:, c])
        if np.count_nonzero(ok) < 6:
            continue
        e2 = (y[ok, c] - yhat[ok, c]) ** 2
        y2 = yhat[ok, c] ** 2
        top = math.sqrt(float(np.max(y2)))
        if not 1e-100 < top < 1e100:
            continue  # a model of (almost) nothing: keep the previous noise model
        big = y2 >= np.median(y2)
        a0 = math.sqrt(max(float(np.median(e2[big] / np.maximum(y2[big], 1e-300))), 1e-30))
        b0 = math.sqrt(max(float(np.median(e2[~big])) if np.any(~big) else 0.0,
                           (1e-12 * top) ** 2))
        # in units of the largest value, so the likelihood's powers stay in range
        lo = np.array([math.log(1e-15), math.log(1e-15)])
        hi = np.array([math.log(10.0), 0.0])
        q = np.clip(np.log([a0, b0 / top]), lo, hi)
        with np.errstate(over="ignore", under="ignore", invalid="ignore", divide="ignore"):
            q = _noise_newton(2 * q, np.minimum(e2 / top**2, 1e100), y2 / top**2,
                              2 * lo, 2 * hi) / 2
        rel[c], floor[c] = math.exp(q[0]), math.exp(q[1]) * top
    return Noise(tuple(rel), tuple(floor), estimated=True)


def initial_noise(model, y: np.ndarray, eligible: np.ndarray) -> Noise:
    """Pure relative weighting, with a floor read from readings of the wrong sign."""
    floors = []
    for c, kind in enumerate(model.channels):
        col = y[eligible[:, c] & np.isfinite(y[:, c]), c]
        neg = col[col <= 0]
        floors.append(float(np.max(np.abs(neg))) / FLOOR_FACTOR * 3 if kind == "log"
                      and neg.size else 0.0)
    return Noise(tuple(1.0 for _ in model.channels), tuple(floors), estimated=True)
