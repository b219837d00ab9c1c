"""Damaged run folders get exit 2 and a message naming the file; torn lines do not."""

from __future__ import annotations

import json
import shutil

import pytest
import report_runs

from pnbench.errors import DataFileError
from pnbench.tui import cli
from pnbench.tui.report.data import load_run


@pytest.fixture(scope="module")
def template(tmp_path_factory):
    """One complete run folder, copied by each test before it damages it."""
    return report_runs.make_run(tmp_path_factory.mktemp("template"))


@pytest.fixture
def run_dir(template, tmp_path):
    target = tmp_path / template.name
    shutil.copytree(template, target)
    return target


def _report_fails(run_dir, capsys, *needles: str) -> str:
    code = cli.main(["report", str(run_dir)])
    err = capsys.readouterr().err
    assert code == 2, err
    assert err.startswith("pnbench report: ")
    assert "Traceback" not in err
    for needle in needles:
        assert needle in err, (needle, err)
    assert not (run_dir / "report.html").exists()
    return err


def test_run_json_that_is_not_json(run_dir, capsys):
    (run_dir / "run.json").write_text('{"format": 1, "status": "runn')
    _report_fails(run_dir, capsys, "run.json", "not valid JSON", "line 1")


def test_run_json_of_another_format(run_dir, capsys):
    (run_dir / "run.json").write_text(json.dumps({"format": 7, "status": "completed"}))
    _report_fails(run_dir, capsys, "run.json", "format 1")


def test_garbage_row_in_the_middle_of_points_csv(run_dir, capsys):
    lines = (run_dir / "points.csv").read_text().splitlines(keepends=True)
    lines.insert(10, "forward_iv,3,iv,0.1,zero point four,1e-9,,,,0\n")
    (run_dir / "points.csv").write_text("".join(lines))
    _report_fails(run_dir, capsys, "points.csv", "cannot be read")


def test_points_csv_with_a_foreign_header(run_dir, capsys):
    (run_dir / "points.csv").write_text("V,I\n0.1,1e-9\n0.2,2e-9\n")
    _report_fails(run_dir, capsys, "points.csv", "header", "voltage_V")


def test_points_csv_of_binary_noise(run_dir, capsys):
    (run_dir / "points.csv").write_bytes(bytes(range(256)) * 4)
    _report_fails(run_dir, capsys, "points.csv", "not UTF-8")


def test_model_json_that_is_not_json(run_dir, capsys):
    (run_dir / "model.json").write_text("{\"parameters\": {\"IS\": ")
    _report_fails(run_dir, capsys, "model.json", "not valid JSON")


def test_model_json_with_an_impossible_value(run_dir, capsys):
    doc = json.loads((run_dir / "model.json").read_text())
    doc["parameters"]["IS"]["value"] = -1e-14
    (run_dir / "model.json").write_text(json.dumps(doc))
    _report_fails(run_dir, capsys, "model.json", "IS")


def test_a_folder_with_none_of_the_run_files(tmp_path, capsys):
    (tmp_path / "notes.txt").write_text("nothing to see")
    _report_fails(tmp_path, capsys, str(tmp_path), "run.json", "points.csv")


def test_a_folder_that_does_not_exist(tmp_path, capsys):
    code = cli.main(["report", str(tmp_path / "no-such-run")])
    err = capsys.readouterr().err
    assert code == 2 and "no-such-run" in err and "not a run folder" in err


def test_load_run_raises_the_data_file_error_itself(run_dir):
    (run_dir / "run.json").write_text("[1, 2")
    with pytest.raises(DataFileError, match="run.json"):
        load_run(run_dir)


def test_torn_last_lines_are_left_out_and_said(run_dir):
    report_runs.append_lines(run_dir / "points.csv", "admittance,12,cv,9.9,0.7,,1e")
    report_runs.append_lines(run_dir / "events.jsonl", '{"seq": 40, "time_s": 9.9, "ki')
    data = load_run(run_dir)
    assert len(data.cv) == 42 + 12  # the C-V sweep and the spectra, not the torn row
    joined = " ".join(data.missing)
    assert "points.csv: the last line was cut short" in joined
    assert "events.jsonl: the last line was cut short" in joined


def test_missing_side_files_are_reported_not_fatal(run_dir):
    for name in ("events.jsonl", "plan.toml", "run.json"):
        (run_dir / name).unlink()
    data = load_run(run_dir)
    joined = " ".join(data.missing)
    for name in ("events.jsonl is missing", "plan.toml is missing", "run.json is missing"):
        assert name in joined
    assert data.device_name == "hr-sw-101"  # from the points.csv metadata
    assert data.area_m2 == report_runs.AREA_M2
