"""Joint fits of a whole run into one model, and the round trip through ngspice.

Reference: ngspice level-1 diode in batch mode (tests/spicehelp.py). A model card
exported from a fit and simulated by ngspice must reproduce the curves it was fitted to.
"""

from __future__ import annotations

import json
import math

import fitdevices as fd
import numpy as np
import pytest
from spicehelp import ac_admittance, dc_sweep

from pnbench.modeling import joint
from pnbench.modeling.modelset import ModelSet


def _run_data(d):
    return {
        "iv_forward": {"voltage_V": d.forward_v, "current_A": d.forward_i},
        "iv_reverse": {"voltage_V": d.reverse_v, "current_A": d.reverse_i},
        "admittance": {"voltage_V": d.cv_v, "frequency_Hz": d.cv_f,
                       "capacitance_F": d.cv_c, "conductance_S": d.cv_g},
    }


def test_a_run_becomes_one_model_with_every_parameter(data):
    d = data["sig"]
    out = joint.fit_all(_run_data(d), ibv_A=d.params.IBV)
    m = out.model
    for name in ("IS", "N", "RS", "CJO", "VJ", "M", "TT", "BV"):
        assert abs(m.values[name] / getattr(d.params, name) - 1) < 0.02, name
    assert m.values["IBV"] == d.params.IBV and m.sigma("IBV") is None
    assert set(out.results) == {"iv_forward", "iv_reverse", "cv"}
    # one fit of the network the meter sees held IS, N, RS at the I-V values
    assert out.results["cv"].extras["fixed"]["IS"] == m.values["IS"]
    assert {"CJO", "VJ", "M", "TT"} <= set(out.results["cv"].values)
    doc = json.loads(json.dumps(m.to_json_dict()))
    assert doc["parameters"]["TT"]["unit"] == "s"
    assert doc["fits"]["iv_forward"]["success"] is True
    assert "correlation" in doc["fits"]["cv"]


def test_parameters_not_extracted_are_absent(data):
    """The rectifier's reverse sweep stops far short of its 600 V: no BV, no IBV."""
    d = data["rec"]
    m = joint.fit_run(_run_data(d))
    assert "BV" not in m.values and "IBV" not in m.values
    assert "BV" not in m.to_json_dict()["parameters"]
    assert "BV not determined" in m.extras["fits"]["iv_reverse"]["message"]


def test_exported_card_reproduces_the_input_curves(data, ngspice):
    """Fit the sig diode, write its model card, simulate the card text in ngspice: the
    I-V curve (above 1 nA) and the C-V curve agree with the input within 0.5 %."""
    d = data["sig"]
    m = joint.fit_run(_run_data(d), ibv_A=d.params.IBV)
    # ngspice adds its own GMIN shunt; the fitted RSH is that shunt, so it stays out
    card = ModelSet(values={k: v for k, v in m.values.items() if k != "RSH"},
                    sigmas={k: s for k, s in m.sigmas.items() if k != "RSH"},
                    temperature_K=m.temperature_K).card_text("SIGA1")
    assert ".model SIGA1 D(" in card
    v, i = dc_sweep(ngspice, card, d.forward_v)
    big = np.abs(d.forward_i) > 1e-9
    assert np.max(np.abs(i[big] / d.forward_i[big] - 1)) < 5e-3
    rv, ri = dc_sweep(ngspice, card, d.reverse_v[:40])
    assert np.max(np.abs(ri / d.reverse_i[:40] - 1)) < 5e-3
    f = np.asarray(fd.FREQUENCIES_HZ["sig"])
    y = ac_admittance(ngspice, card, d.cv_v[::2], f).ravel()
    c = y.imag / (2 * np.pi * np.tile(f, d.cv_v[::2].size))
    assert np.max(np.abs(c / d.cv_c - 1)) < 5e-3


def test_exported_model_with_a_shunt_reproduces_the_leaky_diode(data, ngspice):
    """The leaky diode's RSH is not a card parameter: simulated as a resistor across the
    junction (spicehelp places one for a ModelSet), the fitted model reproduces the
    forward curve, shunt region included, within 0.5 %."""
    d = data["lky"]
    m = joint.fit_run(_run_data(d))
    assert abs(m.values["RSH"] / d.params.RSH - 1) < 0.05
    v, i = dc_sweep(ngspice, m, d.forward_v)
    assert np.max(np.abs(i / d.forward_i - 1)) < 5e-3


def test_merge_keeps_the_better_of_two_estimates(data):
    d = data["lky"]
    out = joint.fit_all({"iv": {"voltage_V": np.concatenate([d.forward_v, d.reverse_v]),
                                "current_A": np.concatenate([d.forward_i, d.reverse_i])}})
    fwd, rev = out.results["iv_forward"], out.results["iv_reverse"]
    n_f, n_r = d.forward_v.size, d.reverse_v.size
    first = np.r_[np.ones(n_f, bool), np.zeros(n_r, bool)]
    merged = joint.merge_results("iv", [fwd, rev], [first, ~first])
    best = min((fwd, rev), key=lambda r: r.relative_sigma("RSH"))
    assert merged.values["RSH"] == best.values["RSH"]
    assert merged.n_points == n_f + n_r and merged.used.size == n_f + n_r
    k = merged.names.index("BV")
    assert math.isclose(merged.covariance[k, k], rev.sigmas["BV"] ** 2)


def _result(kind: str, success: bool = True, **values: float):
    """A FitResult by hand: each value with a 1 % sigma."""
    from pnbench.modeling.fitresult import FitResult

    names = tuple(values)
    sig = {k: abs(v) * 0.01 for k, v in values.items()}
    cov = np.diag([sig[k] ** 2 for k in names])
    return FitResult(kind=kind, names=names, values=values, sigmas=sig, covariance=cov,
                     correlation=np.eye(len(names)), used=np.ones(10, bool), n_points=10,
                     reduced_chi2=1.0, success=success, message="by hand",
                     extras={"IBV_A": 1e-5} if kind == "iv_reverse" else {})


ADMITTANCE = {"IS": 3e-9, "N": 1.9, "RS": 0.5, "RSH": 1.2e5, "CJO": 2e-12, "VJ": 0.6,
              "M": 0.36, "TT": 4e-9}


def test_iv_evidence_wins_for_is_n_rs_rsh():
    """Both I-V fits looked for a shunt and found none: RSH stays out of the model even
    though the admittance fit (whose conductance also carries meter and fixture losses)
    has one; IS, N, RS come from I-V, the small-signal values from the admittance."""
    results = {"iv_forward": _result("iv_forward", IS=2.9e-9, N=1.82, RS=0.62),
               "iv_reverse": _result("iv_reverse", BV=105.0),
               "admittance": _result("admittance", **ADMITTANCE)}
    m = joint.model_from_results(results, 300.0)
    assert "RSH" not in m.values
    assert (m.values["IS"], m.values["N"], m.values["RS"]) == (2.9e-9, 1.82, 0.62)
    assert m.values["TT"] == 4e-9 and m.values["CJO"] == 2e-12
    # an I-V fit without RS keeps the admittance's RS out too
    results["iv_forward"] = _result("iv_forward", IS=2.9e-9, N=1.82)
    assert "RS" not in joint.model_from_results(results, 300.0).values
    # a shunt found by the reverse fit is used
    results["iv_reverse"] = _result("iv_reverse", BV=105.0, RSH=3e9)
    assert joint.model_from_results(results, 300.0).values["RSH"] == 3e9


def test_admittance_supplies_dc_parameters_only_without_iv_evidence():
    """Without I-V data the admittance fit's IS, N, RS, RSH are the model's; a forward
    I-V fit that failed is no evidence, while a reverse fit still rules on RSH."""
    adm = _result("admittance", **ADMITTANCE)
    m = joint.model_from_results({"admittance": adm}, 300.0)
    assert {k: m.values[k] for k in ADMITTANCE} == ADMITTANCE
    m = joint.model_from_results({"iv_forward": _result("iv_forward", False, IS=1.0, N=9.0),
                                  "iv_reverse": _result("iv_reverse", BV=105.0),
                                  "admittance": adm}, 300.0)
    assert m.values["IS"] == ADMITTANCE["IS"] and "RSH" not in m.values


def test_dc_holds_of_the_iv_fits():
    """What an admittance fit holds: the I-V values, a series resistance or shunt the
    I-V fits did not find held absent (RS = 0, RSH = inf), nothing without I-V."""
    fwd = _result("iv_forward", IS=2.9e-9, N=1.82)
    assert joint.dc_holds([fwd]) == {"IS": 2.9e-9, "N": 1.82, "RS": 0.0, "RSH": math.inf}
    rev = _result("iv_reverse", RSH=3e9)
    assert joint.dc_holds([fwd, rev])["RSH"] == 3e9
    assert joint.dc_holds([rev]) == {"RSH": 3e9}
    assert joint.dc_holds([_result("iv_forward", False, IS=1.0)]) == {}
    assert joint.dc_holds([_result("admittance", **ADMITTANCE)]) == {}


def test_admittance_fit_holds_no_shunt_when_iv_sees_none(data):
    """The sig diode's forward I-V from 0.35 V (where the simulator's GMIN shunt is below
    the 0.1 % reading noise added) and its admittance with 1 uS of meter loss added to G:
    the network fit holds RSH absent instead of turning the loss into a shunt, the
    model has no RSH, and TT stays within 2 % (reference: ngspice DC and AC analysis,
    tests/spicehelp.py)."""
    d = data["sig"]
    up = d.forward_v >= 0.35
    rng = np.random.default_rng(7)
    i = fd.instrument_noise(rng, d.forward_i[up], 1e-3, 1e-13)
    out = joint.fit_all({"iv_forward": {"voltage_V": d.forward_v[up], "current_A": i},
                         "admittance": {"voltage_V": d.cv_v, "frequency_Hz": d.cv_f,
                                        "capacitance_F": d.cv_c,
                                        "conductance_S": d.cv_g + 1e-6}})
    adm = out.results["cv"]
    assert "RSH" not in out.results["iv_forward"].values
    assert adm.extras["held_absent"] == ["RSH"] and "RSH" not in adm.values
    assert "RSH" not in out.model.values
    assert abs(out.model.values["TT"] / d.params.TT - 1) < 0.02
    json.dumps(out.model.to_json_dict(), allow_nan=False)


@pytest.mark.parametrize(("m", "cautioned"), [(0.5, False), (0.33, True)])
def test_mott_schottky_doping_carries_a_caution_when_the_junction_is_not_abrupt(m, cautioned):
    """1/C^2 is linear in V only for M = 1/2 (abrupt junction, Sze & Ng ch. 2): with a
    graded junction (M = 1/3) the doping and Vbi it gives are only an average, and the
    model says so."""
    from pnbench.modeling import smallsignal
    from pnbench.modeling.params import DiodeParams

    p = DiodeParams(IS=1e-14, CJO=5e-12, VJ=0.7, M=m)
    v = np.linspace(-10.0, 0.2, 42)
    f = np.full_like(v, 1e6)
    c, _ = smallsignal.parallel_from_admittance(smallsignal.device_admittance(v, f, p), f)
    fit = joint.fit_all({"cv": {"voltage_V": v, "frequency_Hz": f, "capacitance_F": c}},
                        area_m2=1e-8)
    doping = fit.model.extras["doping"]
    assert "doping_per_m3" in doping
    assert ("note" in doping) is cautioned
