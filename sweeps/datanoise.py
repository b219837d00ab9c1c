"""The instruments' stated noise of a plain data file (`pnbench fit FILE`), from the file's
header comment lines or from a sidecar file beside it (docs/run-folder.md, "Data files").

The keys are the plan's instrument-table keys (`statednoise.PLAN_KEYS`, docs/plan-format.md)
under the role, so a statement reads the same in a plan, a header and a sidecar:

    # smu.current_noise_percent = 0.02
    # smu.current_noise_floor = 50 pA
    # smu.current_noise_floor_per_range = { "1 uA" = "2 pA", "1 mA" = "5 nA" }
    # lcr.noise_floor = 3 fF

A header value is read as a TOML value when it is one (numbers, quoted text, an inline
table) and as text otherwise (``50 pA``). The sidecar is ``STEM.noise.toml`` beside
``STEM.csv`` (any data file's name without its last suffix), with ``[smu]`` and ``[lcr]``
tables of the same keys. A role stated in both places is refused (which one was meant?);
`pnbench fit`'s --smu-noise and --lcr-noise win over either. Every problem names the
file, the line and the key (DataFileError, exit 2).
"""

from __future__ import annotations

import tomllib
from pathlib import Path

from pnbench.errors import DataFileError
from pnbench.modeling.stated import StatedNoise
from pnbench.sweeps.planread import Problems, TableReader
from pnbench.sweeps.statednoise import FIT_OF_ROLE, PLAN_KEYS, read_plan_noise
from pnbench.sweeps.tomllines import key_lines

SIDECAR_SUFFIX = ".noise.toml"


def sidecar_of(path: Path) -> Path:
    """Where the sidecar of the data file ``path`` is: STEM.noise.toml beside it."""
    return path.with_name(path.stem + SIDECAR_SUFFIX)


def stated_noise(path: Path, meta: dict[str, tuple[str, int]]
                 ) -> tuple[dict[str, StatedNoise], dict[str, str]]:
    """({"iv"|"cv": StatedNoise}, {"iv"|"cv": where it came from}) of the data file
    ``path`` with its header metadata ``meta`` (key -> (text, line))."""
    header = _from_header(path, meta)
    sidecar = sidecar_of(path)
    side = _from_sidecar(sidecar) if sidecar.is_file() else {}
    twice = sorted(set(header) & set(side))
    if twice:
        role = twice[0]
        line = min(n for k, (_, n) in meta.items() if k.startswith(role + "."))
        raise DataFileError(f"{path}, line {line}: the {role} noise is stated here and "
                            f"in {sidecar}; state it in one place")
    out, notes = {}, {}
    for role, noise in (*header.items(), *side.items()):
        fit = FIT_OF_ROLE[role]
        out[fit] = noise
        where = f"{path.name}'s header" if role in header else str(sidecar)
        notes[fit] = (f"{'I-V' if fit == 'iv' else 'C-V'} fits judged against the stated "
                      f"noise of {where} "
                      f"({'--smu-noise' if role == 'smu' else '--lcr-noise'} sets another)")
    return out, notes


def _from_header(path: Path, meta: dict[str, tuple[str, int]]) -> dict[str, StatedNoise]:
    tables: dict[str, dict] = {}
    lines: dict[tuple, int] = {}
    for key, (text, line) in meta.items():
        role, dot, name = key.partition(".")
        if not dot or role not in PLAN_KEYS:
            continue
        tables.setdefault(role, {})[name] = _value(text)
        lines[(role, name)] = line
        lines.setdefault((role,), line)
    return _read(tables, Problems(str(path), lines), f"{path}: the stated noise in its "
                 "header")


def _from_sidecar(sidecar: Path) -> dict[str, StatedNoise]:
    try:
        text = sidecar.read_text(encoding="utf-8")
        data = tomllib.loads(text)
    except (OSError, UnicodeDecodeError) as exc:
        raise DataFileError(f"{sidecar}: cannot read it ({exc})") from None
    except tomllib.TOMLDecodeError as exc:
        raise DataFileError(f"{sidecar}: not valid TOML ({exc})") from None
    problems = Problems(str(sidecar), key_lines(text))
    for key in sorted(set(data) - set(PLAN_KEYS)):
        problems.add((key,), f"unknown table; a noise sidecar has {', '.join(PLAN_KEYS)}")
    return _read({r: t for r, t in data.items() if r in PLAN_KEYS}, problems,
                 f"{sidecar}: the stated noise")


def _read(tables: dict, problems: Problems, what: str) -> dict[str, StatedNoise]:
    out = {}
    for role, table in tables.items():
        t = TableReader(table, (role,), problems)
        noise = read_plan_noise(t, role)
        t.finish()
        if noise is not None:
            out[role] = noise
        elif not problems.items:
            problems.add((role,), "states no noise")
    if problems.items:
        count = len(problems.items)
        raise DataFileError(f"{what}: {count} problem{'s' if count > 1 else ''}:\n  "
                            + "\n  ".join(problems.items))
    return out


def _value(text: str) -> object:
    """A header value: a TOML value when it parses as one, else the text itself."""
    try:
        return tomllib.loads(f"v = {text}")["v"]
    except tomllib.TOMLDecodeError:
        return text
