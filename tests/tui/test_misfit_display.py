"""Misfit is shown where fit results are: the headless line, the report's fit table and
the app's parameter panel, in a few words (common practice, no source)."""

from __future__ import annotations

from pnbench.sweeps.events import Fit
from pnbench.tui.app.state import RunState
from pnbench.tui.app.widgets.params import MISFIT_MARK, rows
from pnbench.tui.headless import misfit_text
from pnbench.tui.report.tables import misfit_cell


def test_misfit_words_for_the_live_line_and_the_report():
    """The headless line says MISFIT in a few words only when a check fails; the
    report's fit table says against what the fit was judged."""
    assert misfit_text({"misfit": False, "runs_z": -1.0}) == ""
    assert misfit_text(None) == ""
    text = misfit_text({"misfit": True, "basis": "stated noise", "runs_z": -5.2,
                        "reduced_chi2": 24.0})
    assert text.startswith("MISFIT") and "24" in text and "-5.2" in text
    stated = {"lack_of_fit": {"misfit": True}, "noise": {"estimated": False}}
    assert "MISFIT" in misfit_cell(stated) and "stated" in misfit_cell(stated)
    guessed = {"lack_of_fit": {"misfit": False}, "noise": {"estimated": True}}
    assert misfit_cell(guessed).startswith("none found") and "runs test" in misfit_cell(guessed)
    assert misfit_cell({}) == "\u2014"


def test_the_parameter_panel_marks_a_misfit():
    """A live fit event with a failed check marks its parameters; the run's model.json
    marks the parameters of a fit whose lack_of_fit says misfit."""
    state = RunState()
    state.apply_event(Fit(step="cv", fit_kind="cv", success=True, parameters={
        "CJO": {"value": 3.2e-11, "sigma": 1e-14, "settled": True}},
        misfit={"misfit": True, "basis": "runs test", "runs_z": -5.0}))
    assert dict((r[0], r[3]) for r in rows(state.parameters))["CJO"] == MISFIT_MARK
    state = RunState()
    state.apply_model_json({
        "parameters": {"IS": {"value": 4e-15, "sigma": 1e-17},
                       "CJO": {"value": 3.2e-11, "sigma": 1e-14}},
        "fits": {"cv": {"message": "CJO from 60 points; the model does not describe the "
                                   "data", "correlation": {"CJO": {"CJO": 1.0}},
                        "lack_of_fit": {"misfit": True}},
                 "iv_forward": {"message": "IS", "correlation": {"IS": {"IS": 1.0}},
                                "lack_of_fit": {"misfit": False}}}})
    marks = dict((r[0], r[3]) for r in rows(state.parameters))
    assert marks["CJO"] == MISFIT_MARK and marks["IS"] != MISFIT_MARK


def test_the_review_marks_a_misfit_fit():
    """The review's parameters (run's model or refit) mark those of a misfit fit."""
    from pnbench.tui.app.review import estimates, misfits

    doc = {"parameters": {"CJO": {"value": 3.2e-11, "sigma": 1e-14},
                          "IS": {"value": 4e-15, "sigma": 1e-17}},
           "fits": {"cv": {"correlation": {"CJO": {"CJO": 1.0}},
                           "lack_of_fit": {"misfit": True}},
                    "iv_forward": {"correlation": {"IS": {"IS": 1.0}}}}}
    assert misfits(doc) == ["cv"]
    marked = estimates(doc)
    assert marked["CJO"].misfit and not marked["IS"].misfit
    assert misfits(None) == [] and estimates(None) == {}


def test_the_report_says_what_chi_square_was_judged_against():
    from pnbench.modeling.modelset import ModelSet
    from pnbench.tui.report.analysis import Analysis
    from pnbench.tui.report.tables import noise_note

    stated = ModelSet(values={"IS": 4e-15}, sigmas={"IS": 1e-17}, temperature_K=300.15,
                      extras={"stated_noise": {"iv": {"relative": 1e-4, "floor": 0.0,
                                                      "source": "plan [instruments.smu]"}}})
    note = noise_note(Analysis(300.15, True, model=stated))
    assert "stated noise" in note and "plan [instruments.smu]" in note
    guessed = noise_note(Analysis(300.15, True, model=ModelSet(values={}, sigmas={})))
    assert "by construction" in guessed and "runs test" in guessed
