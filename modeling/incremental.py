"""Streaming fits: points arrive one at a time or in batches, an estimate is ready any time.

How a least-squares kind (``iv_forward``, ``cv``, ``admittance``) keeps up without
refitting from scratch:

* The normal equations H = J^T W J, g = J^T W r and the weighted sum of squares are kept
  as running sums, linearized at a reference point t_ref. A new point adds its row in
  O(p^2); a snapshot solves the p x p system for one Gauss–Newton step from t_ref, which,
  t_ref being the optimum of most of the same data, lands on the optimum of all of it to
  well within its standard error.
* When that step grows beyond about one standard error (the linearization may no longer
  hold), the sums are rebuilt at the new estimate with a few warm-started iterations
  (O(n), rare).
* Whenever the point count has grown by ``growth`` (25 % by default) since the last
  refit, the fit is refitted over every point. Most of these refits are warm: they keep
  what the last full refit decided (which optional parameters the data determine, the
  noise model) and run one Levenberg–Marquardt solve from the current estimate, then
  re-estimate the noise model once and re-choose the points above the floor. A full
  refit, which starts the noise model afresh and re-decides the optional parameters
  (RS, RSH, TT, ...), runs when the count has grown by ``SELECT_GROWTH`` since the last
  full one, when a kept optional parameter is no longer significant, or when the warm
  solve fails. Both schedules are geometric, so the work is O(1) per point amortized,
  and a warm refit costs a fraction of a full one.

``iv_reverse`` is a closed-form analysis (straight lines through the data): a snapshot
recomputes it when points were added. ``iv`` routes forward and reverse points to one
fitter each and merges their snapshots.

Every public method holds one lock, so the acquisition thread may ``add`` while another
thread takes a ``snapshot``. Nothing here starts a thread or reads a clock.
"""

from __future__ import annotations

import threading
from collections.abc import Iterable

import numpy as np

from pnbench.modeling import fit_iv
from pnbench.modeling.fitresult import FitResult
from pnbench.modeling.joint import merge_results
from pnbench.modeling.lsqstream import Buffer, LsqStream, as_column
from pnbench.modeling.params import DEFAULT_TEMPERATURE_K

#: What an IncrementalFitter can be asked to fit.
FITTER_KINDS = ("iv", "iv_forward", "iv_reverse", "cv", "admittance")
class _ForwardSpec:
    kind = "iv_forward"
    x_width = 1
    min_points = fit_iv.MIN_POINTS
    refit_calls_warm = True  # a called RS or RSH is fitted warm before a full refit

    def __init__(self, temperature_K: float, noise, shunt: bool = True,
                 noise_scale: float = 1.0):
        self.model = fit_iv.ForwardModel(temperature_K)
        self.noise = noise
        self.shunt = shunt
        self.noise_scale = noise_scale

    def rows(self, v, i, f, c, g, comp):
        ok = np.isfinite(v) & np.isfinite(i) & (v > 0) & ~comp
        return v[:, None], i[:, None], ok[:, None]

    def full_state(self, x, y, elig, start):
        return fit_iv.forward_state(self.model, x[:, 0], y[:, 0], elig[:, 0],
                                    noise=self.noise, shunt=self.shunt, start=start,
                                    noise_scale=self.noise_scale)

    def noise_rows(self, x, y, t):
        """The stated noise of these rows (None when the noise is estimated)."""
        if self.noise is None:
            return None
        return fit_iv.stated_noise(self.model, self.noise, x[:, 0], y[:, 0],
                                   self.noise_scale, t)

    def eligible_now(self, x, elig):
        return elig

    def extras(self) -> dict:
        return {}


class _ReverseStream:
    def __init__(self, temperature_K, reference_V, ibv_A, noise=None, noise_scale=1.0):
        self.v, self.i, self.comp = Buffer(1), Buffer(1), Buffer(1, dtype=bool)
        self.kw = {"temperature_K": temperature_K, "reference_V": reference_V,
                   "ibv_A": ibv_A, "noise": noise, "noise_scale": noise_scale}
        self.cache: FitResult | None = None

    @property
    def n(self) -> int:
        return self.v.n

    def add(self, v, i, comp) -> None:
        self.v.extend(v[:, None])
        self.i.extend(i[:, None])
        self.comp.extend(comp[:, None])
        self.cache = None

    def snapshot(self) -> FitResult:
        if self.cache is None:
            self.cache = fit_iv.fit_reverse(self.v.view()[:, 0], self.i.view()[:, 0],
                                            compliance=self.comp.view()[:, 0], **self.kw)
        return self.cache


class IncrementalFitter:
    """A fit that follows a sweep: ``add`` points as they come, ``snapshot`` any time.

    kind: "iv_forward", "iv_reverse", "iv" (both, by the sign of V), "cv" (CJO, VJ, M
    from C–V) or "admittance" (the whole small-signal model, TT included, from C and G).
    Options: ``temperature_K``; ``target_rel`` (default for ``settled``); ``noise``:
    the instrument's stated noise when known (fitnoise.StatedNoise or (relative,
    floor): the SMU's for I-V, the LCR meter's for C-V and admittance), times
    ``noise_scale`` (1/sqrt(NPLC x readings)), else estimated;
    ``reference_V`` and ``ibv_A`` for the reverse analysis; ``with_fixture`` (fit a
    parallel fixture capacitance); ``fixed`` (model-card values to hold, e.g. IS, N, RS
    from an I–V fit while fitting admittance; with IS and N among them C–V and
    admittance points are fitted on the network the meter sees, as the run's final fit
    does); ``ac_level_V`` (the LCR meter's test level, rms, of this sweep);
    ``held_covariance`` ((names, covariance) of held values, carried into the sigmas);
    ``growth`` (full refit schedule).
    """

    def __init__(self, kind: str, *, temperature_K: float = DEFAULT_TEMPERATURE_K,
                 target_rel: float = 0.01, noise=None, noise_scale: float = 1.0,
                 reference_V: float | None = None, ibv_A: float | None = None,
                 with_fixture: bool | None = None, fixed: dict[str, float] | None = None,
                 ac_level_V: float | None = None, held_covariance=None,
                 growth: float = 1.25):
        if kind not in FITTER_KINDS:
            raise ValueError(f"unknown fit kind {kind!r}; known: {', '.join(FITTER_KINDS)}")
        if not growth > 1.0:
            raise ValueError(f"growth must be > 1, got {growth!r}")
        self.kind = kind
        self.temperature_K = float(temperature_K)
        self.target_rel = float(target_rel)
        self._lock = threading.Lock()
        self._forward = self._reverse = self._small = None
        if kind in ("iv", "iv_forward"):
            self._forward = LsqStream(_ForwardSpec(self.temperature_K, noise,
                                                   noise_scale=noise_scale), growth)
        if kind in ("iv", "iv_reverse"):
            self._reverse = _ReverseStream(self.temperature_K, reference_V, ibv_A,
                                           noise=noise, noise_scale=noise_scale)
        if kind in ("cv", "admittance"):
            from pnbench.modeling import cvstream

            spec = cvstream.stream_spec(kind, self.temperature_K, with_fixture=with_fixture,
                                        fixed=fixed, ac_level_V=ac_level_V,
                                        held_covariance=held_covariance, noise=noise,
                                        noise_scale=noise_scale)
            self._small = LsqStream(spec, growth)
        self._order: list[np.ndarray] = []  # for "iv": which points went forward
        self._cache: FitResult | None = None

    @property
    def n_points(self) -> int:
        with self._lock:
            return sum(s.n for s in (self._forward, self._reverse, self._small) if s)

    def add(self, voltage_V, current_A=None, *, frequency_Hz=None, capacitance_F=None,
            conductance_S=None, compliance=False) -> None:
        """Add one point (scalars) or a batch (arrays of one length)."""
        v = np.atleast_1d(np.asarray(voltage_V, dtype=float)).ravel()
        n = v.size
        i = as_column(current_A, n, "current_A")
        f = as_column(frequency_Hz, n, "frequency_Hz")
        c = as_column(capacitance_F, n, "capacitance_F")
        g = as_column(conductance_S, n, "conductance_S")
        comp = np.asarray(compliance, dtype=bool).ravel()
        comp = np.full(n, bool(comp[0])) if comp.size == 1 else comp
        if comp.size != n:
            raise ValueError(f"compliance has {comp.size} values, voltage_V has {n}")
        with self._lock, np.errstate(all="ignore"):
            self._cache = None
            if self.kind == "iv":
                fwd = v > 0
                self._order.append(fwd)
                if fwd.any():
                    self._forward.add(*self._forward.spec.rows(v[fwd], i[fwd], None, None,
                                                               None, comp[fwd]))
                if (~fwd).any():
                    self._reverse.add(v[~fwd], i[~fwd], comp[~fwd])
            elif self._forward is not None:
                self._forward.add(*self._forward.spec.rows(v, i, f, c, g, comp))
            elif self._reverse is not None:
                self._reverse.add(v, i, comp)
            else:
                self._small.add(*self._small.spec.rows(v, i, f, c, g, comp))

    def snapshot(self) -> FitResult:
        """The current estimate as a frozen FitResult (cheap; cached until the next add)."""
        with self._lock, np.errstate(all="ignore"):
            if self._cache is None:
                self._cache = self._snapshot()
            return self._cache

    def _snapshot(self) -> FitResult:
        if self.kind == "iv":
            fwd_mask = np.concatenate(self._order) if self._order else np.zeros(0, bool)
            return merge_results("iv", [self._forward.snapshot(), self._reverse.snapshot()],
                                 [fwd_mask, ~fwd_mask])
        stream = self._forward or self._reverse or self._small
        result = stream.snapshot()
        describe = getattr(getattr(stream, "spec", None), "describe", None)
        return describe(result) if describe else result  # e.g. what CFIX, RFIX are

    def refit(self) -> None:
        """Refit every point now from scratch (warm-started): noise model and optional
        parameters decided afresh. For the end of a sweep; O(n)."""
        with self._lock, np.errstate(all="ignore"):
            self._cache = None
            for stream in (self._forward, self._small):
                if stream is not None:
                    stream.refit()

    def settle(self) -> None:
        """The end of a sweep when no refit follows: a full refit only where the points
        since the last one call for an optional parameter it left out (one Jacobian
        over every point otherwise; see LsqStream.settle)."""
        with self._lock, np.errstate(all="ignore"):
            self._cache = None
            for stream in (self._forward, self._small):
                if stream is not None:
                    stream.settle()

    def settled(self, target_rel: float | None = None,
                names: Iterable[str] | None = None) -> dict[str, bool]:
        """Per parameter: relative standard error below ``target_rel`` (or the default)."""
        target = self.target_rel if target_rel is None else target_rel
        return self.snapshot().settled(target, names)
