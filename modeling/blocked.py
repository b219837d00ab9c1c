"""Weighted residuals and the normal equations of a fit, summed over blocks of rows.

A night's run holds ~10^5–10^6 points per kind; its Jacobian over every point (rows x
channels x parameters, float64) and the weighted copies made of it would dominate the
memory of the run's final fit. The solver needs only the normal equations J^T J, J^T r
and the sum of squares r^T r, which are sums over rows: they are accumulated here over
blocks of ``BLOCK_ROWS`` rows, so only one block's Jacobian exists at a time. The sums
equal the whole-array products up to the order of the floating-point additions.
"""

from __future__ import annotations

import numpy as np

from pnbench.modeling.fitnoise import Noise

#: Rows per block (a block's Jacobian: BLOCK_ROWS x channels x parameters float64).
BLOCK_ROWS = 8192


def weighted_rows(model, t: np.ndarray, active_idx: np.ndarray, x: np.ndarray,
                  y: np.ndarray, use: np.ndarray, noise: Noise,
                  want_jac: bool = True, yhat_ref: np.ndarray | None = None):
    """Weighted residuals (model - data)/sigma and their Jacobian, rows where ``use``.

    Sigma comes from ``yhat_ref`` (the model at the start of a reweighting round) when
    given, so the weights stay fixed while the solver moves.
    """
    yhat, jac = model.predict(t, x, active_idx if want_jac else None)
    # rows outside ``use`` may overflow (model values far below the floor): masked out
    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        ref = yhat if yhat_ref is None else yhat_ref
        sig = noise.sigma(np.abs(ref))
        r = np.empty_like(yhat)
        scale = np.empty_like(yhat)
        tiny = 1e-300
        for c, kind in enumerate(model.channels):
            if kind == "log":
                pos = np.maximum(np.abs(ref[:, c]), tiny)
                s = np.maximum(sig[:, c] / pos, 1e-15)
                r[:, c] = (np.log(np.maximum(yhat[:, c], tiny))
                           - np.log(np.where(use[:, c], y[:, c], 1.0))) / s
                scale[:, c] = 1.0 / (s * np.maximum(yhat[:, c], tiny))
            else:
                s = np.maximum(sig[:, c], 1e-300)
                r[:, c] = (yhat[:, c] - y[:, c]) / s
                scale[:, c] = 1.0 / s
        rows = r[use]
        if not want_jac:
            return rows, None, yhat
        return rows, (jac * scale[..., None])[use], yhat


def _blocks(model, x, y, use, noise: Noise, yhat_ref):
    for a in range(0, len(x), BLOCK_ROWS):
        s = slice(a, a + BLOCK_ROWS)
        if np.any(use[s]):
            yield (x[s], y[s], use[s], noise.take(s),
                   None if yhat_ref is None else yhat_ref[s])


def normal_sums(model, t: np.ndarray, idx: np.ndarray, x: np.ndarray, y: np.ndarray,
                use: np.ndarray, noise: Noise, yhat_ref: np.ndarray | None = None):
    """(J^T J, J^T r, r^T r) of the weighted rows (`weighted_rows`) over t[idx]."""
    h = np.zeros((len(idx), len(idx)))
    g = np.zeros(len(idx))
    chi2 = 0.0
    for xs, ys, us, ns, ref in _blocks(model, x, y, use, noise, yhat_ref):
        r, jac, _ = weighted_rows(model, t, idx, xs, ys, us, ns, yhat_ref=ref)
        h += jac.T @ jac
        g += jac.T @ r
        chi2 += float(r @ r)
    return h, g, chi2


def residual_sum(model, t: np.ndarray, idx: np.ndarray, x: np.ndarray, y: np.ndarray,
                 use: np.ndarray, noise: Noise, yhat_ref: np.ndarray | None = None) -> float:
    """r^T r of the weighted rows at t (no Jacobian: a trial step's cost)."""
    chi2 = 0.0
    for xs, ys, us, ns, ref in _blocks(model, x, y, use, noise, yhat_ref):
        r, _, _ = weighted_rows(model, t, idx, xs, ys, us, ns, want_jac=False,
                                yhat_ref=ref)
        chi2 += float(r @ r)
    return chi2


class InBlocks:
    """A model whose predictions without a Jacobian (the residuals of a reweighting
    round, the noise estimate's model values) are computed over blocks of BLOCK_ROWS
    rows and gathered into one array: a long run's model evaluation then makes one
    block's temporaries (complex admittances, the meter's describing function), not a
    dozen arrays as long as the run. Rows are independent, so the values are those of
    one evaluation over every row. Everything else is the wrapped model's."""

    def __init__(self, model) -> None:
        self.model = model

    def __getattr__(self, name: str):
        return getattr(self.model, name)

    def predict(self, t, x, active=None):
        if active is not None or len(x) <= BLOCK_ROWS:
            return self.model.predict(t, x, active)
        out = None
        for a in range(0, len(x), BLOCK_ROWS):
            part, _ = self.model.predict(t, x[a:a + BLOCK_ROWS], None)
            if out is None:
                out = np.empty((len(x), *part.shape[1:]), dtype=part.dtype)
            out[a:a + len(part)] = part
        return out, None

