"""Mott-Schottky line, doping profile and built-in voltage, with the materials table."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import constants

from pnbench.errors import BadInput
from pnbench.modeling import depletion, materials

Q, EPS0 = constants.e, constants.epsilon_0
AREA = 0.25e-6                        # 0.5 mm x 0.5 mm, an invented test structure
SI_EPS = 11.7 * EPS0


def _sze_abrupt_c(v, doping, vbi, t_k=300.0):
    """C = A*sqrt(q*eps*N/(2*(Vbi - V - kT/q))), written out here from Sze & Ng, 3rd ed.,
    ch. 2 (one-sided abrupt junction), independently of the code under test."""
    kt_q = constants.k * t_k / Q
    return AREA * np.sqrt(Q * SI_EPS * doping / (2 * (vbi - v - kt_q)))


def test_mott_schottky_recovers_doping_and_vbi_of_synthetic_cv():
    """Doping within 0.1 % and Vbi within 2 mV from C-V with 0.05 % noise.

    Source: Sze & Ng, Physics of Semiconductor Devices, 3rd ed., ch. 2-3 (Mott-Schottky
    relation with the kT/q term, docs/physics.md §7).
    """
    rng = np.random.default_rng(7)
    doping, vbi = 3.0e21, 0.78       # 3e15 cm^-3
    v = np.linspace(-10.0, 0.2, 60)
    c = _sze_abrupt_c(v, doping, vbi) * (1 + 5e-4 * rng.standard_normal(v.size))
    r = depletion.mott_schottky(v, c, AREA, "Si", 300.0)
    assert r.doping_per_m3 == pytest.approx(doping, rel=1e-3)
    assert r.built_in_voltage_V == pytest.approx(vbi, abs=2e-3)
    assert r.doping_per_cm3 == pytest.approx(3.0e15, rel=1e-3)
    # The sigma is honest: the truth lies within a few sigma.
    assert abs(r.doping_per_m3 - doping) < 4 * r.doping_sigma_per_m3
    assert abs(r.built_in_voltage_V - vbi) < 4 * r.built_in_sigma_V
    # Noise-free data: exact to rounding, and the kT/q term is what separates
    # the intercept from Vbi.
    exact = depletion.mott_schottky(v, _sze_abrupt_c(v, doping, vbi), AREA, "Si", 300.0)
    assert exact.doping_per_m3 == pytest.approx(doping, rel=1e-10)
    assert exact.built_in_voltage_V - exact.intercept_voltage_V == pytest.approx(
        constants.k * 300.0 / Q, rel=1e-12)


def test_line_without_area_and_doping_from_slope_agree_with_the_full_fit():
    v = np.linspace(-5.0, 0.0, 20)
    c = _sze_abrupt_c(v, 1e22, 0.7)
    line = depletion.mott_schottky_line(v, c, 300.0)
    full = depletion.mott_schottky(v, c, AREA, SI_EPS, 300.0)
    assert line.vbi_V == pytest.approx(full.built_in_voltage_V, rel=1e-12)
    assert depletion.doping_from_slope(line.slope, AREA, materials.permittivity("Si")) \
        == pytest.approx(full.doping_per_m3, rel=1e-12)


def _profile_cv(depth_edges, dopings, w):
    """C-V of a one-sided junction with a piecewise-constant doping N(x), from Poisson:
    Vbi - V - kT/q = (q/eps) * integral_0^W x*N(x) dx, C = eps*A/W (Sze & Ng ch. 2)."""
    n_of_x = np.select([w < depth_edges[0]], [dopings[0]], dopings[1])
    integrand = w * n_of_x
    integral = np.concatenate([[0.0], np.cumsum(0.5 * (integrand[1:] + integrand[:-1])
                                                 * np.diff(w))])
    v = 0.75 - constants.k * 300.0 / Q - Q / SI_EPS * integral
    return v, SI_EPS * AREA / w


def test_doping_profile_recovers_a_step_in_doping():
    """N(W) = -2/(q*eps*A^2*d(1/C^2)/dV) at W = eps*A/C (docs/physics.md §7) follows a step
    from 1e16 to 4e16 cm^-3 at 1 um, away from the step, to 0.5 %."""
    w = np.linspace(0.2e-6, 2.0e-6, 4001)
    v, c = _profile_cv([1.0e-6], [1e22, 4e22], w)
    pick = slice(None, None, 40)
    prof = depletion.doping_profile(v[pick], c[pick], AREA, "Si", window=5)
    assert np.allclose(prof.depth_m, w[pick][np.argsort(v[pick])], rtol=1e-12)
    shallow = prof.depth_m < 0.9e-6
    deep = prof.depth_m > 1.1e-6
    np.testing.assert_allclose(prof.doping_per_m3[shallow], 1e22, rtol=5e-3)
    np.testing.assert_allclose(prof.doping_per_m3[deep], 4e22, rtol=5e-3)
    depth, doping = prof               # unpacks as (depth, doping)
    assert depth is prof.depth_m and doping is prof.doping_per_m3


def test_local_fits_tame_noise_better_than_point_differences():
    """With 0.02 % capacitance noise the local-fit derivative scatters far less than a
    plain two-point difference (numpy.gradient) of the same data."""
    rng = np.random.default_rng(3)
    v = np.linspace(-8.0, 0.0, 161)
    c = _sze_abrupt_c(v, 2e21, 0.75) * (1 + 2e-4 * rng.standard_normal(v.size))
    prof = depletion.doping_profile(v, c, AREA, "Si", window=9)
    naive = -2 / (Q * SI_EPS * AREA**2 * np.gradient(1 / c**2, v))
    spread_fit = np.std(prof.doping_per_m3 / 2e21 - 1)
    spread_naive = np.std(naive / 2e21 - 1)
    assert spread_fit < 0.3 * spread_naive
    assert abs(np.median(prof.doping_per_m3) / 2e21 - 1) < 5e-3


def test_step_junction_built_in_voltage_of_silicon():
    """p+n Si step junction, Na = 1e18, Nd = 1e15 cm^-3 at 300 K: Vbi = Vt*ln(Na*Nd/ni^2)
    = 0.776 V with ni = 9.65e9 cm^-3 (Sze & Ng, 3rd ed., appendix, from memory; hand
    calculation); each decade of Nd adds Vt*ln(10) = 59.5 mV."""
    vbi = depletion.step_junction_built_in_voltage(1e24, 1e21, "Si")
    assert vbi == pytest.approx(0.776, abs=1e-3)
    step = depletion.step_junction_built_in_voltage(1e24, 1e22, "Si") - vbi
    assert step == pytest.approx(0.0595, abs=1e-4)
    with pytest.raises(BadInput):
        depletion.step_junction_built_in_voltage(1e24, 1e21, "Si", temperature_K=350.0)


def test_card_values_reproduce_the_abrupt_capacitance():
    """CJO*(1 - V/VJ)^-1/2 with VJ = Vbi - kT/q is the §5 formula exactly."""
    from pnbench.modeling import smallsignal
    from pnbench.modeling.params import DiodeParams

    card = depletion.abrupt_card_values(5e21, 0.8, AREA, "Si")
    p = DiodeParams(CJO=card["CJO"], VJ=card["VJ"], M=card["M"], FC=0.95)
    v = np.linspace(-20.0, 0.5, 25)
    np.testing.assert_allclose(smallsignal.depletion_capacitance(v, p),
                               depletion.abrupt_capacitance(v, 5e21, 0.8, AREA, "Si"),
                               rtol=1e-12)


@pytest.mark.parametrize("v, c, fragment", [
    ([0.0, -1.0], [1e-12, 2e-12, 3e-12], "2 voltages but 3"),
    ([0.0, -1.0, -2.0], [1e-12, 0.0, 1e-12], "must be > 0"),
    ([0.0, 0.0, 0.0], [1e-12, 1e-12, 1e-12], "at least 3 distinct"),
    ([0.0, -1.0, -2.0], [1e-12, 1.1e-12, 1.2e-12], "does not fall"),
    ([0.0, -1.0, np.nan], [1e-12, 0.9e-12, 0.8e-12], "finite"),
])
def test_bad_cv_data_is_refused_with_a_reason(v, c, fragment):
    with pytest.raises(BadInput, match=fragment):
        depletion.mott_schottky(v, c, AREA)


def test_materials_table_lookup_aliases_and_unknown_names():
    """The table's names, the SiC alias, approximate entries and a refused name."""
    assert materials.material("sic") is materials.material("4H-SiC")
    assert materials.material("4h-sic").approximate and materials.material("GaN").approximate
    assert not materials.material("si").approximate
    assert materials.permittivity("Ge") == materials.material("Ge").relative_permittivity.value \
        * constants.epsilon_0  # eps0 from scipy.constants, not typed in
    with pytest.raises(BadInput, match="known: Si"):
        materials.material("unobtainium")
    with pytest.raises(ValueError):
        materials.permittivity("unobtainium")


#: Varshni fits Eg(T) = Eg0 - alpha*T**2/(T + beta) [eV, eV/K, K]: Sze & Ng, *Physics of
#: Semiconductor Devices*, 3rd ed., 2007, ch. 1 (from memory; the form is Varshni,
#: Physica 34, 149, 1967). Published separately from the 300 K gaps of the appendix.
VARSHNI = {"Si": (1.17, 4.73e-4, 636.0), "Ge": (0.7437, 4.774e-4, 235.0),
           "GaAs": (1.519, 5.405e-4, 204.0)}


@pytest.mark.parametrize("name", sorted(VARSHNI))
def test_band_gap_at_300_K_agrees_with_the_varshni_fit(name):
    """The table's 300 K band gap against the Varshni law of the same handbook's ch. 1
    (see VARSHNI), to 0.01 eV: a second published route to the same number."""
    eg0, alpha, beta = VARSHNI[name]
    t = materials.TABLE_TEMPERATURE_K
    assert materials.material(name).bandgap_eV.value == pytest.approx(
        eg0 - alpha * t * t / (t + beta), abs=0.01)


#: Effective densities of states at 300 K [cm^-3] (Nc, Nv): Sze & Ng, 3rd ed., appendix
#: (from memory).
DENSITY_OF_STATES = {"Si": (2.8e19, 1.04e19), "Ge": (1.04e19, 6.0e18),
                     "GaAs": (4.7e17, 7.0e18)}


@pytest.mark.parametrize("name", sorted(DENSITY_OF_STATES))
def test_intrinsic_density_follows_from_band_gap_and_densities_of_states(name):
    """ni = sqrt(Nc*Nv)*exp(-Eg/(2kT)) (Sze & Ng, 3rd ed., ch. 1), k from scipy.constants.

    Within a factor 1.5: the tabulated Si value (9.65e9 cm^-3, a measured one) sits about
    40 % above what this formula gives with these Nc and Nv, so the check catches a wrong
    exponent or unit, not the last digit.
    """
    nc, nv = DENSITY_OF_STATES[name]
    m = materials.material(name)
    kt_ev = constants.k * materials.TABLE_TEMPERATURE_K / constants.e
    ni_m3 = math.sqrt(nc * nv) * math.exp(-m.bandgap_eV.value / (2 * kt_ev)) * 1e6
    assert abs(math.log(m.intrinsic_density_per_m3.value / ni_m3)) < math.log(1.5)


@pytest.mark.parametrize(("name", "index"), [("Si", 3.42), ("Ge", 4.00)])
def test_permittivity_of_nonpolar_crystals_is_the_square_of_the_refractive_index(name, index):
    """For covalent (nonpolar) crystals the static and optical permittivities coincide, so
    epsr = n**2 with n the infrared refractive index: Si 3.42, Ge 4.00 (from memory; Palik,
    Handbook of Optical Constants of Solids, 1985). To 2 %."""
    assert materials.material(name).relative_permittivity.value == pytest.approx(
        index**2, rel=0.02)


def test_card_eg_defaults_are_the_simulator_values_not_the_band_gaps():
    """EG defaults of SPICE2's diode parameter table (Nagel, UCB/ERL M520, 1975; the ngspice
    manual's default EG is 1.11 eV): 1.11 eV for Si, 0.67 eV for Ge, 0.69 eV for a Schottky
    barrier (from memory). They differ from the 300 K gaps (docs/physics.md §8)."""
    assert materials.material("Si").default_card_eg_eV == 1.11
    assert materials.material("Ge").default_card_eg_eV == 0.67
    assert materials.SCHOTTKY_CARD_EG.value == 0.69
    # Materials without a simulator default fall back to their band gap.
    gaas = materials.material("GaAs")
    assert gaas.default_card_eg_eV == gaas.bandgap_eV.value


def test_abrupt_doping_inverts_the_card_values():
    """N = 2*VJ*CJO**2/(q*eps*A**2) and Vbi = VJ + kT/q (docs/physics.md section 7) give
    back the doping and built-in voltage the card was made from."""
    from pnbench.modeling.depletion import abrupt_card_values, abrupt_doping

    card = abrupt_card_values(3e21, 0.78, 2.5e-7, "Si", 300.15)
    n, vbi = abrupt_doping(card["CJO"], card["VJ"], 2.5e-7, "Si", 300.15)
    assert n == pytest.approx(3e21, rel=1e-12)
    assert vbi == pytest.approx(0.78, rel=1e-12)
