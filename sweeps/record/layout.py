"""The names and shapes of the files of a run folder (nowhere else in pnbench).

One folder per run under ``--out``, named ``YYYYmmdd-HHMMSS_<device>`` from the start
time (UTC) and the device name. docs/run-folder.md
describes every file; this module is where the code learns their names.
"""

from __future__ import annotations

import re
from datetime import UTC, datetime

RUN_FORMAT = 1
PLAN = "plan.toml"
RUN = "run.json"
POINTS = "points.csv"
EVENTS = "events.jsonl"
MODEL = "model.json"
LOG = "run.log"
REPORT = "report.html"
FIGURES = "figures"
CARD_SUFFIX = ".lib"
LOCK = ".pnbench.lock"
#: where a run folder is built inside --out, until run.json exists and it is renamed
STAGING = ".pnbench-partial"

COLUMNS = ("step", "index", "kind", "time_s", "voltage_V", "current_A", "frequency_Hz",
           "capacitance_F", "conductance_S", "compliance")
HEADER = ",".join(COLUMNS)
#: A run over temperature adds the stage's reading at each point as a last column.
TEMPERATURE_COLUMN = "temperature_K"
HEADER_T = HEADER + "," + TEMPERATURE_COLUMN
#: the columns that hold numbers, in file order (after step; kind is text)
NUMBER_COLUMNS = ("index", "time_s", "voltage_V", "current_A", "frequency_Hz",
                  "capacitance_F", "conductance_S", "compliance")

_SAFE = re.compile(r"[^A-Za-z0-9._-]+")


def safe_name(text: str, fallback: str = "device") -> str:
    return _SAFE.sub("_", text).strip("._") or fallback


def folder_name(started: datetime, device_name: str) -> str:
    return f"{started.astimezone(UTC):%Y%m%d-%H%M%S}_{safe_name(device_name)[:60]}"


def card_file_name(device_name: str) -> str:
    """The model card's file name in the run folder (``<device>.lib``)."""
    return safe_name(device_name) + CARD_SUFFIX


def utc_now() -> datetime:
    return datetime.now(UTC)


def iso(moment: datetime) -> str:
    return moment.astimezone(UTC).strftime("%Y-%m-%dT%H:%M:%S.%fZ")
