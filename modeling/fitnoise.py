"""Noise models for the fitters: sigma = sqrt((rel*y)**2 + floor**2) per channel.

Instruments state their accuracy as a percent of reading plus a floor; the same two
numbers describe what the fitters see. When the caller does not know them they are
estimated from the residuals of a fit by maximum likelihood (Gaussian residuals), and
the fit is repeated with the new weights (iteratively reweighted least squares); the
residuals are corrected for leverage and a relative part the data cannot tell from zero
is held at its standard error (``estimate_noise``).
Weights use the model value, not the reading, so they do not bias the estimates.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np

from pnbench.modeling.stated import StatedNoise, as_stated  # noqa: F401  (re-exported)

#: A log-channel point is used only where the model value exceeds this many floors.
FLOOR_FACTOR = 10.0
#: Leverages are capped here, so a row the fit passes through does not divide by zero.
MAX_LEVERAGE = 0.9
#: Fits of more rows skip the leverage correction: the k leverages of k parameters are
#: spread over so many rows that the correction is lost in the noise estimate's own
#: scatter, and a long run's final fit is spared one more Jacobian per round.
LEVERAGE_ROWS = 5000
#: A channel's noise is estimated from no fewer rows; a model may lend a sparser channel
#: the noise of another (``lend_noise``), else it keeps the previous noise model.
MIN_NOISE_ROWS = 6
#: The noise likelihood's sums run over blocks of this many rows, so a long run's final
#: fit keeps a block's temporaries, not a dozen arrays as long as the run (one block, and
#: the same sums to the last bit, for every fit of fewer rows).
SUM_ROWS = 1 << 16


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
    #: what ``estimate_noise`` had to decide for the data, for the fit's message
    notes: tuple[str, ...] = field(default=(), compare=False)

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


def _blocks(n: int):
    """Slices of at most SUM_ROWS rows covering 0..n (one slice for a short fit)."""
    return [slice(a, a + SUM_ROWS) for a in range(0, max(n, 1), SUM_ROWS)]


def _noise_newton(q, e2, y2, lo, hi, iterations: int = 40):
    """Minimize sum(ln s2 + e2/s2), s2 = exp(q0) y2 + exp(q1), by damped Newton in q."""

    def parts(q):
        a, b = math.exp(q[0]), math.exp(q[1])
        # the sums over blocks of rows: a long run's temporaries stay a block long
        f = su = suy = sv = svy = svyy = 0.0
        for rows in _blocks(len(y2)):
            yb, eb = y2[rows], e2[rows]
            s2 = np.maximum(a * yb + b, 1e-300)
            f += float(np.sum(np.log(s2) + eb / s2))
            u = 1.0 / s2 - eb / s2**2  # df/ds2
            v = -1.0 / s2**2 + 2 * eb / s2**3  # d2f/ds2^2
            suy, su = suy + float(u @ yb), su + float(u.sum())
            svyy, sv, svy = svyy + float(v @ (yb * yb)), sv + float(v.sum()), \
                svy + float(v @ yb)
        ga, gb = a * suy, b * su
        haa = a * a * svyy + ga
        hbb = b * b * sv + gb
        hab = a * b * svy
        return f, np.array([ga, gb]), np.array([[haa, hab], [hab, hbb]])

    f, g, h = parts(q)
    lam = 1e-3
    for _ in range(iterations):
        # a component held on a bound that the gradient pushes against stays out of
        # the step, so the other one reaches its own optimum (projected Newton)
        free = ~(((q <= lo) & (g > 0)) | ((q >= hi) & (g < 0)))
        if not free.any():
            break
        hf = h[np.ix_(free, free)]
        step = np.zeros(2)
        while lam < 1e8:
            try:
                step[free] = -np.linalg.solve(
                    hf + lam * np.diag(np.abs(np.diag(hf)) + 1e-9), g[free])
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


def _relative_error(a: float, b: float, y2: np.ndarray) -> float:
    """Standard error of the relative variance component A = rel**2 at (A, B) = (a, b).

    With s2 = A*y2 + B and Gaussian residuals the Fisher information of (A, B) is
    1/2 sum (y2, 1)(y2, 1)^T / s2**2 (Kay, *Estimation Theory*, 1993, ch. 3, from
    memory); A's standard error is the root of its inverse's first diagonal element.
    Infinite when the values span too little for a relative part and a floor to be told
    apart.
    """
    i_aa = i_ab = i_bb = 0.0
    for rows in _blocks(len(y2)):  # summed over blocks of rows, as in _noise_newton
        yb = y2[rows]
        w = 0.5 / np.maximum(a * yb + b, 1e-300) ** 2
        i_aa, i_ab, i_bb = i_aa + float(w @ (yb * yb)), i_ab + float(w @ yb), \
            i_bb + float(w.sum())
    det = i_aa * i_bb - i_ab * i_ab
    if not det > 1e-9 * i_aa * i_bb:
        return math.inf
    return math.sqrt(i_bb / det)


def _components(e2: np.ndarray, y2: np.ndarray) -> tuple[float, float, str]:
    """(A, B, which rule applied) for one channel in units of its largest value (y2 <= 1):
    the maximum-likelihood estimate with A held at or above its standard error
    (``estimate_noise`` says why); "" when the bound does not bind."""
    if not np.any(e2 > 0):  # data without noise, fitted exactly: the smallest noise
        return 1e-30, 1e-30, ""
    big = y2 >= np.median(y2)
    a0 = max(float(np.median(e2[big] / np.maximum(y2[big], 1e-300))), 1e-30)
    b0 = max(float(np.median(e2[~big])) if np.any(~big) else 0.0, 1e-24)
    lo, hi = np.log([1e-30, 1e-30]), np.log([100.0, 1.0])
    q = _noise_newton(np.clip(np.log([a0, b0]), lo, hi), e2, y2, lo, hi)
    held = ""
    # A with no floor at all (both within the likelihood's bounds, so residuals that
    # are exactly zero, from data without noise, still give finite weights)
    alone = min(max(float(np.mean(e2 / np.maximum(y2, 1e-300))), math.exp(lo[0])),
                math.exp(hi[0]))
    for _ in range(8):  # the bound moves with the estimate: a few rounds settle it
        se = _relative_error(math.exp(q[0]), math.exp(q[1]), y2)
        if not se < alone:
            return alone, math.exp(lo[1]), "one"
        if math.exp(q[0]) >= se * (1 - 1e-3):
            break
        held = "rel"
        low = np.array([min(max(lo[0], math.log(se)), hi[0]), lo[1]])
        q = _noise_newton(np.clip(q, low, hi), e2, y2, low, hi)
    return math.exp(q[0]), math.exp(q[1]), held


def leverages(jac_rows: np.ndarray, use: np.ndarray) -> np.ndarray:
    """Leverage h of every used row (shaped as ``use``; 0 elsewhere): the diagonal of
    the hat matrix J (J^T J)^-1 J^T of the weighted Jacobian rows a fit used."""
    out = np.zeros(use.shape)
    if jac_rows.ndim != 2 or jac_rows.shape[0] <= jac_rows.shape[1] or \
            not np.all(np.isfinite(jac_rows)):
        return out
    d = np.sqrt(np.sum(jac_rows**2, axis=0))
    q = np.linalg.qr(jac_rows[:, d > 0] / d[d > 0])[0]
    out[use] = np.minimum(np.sum(q * q, axis=1), MAX_LEVERAGE)
    return out


def estimate_noise(model, y: np.ndarray, yhat: np.ndarray,
                   eligible: np.ndarray, previous: Noise,
                   leverage: np.ndarray | None = None) -> Noise:
    """Noise model per channel from the residuals y - yhat: maximum likelihood, bounded.

    Minimizes sum(ln s2 + e**2/s2) with s2 = rel**2 yhat**2 + floor**2 (Gaussian
    residuals) over ln rel and ln floor, from moment estimates (median e**2/yhat**2 over
    the larger half of the values, median e**2 over the smaller half).

    Two corrections make the estimate fit for weighting (both measured over Monte Carlo
    draws of C-V data: tests/modeling/test_fitnoise.py):

    * Residuals of a fit are smaller than the noise where the fit leans on few points
      (E e**2 = sigma**2 (1 - h), h the row's leverage), and in C-V those are the
      largest readings, near 0 V. With ``leverage`` (``leverages`` of the fit's
      weighted Jacobian) each e**2 is divided by 1 - h (the studentized residuals of
      variance-function estimation, Carroll and Ruppert, *Transformation and Weighting
      in Regression*, 1988, ch. 3, from memory).
    * A relative part the data cannot resolve is held at its standard error, not
      zero. Its estimate falls on zero whenever the few largest readings happen to
      scatter little; with a few dozen points spanning less than a decade (C-V) that
      was one fit in four. The largest readings were then weighted as if they were as
      precise as the floor, and the sigmas of what they decide came out too small (over
      draws of a varactor's C-V, CJO's rms of (value - truth)/sigma was 1.55). So
      rel**2 is held at or above its standard error from the Fisher information of the
      two parts (``_relative_error``). The floor is left to the likelihood: a floor of
      zero is plain percent-of-reading weighting, and holding an unseen floor at its
      standard error flattened the weights of data without one and measured worse.
      When the values span too little to tell the parts apart at all, the noise is
      taken as relative alone. Either rule is said in the fit's message
      (``Noise.notes``).

    A channel with fewer than MIN_NOISE_ROWS rows has no estimate of its own. A model
    whose channels are readings of one instrument may say how another channel's noise
    carries over to it (``model.lend_noise(rel, floor, sparse, yhat, eligible)`` fills
    in the sparse channels and returns notes); without that the channel keeps the
    previous noise model.
    """
    rel, floor = list(previous.rel), list(previous.floor)
    notes = []
    sparse = []
    for c in range(len(model.channels)):
        ok = eligible[:, c] & np.isfinite(y[:, c]) & np.isfinite(yhat[:, c])
        if np.count_nonzero(ok) < MIN_NOISE_ROWS:
            sparse.append(c)
            continue
        e2 = (y[ok, c] - yhat[ok, c]) ** 2
        if leverage is not None and leverage.shape == y.shape:
            e2 = e2 / (1.0 - leverage[ok, c])
        y2 = yhat[ok, c] ** 2
        top = math.sqrt(float(np.max(y2)))
        if not 1e-100 < top < 1e100:
            continue  # a model of (almost) nothing: keep the previous noise model
        # in units of the largest value, so the likelihood's powers stay in range (in
        # place: a long run's final fit holds two arrays as long as the run here, not four)
        with np.errstate(over="ignore", under="ignore", invalid="ignore", divide="ignore"):
            e2 /= top**2
            y2 /= top**2
            a, b, held = _components(np.minimum(e2, 1e100, out=e2), y2)
        rel[c], floor[c] = math.sqrt(a), math.sqrt(b) * top
        which = f" of channel {c}" if len(model.channels) > 1 else ""
        if held == "one":
            notes.append(f"estimated noise{which}: the values span too little to tell a "
                         f"relative part from a floor, so it is taken as relative alone "
                         f"({100 * rel[c]:.2g} % of reading)")
        elif held:
            notes.append(f"estimated noise{which}: the data do not resolve its relative "
                         f"part, held at its standard error ({100 * rel[c]:.2g} % of "
                         f"reading) rather than zero")
    lend = getattr(model, "lend_noise", None)
    if sparse and lend is not None and len(sparse) < len(model.channels):
        notes += lend(rel, floor, sparse, yhat, eligible)
    return Noise(tuple(rel), tuple(floor), estimated=True, notes=tuple(notes))


def initial_noise(model, y: np.ndarray, eligible: np.ndarray) -> Noise:
    """Pure relative weighting, with a floor read from readings of the wrong sign."""
    floors = []
    for c, kind in enumerate(model.channels):
        col = y[eligible[:, c] & np.isfinite(y[:, c]), c]
        neg = col[col <= 0]
        floors.append(float(np.max(np.abs(neg))) / FLOOR_FACTOR * 3 if kind == "log"
                      and neg.size else 0.0)
    return Noise(tuple(1.0 for _ in model.channels), tuple(floors), estimated=True)
