"""`pnbench fit FILE` takes the instruments' stated noise from the data file's header
comment lines (`# smu.KEY = VALUE`) or from its sidecar STEM.noise.toml, with the plan's
keys; --smu-noise/--lcr-noise win; a role stated in both places, or a bad value, exits 2
naming the file, the line and the key (docs/run-folder.md, "Data files").

The data are the diode equation with 0.1 % Gaussian noise added (common practice, no
source): judged against a stated 0.1 % they pass, against 0.001 % they are a misfit."""

from __future__ import annotations

import json

import numpy as np
import pytest

from pnbench.modeling import junction
from pnbench.modeling.params import DiodeParams
from pnbench.sweeps.datafile import read_data_file
from pnbench.tui import cli

P = DiodeParams(IS=1e-14, N=1.0, RS=0.5)
OK = "against the stated instrument noise"
EXCEED = "exceed the stated instrument noise"


def _iv_file(path, header: str = ""):
    rng = np.random.default_rng(4)
    v = np.linspace(0.3, 0.85, 60)
    i = np.asarray(junction.current(v, P)) * (1 + 1e-3 * rng.standard_normal(v.size))
    rows = [f"{a!r},{b!r}" for a, b in zip(v.tolist(), i.tolist(), strict=True)]
    path.write_text(header + "voltage_V,current_A\n" + "\n".join(rows) + "\n",
                    encoding="utf-8")
    return path


def _fit(path, capsys, *options) -> tuple[str, str]:
    assert cli.main(["fit", str(path), "--json", *options]) == 0
    message = json.loads(capsys.readouterr().out)["fits"]["iv_forward"]["message"]
    assert cli.main(["fit", str(path), *options]) == 0
    return message, capsys.readouterr().out


def test_the_header_states_the_noise_and_the_option_wins(tmp_path, capsys):
    fair = _iv_file(tmp_path / "fair.csv", "# temperature_K = 300.15\n"
                    "# smu.current_noise_percent = 0.1\n# smu.current_noise_floor = 1 fA\n")
    message, table = _fit(fair, capsys)
    assert OK in message and EXCEED not in message
    assert "judged against the stated noise of fair.csv's header" in table
    tight = _iv_file(tmp_path / "tight.csv", "# smu.current_noise_percent = 0.001\n"
                     '# smu.current_noise_floor = "1 fA"\n')
    assert EXCEED in _fit(tight, capsys)[0]
    message, table = _fit(tight, capsys, "--smu-noise", "1e-3,1fA")
    assert EXCEED not in message and OK in message
    assert "tight.csv's header" not in table  # the option's noise, not the header's
    plain = _iv_file(tmp_path / "plain.csv")
    assert OK not in _fit(plain, capsys)[0]  # nothing stated: estimated


def test_the_header_and_a_sidecar_state_a_floor_per_range(tmp_path, capsys):
    path = _iv_file(tmp_path / "ranges.csv", "# smu.current_noise_percent = 0.1\n"
                    '# smu.current_noise_floor_per_range = { "1 uA" = "2 pA", "10 mA" = '
                    '"5 nA" }\n')
    noise = read_data_file(path).stated_noise["iv"]
    assert noise.floor_by_range == ((1e-6, 2e-12), (1e-2, 5e-9))
    side = _iv_file(tmp_path / "side.csv")
    (tmp_path / "side.noise.toml").write_text(
        '[smu]\ncurrent_noise_percent = 0.1\ncurrent_noise_floor_per_range = '
        '{ "1 uA" = "2 pA", "10 mA" = "5 nA" }\n', encoding="utf-8")
    data = read_data_file(side)
    assert data.stated_noise["iv"] == noise
    message, table = _fit(side, capsys)
    assert OK in message and "side.noise.toml" in table


@pytest.mark.parametrize("header, sidecar, words", [
    ("# smu.current_noise_floor = lots\n", None,
     ["line 1, smu.current_noise_floor", "cannot read 'lots'"]),
    ("# smu.current_noise_percent = 80\n", None, ["smu.current_noise_percent", "out of range"]),
    ("# smu.current_noise = 0.1\n", None, ["smu.current_noise", "unknown key",
                                             "did you mean"]),
    ("# lcr.current_noise_percent = 0.1\n", None, ["noise figure of another role"]),
    ("# smu.current_noise_floor_per_range = { \"1 uA\" = \"-2 pA\" }\n", None,
     ["smu.current_noise_floor_per_range"]),
    ("", "[smu]\ncurrent_noise_percent = \n", ["side.noise.toml", "not valid TOML"]),
    ("", "[dmm]\nnoise = 1\n", ["side.noise.toml", "line 1, dmm", "unknown table"]),
    ("", "[smu]\ncurrent_noise_floor = \"2 pV\"\n", ["line 2, smu.current_noise_floor"]),
    ("", "[smu]\nvoltage_noise_floor = \"2 uV\"\n", ["needs the current's"]),
    ("# smu.current_noise_percent = 0.1\n", "[smu]\ncurrent_noise_percent = 0.1\n",
     ["line 1", "stated here and in", "side.noise.toml"]),
])
def test_a_bad_noise_statement_exits_2_naming_where(tmp_path, capsys, header, sidecar,
                                                    words):
    path = _iv_file(tmp_path / "side.csv", header)
    if sidecar is not None:
        (tmp_path / "side.noise.toml").write_text(sidecar, encoding="utf-8")
    assert cli.main(["fit", str(path)]) == 2
    err = capsys.readouterr().err
    assert "Traceback" not in err
    for word in words:
        assert word in err, (word, err)
