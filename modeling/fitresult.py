"""The value every fitter returns: estimates with honest uncertainties and a readable verdict.

A ``FitResult`` is frozen (as scipy.optimize returns one result object): the fitted
model-card values and their one-sigma errors, the covariance and correlation between
them (in the units of the values, SI), which input points were used, the reduced
chi-square, a success flag and a message a person can read. A parameter the data do not
determine is absent from ``values`` (and the message says why); nothing is made up.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Any

import numpy as np

#: The kinds of fit the project knows.
KINDS = ("iv", "iv_forward", "iv_reverse", "cv", "admittance", "joint")


def _frozen_array(a: Any, dtype=float) -> np.ndarray:
    out = np.array(a, dtype=dtype, copy=True)
    out.setflags(write=False)
    return out


@dataclass(frozen=True)
class FitResult:
    """One fit: values [SI], sigmas, covariance, points used and a verdict.

    ``names`` orders the rows and columns of ``covariance`` and ``correlation`` and holds
    exactly the keys of ``values``. ``extras`` carries derived figures that are not
    fitted model-card parameters (e.g. the leakage current at a reference voltage, the
    stated IBV, the doping), JSON-able. ``used`` is a bool mask over the input points in
    the order they were given.
    """

    kind: str
    names: tuple[str, ...]
    values: Mapping[str, float]
    sigmas: Mapping[str, float]
    covariance: np.ndarray
    correlation: np.ndarray
    used: np.ndarray
    n_points: int
    reduced_chi2: float
    success: bool
    message: str
    extras: Mapping[str, Any] = field(default_factory=dict)

    def __post_init__(self) -> None:
        names = tuple(self.names)
        if set(names) != set(self.values) or len(set(names)) != len(names):
            raise ValueError(f"names {names} and values {sorted(self.values)} disagree")
        p = len(names)
        cov = _frozen_array(self.covariance).reshape(p, p) if p else _frozen_array(
            np.zeros((0, 0)))
        cor = _frozen_array(self.correlation).reshape(p, p) if p else _frozen_array(
            np.zeros((0, 0)))
        object.__setattr__(self, "names", names)
        object.__setattr__(self, "values", MappingProxyType({n: float(self.values[n])
                                                             for n in names}))
        object.__setattr__(self, "sigmas", MappingProxyType(
            {n: float(self.sigmas.get(n, math.inf)) for n in names}))
        object.__setattr__(self, "covariance", cov)
        object.__setattr__(self, "correlation", cor)
        object.__setattr__(self, "used", _frozen_array(self.used, dtype=bool))
        object.__setattr__(self, "extras", MappingProxyType(dict(self.extras)))

    @property
    def n_used(self) -> int:
        return int(np.count_nonzero(self.used))

    def relative_sigma(self, name: str) -> float:
        """sigma/|value| of a fitted parameter (inf when absent or zero)."""
        if name not in self.values:
            return math.inf
        value = abs(self.values[name])
        return self.sigmas[name] / value if value > 0 else math.inf

    def settled(self, target_rel: float = 0.01,
                names: Iterable[str] | None = None) -> dict[str, bool]:
        """Per parameter: is its relative standard error below ``target_rel``?

        Without ``names``, every fitted parameter; a name asked for but not fitted is
        False (a parameter the data do not determine is never settled).
        """
        chosen = self.names if names is None else tuple(n.upper() for n in names)
        return {n: bool(self.success and self.relative_sigma(n) < target_rel)
                for n in chosen}

    def summary(self) -> dict[str, Any]:
        """A JSON-able digest (for model.json extras and events)."""
        return {
            "kind": self.kind,
            "success": self.success,
            "message": self.message,
            "n_points": self.n_points,
            "n_used": self.n_used,
            "reduced_chi2": (self.reduced_chi2 if math.isfinite(self.reduced_chi2)
                             else None),
            "correlation": {a: {b: round(float(self.correlation[i, j]), 4)
                                for j, b in enumerate(self.names)}
                            for i, a in enumerate(self.names)},
            **{k: v for k, v in self.extras.items()},
        }


def empty_result(kind: str, n_points: int, message: str,
                 used: np.ndarray | None = None,
                 extras: Mapping[str, Any] | None = None) -> FitResult:
    """A result that determines nothing (too few points, no usable data, ...)."""
    return FitResult(
        kind=kind, names=(), values={}, sigmas={}, covariance=np.zeros((0, 0)),
        correlation=np.zeros((0, 0)),
        used=np.zeros(n_points, dtype=bool) if used is None else used,
        n_points=n_points, reduced_chi2=math.nan, success=False, message=message,
        extras=extras or {},
    )


def correlation_from_covariance(cov: np.ndarray) -> np.ndarray:
    """Correlation matrix of a covariance (zero where a variance is zero or infinite)."""
    cov = np.asarray(cov, dtype=float)
    d = np.sqrt(np.clip(np.diag(cov), 0.0, None))
    with np.errstate(divide="ignore", invalid="ignore"):
        cor = cov / np.outer(d, d)
    cor[~np.isfinite(cor)] = 0.0
    np.fill_diagonal(cor, 1.0)
    return np.clip(cor, -1.0, 1.0)
