"""`pnbench ui` refuses a plan path it cannot read before opening any screen."""

from __future__ import annotations

from pnbench.tui import cli


def test_missing_plan_exits_2_naming_it(tmp_path, capsys):
    missing = tmp_path / "nope.toml"
    assert cli.main(["ui", str(missing)]) == 2
    err = capsys.readouterr().err
    assert str(missing) in err and "no such plan file" in err
    assert "Traceback" not in err


def test_binary_plan_exits_2(tmp_path, capsys):
    junk = tmp_path / "junk.toml"
    junk.write_bytes(bytes(range(128, 256)))
    assert cli.main(["ui", str(junk)]) == 2
    assert "UTF-8" in capsys.readouterr().err
