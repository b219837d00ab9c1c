"""Simulated-device files: defaults, the bundled devices, and bad files named clearly."""

from __future__ import annotations

import re
from dataclasses import fields

import pytest

from pnbench.drivers.sim.device import (
    bundled_device,
    bundled_devices,
    load_device,
    parse_device,
    resolve_device,
)
from pnbench.drivers.sim.devicekeys import FAULT_KEYS, KEYS
from pnbench.errors import DeviceFileError
from pnbench.modeling import junction
from pnbench.modeling.params import DiodeParams

BUNDLED = ("lh-hm27", "lh-qt16", "lh-vc510", "lh-vh720", "lh-zl560")


def test_every_bundled_device_loads_and_documents_every_key():
    found = bundled_devices()
    assert set(BUNDLED) <= set(found)
    for name in BUNDLED:
        path = found[name]
        text = path.read_text()
        header = "\n".join(line for line in text.splitlines() if line.startswith("#"))
        device = load_device(path)
        assert device.part.lower() == name
        assert "Larkspur Hollow Devices Lab" in header
        documented = set(re.findall(r"^#\s+(\w+)\b", header, re.MULTILINE))
        names = {k.name for keys in KEYS.values() for k in keys}
        names |= {f.name for f in fields(DiodeParams)} | set(FAULT_KEYS)
        assert names <= documented, (name, names - documented)


def test_bundled_devices_are_the_kinds_promised():
    p = {name: load_device(bundled_device(name)).params for name in BUNDLED}
    assert p["lh-vc510"].M == pytest.approx(0.5)
    assert p["lh-vh720"].M > 0.5
    assert p["lh-hm27"].N < 1.1 and p["lh-hm27"].TT == 0
    assert load_device(bundled_device("lh-hm27")).device["junction"] == "schottky"
    assert p["lh-zl560"].BV < 7 and p["lh-zl560"].RSH < 1e8
    assert p["lh-qt16"].TT < 1e-8 and p["lh-qt16"].CJO < 5e-12


def test_missing_keys_take_documented_defaults():
    device = parse_device("[diode]\nIS = 1e-12\n")
    assert device.params == DiodeParams(IS=1e-12, EG=1.11, XTI=3.0)
    for table in ("smu", "lcr", "timing"):
        assert getattr(device, table) == {k.name: k.default for k in KEYS[table]}
    assert device.faults == ()
    assert parse_device("").card == DiodeParams(EG=1.11, XTI=3.0)


def test_schottky_junction_and_material_set_eg_xti_defaults():
    """EG 0.69 eV and XTI 2 for Schottky barriers, XTI 3 for pn junctions: common
    simulator defaults (from memory); band gaps from the materials table (docs/physics.md §8)."""
    schottky = parse_device('[device]\njunction = "schottky"\n').card
    assert (schottky.EG, schottky.XTI) == (0.69, 2.0)
    ge = parse_device('[device]\nmaterial = "Ge"\n').card
    assert (ge.EG, ge.XTI) == (0.67, 3.0)
    explicit = parse_device('[device]\nmaterial = "Ge"\n[diode]\nEG = 0.7\n').card
    assert explicit.EG == 0.7


def test_area_scales_like_a_simulator_area_factor():
    one = parse_device("[diode]\nIS = 1e-14\nRS = 2.0\nCJO = 1e-11\nIBV = 1e-3\nRSH = 1e6\n")
    two = parse_device("[device]\narea = 2.0\n"
                       "[diode]\nIS = 1e-14\nRS = 2.0\nCJO = 1e-11\nIBV = 1e-3\nRSH = 1e6\n")
    a, b = one.params, two.params
    assert (b.IS, b.CJO, b.IBV) == (2 * a.IS, 2 * a.CJO, 2 * a.IBV)
    assert (b.RS, b.RSH) == (a.RS / 2, a.RSH / 2)


def test_bench_temperature_gives_about_minus_2_mV_per_K():
    """A silicon diode's forward voltage at constant current falls by about 2 mV/K near
    room temperature (common practice, no source)."""
    text = "[device]\ntemperature_K = {t}\n[diode]\nIS = 1e-14\nN = 1.0\n"
    cold = parse_device(text.format(t=300.15))
    hot = parse_device(text.format(t=320.15))
    v_cold = junction.voltage(1e-3, cold.params, cold.temperature_K)
    v_hot = junction.voltage(1e-3, hot.params, hot.temperature_K)
    slope_mV_per_K = (v_hot - v_cold) / 20.0 * 1e3
    assert -2.5 < slope_mV_per_K < -1.5


def test_faults_in_the_file():
    device = parse_device('[[fault]]\ninstrument = "smu"\nkind = "drop"\nafter = 4\n'
                          '[[fault]]\ninstrument = "lcr"\nkind = "error"\ncode = -222\n'
                          'repeat = 0\n')
    drop, error = device.faults
    assert (drop.instrument, drop.kind, drop.after, drop.repeat) == ("smu", "drop", 4, 1)
    assert (error.kind, error.repeat, error.option("code")) == ("error", 0, -222)
    assert error.option("message") == FAULT_KEYS["message"][1]


@pytest.mark.parametrize(
    ("text", "named"),
    [
        ("[diod]\nIS = 1e-14\n", "'diod'"),
        ("[smu]\nseeed = 3\n", "seeed"),
        ("[smu]\nseed = 1.5\n", "seed"),
        ("[smu]\ncurrent_ranges_A = [1e-3, 1e-6]\n", "current_ranges_A"),
        ("[smu]\nlead_resistance_ohm = -1\n", "lead_resistance_ohm"),
        ('[device]\nmaterial = "Unobtainium"\n', "material"),
        ("[device]\ntemperature_K = 0\n", "temperature_K"),
        ("[timing]\nline_frequency_Hz = 55\n", "line_frequency_Hz"),
        ("[lcr]\nfrequency_min_Hz = 1e7\n", "frequency_min_Hz"),
        ("[diode]\nIS = -1e-14\n", "IS"),
        ("[diode]\nFC = 1.5\n", "FC"),
        ("[diode]\nN = \"one\"\n", "N"),
        ("[diode]\nXYZ = 1\n", "XYZ"),
        ('[[fault]]\ninstrument = "smu"\nkind = "melt"\n', "kind"),
        ('[[fault]]\ninstrument = "dmm"\nkind = "drop"\n', "instrument"),
        ('[[fault]]\ninstrument = "smu"\nkind = "drop"\nseconds = 3\n', "seconds"),
        ('[[fault]]\nkind = "drop"\n', "instrument"),
        ('[[fault]]\ninstrument = "smu"\nkind = "drop"\nafter = -1\n', "after"),
        ("[diode\nIS = 1\n", "not valid TOML"),
    ],
)
def test_bad_files_name_the_file_and_key(tmp_path, text, named):
    path = tmp_path / "dut.toml"
    path.write_text(text)
    with pytest.raises(DeviceFileError) as caught:
        load_device(path)
    message = str(caught.value)
    assert str(path) in message
    assert named in message
    assert caught.value.exit_code == 2


def test_messages_carry_the_line_of_the_key(tmp_path):
    path = tmp_path / "dut.toml"
    path.write_text("# a comment\n[smu]\nseed = 1\nlead_resistance_ohm = -2\n")
    with pytest.raises(DeviceFileError, match=r"\[smu\] lead_resistance_ohm \(line 4\)"):
        load_device(path)


def test_bundled_names_and_paths_resolve(tmp_path):
    assert bundled_device("LH-VC510") == bundled_device("lh-vc510.toml")
    assert resolve_device("lh-vc510").part == "LH-VC510"
    own = tmp_path / "mine.toml"
    own.write_text('[device]\npart = "LH-TEST1"\n')
    assert resolve_device(own).part == "LH-TEST1"
    assert resolve_device(str(own)).part == "LH-TEST1"
    with pytest.raises(DeviceFileError, match="lh-vc510"):
        bundled_device("lh-nothing")
    with pytest.raises(DeviceFileError, match="cannot read"):
        resolve_device(tmp_path / "absent.toml")
