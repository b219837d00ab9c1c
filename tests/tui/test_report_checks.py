"""The numbers a report prints, checked against formulas, ngspice and rules of thumb."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
import report_runs
from scipy import constants
from spicehelp import ac_admittance

from pnbench.tui.report.analysis import BV_REACHED_FRACTION, analyze
from pnbench.tui.report.data import load_run
from pnbench.tui.report.plotstyle import decade_limits, prefix_scale
from pnbench.tui.report.tables import qty

T = report_runs.TRUE


@pytest.fixture(scope="module")
def full(tmp_path_factory):
    return analyze(load_run(report_runs.make_run(tmp_path_factory.mktemp("full"))))


def test_doping_and_built_in_voltage_follow_the_mott_schottky_formula(full):
    """Sze & Ng, 3rd ed., ch. 2 (docs/physics.md §7): for C = CJO/sqrt(1 - V/VJ),
    1/C^2 = (1 - V/VJ)/CJO^2, so N = 2*VJ*CJO^2/(q*eps*A^2) and the intercept is VJ;
    Vbi = intercept + kT/q. q, eps0, k from scipy.constants; eps_r(Si) = 11.7 (Sze & Ng
    appendix, from memory)."""
    eps = 11.7 * constants.epsilon_0
    expected = 2 * T.VJ * T.CJO**2 / (constants.e * eps * report_runs.AREA_M2**2)
    ms = full.mott_schottky
    assert ms is not None and ms.doping_m3 is not None
    assert ms.doping_m3 == pytest.approx(expected, rel=0.01)
    assert expected * 1e-6 == pytest.approx(1.45e16, rel=0.01)  # the invented device
    kt_q = constants.k * report_runs.TEMPERATURE_K / constants.e
    assert ms.intercept_V == pytest.approx(T.VJ, abs=0.01)
    assert ms.vbi_V == pytest.approx(T.VJ + kt_q, abs=0.01)
    assert int(ms.used.sum()) == 41  # -10 V ... 0 V in 0.25 V steps; +0.25 V left out
    w, n = full.profile
    assert np.median(n) == pytest.approx(expected, rel=0.02)
    # depth W = eps*A/C at zero bias, with C = CJO
    assert w.min() == pytest.approx(eps * report_runs.AREA_M2 / T.CJO, rel=0.01)


def test_without_an_area_the_line_stays_and_the_doping_goes(tmp_path):
    an = analyze(load_run(report_runs.make_run(tmp_path, parts=("cv",), area=False)))
    assert an.mott_schottky is not None and an.mott_schottky.doping_m3 is None
    assert an.profile is None
    assert an.mott_schottky.intercept_V == pytest.approx(T.VJ, abs=0.01)
    assert any("area is not recorded" in m for m in an.missing)


def test_qpoint_rd_at_one_milliampere_is_the_trade_rule(tmp_path):
    """rd = N*Vt/I: "26 ohm at 1 mA" for N = 1 (common practice, no source); Vt from
    scipy.constants at 300.15 K (docs/physics.md §1)."""
    an = analyze(load_run(report_runs.make_run(tmp_path, parts=("forward",))))
    rows = {round(r.point.bias_current_A, 9): r for r in an.qrows}
    row = rows[1e-3]
    vt = constants.k * report_runs.TEMPERATURE_K / constants.e
    assert row.point.rd_ohm == pytest.approx(T.N * vt / 1e-3, rel=1e-3)
    assert row.point.rd_ohm / T.N == pytest.approx(26.0, rel=0.01)
    assert row.point.rs_ohm == T.RS
    assert not an.table_frequencies_measured  # no C-V data: nominal frequencies
    # A forward-only model has no capacitance: |Z| = rd + RS at every frequency.
    for z in row.impedance_ohm.values():
        assert z == pytest.approx(row.point.rd_ohm + T.RS, rel=1e-6)


@pytest.mark.ngspice
def test_qpoint_impedance_matches_ngspice_ac_analysis(full, ngspice):
    """|Z| of the small-signal table against an ngspice (batch) AC analysis of the same
    card at the same biases and frequencies (ngspice's GMIN of 1e-12 S is far below gd
    and w*C at these points, so 1e-3 covers it)."""
    biases = [r.point.bias_voltage_V for r in full.qrows]
    freqs = list(full.table_frequencies_Hz)
    assert full.table_frequencies_measured and freqs == [1e3, 1e4, 1e5, 1e6]
    y = np.asarray(ac_admittance(ngspice, T, biases, freqs))
    for k, row in enumerate(full.qrows):
        for j, f in enumerate(freqs):
            assert row.impedance_ohm[f] == pytest.approx(1 / abs(y[k, j]), rel=1e-3)


def test_qpoints_cover_reverse_zero_and_the_measured_admittance_biases(full):
    origins = [(r.origin, r.point.bias_voltage_V) for r in full.qrows]
    assert origins[:2] == [("deepest C-V bias", -10.0), ("zero bias", 0.0)]
    measured = [v for o, v in origins if o == "measured admittance bias"]
    assert measured == list(report_runs.SPECTRUM_BIASES_V)
    row = next(r for r in full.qrows if r.point.bias_voltage_V == 0.6)
    for f, z in row.measured_ohm.items():  # the measured |Z| agrees with the model
        assert z == pytest.approx(row.impedance_ohm[f], rel=0.02)


def test_breakdown_is_marked_only_when_the_sweep_reached_it(tmp_path, full):
    assert full.reverse_extreme_V <= -T.BV
    assert full.breakdown_V == -T.BV and full.breakdown_label == "BV = 60 V (model)"
    run_dir = report_runs.make_run(tmp_path, parts=("reverse",))
    path = run_dir / "points.csv"
    lines = path.read_text().splitlines(keepends=True)
    kept = [ln for ln in lines if ln.startswith(("#", "step")) or
            float(ln.split(",")[4]) >= -0.9 * T.BV]
    path.write_text("".join(kept))
    an = analyze(load_run(run_dir))
    assert an.reverse_extreme_V > -BV_REACHED_FRACTION * T.BV and an.breakdown_V is None
    # a breakdown guard that tripped marks where the step stopped
    report_runs.append_lines(run_dir / "events.jsonl", json.dumps(
        {"seq": 50, "time_s": 9.0, "kind": "limit", "step": "reverse_iv",
         "guard": "breakdown_guard", "message": "|I| reached the breakdown guard"}) + "\n")
    an = analyze(load_run(run_dir))
    assert an.breakdown_V == -54.0
    assert an.breakdown_label == "breakdown guard tripped at -54 V"


def test_log_axes_span_whole_decades_with_room():
    assert decade_limits([2.3e-14, 0.1]) == pytest.approx((1e-15, 1.0))
    assert decade_limits([1e3, 1e6], pad=1.0) == pytest.approx((1e3, 1e6))
    assert decade_limits([3e-9, 4e-9]) == pytest.approx((1e-9, 1e-8))
    assert decade_limits([0.0, -1.0, math.nan]) is None


def test_linear_axes_take_one_si_prefix():
    assert prefix_scale([1.1e-12, 4.9e-12], "F") == (1e-12, "pF")
    assert prefix_scale([0.02, 0.5], "A") == (1e-3, "mA")
    assert prefix_scale([1.0e6], "Hz") == (1e6, "MHz")
    assert prefix_scale([math.nan], "F") == (1.0, "F")


def test_values_print_with_prefix_and_unit():
    assert qty(2e-14, "A") == "20 fA"
    assert qty(0.8, "ohm") == "800 mohm"  # one spelling of the ohm everywhere
    assert qty(3.2e-6, "A") == "3.2 \u00b5A"
    assert qty(math.inf, "ohm") == "\u221e ohm"
    assert qty(1.05, "") == "1.05"
    assert qty(None, "V") == "\u2014"


def test_a_step_ended_at_its_breakdown_guard_is_not_missing():
    """A reverse step that stops at its guard current did what the plan asked; a step
    ended by another guard is listed, in words."""
    from types import SimpleNamespace

    from pnbench.tui.report.analysis import missing_items

    run = {"status": "completed", "steps": [
        {"name": "breakdown", "done": 111, "planned": 401, "status": "limit",
         "ended_by": "breakdown_guard"},
        {"name": "forward", "done": 40, "planned": 90, "status": "limit",
         "ended_by": "compliance_storm"}]}
    items = missing_items(SimpleNamespace(run=run, missing=[]), SimpleNamespace(missing=[]))
    assert not [i for i in items if "breakdown" in i]
    assert len(items) == 1 and "forward: 40 of 90" in items[0]
    assert "compliance_storm" not in items[0] and "repeated compliance" in items[0]


def test_the_doping_is_stated_once_with_one_sigma():
    """model.json's own doping digest is not repeated under "other results": the depletion
    section states the doping and its sigma once."""
    from pnbench.tui.report.tables import _extras

    extras = {"doping": {"doping_per_m3": 1e22, "doping_sigma_per_m3": 3e20},
              "leakage": {"voltage_V": -5.0, "current_A": 1e-9}}
    text = _extras(extras)
    assert "doping" not in text and "leakage" in text
