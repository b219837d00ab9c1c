"""points.csv: one row per point written by the runner, read back by column.

`Point` is one row (the runner writes them one at a time). `PointColumns` is the whole
file as numpy columns, which is how every reader takes it: `read_columns` parses the file
in blocks with numpy's C parser, so a million points read in about a second, and its
memory is the columns plus one block, never one Python object per row. A malformed row
raises DataFileError naming the file and the line; a torn last line (a write cut short
by a kill, or a row of a live run still being written) is left out and said in ``torn``.
A file that grows while it is read (a run in progress) is read as it was when its lines
were counted: the rows appended since are left for the next read.
"""

from __future__ import annotations

import io
import math
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from pnbench.errors import DataFileError
from pnbench.sweeps.record.layout import COLUMNS, HEADER, HEADER_T

#: bytes parsed at once (bounds the memory a read needs beyond its columns)
BLOCK_BYTES = 4 << 20
_FLOATS = ("time_s", "voltage_V", "current_A", "frequency_Hz", "capacitance_F",
           "conductance_S")


@dataclass(frozen=True, slots=True)
class Point:
    """One row of points.csv. ``kind`` is ``iv`` or ``cv``; absent cells are None."""

    step: str
    index: int
    kind: str
    time_s: float
    voltage_V: float | None = None
    current_A: float | None = None
    frequency_Hz: float | None = None
    capacitance_F: float | None = None
    conductance_S: float | None = None
    compliance: bool = False
    temperature_K: float | None = None  # a run over temperature: the stage's reading

    def to_row(self, temperature: bool = False) -> str:
        """The CSV line, newline included (floats in shortest round-trip form); with
        ``temperature`` the temperature_K cell of a run over temperature ends it."""
        v, i, f, c, g = (self.voltage_V, self.current_A, self.frequency_Hz,
                         self.capacitance_F, self.conductance_S)
        # the cells written inline (this runs once a point): _cell's rule, None -> ""
        return (f"{self.step},{self.index},{self.kind},{self.time_s:.6f},"
                f"{'' if v is None else repr(float(v))},"
                f"{'' if i is None else repr(float(i))},"
                f"{'' if f is None else repr(float(f))},"
                f"{'' if c is None else repr(float(c))},"
                f"{'' if g is None else repr(float(g))},{1 if self.compliance else 0}"
                + (f",{_cell(self.temperature_K)}\n" if temperature else "\n"))

    @classmethod
    def from_row(cls, line: str) -> Point:
        cells = line.rstrip("\r\n").split(",")
        if len(cells) not in (len(COLUMNS), len(COLUMNS) + 1):
            raise ValueError(f"{len(cells)} cells, expected {len(COLUMNS)} (or "
                             f"{len(COLUMNS) + 1} with temperature_K)")
        if cells[9] not in ("0", "1"):
            raise ValueError(f"compliance {cells[9]!r}, expected 0 or 1")
        t = float(cells[10]) if len(cells) > len(COLUMNS) and cells[10] else None
        return cls(cells[0], int(cells[1]), cells[2], float(cells[3]),
                   *(float(c) if c else None for c in cells[4:9]), cells[9] == "1", t)


def _cell(value: float | None) -> str:
    return "" if value is None else repr(float(value))


def _none(value: float) -> float | None:
    return None if math.isnan(value) else float(value)


@dataclass(frozen=True)
class PointColumns:
    """Points as columns (SI units; NaN where a cell is empty), in the order taken.

    ``step`` and ``kind`` are small integer codes into ``step_names`` and
    ``kind_names``; `step_of`, `kind_of` and `select` read them by name."""

    step_names: tuple[str, ...]
    step_code: np.ndarray
    kind_names: tuple[str, ...]
    kind_code: np.ndarray
    index: np.ndarray
    time_s: np.ndarray
    voltage_V: np.ndarray
    current_A: np.ndarray
    frequency_Hz: np.ndarray
    capacitance_F: np.ndarray
    conductance_S: np.ndarray
    compliance: np.ndarray
    #: the stage's reading at each point (a run over temperature; NaN otherwise)
    temperature_K: np.ndarray
    #: file line of the first data row (rows follow one per line)
    first_line: int = 0
    metadata: dict[str, str] = field(default_factory=dict)
    torn: bool = False

    def __len__(self) -> int:
        return int(self.index.size)

    @classmethod
    def empty(cls) -> PointColumns:
        return _assemble([], [], {}, 0, {}, False)

    def step_mask(self, *names: str) -> np.ndarray:
        codes = [k for k, n in enumerate(self.step_names) if n in names]
        return np.isin(self.step_code, codes)

    def kind_mask(self, kind: str) -> np.ndarray:
        codes = [k for k, n in enumerate(self.kind_names) if n == kind]
        return np.isin(self.kind_code, codes)

    def steps(self) -> np.ndarray:
        """The step name of every row (an object array; for small selections)."""
        return np.asarray(self.step_names, dtype=object)[self.step_code] \
            if self.step_names else np.array([], dtype=object)

    def kinds(self) -> np.ndarray:
        return np.asarray(self.kind_names, dtype=object)[self.kind_code] \
            if self.kind_names else np.array([], dtype=object)

    def select(self, mask: np.ndarray) -> PointColumns:
        """The rows where ``mask`` holds (or rows at the given indices)."""
        count = int(np.count_nonzero(mask)) if mask.dtype == bool else len(mask)
        cut = {name: _take(getattr(self, name), mask, count) for name in _ARRAYS}
        return PointColumns(self.step_names, kind_names=self.kind_names,
                            first_line=self.first_line, metadata=self.metadata,
                            torn=self.torn, **cut)

    def row(self, n: int) -> Point:
        return Point(self.step_names[self.step_code[n]], int(self.index[n]),
                     self.kind_names[self.kind_code[n]], float(self.time_s[n]),
                     *(_none(getattr(self, c)[n]) for c in _FLOATS[1:]),
                     bool(self.compliance[n]), _none(self.temperature_K[n]))

    def rows(self) -> Iterator[Point]:
        """Row objects, one at a time (for small selections: a step's tail, a table)."""
        for n in range(len(self)):
            yield self.row(n)

    def fit_columns(self) -> dict[str, np.ndarray]:
        """The mapping the fitters take (voltage_V ... conductance_S, compliance)."""
        return {name: getattr(self, name) for name in (*_FLOATS[1:], "compliance",
                                                       "temperature_K")}


_ARRAYS = ("step_code", "kind_code", "index", *_FLOATS, "compliance", "temperature_K")
#: the numeric fields a reader may choose (the others it skips, costing no memory)
FIELDS = ("index", *_FLOATS)
#: the last column of a run over temperature (read when the header has it)
TEMPERATURE = "temperature_K"
#: file column of each number (step and kind are columns 0 and 2)
_COLUMN = {"index": 1, "time_s": 3, "voltage_V": 4, "current_A": 5, "frequency_Hz": 6,
           "capacitance_F": 7, "conductance_S": 8, "compliance": 9, TEMPERATURE: 10}


def _take(values: np.ndarray, mask: np.ndarray, count: int) -> np.ndarray:
    if values.ndim == 1 and values.strides == (0,):  # a skipped field: still nothing
        return np.broadcast_to(values[:1] if values.size else values, (count,))
    return values[mask]


def _has_temperature(path: Path) -> bool:
    """Whether the header of the points.csv at ``path`` ends with temperature_K."""
    try:
        with open(path, "rb") as f:
            for raw in f:
                text = raw.decode("utf-8", "replace").strip()
                if text and not text.startswith("#"):
                    return text == HEADER_T
    except OSError:
        pass
    return False


def _skipped(name: str, n: int) -> np.ndarray:
    fill = np.int64(-1) if name == "index" else np.float64(np.nan)
    return np.broadcast_to(fill, (n,))


def read_columns(path: Path, fields: tuple[str, ...] | None = None) -> PointColumns:
    """Every complete row of the points.csv at ``path``, as columns. ``fields`` names the
    numeric columns wanted (all of `FIELDS` by default); the others read as NaN (index:
    -1) and take no memory. The file is read twice in blocks: once to count its lines,
    so the columns are allocated once, then to parse it, up to the bytes counted (rows a
    live run appends meanwhile are left for the next read; a row cut by the count's end
    is a torn last line)."""
    wanted = FIELDS if fields is None else tuple(f for f in FIELDS if f in fields)
    if (fields is None or TEMPERATURE in fields) and _has_temperature(path):
        wanted += (TEMPERATURE,)
    lines_at_most, size = _count_lines(path)
    floats = (*_FLOATS, TEMPERATURE)
    out = {name: np.empty(lines_at_most, dtype=np.float64 if name in floats else
                          np.int64 if name == "index" else np.int32)
           for name in ("step_code", "kind_code", *wanted)}
    out["compliance"] = np.empty(lines_at_most, dtype=bool)
    metadata: dict[str, str] = {}
    header_line = 0
    steps: dict[bytes, int] = {}
    kinds: dict[bytes, int] = {}
    line = filled = 0
    torn = False
    with open(path, "rb") as handle:
        rest = b""
        while True:
            chunk = handle.read(min(BLOCK_BYTES, size))
            size -= len(chunk)
            data = rest + chunk
            if not chunk:
                torn = bool(data.strip())
                break
            end = data.rfind(b"\n") + 1
            body, rest = data[:end], data[end:]
            del data
            if not header_line:
                body, line, header_line = _head(body, path, metadata, line)
                if not header_line:
                    rest = body + rest
                    continue
            if body:
                block = _parse_block(body, path, line, steps, kinds, wanted)
                count = len(block["compliance"])
                for name, values in block.items():
                    out[name][filled:filled + count] = values
                filled += count
                line += body.count(b"\n")
    cols = {name: values[:filled] for name, values in out.items()}
    for name in (*FIELDS, TEMPERATURE):
        if name not in cols:
            cols[name] = _skipped(name, filled)
    return PointColumns(tuple(n.decode("utf-8") for n in steps),
                        kind_names=tuple(k.decode("utf-8") for k in kinds),
                        first_line=header_line + 1, metadata=metadata, torn=torn, **cols)


def _count_lines(path: Path) -> tuple[int, int]:
    """(newlines, bytes) of the file now."""
    try:
        handle = open(path, "rb")
    except FileNotFoundError:
        raise DataFileError(f"{path}: missing; not a pnbench run folder") from None
    except OSError as exc:
        raise DataFileError(f"{path}: cannot be read ({exc.strerror or exc})") from None
    count = size = 0
    with handle:
        while chunk := handle.read(BLOCK_BYTES):
            count += chunk.count(b"\n")
            size += len(chunk)
    return count, size


def _head(body: bytes, path: Path, metadata: dict, line: int) -> tuple[bytes, int, int]:
    """Metadata and header lines at the top: (the rest, lines read, header's line)."""
    pos = 0
    while pos < len(body):
        nl = body.find(b"\n", pos)
        raw = body[pos:nl]
        line += 1
        pos = nl + 1
        if b"\x00" in raw:
            raise DataFileError(f"{path}, line {line}: binary content (a NUL byte), not "
                                "UTF-8 text; the file is damaged")
        try:
            text = raw.decode("utf-8").strip()
        except UnicodeDecodeError as exc:
            raise DataFileError(f"{path}, line {line}: not UTF-8 text (byte {exc.start}); "
                                "the file is damaged") from None
        if not text:
            continue
        if text.startswith("#"):
            key, sep, value = text[1:].partition("=")
            if sep:
                metadata[key.strip()] = value.strip()
            continue
        if text not in (HEADER, HEADER_T):
            raise DataFileError(f"{path}, line {line}: header is {text[:120]!r}, expected "
                                f"{HEADER!r} (a run over temperature adds ',temperature_K')")
        return body[pos:], line, line
    return b"", line, 0


def _parse_block(body: bytes, path: Path, line: int, steps: dict, kinds: dict,
                 fields: tuple[str, ...] = FIELDS) -> dict[str, np.ndarray]:
    """One block of complete rows (``line`` rows of the file before it), as columns."""
    with_t = body[:body.find(b"\n")].count(b",") == len(COLUMNS)  # temperature_K last
    parsed = tuple(f for f in fields if f != TEMPERATURE or with_t)
    names = (*parsed, "compliance")
    filled = body.replace(b",,", b",nan,").replace(b",,", b",nan,")
    if with_t:
        filled = filled.replace(b",\n", b",nan\n")
    try:
        numbers = np.loadtxt(io.BytesIO(filled), delimiter=",",
                             usecols=[_COLUMN[n] for n in names], dtype=float, ndmin=2,
                             comments=None)
        del filled
        text = np.loadtxt(io.BytesIO(body), delimiter=",", usecols=(0, 2), dtype="S64",
                          ndmin=2, comments=None)
        if len(numbers) != body.count(b"\n"):
            raise ValueError("blank lines")
    except (ValueError, UnicodeDecodeError):
        _find_bad_line(body, path, line)
        raise  # pragma: no cover - _find_bad_line raises
    if (np.char.str_len(text) >= 64).any():  # a long step name: split those rows here
        rows = body.split(b"\n")[:-1]
        cells = [r.split(b",", 3) for r in rows]
        text = np.array([[c[0], c[2]] for c in cells], dtype=object)
    compliance = numbers[:, -1]
    if not np.isin(compliance, (0.0, 1.0)).all():
        _find_bad_line(body, path, line)
    out = {"step_code": _codes(text[:, 0], steps), "kind_code": _codes(text[:, 1], kinds)}
    for k, name in enumerate(parsed):
        out[name] = numbers[:, k].astype(np.int64) if name == "index" else numbers[:, k]
    if TEMPERATURE in fields and not with_t:
        out[TEMPERATURE] = np.full(len(numbers), np.nan)
    out["compliance"] = compliance == 1.0
    return out


def _codes(values: np.ndarray, table: dict[bytes, int]) -> np.ndarray:
    """Integer codes of a text column whose values come in long runs (steps, kinds)."""
    out = np.empty(len(values), dtype=np.int32)
    if not len(values):
        return out
    starts = np.flatnonzero(np.concatenate(([True], values[1:] != values[:-1])))
    if len(starts) > 64:  # interleaved: one comparison per distinct value
        todo = np.ones(len(values), dtype=bool)
        while todo.any():
            value = values[int(np.argmax(todo))]
            same = values == value
            out[same] = table.setdefault(bytes(value), len(table))
            todo &= ~same
        return out
    ends = np.append(starts[1:], len(values))
    for a, b in zip(starts, ends, strict=True):
        out[a:b] = table.setdefault(bytes(values[a]), len(table))
    return out


def _find_bad_line(body: bytes, path: Path, line: int) -> None:
    """Raise DataFileError for the first row of ``body`` that is not a point."""
    for n, raw in enumerate(body.split(b"\n")[:-1], start=line + 1):
        try:
            Point.from_row(raw.decode("utf-8"))
        except UnicodeDecodeError as exc:
            raise DataFileError(f"{path}, line {n}: not UTF-8 text (byte {exc.start}); the "
                                "file is damaged") from None
        except ValueError as exc:
            shown = raw[:120].decode("utf-8", "replace")
            raise DataFileError(f"{path}, line {n}: row cannot be read ({exc}): "
                                f"{shown!r}") from None
    raise DataFileError(f"{path}: rows after line {line} cannot be read")


def _assemble(blocks: list[dict], step_names, kinds, first_line, metadata,
              torn) -> PointColumns:
    n = sum(len(b["compliance"]) for b in blocks)
    cols = {}
    for name in _ARRAYS:
        parts = [b[name] for b in blocks if name in b]
        if parts:
            cols[name] = np.concatenate(parts)
        elif name in (*FIELDS, TEMPERATURE):
            cols[name] = _skipped(name, n)
        else:
            cols[name] = np.empty(0, dtype=bool if name == "compliance" else np.int32)
    blocks.clear()
    names = tuple(s.decode("utf-8") for s in step_names)
    kind_names = tuple(k.decode("utf-8") for k in kinds)
    return PointColumns(names, kind_names=kind_names, first_line=first_line,
                        metadata=metadata, torn=torn, **cols)
