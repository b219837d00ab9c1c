"""Streaming C–V and admittance points: the specs `incremental` uses for the "cv" and
"admittance" kinds (which rows a point gives, how a full refit is made, which points are
eligible now).

With the DC part known from an I–V fit (IS and N held) the points are fitted on the
network the meter sees, exactly as the run's final fit does (`NetworkSpec` on
`network`'s models and rows); without it on the depletion and admittance models of
`cvmodels`, fitted as `fit_cv` fits them (`StreamSpec`)."""

from __future__ import annotations

import math

import numpy as np

from pnbench.modeling.cvmodels import AdmittanceModel, DepletionModel, held_extras
from pnbench.modeling.fit_cv import (
    MIN_CV_POINTS,
    admittance_state,
    cv_arrays,
    depletion_state,
)
from pnbench.modeling.meternoise import meter_rows_noise


class StreamSpec:
    """What the incremental fitter needs to stream C–V ("cv") or admittance points."""

    x_width = 2
    min_points = MIN_CV_POINTS

    def __init__(self, kind: str, temperature_K: float, with_fixture: bool | None = None,
                 fixed: dict[str, float] | None = None, fc: float = 0.5, noise=None,
                 noise_scale: float = 1.0):
        self.kind = kind
        self.noise, self.noise_scale = noise, noise_scale  # the meter's stated noise
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
        noise = self.noise_rows(x, y, None)
        if self.kind == "cv":
            state = depletion_state(self.model, x, y, elig, start, noise=noise)
        else:
            state = admittance_state(self.model, x, y, elig, start, fixed=self.fixed,
                                     noise=noise)
        self.v_cut = math.inf
        if not isinstance(state, str):
            left_out = elig[:, 0] & ~state.used[:, 0]
            if left_out.any() and state.used[:, 0].any():
                top = x[state.used[:, 0], 0].max()
                if np.all(x[left_out, 0] > top):  # a forward cut, not scattered rejects
                    self.v_cut = float(top)
        return state

    def noise_rows(self, x, y, t):
        """The meter's stated noise of these rows (None when it is estimated)."""
        if self.noise is None:
            return None
        return meter_rows_noise(self.noise, x, y, y.shape[1], self.noise_scale)

    def eligible_now(self, x, elig):
        out = elig.copy()
        out[:, 0] &= x[:, 0] <= self.v_cut
        return out

    def can_show(self, name: str, elig) -> bool:
        """Whether a left-out parameter may be called back: not one held (``fixed``)."""
        return name not in (self.fixed or {})

    def extras(self) -> dict:
        return held_extras(self.model, self.fixed) if self.kind == "admittance" else {}


class NetworkSpec:
    """C-V or admittance points on the network the meter sees, as the run's final fit
    models it: the DC part held (IS, N, RS, RSH from the live I-V fit), the step's test
    level on every point, CFIX, RFIX and TT kept by the 3-sigma rule, and whatever else
    ``fixed`` holds (an admittance step holds the C-V step's CJO, VJ, M and CFIX).
    ``held_covariance`` = (names, covariance of their values) is carried into the sigmas
    (`heldcov`), worked out again whenever the stream refits or relinearizes (O(n), on
    its geometric schedule)."""

    x_width = 4
    min_points = MIN_CV_POINTS

    def __init__(self, kind: str, temperature_K: float, fixed: dict[str, float],
                 ac_level_V: float | None = None, fc: float = 0.5,
                 held_covariance: tuple[tuple[str, ...], np.ndarray] | None = None,
                 noise=None, noise_scale: float = 1.0):
        from pnbench.modeling import network

        self.kind = kind
        self.noise, self.noise_scale = noise, noise_scale  # the meter's stated noise
        self.fixed = dict(fixed)
        self.level = math.nan if ac_level_V is None else float(ac_level_V)
        self.model = network.SplitModel(network.network_model(temperature_K, fc, None, None))
        self.held_covariance = held_covariance
        self._carried: tuple[object, np.ndarray | None] | None = None

    def rows(self, v, i, f, c, g, comp):
        from pnbench.modeling.network import network_rows

        return network_rows(v, f, c, g, self.level, comp, None)

    def full_state(self, x, y, elig, start):
        """The network fit over every point; an optional parameter (TT, CFIX, RFIX) is
        kept only while it stands three standard errors from none with the held
        values' uncertainty counted too (their errors can mimic it)."""
        from pnbench.modeling.network import network_state

        fixed = self.fixed
        dropped: list[str] = []
        while True:
            state = network_state(self.model, x, y, elig, fixed, self.noise, start=start,
                                  noise_scale=self.noise_scale)
            if isinstance(state, str) or self.held_covariance is None:
                return state
            weak = self._weak(state, x, y)
            if weak is None:
                state.notes.extend(dropped)
                return state
            p = self.model.params[weak]
            fixed = {**fixed, p.name: p.value(p.null)}
            dropped.append(f"{p.absent_reason} once the uncertainty of the values held "
                           f"from earlier steps is counted")

    def _weak(self, state, x, y) -> int | None:
        """The least significant optional parameter below lsq.Z_KEEP, counting the held
        values' uncertainty, or None."""
        from pnbench.modeling import lsq

        extra = self.carried(state, x, y)
        if extra is None:
            return None
        cov = lsq.covariance_t(state) + extra
        idx = np.flatnonzero(state.active)
        z = {}
        for j, k in enumerate(idx):
            p = self.model.params[k]
            if p.optional:
                sd = math.sqrt(cov[j, j]) if np.isfinite(cov[j, j]) and cov[j, j] > 0 \
                    else math.inf
                z[int(k)] = abs(state.t[k] - p.null) / sd
        weak = {k: v for k, v in z.items() if v < lsq.Z_KEEP}
        return min(weak, key=weak.get) if weak else None

    def eligible_now(self, x, elig):
        return elig

    def can_show(self, name: str, elig) -> bool:
        """Whether a left-out parameter may be called back by these rows: not one held
        at an earlier step's value, and TT and RFIX only with a forward point
        (`network.network_state` holds them absent without one)."""
        if name in self.fixed:
            return False
        return name not in ("TT", "RFIX") or bool(elig[:, 1].any())

    def noise_rows(self, x, y, t):
        """The meter's stated noise of these rows (None when it is estimated)."""
        if self.noise is None:
            return None
        from pnbench.modeling.meternoise import meter_noise

        return meter_noise(self.noise, x[:, 3], self.noise_scale)

    def extras(self) -> dict:
        return held_extras(self.model, self.fixed)

    def describe(self, result):
        """The snapshot with its message saying what a fitted CFIX or RFIX is."""
        from pnbench.modeling.network import with_fixture_note

        return with_fixture_note(result)

    def carried(self, state, x, y) -> np.ndarray | None:
        """The covariance the held values carry into the free ones at ``state`` (t
        space), once per state."""
        if self.held_covariance is None:
            return None
        if self._carried is None or self._carried[0] is not state:
            from pnbench.modeling.heldcov import held_covariance_t, held_names

            names, cov = self.held_covariance
            chosen = held_names(self.model, self.fixed, tuple(names))
            at = [list(names).index(n) for n in chosen]
            sub = np.asarray(cov, dtype=float)[np.ix_(at, at)]
            n = len(state.used)  # the rows the state was fitted to
            self._carried = (state, held_covariance_t(self.model, state, x[:n], y[:n],
                                                      self.fixed, sub, tuple(chosen)))
        return self._carried[1]


def stream_spec(kind: str, temperature_K: float, *, with_fixture: bool | None = None,
                fixed: dict[str, float] | None = None, ac_level_V: float | None = None,
                held_covariance=None, noise=None,
                noise_scale: float = 1.0) -> StreamSpec | NetworkSpec:
    """The network spec when ``fixed`` holds the DC part (IS and N), else the plain one;
    ``noise`` is the meter's stated noise (None: estimated), times ``noise_scale``."""
    if fixed and "IS" in fixed and "N" in fixed:
        return NetworkSpec(kind, temperature_K, fixed, ac_level_V,
                           held_covariance=held_covariance, noise=noise,
                           noise_scale=noise_scale)
    return StreamSpec(kind, temperature_K, with_fixture, fixed, noise=noise,
                      noise_scale=noise_scale)
