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


@pytest.fixture(scope="module")
def data(ngspice):
    return {name: fd.make(ngspice, name) for name in ("sig", "rec", "lky")}


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
    assert set(out.results) == {"iv_forward", "iv_reverse", "cv", "admittance"}
    # the admittance fit held IS, N, RS at the I-V values
    assert out.results["admittance"].extras["fixed"]["IS"] == m.values["IS"]
    doc = json.loads(json.dumps(m.to_json_dict()))
    assert doc["parameters"]["TT"]["unit"] == "s"
    assert doc["fits"]["iv_forward"]["success"] is True
    assert "correlation" in doc["fits"]["admittance"]


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
