"""Write the report of a run folder: figures (PNG and SVG) and one self-contained page.

    write_report(run_dir) -> run_dir / "report.html"

The runner calls it at the end of every run, the review screen and `pnbench report`
call it on demand (for example after a refit rewrote model.json). A partial run gets a
report of what exists, saying what is missing; a damaged folder raises DataFileError.
"""

from __future__ import annotations

import datetime as _dt
from dataclasses import dataclass
from pathlib import Path


@dataclass(frozen=True)
class Report:
    """What `build_report` wrote: the page, the figure files, and what is missing."""

    path: Path
    figures: tuple[Path, ...]  # PNG and SVG files, in report order
    missing: tuple[str, ...]  # sentences, as the page lists them


def build_report(run_dir: Path | str) -> Report:
    """Make ``run_dir/report.html`` and ``run_dir/figures/*``; say what was written.

    Raises DataFileError (exit 2) when the folder is damaged: run.json or model.json
    that is not JSON, garbage rows in points.csv, or none of the run files at all.
    """
    from pnbench import version
    from pnbench.sweeps import record
    from pnbench.tui.report import analysis as report_analysis
    from pnbench.tui.report import data as report_data
    from pnbench.tui.report import figures as report_figures
    from pnbench.tui.report import html as report_html

    run_dir = Path(run_dir)
    data = report_data.load_run(run_dir)
    analysis = report_analysis.analyze(data)
    figures = report_figures.render_all(analysis, data.device_name, record.figures_dir(run_dir))
    made_at = _dt.datetime.now(_dt.UTC).strftime("%Y-%m-%dT%H:%M:%SZ")
    missing = report_analysis.missing_items(data, analysis)
    page = report_html.render(data, analysis, figures, missing, version(), made_at)
    path = record.report_path(run_dir)
    record.atomic_write(path, page)
    files = tuple(p for f in figures for p in (f.png_path, f.svg_path))
    return Report(path=path, figures=files, missing=tuple(missing))


def write_report(run_dir: Path | str) -> Path:
    """Make the report of ``run_dir``; return the path of report.html."""
    return build_report(run_dir).path
