"""The C–V and admittance models the fits share: their parameters and predictions.

* `DepletionModel`: C(V) = Cj(V) + CFIX, the depletion capacitance
  Cj(V) = CJO/(1 - V/VJ)**M with the simulator's linear continuation above FC*VJ
  (docs/physics.md §4) and an optional fixture capacitance; one linear channel.
* `AdmittanceModel`: the whole small-signal model of docs/physics.md §4, RS in series with
  gd + 1/RSH + j*w*(Cj + TT*gd), as (C, G) = (Im Y/w + CFIX, Re Y).

`held_extras` states the values a fit held. The fits themselves are in `fit_cv` and
`network`.
"""

from __future__ import annotations

import math

import numpy as np

from pnbench.modeling import lsq
from pnbench.modeling.fit_iv import IS_LOWER_LN
from pnbench.modeling.params import DEFAULT_TEMPERATURE_K, DiodeParams
from pnbench.modeling.smallsignal import depletion_capacitance, device_admittance

#: Why a fixture capacitance is left out of a fit (the 3-sigma rule, as for RS and RSH).
CFIX_ABSENT = ("CFIX (fixture capacitance) not fitted: no constant capacitance beyond the "
               "junction's stands three standard errors above zero")


def _params(fixture: bool | None, with_dc: bool) -> tuple[lsq.Param, ...]:
    """Parameters of the C-V models; ``fixture``: None fits CFIX when the data determine
    it, True always, False never."""
    out = []
    if with_dc:
        out += [
            lsq.Param("IS", "log", lower=IS_LOWER_LN, upper=math.log(10.0)),
            lsq.Param("N", "lin", lower=0.3, upper=20.0),
            lsq.Param("RS", "lin", lower=0.0, upper=1e9, optional=True, step=1e-9,
                      absent_reason="RS not determined: the conductance never bends "
                                    "away from the exponential"),
            lsq.Param("RSH", "inv", lower=0.0, upper=1e3, optional=True, step=1e-18,
                      absent_reason="RSH not determined: no shunt conductance shows"),
        ]
    out += [
        lsq.Param("CJO", "log", lower=math.log(1e-18), upper=0.0),
        lsq.Param("VJ", "lin", lower=0.05, upper=5.0),
        lsq.Param("M", "lin", lower=0.01, upper=3.0),
    ]
    if with_dc:
        out.append(lsq.Param("TT", "lin", lower=0.0, upper=1.0, optional=True, step=1e-16,
                             absent_reason="TT not determined: the diffusion capacitance "
                                           "never shows above the depletion capacitance"))
    if fixture is not False:
        out.append(lsq.Param("CFIX", "lin", lower=-1e-6, upper=1e-6, optional=not fixture,
                             step=1e-18, absent_reason=CFIX_ABSENT))
    return tuple(out)


class DepletionModel:
    """C(V) = Cj(V) + CFIX; x = (V, f); one linear channel."""

    channels = ("lin",)

    def __init__(self, fc: float = 0.5, fixture: bool | None = False):
        self.fc = fc
        self.params = _params(fixture, with_dc=False)

    def _c(self, t, x):
        p = DiodeParams(CJO=math.exp(t[0]), VJ=float(t[1]), M=float(t[2]), FC=self.fc)
        c = np.asarray(depletion_capacitance(x[:, 0], p), dtype=float)
        return (c + (t[3] if len(t) > 3 else 0.0))[:, None]

    def predict(self, t, x, active):
        y = self._c(t, x)
        if active is None:
            return y, None
        return y, lsq.numeric_jacobian(self._c, t, active, x, y, self.params)


class AdmittanceModel:
    """(C, G) = (Im Y/w + CFIX, Re Y) of the whole device; x = (V, f)."""

    channels = ("lin", "log")

    def __init__(self, temperature_K: float = DEFAULT_TEMPERATURE_K, fc: float = 0.5,
                 fixture: bool | None = False):
        self.temperature_K = temperature_K
        self.fc = fc
        self.params = _params(fixture, with_dc=True)
        self.index = {p.name: k for k, p in enumerate(self.params)}

    def diode(self, t) -> DiodeParams:
        g = float(t[3])
        return DiodeParams(IS=math.exp(t[0]), N=float(t[1]), RS=float(t[2]),
                           RSH=math.inf if g <= 0 else 1.0 / g, CJO=math.exp(t[4]),
                           VJ=float(t[5]), M=float(t[6]), TT=float(t[7]), FC=self.fc)

    def _y(self, t, x):
        y = device_admittance(x[:, 0], x[:, 1], self.diode(t), self.temperature_K)
        w = 2 * np.pi * x[:, 1]
        c = y.imag / w + (t[8] if len(t) > 8 else 0.0)
        return np.column_stack([c, y.real])

    def predict(self, t, x, active):
        y = self._y(t, x)
        if active is None:
            return y, None
        return y, lsq.numeric_jacobian(self._y, t, active, x, y, self.params)


def held_extras(model: AdmittanceModel, fixed: dict[str, float] | None) -> dict:
    """The held values for a FitResult's extras: ``fixed`` (values held) and
    ``held_absent`` (optional parameters held at none, e.g. RSH = inf: no shunt)."""
    if not fixed:
        return {}
    params = {p.name: p for p in model.params}
    absent = [k for k, v in fixed.items() if k in params and params[k].optional
              and params[k].to_t(v) == params[k].null]
    out: dict = {"fixed": {k: float(v) for k, v in fixed.items() if k not in absent}}
    if absent:
        out["held_absent"] = absent
    return out
