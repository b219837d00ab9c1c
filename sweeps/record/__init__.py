"""The run record: the one owner of a run folder's files.

It writes the folder (`RunFolder`), reads it back into typed records (`read_run` ->
`RunInfo`, `read_columns` -> `PointColumns`, `read_events` -> typed events,
`read_model` -> `ModelSet`), follows it for live viewers (`FolderTail`), and reports
torn or malformed files one way (DataFileError naming file and line; a torn last line
is left out and said). Nothing else in pnbench names the folder's files: `layout` does.
"""

from pnbench.sweeps.record import layout
from pnbench.sweeps.record.columns import Point, PointColumns
from pnbench.sweeps.record.layout import card_file_name, folder_name, iso, utc_now
from pnbench.sweeps.record.reader import (
    EventLog,
    RunInfo,
    StepInfo,
    figures_dir,
    has,
    log_path,
    looks_like_run,
    model_source,
    plan_path,
    present,
    read_card,
    read_columns,
    read_event_log,
    read_events,
    read_json_object,
    read_metadata,
    read_model,
    read_model_doc,
    read_plan,
    read_points,
    read_run,
    read_run_doc,
    read_text,
    report_path,
    run_info,
)
from pnbench.sweeps.record.tail import Batch, FolderTail
from pnbench.sweeps.record.writer import RunFolder, atomic_write

__all__ = ["Batch", "EventLog", "FolderTail", "Point", "PointColumns", "RunFolder", "RunInfo",
           "StepInfo", "atomic_write", "card_file_name", "figures_dir", "folder_name", "has",
           "iso", "layout", "log_path", "looks_like_run", "model_source", "plan_path",
           "present", "read_card", "read_columns", "read_event_log", "read_events",
           "read_json_object", "read_metadata", "read_model", "read_model_doc",
           "read_plan", "read_points", "read_run", "read_run_doc", "read_text",
           "report_path", "run_info", "utc_now"]
