"""ModelSet: model.json documents and simulator model cards, both ways."""

from __future__ import annotations

import json
import math

import pytest

from pnbench.errors import DataFileError
from pnbench.modeling.modelset import OTHER_CARD_PARAMETERS, ModelSet
from pnbench.modeling.params import DiodeParams

#: An invented Schottky part of an invented lab.
MODEL = ModelSet(
    values={"IS": 2.5e-9, "N": 1.031, "RS": 0.81, "RSH": 1.2e7, "CJO": 1.2e-10, "VJ": 0.45,
            "M": 0.49, "TT": 2e-10, "BV": 40.0, "IBV": 1e-5},
    sigmas={"IS": 3e-11, "N": 0.0012, "RS": math.inf, "CJO": None},
    temperature_K=298.15,
    extras={"device": "SBX-7", "area_m2": 1e-6, "material": "Si", "fit": {"chi2": 1.07}},
)


def test_json_round_trip_through_text():
    text = json.dumps(MODEL.to_json_dict(), allow_nan=False)
    back = ModelSet.from_json_dict(json.loads(text))
    assert back.values == MODEL.values
    assert back.extras == MODEL.extras
    assert back.temperature_K == 298.15
    assert back.sigmas == {"IS": 3e-11, "N": 0.0012}   # inf and None become "unknown"


def test_json_document_has_the_design_shape():
    """model.json (docs/run-folder.md): {"parameters": {NAME: {"value", "sigma", "unit"}},
    "temperature_K", ...}; a parameter not extracted is absent."""
    doc = ModelSet(values={"IS": 1e-14, "N": 1.0}, sigmas={"IS": 1e-16}).to_json_dict()
    assert doc == {
        "parameters": {"IS": {"value": 1e-14, "sigma": 1e-16, "unit": "A"},
                       "N": {"value": 1.0, "sigma": None, "unit": ""}},
        "temperature_K": 300.15,
    }


@pytest.mark.parametrize("document, fragment", [
    ([], "JSON object"),
    ({"temperature_K": 300}, "'parameters'"),
    ({"parameters": {"XX": {"value": 1}}}, "parameters.XX: unknown parameter"),
    ({"parameters": {"IS": 1e-14}}, "parameters.IS: expected an object"),
    ({"parameters": {"IS": {"value": "1e-14"}}}, "parameters.IS.value"),
    ({"parameters": {"IS": {"value": 1e-14, "sigma": -1}}}, "parameters.IS.sigma"),
    ({"parameters": {"IS": {"value": 1e-14, "unit": "mA"}}}, "parameters.IS.unit"),
    ({"parameters": {"N": {"value": -1.0}}}, "N must be > 0"),
    ({"parameters": {}, "temperature_K": -3}, "temperature_K"),
    ({"parameters": {"IS": {"value": True}}}, "parameters.IS.value"),
])
def test_bad_json_documents_are_named(document, fragment):
    with pytest.raises(DataFileError, match="run7/model.json") as err:
        ModelSet.from_json_dict(document, source="run7/model.json")
    assert fragment in str(err.value)


def test_card_round_trip_keeps_values_sigmas_temperature_and_shunt():
    card = MODEL.card_text("SBX7")
    back = ModelSet.from_card_text(card)
    assert back.values == MODEL.values
    assert back.temperature_K == pytest.approx(298.15, abs=1e-9)
    assert back.sigmas == {"IS": 3e-11, "N": 0.0012, "RS": math.inf}
    assert back.extras["model_name"] == "SBX7"


def test_card_keeps_rsh_off_the_model_line_and_says_why():
    card = MODEL.card_text("SBX7")
    model_line = [ln for ln in card.splitlines() if ln.startswith(".model")]
    assert len(model_line) == 1
    assert "RSH" not in model_line[0]
    assert "TNOM=25" in model_line[0]
    assert "not a standard model-card parameter" in card
    body = card.split(".subckt")[0]  # the shunt's subcircuit follows the .model line
    assert all(ln.startswith("*") for ln in body.splitlines() if not ln.startswith(".model"))


def test_card_reader_understands_simulator_syntax():
    """Suffixes as circuit simulators read them (f p n u m k meg g t, any case, trailing
    letters ignored), continuation lines, comments, aliases. Common practice of SPICE
    netlists (Nagel, SPICE2 user's guide, 1975, from memory)."""
    text = """* a foreign card
    .MODEL dx1 d (is=10p n=1.9 rs = 1.5Ohm cjo=2.5PF ; inline comment
    + m=0.33 pb=.7 bv=1.2K ibv=50u tt=4N
    + ikf=1m level=1 tnom=50)
    .model other npn(bf=100)
    """
    m = ModelSet.from_card_text(text, name="DX1")
    assert m.values == pytest.approx({"IS": 10e-12, "N": 1.9, "RS": 1.5, "CJO": 2.5e-12,
                                      "M": 0.33, "VJ": 0.7, "BV": 1200.0, "IBV": 50e-6,
                                      "TT": 4e-9}, rel=1e-6, abs=0)
    assert m.temperature_K == pytest.approx(323.15)
    assert m.extras[OTHER_CARD_PARAMETERS] == {"IKF": 1e-3, "LEVEL": 1.0}
    assert ModelSet.from_card_text(".model z D IS=2MEG N=1").values["IS"] == 2e6
    assert ModelSet.from_card_text(".model z D(IS=3m)").values["IS"] == pytest.approx(3e-3)
    assert ModelSet.from_card_text(".model z D(IS=1e-14,N=1.1)").values["N"] == 1.1


@pytest.mark.parametrize("text, fragment", [
    ("R1 a b 1k\n", "no '.model"),
    (".model q1 npn(bf=100)\n", "only diode models"),
    (".model d1 D(IS=1e-14)\n.model d2 D(IS=1e-13)\n", "several models"),
    (".model d1 D(IS=abc)\n", "line 1: IS: cannot read 'abc'"),
    (".model d1 D(IS 1e-14)\n", "expected NAME=VALUE"),
    ("+ IS=1\n", "continuation"),
    (".model d1 D(N=-1)\n", "N must be > 0"),
])
def test_bad_cards_are_named(text, fragment):
    with pytest.raises(DataFileError, match="lab.lib") as err:
        ModelSet.from_card_text(text, source="lab.lib")
    assert fragment in str(err.value)


def test_to_params_takes_defaults_for_absent_values():
    p = ModelSet(values={"IS": 3e-12, "N": 1.4}).to_params()
    assert p == DiodeParams(IS=3e-12, N=1.4)
    assert math.isinf(p.RSH) and math.isinf(p.BV) and p.RS == 0.0


def test_constructor_rejects_nonsense():
    with pytest.raises(ValueError):
        ModelSet(values={"IS": math.nan})
    with pytest.raises(ValueError):
        ModelSet(values={"FOO": 1.0})
    with pytest.raises(ValueError):
        ModelSet(values={"IS": 1e-14}, sigmas={"N": 0.1})
    with pytest.raises(ValueError):
        ModelSet(values={}, extras={"parameters": 1})
    with pytest.raises(ValueError):
        MODEL.card_text("bad name")


def test_from_params_drops_infinite_values():
    m = ModelSet.from_params(DiodeParams(IS=1e-14, RS=2.0))
    assert "RSH" not in m.values and "BV" not in m.values
    assert m.to_params() == DiodeParams(IS=1e-14, RS=2.0)


def test_card_name_makes_any_device_name_a_simulator_name():
    """A plan's device name may hold spaces ("LH-QT16 sample 3"); the card line may not."""
    from pnbench.modeling.modelset import card_name

    assert card_name("LH-QT16 sample 3") == "LH-QT16_sample_3"
    assert card_name("  7th wafer / die 12 ") == "D7th_wafer_die_12"
    assert card_name("") == "device"
    card = ModelSet(values={"IS": 1e-14}, sigmas={}, temperature_K=300.15,
                    extras={}).card_text(card_name("LH-QT16 sample 3"))
    assert ".model LH-QT16_sample_3 D(" in card


def test_card_with_a_shunt_offers_a_subcircuit_and_round_trips():
    """RSH is no card parameter: the card carries a subcircuit that places it across the
    diode, says how to use it, and still reads back (RSH from its comment line)."""
    m = ModelSet(values={"IS": 1e-12, "N": 1.4, "RS": 3.0, "RSH": 2e5})
    text = m.card_text("LKY1")
    assert ".subckt LKY1_RSH A K" in text and "R1 A K 200000.0" in text
    assert "X1 a k LKY1_RSH" in text
    assert ModelSet.from_card_text(text).values["RSH"] == 2e5


def test_card_warns_when_ibv_is_below_is_bv_over_vt():
    """Simulators of the SPICE2 lineage (ngspice) raise IBV to IS*BV/Vt when it is
    smaller, moving the knee (ngspice source, dioTemp; from memory): the card says so."""
    low = ModelSet(values={"IS": 1e-8, "N": 1.8, "BV": 100.0, "IBV": 1e-6})
    assert "caution: IBV" in low.card_text("REC1")
    ok = ModelSet(values={"IS": 1e-14, "N": 1.0, "BV": 100.0, "IBV": 1e-6})
    assert "caution" not in ok.card_text("SIG1") and ok.breakdown_caution() is None
