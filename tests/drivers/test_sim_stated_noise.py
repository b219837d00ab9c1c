"""The simulated bench states its own noise, and the fits judged against it tell a right
model from a wrong one (chi-square with the fit's degrees of freedom, and the runs test
of Wald & Wolfowitz, Ann. Math. Statist. 11, 147, 1940: see modeling/misfit.py).

The statistical check runs the demo part (LH-VC510) over eight noise seeds: for a right
model the reduced chi-square of a fit with about 60 (I-V) and 86 (C-V) degrees of freedom
has a standard deviation of sqrt(2/dof), 0.18 and 0.15, so the mean of eight lies within
0.8 to 1.2 unless the stated noise is wrong by more than about 10 % in sigma (2.7
standard deviations of the mean at the wider one)."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from simdata import bench_data, reverse_data

from pnbench.drivers.sim.device import resolve_device
from pnbench.drivers.sim.statednoise import device_noise
from pnbench.modeling import fit_iv, joint, junction
from pnbench.modeling.incremental import IncrementalFitter

SEEDS = range(8)


@pytest.fixture(scope="module")
def demo_part():
    return resolve_device("lh-vc510")


@pytest.fixture(scope="module")
def demo_data(demo_part):
    return [bench_data(demo_part, seed) for seed in SEEDS]


def test_device_noise_is_the_device_files_figures(demo_part):
    """Percent becomes a fraction; the SMU's floors follow the device's ranges."""
    noise = device_noise(demo_part)
    iv, cv = noise["iv"], noise["cv"]
    assert iv.relative == pytest.approx(demo_part.smu["current_noise_percent_of_reading"] / 100)
    assert iv.ranges == tuple(demo_part.smu["current_ranges_A"])
    assert iv.voltage is not None and iv.voltage.ranges == tuple(
        demo_part.smu["voltage_ranges_V"])
    assert cv.relative == pytest.approx(demo_part.lcr["noise_percent_of_reading"] / 100)
    assert cv.floor == demo_part.lcr["noise_floor_F"]
    # 20 nA reads on the 100 nA range: floor = percent of range x 100 nA
    frac = demo_part.smu["current_noise_percent_of_range"] / 100
    assert iv.floors(np.array([2e-8]))[0] == pytest.approx(frac * 1e-7)


def test_chi_square_is_near_one_on_the_benchs_own_data(demo_part, demo_data):
    """Right model, stated noise: mean reduced chi-square of eight seeds within 0.8-1.2
    for the forward I-V and the C-V network fit, and no fit flagged."""
    noise = device_noise(demo_part)
    chi2 = {"iv_forward": [], "cv": []}
    for data in demo_data:
        fit = joint.fit_all(data, noise=noise)
        for kind, values in chi2.items():
            result = fit.results[kind]
            assert result.success, result.message
            assert not result.extras["lack_of_fit"]["misfit"], result.message
            assert result.extras.get("noise", result.extras.get("noise_0"))["estimated"] \
                is False
            values.append(result.reduced_chi2)
    for kind, values in chi2.items():
        assert 0.8 < np.mean(values) < 1.2, (kind, values)


def test_a_fixture_fitted_without_cfix_is_a_misfit(demo_part, demo_data):
    """The demo part's fixture adds 0.35 pF; a C-V fit told there is none misfits: its
    chi-square against the stated noise is far above 1 and the message says so, and the
    runs test flags it too (also when the noise is only estimated)."""
    noise = device_noise(demo_part)
    for data in demo_data[:3]:
        stated = joint.fit_all(data, noise=noise, with_fixture=False).results["cv"]
        assert stated.extras["lack_of_fit"]["misfit"]
        assert stated.reduced_chi2 > 5
        assert "exceed the stated instrument noise" in stated.message
        guessed = joint.fit_all(data, with_fixture=False).results["cv"]
        assert guessed.extras["lack_of_fit"]["runs_z"] < -3.3
        assert "does not describe the data" in guessed.message


def test_a_shunt_fitted_as_absent_is_a_misfit(demo_part):
    """A part with a 20 Mohm shunt: the forward fit that may fit RSH passes against the
    stated noise, the one told there is no shunt is flagged."""
    part = dataclasses.replace(demo_part, card=demo_part.card.with_values(RSH=2e7))
    noise = device_noise(part)["iv"]
    iv = bench_data(part, 0)["iv"]
    right = fit_iv.fit_forward(iv["voltage_V"], iv["current_A"], noise=noise)
    wrong = fit_iv.fit_forward(iv["voltage_V"], iv["current_A"], noise=noise, shunt=False)
    assert not right.extras["lack_of_fit"]["misfit"] and "RSH" in right.values
    assert wrong.extras["lack_of_fit"]["misfit"] and wrong.reduced_chi2 > 100


def test_the_live_fit_says_when_it_misfits(demo_data):
    """A live C-V stream told there is no fixture flags the misfit in its snapshot (from
    the runs test at its last rebuild); the one that may fit CFIX does not."""
    cv = demo_data[0]["cv"]
    rev = cv["voltage_V"] <= 0
    verdicts = {}
    for with_fixture in (False, None):
        fitter = IncrementalFitter("cv", with_fixture=with_fixture)
        for k in range(0, int(rev.sum()), 8):  # batches, as the fit worker adds them
            sel = np.flatnonzero(rev)[k:k + 8]
            fitter.add(cv["voltage_V"][sel], frequency_Hz=cv["frequency_Hz"][sel],
                       capacitance_F=cv["capacitance_F"][sel])
        fitter.refit()
        verdicts[with_fixture] = fitter.snapshot().extras.get("lack_of_fit", {})
    assert verdicts[False]["misfit"] and verdicts[False]["runs_z"] < -3.3
    assert verdicts[None] and not verdicts[None]["misfit"]


def test_leakage_sigma_from_the_stated_noise_is_honest(demo_part):
    """The leakage figure at -29.5 V read from five points near it: weighted by the
    stated noise its sigma covers the truth (the junction's own current, about -IS) with
    an rms z within 0.7-1.4 over 20 seeds, the band the coverage benchmark uses."""
    noise = device_noise(demo_part)["iv"]
    truth = -float(junction.current(-29.5, demo_part.params, demo_part.temperature_K))
    z = []
    for seed in range(20):
        rev = reverse_data(demo_part, seed)
        fit = fit_iv.fit_reverse(rev["voltage_V"], rev["current_A"], noise=noise,
                                 reference_V=-29.5)
        z.append((fit.extras["leakage_A"] - truth) / fit.extras["leakage_sigma_A"])
    assert 0.7 < float(np.sqrt(np.mean(np.square(z)))) < 1.4, z


def test_cv_data_alone_are_judged_against_the_meters_noise(demo_part, demo_data):
    """Without I-V data the depletion fit of the C-V points takes the stated meter
    noise too (|Y| from the reading): mean reduced chi-square of eight seeds within
    0.8-1.2 (about 58 degrees of freedom: sd 0.19 each, 0.07 for the mean)."""
    noise = device_noise(demo_part)
    chi2 = []
    for data in demo_data:
        result = joint.fit_all({"cv": data["cv"]}, noise=noise).results["cv"]
        assert result.success and result.extras["noise"]["estimated"] is False
        chi2.append(result.reduced_chi2)
    assert 0.8 < np.mean(chi2) < 1.2, chi2


def _stream(fitter, columns, rows, batch=8):
    """Feed ``rows`` of ``columns`` to a live fitter in batches, as the fit worker does."""
    for k in range(0, rows.size, batch):
        sel = rows[k:k + batch]
        if "current_A" in columns:
            fitter.add(columns["voltage_V"][sel], columns["current_A"][sel])
        else:
            fitter.add(columns["voltage_V"][sel], frequency_Hz=columns["frequency_Hz"][sel],
                       capacitance_F=columns["capacitance_F"][sel],
                       conductance_S=columns["conductance_S"][sel])
    return fitter.snapshot()


def test_live_fits_are_judged_against_the_stated_noise(demo_part, demo_data):
    """Given the run's stated noise, the live forward I-V and C-V streams keep it per
    point as points arrive: mean reduced chi-square of eight seeds within 0.7-1.3 (a
    live estimate is one Gauss-Newton step from the last rebuild, so a little looser
    than the final fit's band), and the C-V stream told there is no fixture misfits by
    chi-square."""
    noise = device_noise(demo_part)
    chi2 = {"iv_forward": [], "cv": []}
    for data in demo_data:
        iv, cv = data["iv"], data["cv"]
        fwd = _stream(IncrementalFitter("iv_forward", noise=noise["iv"]), iv,
                      np.arange(iv["voltage_V"].size))
        rev = np.flatnonzero(cv["voltage_V"] <= 0)
        live_cv = _stream(IncrementalFitter("cv", noise=noise["cv"]), cv, rev)
        for kind, result in (("iv_forward", fwd), ("cv", live_cv)):
            assert result.success and not result.extras["lack_of_fit"]["misfit"], (
                kind, result.message)
            chi2[kind].append(result.reduced_chi2)
    for kind, values in chi2.items():
        assert 0.7 < np.mean(values) < 1.3, (kind, values)
    cv = demo_data[0]["cv"]
    wrong = _stream(IncrementalFitter("cv", noise=noise["cv"], with_fixture=False), cv,
                    np.flatnonzero(cv["voltage_V"] <= 0))
    assert wrong.extras["lack_of_fit"]["misfit"] and wrong.reduced_chi2 > 5


def test_the_live_reverse_fit_takes_the_stated_noise_too(demo_part):
    """The live reverse analysis weighs its leakage figure by the stated noise exactly
    as the final reverse fit does."""
    noise = device_noise(demo_part)["iv"]
    rev = reverse_data(demo_part, 0)
    live = _stream(IncrementalFitter("iv_reverse", noise=noise, reference_V=-29.5), rev,
                   np.arange(rev["voltage_V"].size))
    final = fit_iv.fit_reverse(rev["voltage_V"], rev["current_A"], noise=noise,
                               reference_V=-29.5)
    guessed = fit_iv.fit_reverse(rev["voltage_V"], rev["current_A"], reference_V=-29.5)
    assert live.extras["leakage_sigma_A"] == pytest.approx(final.extras["leakage_sigma_A"],
                                                           rel=1e-9, abs=0)
    assert final.extras["leakage_sigma_A"] != pytest.approx(
        guessed.extras["leakage_sigma_A"], rel=1e-3, abs=0)
