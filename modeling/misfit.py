"""Is the model the right one? Lack-of-fit tests on a finished least-squares state.

The reduced chi-square of a fit whose noise was estimated from its own residuals is ~1
by construction, so it cannot say whether the model describes the data. Two checks can:

* Against a stated noise (the instrument's accuracy, when the caller gives it): the
  weighted sum of squares is chi-square distributed with the fit's degrees of freedom
  if the model is right; a tail probability below ``P_MISFIT`` says it is not.
* Runs of residual sign, ordered by the independent variable (Wald & Wolfowitz, *Ann.
  Math. Statist.* 11, 147, 1940): a model that is systematically wrong leaves long runs
  of one sign (too few runs); the count is compared with its expectation under
  independence, and a z below -``Z_RUNS`` flags a misfit.

When the runs test flags one, the residuals are correlated and the covariance
s**2 (J^T W J)^-1 understates the errors: the sigmas are inflated by
sqrt((1 + rho)/(1 - rho)) (rho: lag-1 autocorrelation of the residuals, read from
the rate of sign changes; the variance
factor of a mean of an AR(1) series, e.g. Box, Jenkins & Reinsel, *Time Series
Analysis*, 4th ed., 2008, from memory) and marked as lower bounds.

Data without noise (residuals at the rounding of their digits, or below any
instrument's resolution: `precision`) are not judged by the runs test; the fit's
message says what the residuals are instead.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy.special import chdtrc  # chi2.sf without loading scipy.stats (~50 MB, ~1 s)

from pnbench.modeling import blocked, lsq, precision

#: Runs-test threshold (one-sided p ~ 5e-4: one false alarm in ~2000 honest fits).
Z_RUNS = 3.3
#: Chi-square tail probability below which residuals exceed the stated noise.
P_MISFIT = 1e-3
#: The fewest residuals a runs test is run on.
MIN_RUNS_POINTS = 12
#: Largest sigma inflation applied (beyond it the sigmas mean little anyway).
MAX_INFLATION = 30.0


@dataclass
class Verdict:
    """What the checks found: a factor for the sigmas, notes and figures for extras."""

    inflation: float = 1.0
    misfit: bool = False
    notes: list[str] = field(default_factory=list)
    figures: dict = field(default_factory=dict)


def ordered_residuals(model, state: lsq.FitState, x: np.ndarray, y: np.ndarray):
    """Weighted residuals per channel, ordered by the second condition then the first
    (frequency, then bias): a list of 1-d arrays, one per channel and frequency. The
    residuals are computed over blocks of rows (`blocked`), so nothing larger than one
    value per point is made for a long run."""
    idx = np.flatnonzero(state.active)
    out = []
    for c in range(len(model.channels)):
        rows = np.flatnonzero(state.used[:, c])
        if rows.size == 0:
            continue
        r = np.concatenate(list(_channel_residuals(model, state, idx, x, y, c)))
        if x.shape[1] > 1:  # one sequence per value of the second condition (frequency)
            other = x[rows, 1]
            order = np.lexsort((x[rows, 0], other))
            rs, other = r[order], other[order]
            cut = np.flatnonzero(np.diff(other) != 0) + 1
            out += [p for p in np.split(rs, cut) if p.size]
        else:
            out.append(r[np.argsort(x[rows, 0], kind="stable")])
    return out


def _channel_residuals(model, state: lsq.FitState, idx, x, y, c: int):
    """The used rows' weighted residuals of channel c, block by block in row order."""
    step = blocked.BLOCK_ROWS
    for a in range(0, len(x), step):
        s = slice(a, a + step)
        use = np.zeros_like(state.used[s])
        use[:, c] = state.used[s, c]
        if not use.any():
            continue
        r, _, _ = lsq.weighted_rows(model, state.t, idx, x[s], y[s], use,
                                    state.noise.take(s), want_jac=False)
        yield r


def runs_test(sequences) -> tuple[int, float, float] | None:
    """(runs, expected, z) of residual signs over the sequences (runs counted within
    each), or None with too few residuals."""
    runs, n1, n2, groups = 0, 0, 0, []
    for s in sequences:
        s = s[np.isfinite(s) & (s != 0)]
        if s.size == 0:
            continue
        pos = s > 0
        runs += 1 + int(np.count_nonzero(pos[1:] != pos[:-1]))
        a, b = int(pos.sum()), int((~pos).sum())
        n1, n2 = n1 + a, n2 + b
        groups.append((a, b))
    n = n1 + n2
    if n < MIN_RUNS_POINTS or n1 == 0 or n2 == 0:
        return None
    # expectation and variance summed over independent sequences
    mean, var = 0.0, 0.0
    for a, b in groups:
        m = a + b
        if m == 0:
            continue
        mean += 1 + 2 * a * b / m
        if m > 1:
            var += 2 * a * b * (2 * a * b - m) / (m * m * (m - 1))
    if var <= 0:
        return None
    return runs, mean, (runs - mean) / math.sqrt(var)


def sign_correlation(runs: int, sequences) -> float:
    """Lag-1 correlation of a Gaussian AR(1) series whose signs change as often as
    observed: P(change) = arccos(rho)/pi (Sheppard's orthant probability; Kendall &
    Stuart, *The Advanced Theory of Statistics*, vol. 1, from memory). Robust to the
    few large residuals that dominate a moment estimate."""
    n = sum(int(s.size) for s in sequences)
    groups = sum(1 for s in sequences if s.size)
    if n - groups <= 0:
        return 0.0
    p_change = (runs - groups) / (n - groups)
    return math.cos(math.pi * min(max(p_change, 0.0), 1.0))


def assess(model, state: lsq.FitState, x: np.ndarray, y: np.ndarray) -> Verdict:
    """Run the checks on a finished state (cheap: one model evaluation per channel)."""
    out = Verdict()
    if state.dof <= 0 or not math.isfinite(state.chi2):
        return out
    if not state.noise.estimated:
        p = float(chdtrc(state.dof, state.chi2))
        out.figures["chi2_probability"] = p
        red = state.chi2 / state.dof
        if p < P_MISFIT:
            out.misfit = True
            out.notes.append(
                f"the residuals exceed the stated instrument noise (reduced chi-square "
                f"{red:.3g} on {state.dof} degrees of freedom, p = {p:.2g}); sigmas scaled "
                f"by its square root")
        elif p > 1 - P_MISFIT:
            out.notes.append(
                f"the residuals are smaller than the stated instrument noise (reduced "
                f"chi-square {red:.3g} on {state.dof} degrees of freedom): the stated noise "
                f"is too large, and the sigmas with it")
        else:
            out.notes.append(f"reduced chi-square {red:.3g} against the stated instrument "
                             f"noise ({state.dof} degrees of freedom, p = {p:.2g})")
    free = precision.assess(model, state, x, y)
    if free is not None:
        out.figures["noise_free"] = free.figures()
    with np.errstate(all="ignore"):
        seqs = ordered_residuals(model, state, x, y)
    rt = runs_test(seqs)
    if rt is None:
        if free is not None:
            out.notes.append(free.statement())
        return out
    runs, expected, z = rt
    rho = sign_correlation(runs, seqs)
    out.figures.update({"runs": runs, "expected_runs": round(expected, 2),
                        "runs_z": round(z, 3), "lag1_correlation": round(rho, 4)})
    if free is not None:  # no noise: the tests describe rounding or the simulator
        out.notes.append(free.statement(z if z < -Z_RUNS else None))
    elif z < -Z_RUNS:
        out.misfit = True
        inflation = math.sqrt((1 + rho) / (1 - rho)) if 0 < rho < 1 else 1.0
        out.inflation = min(max(inflation, 1.0), MAX_INFLATION)
        out.notes.append(
            f"the model does not describe the data: the residuals change sign {runs} times "
            f"where {expected:.0f} are expected (runs test z = {z:.1f}); sigmas inflated "
            f"x{out.inflation:.2g} for correlated residuals and are lower bounds")
    return out
