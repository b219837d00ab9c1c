"""Reading data files and run folders for fits: what is accepted, and clear refusals."""

from __future__ import annotations

import json

import numpy as np
import pytest

from pnbench.errors import DataFileError
from pnbench.sweeps import store
from pnbench.sweeps.datafile import read_data, read_data_file

IV = "voltage_V,current_A\n0.1,1e-9\n0.2,5e-8\n0.3,2.5e-6\n"
CV = "voltage_V,frequency_Hz,capacitance_F\n-2,1e6,1.1e-12\n-1,1e6,1.4e-12\n0,1e6,2e-12\n"


def _write(tmp_path, text, name="data.csv"):
    path = tmp_path / name
    if isinstance(text, bytes):
        path.write_bytes(text)
    else:
        path.write_text(text, encoding="utf-8")
    return path


def test_iv_file_with_metadata_and_extra_columns(tmp_path):
    text = ("# device = sig-a1 (Northfield bench)\n# temperature_K = 310.5\n"
            "# area_m2 = 1e-8\nvoltage_V,current_A,comment\n0.1,1e-9,a\n0.2,5e-8,b\n")
    d = read_data(_write(tmp_path, text))
    assert d.kinds == ("iv",) and len(d) == 2
    assert d.temperature_K == 310.5 and d.area_m2 == 1e-8
    assert d.metadata["device"] == "sig-a1 (Northfield bench)"
    iv = d.select("iv")
    assert np.allclose(iv["voltage_V"], [0.1, 0.2]) and not iv["compliance"].any()


def test_cv_file_without_conductance(tmp_path):
    d = read_data(_write(tmp_path, CV))
    cv = d.select("cv")
    assert d.kinds == ("cv",)
    assert np.isnan(cv["conductance_S"]).all() and cv["capacitance_F"][2] == 2e-12


def test_compliance_column_flags_points(tmp_path):
    text = "voltage_V,current_A,compliance\n0.1,1e-9,0\n0.5,1e-3,0\n0.9,1e-1,1\n"
    d = read_data(_write(tmp_path, text))
    assert d.compliance.tolist() == [False, False, True]


@pytest.mark.parametrize("text, expected", [
    ("", "empty"),
    ("# only comments\n# temperature_K = 300\n", "empty"),
    ("voltage_V,current_A\n", "no data rows"),
    ("voltage_V,current_A\n0.5,1e-3\n", "a single IV point (line 2)"),
    ("V,I\n0.1,1e-9\n0.2,2e-9\n", "missing columns"),
    ("voltage_V,current_A\n0.1,1e-9\n0.2,abc\n", "line 3, column current_A: 'abc' is not a"),
    ("voltage_V,current_A\n0.1,1e-9\n0.2,nan\n", "line 3, column current_A: 'nan' is not a "
                                                 "finite"),
    ("voltage_V,current_A\n0.1,1e-9\n0.2,inf\n", "not a finite number"),
    ("voltage_V,current_A\n0.1,1e-9\n0.2\n", "line 3: 1 cells where the header has 2"),
    ("voltage_V,current_A\n0.1,\n0.2,1e-9\n", "line 2, column current_A: empty"),
    ("voltage_V,current_A,compliance\n0.1,1e-9,1\n0.2,2e-9,1\n", "every point is flagged"),
    ("voltage_V,current_A,compliance\n0.1,1e-9,maybe\n0.2,2e-9,0\n", "accepted are 0 and 1"),
    ("voltage_V,voltage_V\n1,2\n3,4\n", "appears twice"),
    ("# temperature_K = warm\nvoltage_V,current_A\n0.1,1e-9\n0.2,2e-9\n", "line 1"),
    ("# temperature_K = -4\nvoltage_V,current_A\n0.1,1e-9\n0.2,2e-9\n", "must be > 0"),
    ("voltage_V,frequency_Hz,capacitance_F\n-1,0,1e-12\n0,1e6,2e-12\n", "must be > 0"),
])
def test_bad_files_are_refused_naming_file_and_problem(tmp_path, text, expected):
    path = _write(tmp_path, text)
    with pytest.raises(DataFileError) as err:
        read_data(path)
    message = str(err.value)
    assert str(path) in message and expected in message, message


def test_binary_and_random_bytes_are_refused(tmp_path):
    rng = np.random.default_rng(0)
    for name, raw in (("zeros.csv", bytes(64)),
                      ("noise.csv", rng.integers(0, 256, 4096, dtype=np.uint8).tobytes()),
                      ("latin.csv", "voltage_V,current_A\n0,1\n\xb5,2\n".encode("latin-1"))):
        path = _write(tmp_path, raw, name)
        with pytest.raises(DataFileError) as err:
            read_data(path)
        assert str(path) in str(err.value) and "text CSV" in str(err.value)


def test_missing_file_and_wrong_kind(tmp_path):
    with pytest.raises(DataFileError, match="no such file"):
        read_data(tmp_path / "absent.csv")
    with pytest.raises(DataFileError, match="missing column frequency_Hz, capacitance_F"):
        read_data_file(_write(tmp_path, IV), kind="cv")


def _run_folder(tmp_path, torn=False):
    doc = {"device": {"name": "lky-d4", "temperature_K": 296.0, "area_m2": 4e-8},
           "status": "completed"}
    folder = store.RunFolder.create(tmp_path, "# plan\n", doc, {"temperature_K": 300.0})
    points = [store.Point("fwd", k, "iv", 0.1 * k, voltage_V=0.1 * (k + 1),
                          current_A=1e-9 * 10 ** k, compliance=k == 5) for k in range(6)]
    points += [store.Point("cv", k, "cv", 1.0 + k, voltage_V=-1.0 * k, frequency_Hz=1e6,
                           capacitance_F=2e-12 / (1 + k), conductance_S=1e-9)
               for k in range(4)]
    for p in points:
        folder.append_point(p)
    folder.close()
    if torn:
        with open(folder.path / "points.csv", "a", encoding="utf-8") as f:
            f.write("fwd,6,iv,0.7,0.7,1e-")
    return folder.path


def test_run_folder_holds_iv_and_cv_rows(tmp_path):
    """A folder written by the run store: both kinds, compliance flags, and the device
    temperature and area from run.json (they win over points.csv metadata)."""
    d = read_data(_run_folder(tmp_path))
    assert d.kinds == ("iv", "cv")
    assert d.select("iv")["compliance"].tolist() == [False] * 5 + [True]
    assert np.allclose(d.select("cv")["capacitance_F"][1], 1e-12)
    assert d.temperature_K == 296.0 and d.area_m2 == 4e-8


def test_run_folder_with_a_half_written_last_line(tmp_path):
    d = read_data(_run_folder(tmp_path, torn=True))
    assert len(d.select("iv")["voltage_V"]) == 6
    assert any("half-written" in n for n in d.notes)


def test_run_folder_with_a_damaged_run_json(tmp_path):
    path = _run_folder(tmp_path)
    (path / "run.json").write_text(json.dumps({"device": {"temperature_K": "hot"}}))
    with pytest.raises(DataFileError, match="device.temperature_K must be a number"):
        read_data(path)
    (path / "run.json").write_text("{not json")
    with pytest.raises(DataFileError, match="not valid JSON"):
        read_data(path)


def test_folder_without_points(tmp_path):
    with pytest.raises(DataFileError, match="no points.csv here"):
        read_data(tmp_path)
