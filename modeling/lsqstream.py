"""The running normal equations of one least-squares fit kind, for `incremental`.

`LsqStream` keeps H = J^T W J, g = J^T W r and the weighted sum of squares as running
sums linearized at a reference point, relinearizes when a step grows beyond about one
standard error, and refits over every point on a geometric schedule (warm refits in
between full ones); the module docstring of `pnbench.modeling.incremental` explains the
schedule. The sums over a step's every row are taken over blocks of rows
(`blocked.normal_sums`), so a refit of a long step holds one block's Jacobian at a time and
no single numpy call grows with the step. Pure: no threads, clocks or files (the caller
holds the lock).
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from pnbench.modeling import blocked, lsq, misfit
from pnbench.modeling.fitresult import FitResult, empty_result

#: Rebuild the sums when the pending step moves the estimate by more than this
#: Mahalanobis distance squared (in units of the current covariance).
RELINEARIZE_CHI2 = 1.0
#: A full refit (noise model afresh, optional parameters re-decided) at the latest when
#: the point count has grown by this factor since the last one; warm refits in between.
SELECT_GROWTH = 2.0
#: A warm refit gives way to a full one when a left-out optional parameter, freed for
#: one Gauss–Newton step, moves by this many standard errors (below the 3 sigma that
#: keep one, since one step from the null understates a parameter coupled to others).
CALL_Z = 1.5
#: Iterations of a warm refit's Levenberg–Marquardt solve (it starts near the optimum).
WARM_MAX_ITER = 20


class Buffer:
    """Growable column storage (amortized doubling)."""

    def __init__(self, width: int, dtype=float):
        self.data = np.empty((16, width), dtype=dtype)
        self.n = 0

    def extend(self, rows: np.ndarray) -> None:
        need = self.n + len(rows)
        if need > len(self.data):
            bigger = np.empty((max(need, 2 * len(self.data)), self.data.shape[1]),
                              dtype=self.data.dtype)
            bigger[: self.n] = self.data[: self.n]
            self.data = bigger
        self.data[self.n:need] = rows
        self.n = need

    def view(self) -> np.ndarray:
        return self.data[: self.n]


def as_column(value, n: int, name: str) -> np.ndarray:
    if value is None:
        return np.full(n, np.nan)
    arr = np.asarray(value, dtype=float).ravel()
    if arr.size == 1 and n > 1:
        arr = np.full(n, float(arr[0]))
    if arr.size != n:
        raise ValueError(f"{name} has {arr.size} values, voltage_V has {n}")
    return arr


class LsqStream:
    """Running normal equations for one least-squares kind (see the module notes)."""

    def __init__(self, spec, growth: float):
        self.spec = spec
        self.model = spec.model
        channels = len(self.model.channels)
        self.x = Buffer(spec.x_width)
        self.y = Buffer(channels)
        self.elig = Buffer(channels, dtype=bool)
        self.used = Buffer(channels, dtype=bool)
        self.growth = growth
        self.state: lsq.FitState | None = None
        self.reason = f"waiting for points (need {spec.min_points})"
        self.next_full = spec.min_points
        self.next_select = spec.min_points
        self.refits = {"full": 0, "warm": 0}
        self.h = self.g = None
        self.s = 0.0
        self.rows = 0
        self.verdict = misfit.Verdict()  # the lack-of-fit checks at the last rebuild

    @property
    def n(self) -> int:
        return self.x.n

    def add(self, x: np.ndarray, y: np.ndarray, elig: np.ndarray) -> None:
        start = self.n
        self.x.extend(x)
        self.y.extend(y)
        self.elig.extend(elig)
        self.used.extend(np.zeros_like(elig))
        if self.n >= self.next_full:
            self._full_refit()
            return
        if self.state is None:
            return
        self._accumulate(slice(start, self.n))
        step = self._step()
        if step is not None:
            idx = np.flatnonzero(self.state.active)
            moved = float(step @ self.h @ step) / max(self._s2(step), 1e-300)
            if moved > RELINEARIZE_CHI2 or not np.isfinite(moved):
                t = self.state.t.copy()
                t[idx] = self._clipped(t[idx] + step, idx)
                try:
                    self._relinearize(t)
                except (ValueError, ArithmeticError):  # the step left the model's domain
                    self._full_refit()

    def _s2(self, step: np.ndarray) -> float:
        dof = self.rows - len(step)
        chi2 = self.s + 2 * float(step @ self.g) + float(step @ self.h @ step)
        return chi2 / dof if dof > 0 else math.inf

    def _clipped(self, t_active: np.ndarray, idx: np.ndarray) -> np.ndarray:
        lo = np.array([self.model.params[k].lower for k in idx])
        hi = np.array([self.model.params[k].upper for k in idx])
        return np.clip(t_active, lo, hi)

    def _accumulate(self, rows: slice) -> None:
        st = self.state
        x, y = self.x.view()[rows], self.y.view()[rows]
        elig = self.spec.eligible_now(x, self.elig.view()[rows])
        yhat, _ = self.model.predict(st.t, x, None)
        noise = st.noise
        fresh = self._stated(x, y, st.t)
        if fresh is not None and st.noise.per_row:  # a stated noise, per row: extend it
            noise, st.noise = fresh, st.noise.extended(fresh)
        use = lsq.usable_rows(self.model, y, yhat, elig, noise)
        self.used.view()[rows] = use
        if not use.any():
            return
        idx = np.flatnonzero(st.active)
        h, g, s = blocked.normal_sums(self.model, st.t, idx, x, y, use, noise)
        self.h += h
        self.g += g
        self.s += s
        self.rows += int(np.count_nonzero(use))

    def _stated(self, x, y, t):
        """The spec's stated noise for these rows at estimate t (None: the stream's
        noise model holds for any rows)."""
        rows = getattr(self.spec, "noise_rows", None)
        return rows(x, y, t) if rows is not None else None

    def _step(self) -> np.ndarray | None:
        if self.state is None or self.h.shape[0] == 0:
            return None
        d = np.sqrt(np.maximum(np.diag(self.h), 1e-300))
        try:
            return -np.linalg.solve(self.h / np.outer(d, d), self.g / d) / d
        except np.linalg.LinAlgError:
            return None

    def _reset_sums(self, state: lsq.FitState) -> None:
        self.state = state
        self.h, self.g = state.hessian.copy(), state.gradient.copy()
        self.s, self.rows = state.chi2, state.n_rows
        self.used.view()[:] = state.used
        # the lack-of-fit checks, on the residuals at this new linearization point: one
        # model evaluation per channel, only when the sums are rebuilt (never per point)
        self.verdict = misfit.assess(self.model, state, self.x.view(), self.y.view())

    def _relinearize(self, t: np.ndarray) -> None:
        st = self.state
        x, y = self.x.view(), self.y.view()
        elig = self.spec.eligible_now(x, self.elig.view())
        yhat, _ = self.model.predict(t, x, None)
        noise = self._stated(x, y, t) or st.noise
        use = lsq.usable_rows(self.model, y, yhat, elig, noise)
        t, *_ = lsq.levenberg(self.model, t, st.active, x, y, use, noise, max_iter=4)
        idx = np.flatnonzero(st.active)
        h, g, s = blocked.normal_sums(self.model, t, idx, x, y, use, noise)
        self._reset_sums(replace(st, t=t, noise=noise, used=use, hessian=h, gradient=g,
                                 chi2=s, n_rows=int(use.sum())))

    def _full_refit(self) -> None:
        healthy = self.state is not None and lsq.healthy(self.model, self.state)
        if not (healthy and self.n < self.next_select and self._warm_refit()):
            start = None
            if healthy:
                start = np.where(self.state.active, self.current_t(), np.nan)
            state = self.spec.full_state(self.x.view(), self.y.view(), self.elig.view(),
                                         start)
            self.refits["full"] += 1
            if isinstance(state, str):
                self.reason = state
                self.state = None
            else:
                self._reset_sums(state)
            self.next_select = max(self.n + 1, math.ceil(self.n * SELECT_GROWTH))
        # while the fit is not healthy yet (e.g. only floor noise so far), refit sooner
        healthy = self.state is not None and lsq.healthy(self.model, self.state)
        growth = self.growth if healthy else 1.0 + (self.growth - 1.0) / 5.0
        self.next_full = max(self.n + 1, math.ceil(self.n * growth))
        if not healthy:
            self.next_select = self.next_full

    def refit(self) -> None:
        """A full refit now (the end of a sweep: the last word on the optional
        parameters and the noise model)."""
        if self.n >= self.spec.min_points:
            self.next_select = self.n
            self._full_refit()

    def settle(self) -> None:
        """The end of a sweep, cheaply: a full refit (`refit`) only when the points
        added since the last one call for an optional parameter it left out (the score
        test of warm refits, `_called_for`, at the current estimate over every point),
        e.g. a fixture resistance that only the sweep's last, highest-bias points show."""
        if self.state is None or self.n < self.spec.min_points:
            return
        now = replace(self.state, t=self.current_t(), used=self.used.view().copy())
        try:
            called = self._called_for(now, self.x.view(), self.y.view())
        except (ValueError, ArithmeticError, np.linalg.LinAlgError):
            called = True
        if called:
            self.refit()

    def _warm_refit(self) -> bool:
        """Refit every point keeping the decided optional parameters and the rows'
        eligibility rule, from the current estimate and the last noise model: one
        Levenberg–Marquardt solve, the noise model re-estimated once (when it is an
        estimate), the rows above the floor chosen again, the sums rebuilt. False (and
        nothing changed) when the result is not a healthy fit whose optional parameters
        all stay significant: a full refit decides then."""
        st = self.state
        model = self.model
        x, y = self.x.view(), self.y.view()
        elig = self.spec.eligible_now(x, self.elig.view())
        t0 = self.current_t()
        try:
            yhat, _ = model.predict(t0, x, None)
            noise = self._stated(x, y, t0) or st.noise
            use = lsq.usable_rows(model, y, yhat, elig, noise)
            t, _, _, _, converged = lsq.levenberg(model, t0, st.active, x, y, use, noise,
                                                  max_iter=WARM_MAX_ITER, yhat_ref=yhat)
            yhat, _ = model.predict(t, x, None)
            if noise.estimated:
                noise = lsq.estimate_noise(model, y, yhat, elig, noise,
                                           leverage=lsq.leverages_at(model, t, x, y, use,
                                                                     st.active, noise))
            use = lsq.usable_rows(model, y, yhat, elig, noise)
            idx = np.flatnonzero(st.active)
            h, g, s = blocked.normal_sums(model, t, idx, x, y, use, noise)
        except (ValueError, ArithmeticError, np.linalg.LinAlgError):
            return False
        state = replace(st, t=t, noise=noise, used=use, hessian=h, gradient=g, chi2=s,
                        n_rows=int(use.sum()),
                        converged=converged)
        if not (np.all(np.isfinite(state.hessian)) and lsq.healthy(model, state)):
            return False
        if any(z < lsq.Z_KEEP for z in lsq.significance(model, state).values()):
            return False
        called = self._calls(state, x, y)
        if called and not (getattr(self.spec, "refit_calls_warm", False)
                           and self._still_out(state, called, x, y)):
            return False
        self._reset_sums(state)
        self.refits["warm"] += 1
        return True

    def _still_out(self, state: lsq.FitState, called: list[int], x: np.ndarray,
                   y: np.ndarray) -> bool:
        """Whether every parameter the score test calls for stays out when it is
        fitted: freed alone from its null with the warm state's rows and noise model, a
        converged solve puts it below Z_KEEP standard errors (the keep rule of a full
        refit), so a full refit would leave it out again. A call at CALL_Z that the 3
        sigma rule then refuses is common on a long forward I–V step's way from the
        exponential region to where RS shows, and a full refit costs many warm ones
        (a spec opts in with ``refit_calls_warm``)."""
        for k in called:
            active = state.active.copy()
            active[k] = True
            t = state.t.copy()
            t[k] = self.model.params[k].null
            try:
                t, _, _, _, converged = lsq.levenberg(self.model, t, active, x, y,
                                                      state.used, state.noise,
                                                      max_iter=WARM_MAX_ITER)
                h, g, s = blocked.normal_sums(self.model, t, np.flatnonzero(active), x, y,
                                              state.used, state.noise)
            except (ValueError, ArithmeticError, np.linalg.LinAlgError):
                return False
            trial = replace(state, t=t, active=active, hessian=h, gradient=g, chi2=s,
                            converged=converged)
            if not (converged and np.all(np.isfinite(h))):
                return False
            if lsq.significance(self.model, trial).get(k, 0.0) >= lsq.Z_KEEP:
                return False
        return True

    def _called_for(self, state: lsq.FitState, x: np.ndarray, y: np.ndarray) -> bool:
        """Whether the data now call for an optional parameter the last full refit left
        out (`_calls`)."""
        return bool(self._calls(state, x, y))

    def _calls(self, state: lsq.FitState, x: np.ndarray, y: np.ndarray) -> list[int]:
        """The optional parameters the last full refit left out that the data now call
        for: one Gauss–Newton step with that parameter freed from its null (a score
        test, one parameter at a time) moves it, inside its bounds, by CALL_Z of its
        standard error or more. A sum that is not finite calls for all of them."""
        params = self.model.params
        absent = [k for k, p in enumerate(params) if p.optional and not state.active[k]]
        shown = getattr(self.spec, "can_show", None)  # not held, and shown by these rows
        if shown is not None:
            absent = [k for k in absent if shown(params[k].name, self.elig.view())]
        if not absent:
            return []
        trial = state.active.copy()
        trial[absent] = True
        idx = np.flatnonzero(trial)
        h_all, g_all, _ = blocked.normal_sums(self.model, state.t, idx, x, y, state.used,
                                              state.noise)
        if not (np.all(np.isfinite(h_all)) and np.all(np.isfinite(g_all))):
            return absent
        called = []
        kept = [j for j, k in enumerate(idx) if state.active[k]]
        for k in absent:
            j = int(np.searchsorted(idx, k))
            sub = [*kept, j]
            h, g = h_all[np.ix_(sub, sub)], g_all[sub]
            one = state.active.copy()
            one[k] = True
            cov = lsq.covariance_t(replace(state, active=one, hessian=h, gradient=g))
            d = np.sqrt(np.maximum(np.diag(h), 1e-300))
            try:
                step = -np.linalg.solve(h / np.outer(d, d), g / d) / d
            except np.linalg.LinAlgError:
                return absent
            var = cov[-1, -1]
            sd = math.sqrt(var) if np.isfinite(var) and var > 0 else 0.0
            moved = state.t[k] + step[-1]
            if (params[k].lower <= moved <= params[k].upper and sd > 0
                    and abs(step[-1]) >= CALL_Z * sd):
                called.append(k)
        return called

    def current_t(self) -> np.ndarray:
        t = self.state.t.copy()
        step = self._step()
        if step is not None:
            idx = np.flatnonzero(self.state.active)
            t[idx] = self._clipped(t[idx] + step, idx)
        return t

    def snapshot(self) -> FitResult:
        if self.state is None:
            return empty_result(self.spec.kind, self.n, self.reason)
        st = self.state
        step = self._step()
        t, chi2 = st.t, self.s
        if step is not None:
            idx = np.flatnonzero(st.active)
            t = st.t.copy()
            t[idx] = self._clipped(st.t[idx] + step, idx)
            actual = t[idx] - st.t[idx]
            chi2 = max(self.s + 2 * float(actual @ self.g) + float(actual @ self.h @ actual),
                       0.0)
        view = replace(st, t=t, used=self.used.view().copy(), hessian=self.h,
                       gradient=np.zeros_like(self.g), chi2=chi2, n_rows=self.rows)
        carried = getattr(self.spec, "carried", None)  # held values' uncertainty
        extra = carried(st, self.x.view(), self.y.view()) if carried else None
        return lsq.to_result(self.model, view, self.spec.kind, self.n,
                             extras=self.spec.extras(), min_rows=self.spec.min_points,
                             verdict=self.verdict, extra_cov_t=extra)
