"""The report's Arrhenius figure from a model fitted over temperature.

Data from the project's temperature model (modeling.temperature, itself checked against
ngspice in tests/modeling/test_temperature_ngspice.py).
"""

from __future__ import annotations

import numpy as np

from pnbench.modeling import junction
from pnbench.modeling import temperature as tm
from pnbench.modeling.fit_temperature import fit_over_temperature
from pnbench.modeling.modelset import ModelSet
from pnbench.modeling.params import DiodeParams
from pnbench.tui.report import arrhenius
from pnbench.tui.report.analysis import Analysis
from pnbench.tui.report.figures import OVER_TEMPERATURE_FIGURES, render_all

CARD = DiodeParams(IS=2e-9, N=1.03, RS=0.5, EG=0.69, XTI=2.0, TRS=2e-3)


def _model() -> ModelSet:
    sets = []
    for t in (250.0, 300.0, 350.0, 400.0):
        p = tm.params_at(CARD, t, 300.15)
        v = junction.voltage(np.logspace(-8, -1, 25), p, t)
        sets.append((t, {"iv": {"voltage_V": v, "current_A": junction.current(v, p, t)}}))
    return fit_over_temperature(sets, tnom_K=300.15).model


def test_a_model_over_temperature_gets_the_figure(tmp_path):
    model = _model()
    an = Analysis(temperature_K=300.15, temperature_known=True, model=model,
                  params=model.to_params())
    assert [r["temperature_K"] for r in arrhenius.rows(an)] == [250.0, 300.0, 350.0, 400.0]
    files = render_all(an, "LH-TEST-T2", tmp_path)
    names = [f.name for f in files]
    assert "arrhenius" in names and "arrhenius" in OVER_TEMPERATURE_FIGURES
    fig = next(f for f in files if f.name == "arrhenius")
    assert fig.png.startswith(b"\x89PNG") and fig.svg_path.is_file()
    svg = fig.svg_path.read_text(encoding="utf-8")
    assert "EG 0.69" in svg and "1000 / T" in svg


def test_one_temperature_has_no_figure_and_a_stale_one_is_removed(tmp_path):
    model = _model()
    an = Analysis(temperature_K=300.15, temperature_known=True, model=model)
    render_all(an, "LH-TEST-T2", tmp_path)
    assert (tmp_path / "arrhenius.png").is_file()
    plain = ModelSet(values={"IS": 1e-14, "N": 1.0})
    render_all(Analysis(temperature_K=300.15, temperature_known=True, model=plain),
               "LH-TEST-T2", tmp_path)
    assert not (tmp_path / "arrhenius.png").exists()
    damaged = ModelSet(values={"IS": 1e-14}, extras={"temperatures": [{"x": 1}, "bad"]})
    assert arrhenius.arrhenius(Analysis(300.15, True, model=damaged), "X") is None
