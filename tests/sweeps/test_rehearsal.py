"""A rehearsal on the simulated bench is checked against the part it simulated.

The truth is computed here independently of `sweeps.rehearsal`: from the bundled device
file's TOML text, the abrupt-junction doping N = 2*VJ*CJO**2/(q*eps*A**2) and
Vbi = VJ + kT/q (docs/physics.md section 7), with q and eps0 from scipy.constants and
silicon's relative permittivity 11.7 (Sze & Ng, Physics of Semiconductor Devices, 3rd
ed., appendix; from memory).
"""

from __future__ import annotations

import json
import math
import tomllib
from pathlib import Path

import pytest
from scipy import constants

from pnbench.sweeps.rehearsal import against_part, from_folder

DEVICE = Path(__file__).resolve().parents[2] / "sim_configs" / "lh-vc510.toml"
TRUTH = tomllib.loads(DEVICE.read_text(encoding="utf-8"))
AREA = 2.5e-7
VT = constants.k * 300.15 / constants.e  # kT/q at 300.15 K


def entry(value: float, sigma: float | None, unit: str = "") -> dict:
    return {"value": value, "sigma": sigma, "unit": unit}


def model_doc(shift: float = 0.0) -> dict:
    """A model.json document off the part by ``shift`` sigma in every value."""
    d = TRUTH["diode"]
    params = {}
    for name in ("IS", "N", "RS", "CJO", "VJ", "M", "TT"):
        sigma = abs(d[name]) * 1e-3
        params[name] = entry(d[name] + shift * sigma, sigma)
    ibv = 1e-5
    bv = d["BV"] + d["N"] * VT * math.log(ibv / d["IBV"])
    params["BV"] = entry(bv + shift * 0.01, 0.01, "V")
    params["IBV"] = entry(ibv, None, "A")
    eps = 11.7 * constants.epsilon_0
    n = 2 * d["VJ"] * d["CJO"] ** 2 / (constants.e * eps * AREA**2)
    cfix = TRUTH["lcr"]["fixture_capacitance_F"]
    return {"parameters": params, "temperature_K": 300.15, "area_m2": AREA,
            "fixture_capacitance_F": {"value": cfix + shift * 1e-15, "sigma": 1e-15},
            "doping": {"doping_per_m3": n * (1 + 1e-3 * shift), "doping_sigma_per_m3": n * 1e-3,
                       "built_in_voltage_V": d["VJ"] + VT + shift * 1e-3,
                       "built_in_sigma_V": 1e-3}}


RUN = {"simulated": "lh-vc510", "plan_source": "/nowhere/plan.toml"}


@pytest.mark.parametrize("shift", [0.0, 2.0, -4.0])
def test_every_value_is_set_against_the_part(shift):
    check = against_part(RUN, model_doc(shift))
    assert check is not None and check.part == "LH-VC510"
    names = [r.name for r in check.rows]
    assert names == ["IS", "N", "RS", "CJO", "VJ", "M", "TT", "BV", "CFIX", "doping", "Vbi"]
    for row in check.rows:
        assert row.z == pytest.approx(shift, abs=1e-6), row
    if abs(shift) > 3:
        assert len(check.called_out()) == len(names)
        assert "beyond 3 sigma" in check.summary()
    else:
        assert not check.called_out()
        assert f"{len(names) if shift == 0 else 0} of {len(names)} values within 1 sigma" \
            in check.summary()


def test_real_instruments_and_unreadable_parts_give_nothing():
    assert against_part({"simulated": None}, model_doc()) is None
    assert against_part({"simulated": "/gone/dev.toml"}, model_doc()) is None
    assert against_part(RUN, None) is None


def test_a_corrected_fixture_and_a_graded_part_are_not_compared(tmp_path):
    corrected = dict(RUN, lcr_correction={"runs": [{"apply": "meter"}]})
    check = against_part(corrected, model_doc())
    assert "CFIX" not in [r.name for r in check.rows]
    assert any("open/short correction" in n for n in check.notes)
    graded = tmp_path / "graded.toml"
    graded.write_text(DEVICE.read_text(encoding="utf-8").replace("M = 0.5", "M = 0.4"),
                      encoding="utf-8")
    check = against_part({"simulated": str(graded)}, model_doc())
    assert "doping" not in [r.name for r in check.rows]
    assert any("not abrupt" in n for n in check.notes)


def test_a_relative_device_path_is_found_beside_the_plan(tmp_path):
    (tmp_path / "dev.toml").write_text(DEVICE.read_text(encoding="utf-8"), encoding="utf-8")
    run = {"simulated": "dev.toml", "plan_source": str(tmp_path / "plan.toml")}
    assert against_part(run, model_doc()) is not None


def test_a_folder_with_a_damaged_model_gives_nothing(tmp_path):
    (tmp_path / "run.json").write_text(json.dumps(RUN), encoding="utf-8")
    (tmp_path / "model.json").write_text("{not json", encoding="utf-8")
    assert from_folder(tmp_path) is None
