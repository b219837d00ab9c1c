"""Commands as the README shows them: `resume RUN_DIR --headless`, `check PLAN
--simulate DEVICE`, and `probe` of the LCR meter in readable lines."""

from __future__ import annotations

from plantext import sweep_plan

from pnbench.tui import cli


def test_resume_accepts_headless(tmp_path, capsys):
    args = cli.build_parser().parse_args(["resume", str(tmp_path), "--headless"])
    assert args.headless and args.run_dir == str(tmp_path)
    # a folder that holds no run is bad input, named, not a usage error
    assert cli.main(["resume", str(tmp_path), "--headless"]) == 2
    err = capsys.readouterr().err
    assert "usage:" not in err and str(tmp_path) in err


def test_check_with_simulate_checks_against_the_simulated_bench(tmp_path, capsys):
    plan = tmp_path / "plan.toml"
    plan.write_text(sweep_plan("LH-QT16-t1", 5, 5), encoding="utf-8")
    assert cli.main(["check", str(plan), "--simulate", "lh-vc510"]) == 0
    assert "fits the simulated bench with lh-vc510" in capsys.readouterr().out
    # a limit beyond the simulated SMU's largest current range (1 A) is refused (exit 2)
    big = tmp_path / "big.toml"
    big.write_text(sweep_plan("LH-QT16-t1", 5, 5).replace(
        'max_current = "50 mA"', 'max_current = "2 A"'), encoding="utf-8")
    assert cli.main(["check", str(big)]) == 0  # the plan on its own is fine
    capsys.readouterr()
    code = cli.main(["check", str(big), "--simulate", "lh-vc510"])
    err = capsys.readouterr().err
    assert code == 2 and "simulated bench" in err and "max_current" in err
    assert cli.main(["check", str(plan), "--simulate", "no-such-device"]) == 2


def test_probe_of_the_lcr_meter_prints_quantities_not_a_dict(capsys):
    assert cli.main(["probe", "--simulate", "lh-vc510", "--role", "lcr",
                     "--time-scale", "0"]) == 0
    out = capsys.readouterr().out
    line = next(x for x in out.splitlines() if "reading_1kHz" in x)
    assert "{" not in line and "'" not in line
    assert "Cp = " in line and " pF" in line and "Gp = " in line and "at 1 kHz" in line


def test_demo_with_a_device_file_of_ones_own_characterizes_that_device(tmp_path, capsys):
    """A device file with its own part name gets a plan fitted to it, and the run folder
    and the model card are named after that part (not after the bundled varactor)."""
    from importlib import resources

    text = (resources.files("pnbench.sim_configs") / "lh-vh720.toml").read_text()
    mine = tmp_path / "my-device.toml"
    mine.write_text(text.replace('part = "LH-VH720"', 'part = "MY-PART-9"'),
                    encoding="utf-8")
    out = tmp_path / "runs"
    code = cli.main(["demo", "--simulate", str(mine), "--time-scale", "0", "--headless",
                     "--out", str(out), "--no-report"])
    assert code == 0, capsys.readouterr().err
    runs = [p for p in out.iterdir() if p.is_dir()]
    assert len(runs) == 1 and runs[0].name.endswith("_MY-PART-9")
    assert (runs[0] / "MY-PART-9.lib").exists()
    assert "VC510" not in (runs[0] / "plan.toml").read_text()
    # a bundled part named by its file is still run with its own bundled plan
    from pnbench.tui.commands.demo import plan_for

    assert plan_for("lh-hm27", str(out)).name == "lh-hm27.toml"


def test_fit_maps_a_files_own_column_names(tmp_path, capsys):
    """A file with columns V,I is read with --column-names V=voltage_V,I=current_A; a
    name the header lacks, or a target pnbench does not know, is bad input (exit 2)."""
    import numpy as np

    from pnbench.modeling import junction
    from pnbench.modeling.params import DiodeParams

    p = DiodeParams(IS=2e-14, N=1.04, RS=1.5)
    v = np.linspace(0.3, 0.85, 60)
    i = junction.current(v, p, 300.15)
    path = tmp_path / "theirs.csv"
    path.write_text("V,I\n" + "".join(f"{float(a)!r},{float(b)!r}\n"
                                       for a, b in zip(v, i, strict=True)),
                    encoding="utf-8")
    assert cli.main(["fit", str(path)]) == 2  # unnamed columns: refused, as before
    assert "voltage_V" in capsys.readouterr().err
    assert cli.main(["fit", str(path), "--column-names", "V=voltage_V,I=current_A",
                     "--json"]) == 0
    import json

    doc = json.loads(capsys.readouterr().out)
    assert abs(doc["parameters"]["N"]["value"] - 1.04) < 0.01
    assert cli.main(["fit", str(path), "--column-names", "U=voltage_V,I=current_A"]) == 2
    assert "'U'" in capsys.readouterr().err
    assert cli.main(["fit", str(path), "--column-names", "V=volts,I=current_A"]) == 2
    assert "not a pnbench column" in capsys.readouterr().err
