"""Former home of the run folder code, kept so that older imports keep working.

Everything lives in `pnbench.sweeps.record` now (docs/run-folder.md describes the folder);
import from there. (`read_run` here
is the old one, giving run.json as a dict; `record.read_run` gives a typed `RunInfo`.)
"""

from pnbench.sweeps.record import (  # noqa: F401 - re-exported
    Point,
    PointColumns,
    RunFolder,
    atomic_write,
    card_file_name,
    folder_name,
    iso,
    read_columns,
    read_events,
    read_metadata,
    read_points,
    read_run_doc,
    utc_now,
)
from pnbench.sweeps.record.layout import COLUMNS, HEADER, RUN_FORMAT  # noqa: F401
from pnbench.sweeps.record.writer import FSYNC_INTERVAL_S  # noqa: F401

read_run = read_run_doc
