"""Streaming C–V and admittance points: the spec `incremental` uses for the "cv" and
"admittance" kinds (which rows a point gives, how a full refit is made, which points are
eligible now), on the models of `fit_cv`."""

from __future__ import annotations

import math

import numpy as np

from pnbench.modeling.fit_cv import (
    MIN_CV_POINTS,
    AdmittanceModel,
    DepletionModel,
    admittance_state,
    cv_arrays,
    depletion_state,
    held_extras,
)


class StreamSpec:
    """What the incremental fitter needs to stream C–V ("cv") or admittance points."""

    x_width = 2
    min_points = MIN_CV_POINTS

    def __init__(self, kind: str, temperature_K: float, with_fixture: bool | None = None,
                 fixed: dict[str, float] | None = None, fc: float = 0.5):
        self.kind = kind
        self.fixed = dict(fixed) if fixed else None
        self.model = (DepletionModel(fc, with_fixture) if kind == "cv"
                      else AdmittanceModel(temperature_K, fc, bool(with_fixture)))
        self.v_cut = math.inf

    def rows(self, v, i, f, c, g, comp):
        x, y, elig = cv_arrays(v, f, c, g, comp, None)
        if self.kind == "cv":
            return x, y[:, :1], elig[:, :1]
        return x, y, elig

    def full_state(self, x, y, elig, start):
        if self.kind == "cv":
            state = depletion_state(self.model, x, y, elig, start)
        else:
            state = admittance_state(self.model, x, y, elig, start, fixed=self.fixed)
        self.v_cut = math.inf
        if not isinstance(state, str):
            left_out = elig[:, 0] & ~state.used[:, 0]
            if left_out.any() and state.used[:, 0].any():
                top = x[state.used[:, 0], 0].max()
                if np.all(x[left_out, 0] > top):  # a forward cut, not scattered rejects
                    self.v_cut = float(top)
        return state

    def eligible_now(self, x, elig):
        out = elig.copy()
        out[:, 0] &= x[:, 0] <= self.v_cut
        return out

    def extras(self) -> dict:
        return held_extras(self.model, self.fixed) if self.kind == "admittance" else {}


def stream_spec(kind: str, temperature_K: float, *, with_fixture: bool | None = None,
                fixed: dict[str, float] | None = None) -> StreamSpec:
    return StreamSpec(kind, temperature_K, with_fixture, fixed)
