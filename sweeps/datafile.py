"""Reading measured data for fits: CSV files (columns as in docs/run-folder.md) and run folders.

Columns (header row; extra columns are kept and ignored by the fits):

* I–V: ``voltage_V,current_A``
* C–V and admittance: ``voltage_V,frequency_Hz,capacitance_F[,conductance_S]``
* run files add ``step,index,time_s,compliance`` (0/1) and, in a run folder's
  ``points.csv``, ``kind`` (``iv`` or ``cv``) with empty cells where a column does not
  apply to a row.

Lines starting with ``#`` are comments; ``# key = value`` comments are metadata
(``temperature_K``, ``area_m2``, ``device``, ...; ``smu.KEY`` and ``lcr.KEY`` state the
instruments' noise, as a sidecar ``STEM.noise.toml`` may: `sweeps.datanoise`). Anything
that cannot be used raises DataFileError naming the file, the line and the column, what
was found and what would be accepted; no partial guesses. A run folder is read by column
through the run record (`sweeps.record`); it may end in a half-written line (a run killed
while writing): that line is left out and counted in ``DataSet.notes``.
"""

from __future__ import annotations

import csv
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from pnbench.errors import BadInput, DataFileError
from pnbench.sweeps import datanoise, record
from pnbench.sweeps.quantities import parse_quantity

IV_COLUMNS = ("voltage_V", "current_A")
CV_COLUMNS = ("voltage_V", "frequency_Hz", "capacitance_F")
NUMERIC = ("voltage_V", "current_A", "frequency_Hz", "capacitance_F", "conductance_S",
           "index", "time_s")
KINDS = ("auto", "iv", "cv")
_ACCEPTED = ("an I-V file needs the columns voltage_V,current_A; a C-V file "
             "voltage_V,frequency_Hz,capacitance_F (conductance_S optional)")
_TRUE = {"1", "true", "yes"}
_FALSE = {"0", "false", "no", ""}


@dataclass(frozen=True)
class DataSet:
    """Measured points read from one file (SI units; NaN where a cell is empty).

    ``row_kind`` says per row whether it is an I–V ("iv") or a C–V ("cv") point.
    """

    path: Path
    columns: dict[str, np.ndarray]
    row_kind: np.ndarray
    compliance: np.ndarray
    line_numbers: np.ndarray
    metadata: dict[str, str] = field(default_factory=dict)
    temperature_K: float | None = None
    area_m2: float | None = None
    notes: tuple[str, ...] = ()
    #: {"iv"|"cv": StatedNoise} from the header or the sidecar (`sweeps.datanoise`)
    stated_noise: dict = field(default_factory=dict)
    noise_notes: dict = field(default_factory=dict)  # {"iv"|"cv": where it came from}

    def __len__(self) -> int:
        return int(self.row_kind.size)

    @property
    def kinds(self) -> tuple[str, ...]:
        return tuple(k for k in ("iv", "cv") if np.any(self.row_kind == k))

    def select(self, kind: str) -> dict[str, np.ndarray] | None:
        """Columns of the rows of one kind (plus ``compliance``), or None when absent."""
        rows = self.row_kind == kind
        if not rows.any():
            return None
        names = IV_COLUMNS if kind == "iv" else (*CV_COLUMNS, "conductance_S")
        out = {n: self.columns[n][rows] if n in self.columns else np.full(rows.sum(), np.nan)
               for n in names}
        out["compliance"] = self.compliance[rows]
        return out

    def fit_data(self) -> dict[str, dict[str, np.ndarray]]:
        """The mapping joint.fit_all takes: {"iv": columns, "cv": columns}."""
        return {k: self.select(k) for k in self.kinds}


def read_data(path: str | Path, kind: str = "auto",
              columns: dict[str, str] | None = None) -> DataSet:
    """A data file, or the points.csv of a run folder (with run.json's temperature).
    `columns` maps a file's own column names to pnbench's (V -> voltage_V)."""
    p = Path(path).expanduser()
    if p.is_dir():
        return read_run_folder(p, kind)
    return read_data_file(p, kind, columns=columns)


def read_run_folder(folder: str | Path, kind: str = "auto") -> DataSet:
    """The points of a run folder, read by column through the run record, checked like a
    data file (every point a fit would use is finite), with run.json's temperature and
    area when it has them."""
    folder = Path(folder).expanduser()
    if kind not in KINDS:
        raise BadInput(f"--kind {kind!r}: accepted are {', '.join(KINDS)}")
    if not record.has(folder, record.layout.POINTS):
        raise DataFileError(f"{folder}: no points.csv here; give a data file (.csv) or the "
                            "folder of a pnbench run")
    points = record.read_columns(folder)
    path = folder / record.layout.POINTS
    if kind != "auto":
        points = points.select(points.kind_mask(kind))
    row_kind = points.kinds().astype(str)
    lines = points.first_line + np.arange(len(points))
    _check_finite(points, row_kind, lines, path)
    meta = {k: (v, 0) for k, v in points.metadata.items()}
    notes = (f"line {int(lines[-1]) + 1 if len(lines) else points.first_line}: half-written "
             "last line left out",) if points.torn else ()
    columns = {n: getattr(points, n) for n in ("voltage_V", "current_A", "frequency_Hz",
                                               "capacitance_F", "conductance_S", "time_s")}
    columns["index"] = points.index.astype(float)
    temperature = _meta_number(meta, "temperature_K", "K", path)
    area = _meta_number(meta, "area_m2", "m2", path)
    if record.has(folder, record.layout.RUN):
        doc = record.read_json_object(folder / record.layout.RUN)
        device = doc.get("device")
        run_json = folder / record.layout.RUN
        if isinstance(device, dict):
            temperature = _positive(device.get("temperature_K"), run_json,
                                    "device.temperature_K", "K") or temperature
            area = _positive(device.get("area_m2"), run_json, "device.area_m2", "m2") or area
    data = DataSet(path=path, columns=columns, row_kind=row_kind,
                   compliance=points.compliance, line_numbers=lines,
                   metadata=dict(points.metadata), temperature_K=temperature, area_m2=area,
                   notes=notes)
    if not len(data):
        raise DataFileError(f"{path}: no data rows below the header; {_ACCEPTED}")
    _check_usable(data, kind)
    return data


def _check_finite(points, row_kind: np.ndarray, lines: np.ndarray, path: Path) -> None:
    """The cells a fit of each row's kind needs are finite numbers (as for data files)."""
    for rk, needed in (("iv", IV_COLUMNS), ("cv", CV_COLUMNS)):
        rows = row_kind == rk
        for column in needed:
            values = getattr(points, column)
            bad = np.flatnonzero(rows & ~np.isfinite(values))
            if bad.size:
                raise DataFileError(f"{path}, line {int(lines[bad[0]])}, column {column}: "
                                    "empty or not a finite number (NaN and infinity cannot "
                                    f"be fitted); an {rk.upper()} point needs "
                                    f"{', '.join(needed)}")
        if rk == "cv":
            bad = np.flatnonzero(rows & (points.frequency_Hz <= 0))
            if bad.size:
                raise DataFileError(f"{path}, line {int(lines[bad[0]])}, column "
                                    "frequency_Hz: a measurement frequency must be > 0")


def _positive(value, path: Path, key: str, unit: str) -> float | None:
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, (int, float)) \
            or not math.isfinite(value) or value <= 0:
        raise DataFileError(f"{path}: {key} must be a number > 0 ({unit}), found {value!r}")
    return float(value)


def _text(path: Path) -> str:
    try:
        raw = path.read_bytes()
    except FileNotFoundError:
        raise DataFileError(f"{path}: no such file") from None
    except IsADirectoryError:
        raise DataFileError(f"{path}: is a folder without points.csv") from None
    except OSError as exc:
        raise DataFileError(f"{path}: cannot read it ({exc.strerror or exc})") from None
    if b"\x00" in raw[:65536]:
        raise DataFileError(f"{path}: binary content (a NUL byte at offset "
                            f"{raw.index(bytes(1))}); expected a text CSV file: {_ACCEPTED}")
    try:
        return raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise DataFileError(f"{path}: not UTF-8 text (undecodable byte at offset "
                            f"{exc.start}); expected a text CSV file: {_ACCEPTED}") from None


def _metadata(lineno: int, line: str, meta: dict, path: Path) -> None:
    body = line.lstrip("#").strip()
    key, sep, value = body.partition("=")
    if sep and key.strip() and " " not in key.strip():
        meta[key.strip()] = (value.strip(), lineno)


def _meta_number(meta: dict, key: str, unit: str, path: Path) -> float | None:
    if key not in meta:
        return None
    text, lineno = meta[key]
    try:
        value = parse_quantity(text, unit, what=f"{path}, line {lineno}: {key}")
    except BadInput as exc:
        raise DataFileError(str(exc)) from None
    if not value > 0:
        raise DataFileError(f"{path}, line {lineno}: {key} must be > 0, found {text!r}")
    return value


def read_data_file(path: str | Path, kind: str = "auto", *,
                   tolerate_torn_tail: bool = False,
                   columns: dict[str, str] | None = None) -> DataSet:
    """Read and validate one CSV file (see the module notes for the format)."""
    path = Path(path).expanduser()
    if kind not in KINDS:
        raise BadInput(f"--kind {kind!r}: accepted are {', '.join(KINDS)}")
    text = _text(path)
    lines = text.splitlines()
    meta: dict[str, tuple[str, int]] = {}
    header, header_line, body = None, 0, []
    for n, line in enumerate(lines, 1):
        stripped = line.strip()
        if not stripped:
            continue
        if stripped.startswith("#"):
            _metadata(n, stripped, meta, path)
            continue
        if header is None:
            header, header_line = [h.strip() for h in next(csv.reader([stripped]))], n
        else:
            body.append((n, stripped))
    if header is None:
        raise DataFileError(f"{path}: empty (no header row and no data); {_ACCEPTED}")
    noise, noise_notes = datanoise.stated_noise(path, meta)
    if columns:
        absent = [name for name in columns if name not in header]
        if absent:
            raise DataFileError(f"{path}, line {header_line}: no column {absent[0]!r} to "
                                f"rename (the header has: {', '.join(header)})")
        header = [columns.get(h, h) for h in header]
    dup = {h for h in header if header.count(h) > 1}
    if dup:
        raise DataFileError(f"{path}, line {header_line}: column {sorted(dup)[0]!r} appears "
                            "twice in the header")
    notes: list[str] = []
    torn = bool(tolerate_torn_tail and body and not text.endswith(("\n", "\r")))
    kinds = _row_kinds_plan(header, kind, path, header_line)
    cols = {h: [] for h in header if h in NUMERIC}
    row_kind, compliance, line_numbers = [], [], []
    for k, (n, line) in enumerate(body):
        cells = [c.strip() for c in next(csv.reader([line]))]
        try:
            rk, values, comp = _parse_row(cells, header, kinds, path, n)
        except DataFileError:
            if torn and k == len(body) - 1:
                notes.append(f"line {n}: half-written last line left out")
                continue
            raise
        if rk is None:
            continue
        for h in cols:
            cols[h].append(values.get(h, math.nan))
        row_kind.append(rk)
        compliance.append(comp)
        line_numbers.append(n)
    if not row_kind:
        raise DataFileError(f"{path}: no data rows below the header (line {header_line}); "
                            f"{_ACCEPTED}")
    data = DataSet(
        path=path, columns={h: np.array(v, dtype=float) for h, v in cols.items()},
        row_kind=np.array(row_kind), compliance=np.array(compliance, dtype=bool),
        line_numbers=np.array(line_numbers), metadata={k: v for k, (v, _) in meta.items()},
        temperature_K=_meta_number(meta, "temperature_K", "K", path),
        area_m2=_meta_number(meta, "area_m2", "m2", path), notes=tuple(notes),
        stated_noise=noise, noise_notes=noise_notes)
    _check_usable(data, kind)
    return data


def _row_kinds_plan(header, kind, path, header_line) -> dict:
    """Which kinds rows may be, and how to tell (a kind column, or filled cells)."""
    has = set(header)
    iv_ok = set(IV_COLUMNS) <= has
    cv_ok = set(CV_COLUMNS) <= has
    want = {"iv": iv_ok, "cv": cv_ok}
    if kind != "auto":
        if not want[kind]:
            cols = IV_COLUMNS if kind == "iv" else CV_COLUMNS
            missing = [c for c in cols if c not in has]
            raise DataFileError(f"{path}, line {header_line}: missing column "
                                f"{', '.join(missing)} for --kind {kind} (found: "
                                f"{', '.join(header)}); {_ACCEPTED}")
        return {"allowed": (kind,), "by_column": "kind" in has}
    if not (iv_ok or cv_ok):
        missing_iv = [c for c in IV_COLUMNS if c not in has]
        missing_cv = [c for c in CV_COLUMNS if c not in has]
        raise DataFileError(f"{path}, line {header_line}: missing columns (found: "
                            f"{', '.join(header)}; an I-V file lacks {', '.join(missing_iv)}, "
                            f"a C-V file {', '.join(missing_cv)}); {_ACCEPTED}")
    allowed = tuple(k for k in ("iv", "cv") if want[k])
    return {"allowed": allowed, "by_column": "kind" in has}


def _number(cell: str, column: str, path: Path, n: int) -> float:
    try:
        value = float(cell)
    except ValueError:
        raise DataFileError(f"{path}, line {n}, column {column}: {cell[:40]!r} is not a "
                            "number (expected a plain number in SI units, e.g. 1.5e-3)") \
            from None
    if not math.isfinite(value):
        raise DataFileError(f"{path}, line {n}, column {column}: {cell!r} is not a finite "
                            "number (NaN and infinity cannot be fitted)")
    return value


def _parse_row(cells, header, plan, path, n):
    if len(cells) != len(header):
        raise DataFileError(f"{path}, line {n}: {len(cells)} cells where the header has "
                            f"{len(header)} ({','.join(header)})")
    row = dict(zip(header, cells, strict=True))
    allowed = plan["allowed"]
    if plan["by_column"]:
        rk = row["kind"].lower()
        if rk not in ("iv", "cv"):
            raise DataFileError(f"{path}, line {n}, column kind: {row['kind']!r}; accepted "
                                "are iv and cv")
        if rk not in allowed:
            return None, {}, False  # a row of a kind not asked for: skipped
    elif len(allowed) == 1:
        rk = allowed[0]
    else:  # both column sets present, no kind column: the filled cells decide
        rk = "iv" if row.get("current_A", "") != "" else "cv"
    needed = IV_COLUMNS if rk == "iv" else CV_COLUMNS
    values = {}
    for column in needed:
        if row[column] == "":
            raise DataFileError(f"{path}, line {n}, column {column}: empty; an {rk.upper()} "
                                f"point needs {', '.join(needed)}")
        values[column] = _number(row[column], column, path, n)
    for column in NUMERIC:
        if column in row and column not in values and row[column] != "":
            values[column] = _number(row[column], column, path, n)
    if rk == "cv" and values["frequency_Hz"] <= 0:
        raise DataFileError(f"{path}, line {n}, column frequency_Hz: "
                            f"{row['frequency_Hz']!r}; a measurement frequency must be > 0")
    comp = False
    if "compliance" in row:
        flag = row["compliance"].lower()
        if flag not in _TRUE | _FALSE:
            raise DataFileError(f"{path}, line {n}, column compliance: {row['compliance']!r};"
                                " accepted are 0 and 1")
        comp = flag in _TRUE
    return rk, values, comp


def _check_usable(data: DataSet, kind: str) -> None:
    chosen = data.kinds if kind == "auto" else (kind,)
    counts = {k: int(np.count_nonzero(data.row_kind == k)) for k in chosen}
    if not any(counts.values()):
        raise DataFileError(f"{data.path}: no {kind.upper()} rows in it (rows of kind "
                            f"{', '.join(data.kinds) or 'none'})")
    for k, count in counts.items():
        if count == 1:
            raise DataFileError(f"{data.path}: a single {k.upper()} point (line "
                                f"{int(data.line_numbers[data.row_kind == k][0])}); a fit "
                                "needs a sweep of several points")
    rows = np.isin(data.row_kind, chosen)
    if data.compliance[rows].all():
        raise DataFileError(f"{data.path}: every point is flagged in compliance "
                            "(compliance = 1); none of them measures the device")
