"""Dialect files: the default loads, and every fault names the file and the key."""

from __future__ import annotations

import tomllib

import pytest
import tomli_w

from pnbench.drivers import dialect as dl
from pnbench.drivers import scpi
from pnbench.errors import DialectError


def default_data() -> dict:
    return tomllib.loads(dl.default_dialect_text())


def write(tmp_path, data, name="mine.toml"):
    path = tmp_path / name
    path.write_bytes(tomli_w.dumps(data).encode())
    return path


def test_default_dialect_loads_with_both_roles():
    d = dl.load_dialect()
    assert d.name == "scpi-default" and d.separator == ";"
    assert d.smu is not None and d.lcr is not None
    assert d.smu.read_fields == ("voltage", "current")
    assert d.lcr.form in dl.LCR_FORMS
    assert d.common.next_error.endswith("?")


def test_default_dialect_uses_only_standard_common_commands():
    """IEEE 488.2-1992 section 10 common commands (from memory): *IDN? *RST *CLS *OPC?."""
    d = dl.load_dialect()
    assert (d.common.identify, d.common.reset, d.common.clear_status,
            d.common.operation_complete) == ("*IDN?", "*RST", "*CLS", "*OPC?")
    assert scpi.header_matches(":SYSTem:ERRor[:NEXT]?", d.common.next_error)


def test_copy_of_default_loads_from_a_file(tmp_path):
    path = write(tmp_path, default_data())
    d = dl.load_dialect(path)
    assert d.source == str(path)
    assert d.smu == dl.load_dialect().smu


@pytest.mark.parametrize(
    ("change", "needle"),
    [
        (lambda d: d["smu"].pop("set_voltage"), "missing key 'set_voltage'"),
        (lambda d: d["lcr"].update(speed="FAST"), "unknown key 'speed'"),
        (lambda d: d.update(extra={}), "unknown table [extra]"),
        (lambda d: d.pop("common"), "missing table [common]"),
        (lambda d: d["smu"].update(set_voltage=":SOUR:VOLT 1"), "[smu] set_voltage"),
        (lambda d: d["smu"].update(read=":READ"), "must be a query"),
        (lambda d: d["smu"].update(output=":OUTP?"), "must be a setting"),
        (lambda d: d["smu"].update(output=""), "must not be empty"),
        (lambda d: d["smu"].update(read_fields=["voltage"]), "'current' exactly once"),
        (lambda d: d["smu"].update(read_fields=["voltage", "current", "time"]), "'time'"),
        (lambda d: d["lcr"].update(form="ZTHETA"), "unknown form 'ZTHETA'"),
        (lambda d: d["dialect"].update(format=2), "format 1"),
        (lambda d: d["dialect"].update(on="OFF"), "must differ"),
        (lambda d: d["smu"].update(set_current=":SOUR:CURR {level}"), "unknown placeholder"),
        (lambda d: d["common"].update(reset=3), "expected a string"),
        (lambda d: (d.pop("smu"), d.pop("lcr"), d.pop("stage")), "drives nothing"),
    ],
)
def test_faults_name_file_and_key(tmp_path, change, needle):
    data = default_data()
    change(data)
    path = write(tmp_path, data)
    with pytest.raises(DialectError) as err:
        dl.load_dialect(path)
    assert str(path) in str(err.value)
    assert needle in str(err.value)
    assert err.value.exit_code == 2


def test_optional_commands_may_be_empty_and_a_role_may_be_absent(tmp_path):
    data = default_data()
    data.pop("lcr")
    data["smu"].update(tripped_sourcing_voltage="", remote_sense="", integration_nplc="")
    d = dl.load_dialect(write(tmp_path, data))
    assert d.lcr is None and d.smu.tripped_sourcing_voltage == ""
    with pytest.raises(DialectError, match=r"no \[lcr\] table"):
        d.require("lcr")
    assert d.require("smu") is d.smu


def test_model_may_use_the_instruments_own_word(tmp_path):
    data = default_data()
    data["lcr"].update(model="SHOW CP,G", form="Parallel")
    d = dl.load_dialect(write(tmp_path, data))
    assert d.lcr.model == "SHOW CP,G" and d.lcr.form == "parallel"


def test_a_form_outside_the_plain_words_is_refused_naming_them(tmp_path):
    data = default_data()
    data["lcr"]["form"] = "PRLL"
    with pytest.raises(DialectError) as err:
        dl.load_dialect(write(tmp_path, data))
    message = str(err.value)
    assert "[lcr] form" in message and "'PRLL'" in message
    for word in ("parallel", "parallel_d", "series", "admittance", "impedance"):
        assert f"{word} = " in message


def test_bad_toml_and_missing_file(tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text("[dialect]\nname = \n")
    with pytest.raises(DialectError, match=r"bad\.toml.*line 2"):
        dl.load_dialect(bad)
    with pytest.raises(DialectError, match="no such file"):
        dl.load_dialect(tmp_path / "absent.toml")


def test_fill_uses_dialect_words(tmp_path):
    data = default_data()
    data["dialect"].update(on="1", off="0", separator=" ; ")
    d = dl.load_dialect(write(tmp_path, data))
    assert d.fill(d.smu.output, state=False) == ":OUTPut:STATe 0"
    assert d.separator == ";"  # surrounding whitespace is not part of the separator
    assert d.join(["*CLS", "*OPC?"]) == "*CLS;*OPC?"


def test_default_smu_dialect_uses_the_scpi_source_subsystem_for_its_limits():
    """SCPI-1999 Volume 2, SOURce subsystem: [SOURce:]CURRent|VOLTage:PROTection[:LEVel]
    and :PROTection:TRIPped? (from memory); the default dialect's header says that SCPI
    defines no compliance command and why it uses these."""
    d = dl.load_dialect()
    smu = d.smu
    assert smu.current_limit.startswith(":SOURce:CURRent:PROTection")
    assert smu.voltage_limit.startswith(":SOURce:VOLTage:PROTection")
    assert smu.tripped_sourcing_voltage == ":SOURce:CURRent:PROTection:TRIPped?"
    assert not any(":SENSe:" in c and "PROT" in c.upper()
                   for c in (smu.current_limit, smu.voltage_limit,
                             smu.tripped_sourcing_voltage, smu.tripped_sourcing_current))
    header = dl.default_dialect_text().split("[dialect]")[0]
    assert "SCPI-1999" in header and "compliance" in header and "does not define" in header
