"""Reports of whole runs: every figure, valid images, nothing outside the page, escaping."""

from __future__ import annotations

import base64
import json
import subprocess
import sys
import xml.etree.ElementTree as ET
from pathlib import Path

import pytest
import report_runs
from report_runs import check_png, scan

from pnbench.tui import cli
from pnbench.tui.report import build_report, write_report
from pnbench.tui.report.figures import FIGURE_NAMES


@pytest.fixture(scope="module")
def full_run(tmp_path_factory) -> tuple[Path, object]:
    run_dir = report_runs.make_run(tmp_path_factory.mktemp("runs"))
    report_runs.append_lines(run_dir / "events.jsonl", json.dumps(
        {"seq": 99, "time_s": 99.0, "kind": "warning", "step": None,
         "message": "<script>alert('x')</script> & <img src=x>"}) + "\n")
    return run_dir, build_report(run_dir)


def test_report_of_a_complete_run_holds_every_figure(full_run):
    run_dir, report = full_run
    assert report.path == run_dir / "report.html"
    page = scan(report.path)
    figure_ids = {a["id"][len("fig-"):] for t, a in page.tags if t == "figure"}
    assert figure_ids == set(FIGURE_NAMES)
    for name in FIGURE_NAMES:
        assert (run_dir / "figures" / f"{name}.png").is_file()
        assert (run_dir / "figures" / f"{name}.svg").is_file()
    assert len(report.figures) == 2 * len(FIGURE_NAMES)
    assert report.missing == ()  # a complete run with everything recorded lacks nothing


def test_every_embedded_image_is_a_valid_png_and_every_svg_parses(full_run):
    run_dir, report = full_run
    page = scan(report.path)
    images = [a["src"] for t, a in page.tags if t == "img"]
    assert len(images) == len(FIGURE_NAMES)
    for src in images:
        head, _, body = src.partition(",")
        assert head == "data:image/png;base64"
        check_png(base64.b64decode(body, validate=True))
    for name in FIGURE_NAMES:
        check_png((run_dir / "figures" / f"{name}.png").read_bytes())
        root = ET.parse(run_dir / "figures" / f"{name}.svg").getroot()
        assert root.tag == "{http://www.w3.org/2000/svg}svg"
        assert len(list(root.iter())) > 50  # axes, ticks, points: not an empty drawing


def test_the_page_references_nothing_outside_itself(full_run):
    _, report = full_run
    page = scan(report.path)
    for tag, attribute, value in page.urls:
        assert value.startswith("data:") or value.startswith("#"), (tag, attribute, value)
    assert not [a for t, a in page.tags if t in ("script", "link", "iframe", "object",
                                                  "embed", "base")]
    raw = report.path.read_text(encoding="utf-8")
    for marker in ("http:", "https:", "file:", "//"):
        outside_data = "".join(page.text) + "".join(page.styles)
        assert marker not in outside_data.replace("\u2014", ""), marker
    assert "url(" not in "".join(page.styles) and "@import" not in raw


def test_text_from_the_run_folder_is_escaped(full_run):
    _, report = full_run
    raw = report.path.read_text(encoding="utf-8")
    assert "<script>" not in raw and "<img src=x>" not in raw
    assert "&lt;script&gt;alert(&#x27;x&#x27;)&lt;/script&gt; &amp; &lt;img src=x&gt;" in raw
    text = "".join(scan(report.path).text)
    assert "Halden Ridge lot 7 <sample 3> & spare" in text  # device notes, shown as text
    assert "converged <ftol> & settled" in text  # the fit's message


def test_the_page_holds_the_tables_the_issue_asks_for(full_run):
    _, report = full_run
    text = " ".join(scan(report.path).text)
    # parameters with sigma, correlation and fit quality
    for name in ("IS", "N", "RS", "CJO", "VJ", "M", "TT", "BV", "IBV"):
        assert name in text
    assert "20.00 fA" in text and "800.0 mohm" in text and "Correlation of the estimates" in text
    assert "+0.97" in text and "\u22120.62" in text.replace("-0.62", "\u22120.62")
    # instruments, identities, plan, limits, steps, events, version, temperature
    for needle in ("Simulated,SMU-SIM,0001,1.0", "Simulated,LCR-SIM,0002,1.0",
                   "max_voltage_V", "forward_iv", "admittance", "pnbench 0.1.0",
                   "300.15 K", "current compliance at -60 V", "run_finished",
                   "Small-signal equivalent", "Mott", "cm\u207b\u00b3"):
        assert needle in text, needle
    assert "fit updates are in events.jsonl" in text
    assert "Other results in model.json" in text and "hr-sw-101" in text


def test_a_report_is_remade_in_place_without_leftovers(full_run):
    run_dir, _ = full_run
    first = {p.name for p in (run_dir / "figures").iterdir()}
    assert write_report(run_dir) == run_dir / "report.html"
    assert {p.name for p in (run_dir / "figures").iterdir()} == first
    assert not [p for p in run_dir.rglob("*.tmp")]


def test_a_partial_run_with_only_forward_iv_says_what_is_missing(tmp_path):
    run_dir = report_runs.make_run(tmp_path, parts=("forward",), status="interrupted")
    # a torn last line, as a kill in the middle of a write leaves it
    report_runs.append_lines(run_dir / "points.csv", "forward_iv,51,iv,3.0,1.02,0.0")
    report = build_report(run_dir)
    assert [p.name for p in report.figures] == ["iv_forward.png", "iv_forward.svg"]
    page = scan(report.path)
    assert {a["id"] for t, a in page.tags if t == "figure"} == {"fig-iv_forward"}
    text = " ".join(page.text)
    assert "Missing from this report" in text
    joined = " ".join(report.missing)
    for needle in ("did not complete (status interrupted", "no reverse I-V points",
                   "no C-V sweep", "no admittance spectra", "step reverse_iv: 0 of 62",
                   "step cv: 0 of 42", "points.csv: the last line was cut short"):
        assert needle in joined, needle
        assert needle in text, needle


def test_a_rerun_with_less_data_removes_figures_it_can_no_longer_draw(tmp_path):
    run_dir = report_runs.make_run(tmp_path, parts=("forward", "cv"))
    build_report(run_dir)
    assert (run_dir / "figures" / "cv.svg").exists()
    lines = (run_dir / "points.csv").read_text().splitlines(keepends=True)
    (run_dir / "points.csv").write_text("".join(ln for ln in lines if ",cv," not in ln))
    report = build_report(run_dir)
    assert not (run_dir / "figures" / "cv.svg").exists()
    assert not (run_dir / "figures" / "mott_schottky.png").exists()
    assert "no C-V sweep" in " ".join(report.missing)


def test_without_model_json_the_points_are_still_drawn(tmp_path):
    run_dir = report_runs.make_run(tmp_path, parts=("forward", "reverse"), model=False)
    report = build_report(run_dir)
    assert {p.stem for p in report.figures} == {"iv_forward", "iv_reverse"}
    assert "model.json is missing" in " ".join(report.missing)
    assert "No model was extracted" in report.path.read_text()


def test_command_prints_json_and_exits_0(tmp_path, capsys):
    run_dir = report_runs.make_run(tmp_path, parts=("forward",), model=False)
    assert cli.main(["report", str(run_dir), "--json"]) == 0
    doc = json.loads(capsys.readouterr().out.strip().splitlines()[-1])
    assert doc["report"] == str(run_dir / "report.html")
    assert sorted(Path(p).name for p in doc["figures"]) == ["iv_forward.png",
                                                          "iv_forward.svg"]
    assert any("model.json is missing" in m for m in doc["missing"])


def test_the_command_module_does_not_import_matplotlib():
    code = ("import sys, pnbench.tui.commands.report, pnbench.tui.report; "
            "print('matplotlib' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True)
    assert out.stdout.strip() == "False"


def test_a_run_that_has_just_started_gets_a_report_of_nothing_yet(tmp_path):
    run_dir = report_runs.make_run(tmp_path, parts=(), status="running", model=False)
    report = build_report(run_dir)
    assert report.figures == ()
    joined = " ".join(report.missing)
    assert "run.json says the run is running" in joined
    assert "points.csv holds no points yet" in joined
    assert "No figure could be drawn from this run." in report.path.read_text()


def test_meter_readings_without_conductance_still_draw(tmp_path):
    """A meter set to report capacitance only leaves conductance_S empty."""
    run_dir = report_runs.make_run(tmp_path, parts=("cv", "admittance"))
    path = run_dir / "points.csv"
    rows = []
    for line in path.read_text().splitlines():
        cells = line.split(",")
        if not line.startswith("#") and cells[2] == "cv":
            cells[8] = ""
        rows.append(",".join(cells))
    path.write_text("\n".join(rows) + "\n")
    report = build_report(run_dir)
    assert {p.stem for p in report.figures} == {"cv", "mott_schottky", "doping_profile",
                                                "admittance"}
    row = next(r for r in report_analysis_of(run_dir).qrows if r.point.bias_voltage_V > 0)
    assert row.measured_ohm == {}  # no measured |Z| without the conductance


def report_analysis_of(run_dir):
    from pnbench.tui.report.analysis import analyze
    from pnbench.tui.report.data import load_run

    return analyze(load_run(run_dir))


def test_a_long_run_is_drawn_thinned_to_what_the_figure_shows():
    """Markers beyond THIN_ABOVE keep the first point in each cell of a fine grid: the
    same picture (every occupied cell still has a marker), drawn in bounded time."""
    import numpy as np

    from pnbench.tui.report.plotstyle import THIN_ABOVE, THIN_CELLS, thin

    small = np.arange(100.0)
    assert len(thin(small, small)[0]) == 100
    rng = np.random.default_rng(1)
    v = np.tile(np.linspace(0.3, 0.8, 200), 2000)  # 400 000 points, 200 voltages
    i = 1e-14 * np.exp(v / 0.0259) * (1 + 0.003 * rng.standard_normal(v.size))
    x, y = thin(v, i)
    assert THIN_ABOVE < v.size and len(x) < v.size / 20
    assert set(np.unique(x)) == set(np.unique(v))  # every voltage still drawn

    def cells(a, log):
        a = np.log10(a) if log else a
        return np.minimum(((a - a.min()) / np.ptp(a) * THIN_CELLS).astype(int),
                          THIN_CELLS - 1)

    every = set(zip(cells(v, False), cells(i, True), strict=True))
    drawn = set(zip(cells(np.append(x, [v.min(), v.max()]), False)[:-2],
                    cells(np.append(y, [i.min(), i.max()]), True)[:-2], strict=True))
    assert drawn == every
