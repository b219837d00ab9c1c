"""One way to build a run's fit inputs (sweeps/runfit.py) and what the model says about
the meter's corrections (fitmodel.note_correction)."""

from __future__ import annotations

from pnbench.modeling.modelset import ModelSet
from pnbench.sweeps.fitmodel import OPEN_CORRECTED, SHORT_CORRECTED, note_correction
from pnbench.sweeps.runfit import run_extras


def test_run_extras_carry_the_device_correction_and_stated_noise():
    run = {"lcr_correction": {"done": True, "corrections": ["short"]},
           "stated_noise": {"cv": {"relative": 2e-4}}, "status": "completed"}
    assert run_extras("LH-VC510", run) == {
        "device": "LH-VC510", "lcr_correction": run["lcr_correction"],
        "stated_noise": run["stated_noise"]}
    assert run_extras(None, {"lcr_correction": None}) == {}


def _model() -> ModelSet:
    fits = {"cv": {"message": "CJO VJ M TT RFIX from 90 of 90 points"}}
    return ModelSet(values={"CJO": 3e-11}, extras={"fits": fits})


def test_a_short_correction_makes_any_fitted_rfix_the_residual():
    """With run.json's record of a short correction the C-V fit's message says a
    fitted RFIX is what the correction left; the open's note is only there when the
    open ran."""
    model = note_correction(_model(), {"done": True, "corrections": ["short"]})
    message = model.extras["fits"]["cv"]["message"]
    assert model.extras["short_corrected"] is True
    assert SHORT_CORRECTED in message and "RFIX" in SHORT_CORRECTED
    assert OPEN_CORRECTED not in message and "open_corrected" not in model.extras
    both = note_correction(_model(), {"done": True, "corrections": ["open", "short"]})
    assert OPEN_CORRECTED in both.extras["fits"]["cv"]["message"]
    undone = note_correction(_model(), {"done": False, "corrections": ["short"]})
    assert "short_corrected" not in undone.extras
