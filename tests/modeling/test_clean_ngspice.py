"""Clean simulator data give the simulator's parameters back (ngspice, batch mode,
tests/spicehelp.py, at its default GMIN of 1e-12 S).

An engineer validating pnbench against a simulator fits noise-free data of an invented
device: forward I-V, and C-V with the conductance at 1 MHz from reverse bias into
forward bias. The fits must return the card's values with no fixture terms (there is no
fixture) and no misfit verdict, whether the numbers come at ngspice's full precision,
or written to a file with 12 or 6 significant digits and read back by `pnbench fit`;
where the residuals are the rounding or below any instrument's resolution, the fit
says so plainly. ngspice computes the diffusion capacitance as TT*(gd + GMIN), a
constant TT*GMIN (1.2e-20 F here) the model does not have: it must not come back as a
fixture capacitance.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from spicehelp import ac_admittance, dc_sweep, operating_point

from pnbench.modeling import joint
from pnbench.modeling.params import DiodeParams
from pnbench.tui import cli

#: An invented small-signal diode (Larkspur Hollow Devices Lab, LH-SS12 style).
PART = DiodeParams(IS=3e-14, N=1.08, RS=2.2, CJO=15e-12, VJ=0.68, M=0.42, TT=8e-9)
FREQUENCY_HZ = 1e6
IV_V = np.linspace(0.2, 0.85, 50)
CV_V = np.concatenate([np.linspace(-8.0, 0.0, 33), np.linspace(0.05, 0.5, 10)])


@pytest.fixture(scope="module")
def clean(ngspice):
    """Forward I-V and C-V/G of PART from ngspice, at full precision."""
    v, i = dc_sweep(ngspice, PART, IV_V)
    y = ac_admittance(ngspice, PART, CV_V, [FREQUENCY_HZ])[:, 0]
    w = 2 * np.pi * FREQUENCY_HZ
    return {"iv": {"voltage_V": v, "current_A": i},
            "cv": {"voltage_V": CV_V, "frequency_Hz": np.full(CV_V.size, FREQUENCY_HZ),
                   "capacitance_F": y.imag / w, "conductance_S": y.real}}


def _check_recovered(model, fits, tt_tol=5e-3, tol=1e-4):
    for name, t in (("IS", tol * 10), ("N", tol), ("RS", tol), ("CJO", tol), ("VJ", tol),
                    ("M", tol), ("TT", tt_tol)):
        assert model[name] == pytest.approx(getattr(PART, name), rel=t, abs=0), name
    for key in ("fixture_capacitance_F", "fixture_resistance_ohm"):
        assert key not in fits["extras"], fits["extras"][key]
    for kind in ("iv_forward", "cv"):
        fit = fits[kind]
        assert fit["success"], fit["message"]
        assert not fit["lack_of_fit"]["misfit"], fit["message"]
        assert fit["lack_of_fit"].get("sigma_inflation", 1.0) == 1.0
        assert "does not describe" not in fit["message"]
        assert "before converging" not in fit["message"]
    assert "CFIX" not in fits["cv_names"] and "RFIX" not in fits["cv_names"]


def test_ngspice_includes_tt_times_gmin_in_its_diffusion_capacitance(ngspice):
    """What the model leaves out, measured: ngspice's capacitance with TT minus that
    without is TT*(gd + GMIN), GMIN = 1e-12 S (its .op's @d[cd] and @d[gd])."""
    no_tt = operating_point(ngspice, PART.with_values(TT=0.0), [-4.0, 0.0])
    with_tt = operating_point(ngspice, PART, [-4.0, 0.0])
    extra = with_tt["cd"] - no_tt["cd"]
    assert extra == pytest.approx(PART.TT * with_tt["gd"], rel=1e-4, abs=0)
    assert extra[0] == pytest.approx(PART.TT * 1e-12, rel=1e-3, abs=0)  # GMIN alone


def test_clean_cv_and_iv_give_the_card_back(clean):
    """Full precision (ngspice's 16 digits): TT within 0.5 %, the rest within 1e-4
    (1e-3 for IS), no fixture term kept, no misfit verdict, and the plain statement that
    the residuals are below any instrument's resolution."""
    fit = joint.fit_all(clean, temperature_K=300.15)
    cv = fit.results["cv"]
    fits = {k: r.summary() for k, r in fit.results.items()}
    fits["extras"] = fit.model.extras
    fits["cv_names"] = cv.names
    _check_recovered(fit.model.values, fits)
    assert "TT" in cv.names and "CFIX" in cv.message  # CFIX was found and not kept
    assert "not kept" in cv.message
    assert "the data look computed, not measured" in cv.message


def _write(path, data, digits: int) -> None:
    """One CSV holding both kinds (I-V rows and C-V rows), numbers with ``digits``
    significant digits."""
    iv, cv = data["iv"], data["cv"]
    lines = ["voltage_V,current_A,frequency_Hz,capacitance_F,conductance_S"]
    lines += [f"{v:.{digits}g},{i:.{digits}g},,," for v, i in
              zip(iv["voltage_V"], iv["current_A"], strict=True)]
    lines += [f"{v:.{digits}g},,{f:.{digits}g},{c:.{digits}g},{g:.{digits}g}" for v, f, c, g in
              zip(cv["voltage_V"], cv["frequency_Hz"], cv["capacitance_F"],
                  cv["conductance_S"], strict=True)]
    path.write_text("\n".join(lines) + "\n")


@pytest.mark.parametrize("digits", [12, 6])
def test_clean_data_written_to_a_file_and_fitted_by_the_command(clean, tmp_path, capsys,
                                                                 digits):
    """The same data written with 12 and with 6 significant digits and read back by
    `pnbench fit FILE --json`: the card comes back (TT within 0.5 %), with no fixture
    term and no misfit verdict, and every fit says what its residuals are: the rounding
    of 6 digits, or at 12 digits below any instrument's resolution."""
    path = tmp_path / f"lh-ss12-clean-{digits}.csv"
    _write(path, clean, digits)
    assert cli.main(["fit", str(path), "--json", "--temperature", "300.15"]) == 0
    doc = json.loads(capsys.readouterr().out)
    values = {k: p["value"] for k, p in doc["parameters"].items()}
    fits = dict(doc["fits"])
    fits["extras"] = doc
    fits["cv_names"] = tuple(fits["cv"]["correlation"])
    _check_recovered(values, fits, tol=1e-4 if digits == 12 else 1e-3)
    for kind in ("iv_forward", "cv"):
        message = fits[kind]["message"]
        if digits == 6:
            assert "the data look noise-free, rounded to 6 significant digits" in message
        else:
            assert ("the data look computed, not measured" in message
                    or "rounded to 12 significant digits" in message), message
        assert fits[kind]["lack_of_fit"]["noise_free"]["significant_digits"] == digits


#: A second invented part, swept as an engineer might: C-V from -10 V to +0.3 V in 40
#: steps, so only two points are forward and one of them carries the diffusion
#: capacitance.
SPARSE = DiodeParams(IS=1.5e-14, N=1.06, RS=1.8, CJO=12e-12, VJ=0.72, M=0.38, TT=6e-9)


def test_two_forward_points_still_give_tt_and_no_fixture(ngspice, tmp_path, capsys):
    """With two forward C-V points (too few for their own noise estimate) TT comes from
    the one at 0.3 V (Cd ~ 3e-16 F, far above 12 digits), within 0.5 %; no fixture
    resistance or capacitance is kept, the solver converges, no misfit (ngspice data
    written with 12 digits; before: TT dropped, RFIX = 147 ohm and CFIX kept)."""
    v, i = dc_sweep(ngspice, SPARSE, np.linspace(0.2, 0.9, 60))
    cv_v = np.linspace(-10.0, 0.3, 40)
    y = ac_admittance(ngspice, SPARSE, cv_v, [FREQUENCY_HZ])[:, 0]
    w = 2 * np.pi * FREQUENCY_HZ
    data = {"iv": {"voltage_V": v, "current_A": i},
            "cv": {"voltage_V": cv_v, "frequency_Hz": np.full(cv_v.size, FREQUENCY_HZ),
                   "capacitance_F": y.imag / w, "conductance_S": y.real}}
    path = tmp_path / "lh-sparse-12.csv"
    _write(path, data, 12)
    assert cli.main(["fit", str(path), "--json", "--temperature", "300.15"]) == 0
    doc = json.loads(capsys.readouterr().out)
    cv = doc["fits"]["cv"]
    assert doc["parameters"]["TT"]["value"] == pytest.approx(SPARSE.TT, rel=5e-3, abs=0)
    for name in ("CJO", "VJ", "M"):
        assert doc["parameters"][name]["value"] == pytest.approx(getattr(SPARSE, name),
                                                                 rel=1e-6, abs=0), name
    assert "fixture_capacitance_F" not in doc and "fixture_resistance_ohm" not in doc
    assert not cv["lack_of_fit"]["misfit"] and "before converging" not in cv["message"]
    assert "too few to estimate their own" in cv["message"]


def test_clean_cv_alone_gives_tt_from_the_conductance_and_no_fixture(clean, tmp_path,
                                                                     capsys):
    """The C-V file alone (12 digits): the depletion fit and the admittance fit (TT with
    IS, N, RS from the forward conductance) give the card's CJO, VJ, M and TT (within
    0.5 %) with no fixture capacitance and no misfit verdict (ngspice AC analysis; the
    admittance fit once kept a CFIX of 9e-20 F, ngspice's TT*GMIN and the like)."""
    path = tmp_path / "lh-ss12-cv-12.csv"
    _write(path, {"iv": {"voltage_V": [], "current_A": []}, "cv": clean["cv"]}, 12)
    assert cli.main(["fit", str(path), "--json", "--temperature", "300.15"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["parameters"]["TT"]["value"] == pytest.approx(PART.TT, rel=5e-3, abs=0)
    for name in ("CJO", "VJ", "M"):
        assert doc["parameters"][name]["value"] == pytest.approx(getattr(PART, name),
                                                                 rel=1e-6, abs=0), name
    assert "fixture_capacitance_F" not in doc
    for kind in ("cv", "admittance"):
        assert not doc["fits"][kind]["lack_of_fit"]["misfit"], doc["fits"][kind]["message"]
