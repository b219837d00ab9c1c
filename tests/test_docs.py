"""The repository stands on its own: every document a file cites is in the repository, and
every section of docs/physics.md that code cites exists (common practice, no source)."""

from __future__ import annotations

import re
import subprocess
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
_MD = re.compile(r"(?<![\w/.-])([\w./-]*[\w-]\.md)\b")
_SECTION = re.compile(r"docs/physics\.md §(\d+)")
_TEXT = (".py", ".md", ".toml", ".tcss", ".cfg", ".txt", ".yaml")


def _tracked() -> list[Path]:
    out = subprocess.run(["git", "ls-files"], cwd=ROOT, capture_output=True, text=True)
    if out.returncode == 0 and out.stdout.strip():
        names = out.stdout.split()
    else:  # not a git checkout (an unpacked sdist): every text file
        names = [str(p.relative_to(ROOT)) for p in ROOT.rglob("*") if p.is_file()
                 and ".venv" not in p.parts and ".git" not in p.parts]
    return [ROOT / n for n in names if n.endswith(_TEXT) and (ROOT / n).is_file()]


FILES = _tracked()


def test_every_cited_document_is_in_the_repository():
    missing = []
    for path in FILES:
        if path == Path(__file__).resolve():
            continue  # this file names documents in its own code
        text = path.read_text(encoding="utf-8", errors="replace")
        for name in set(_MD.findall(text)):
            if not ((ROOT / name).is_file() or (path.parent / name).is_file()):
                missing.append(f"{path.relative_to(ROOT)} cites {name}")
    assert FILES and not missing, "\n".join(missing)


def test_cited_physics_sections_exist():
    physics = (ROOT / "docs" / "physics.md").read_text(encoding="utf-8")
    sections = {int(n) for n in re.findall(r"^## (\d+)\. ", physics, re.MULTILINE)}
    assert len(sections) >= 10
    wrong = [f"{p.relative_to(ROOT)} cites §{n}" for p in FILES
             for n in _SECTION.findall(p.read_text(encoding="utf-8", errors="replace"))
             if int(n) not in sections]
    assert not wrong, "\n".join(wrong)


_READER_CALL = re.compile(
    r"\.(?:text|boolean|integer|number|quantity|quantity_list|area|temperature|choice|raw)"
    r"\(\s*\"([a-z_]+)\"")


def _documented(page: str) -> set[str]:
    return set(re.findall(r"`([A-Za-z_]+)`", (ROOT / "docs" / page).read_text(encoding="utf-8")))


def test_plan_format_page_names_every_key_the_plan_reader_accepts():
    """Keys read through planread.TableReader in sweeps/plan*.py, every step kind's KEYS
    and the instruments' rating keys: each appears in docs/plan-format.md."""
    from pnbench.sweeps import plan, planstep

    keys = set()
    for name in ("plan.py", "planstep.py"):
        keys |= set(_READER_CALL.findall((ROOT / "sweeps" / name).read_text(encoding="utf-8")))
    for kind_keys in planstep.KEYS.values():
        keys |= set(kind_keys)
    for ratings in plan.RATINGS.values():
        keys |= set(ratings)
    keys -= {"plan", "device", "limits", "steps", "instruments"}  # tables, not keys
    assert len(keys) > 40
    missing = sorted(keys - _documented("plan-format.md"))
    assert not missing, f"docs/plan-format.md does not mention {missing}"


def test_dialect_page_names_every_dialect_key():
    """Every key of every dialect table (drivers/dialect.py) appears in docs/dialects.md."""
    from pnbench.drivers import dialect

    keys = set(dialect._DIALECT_KEYS)
    for kinds in (dialect._COMMON_KINDS, dialect._SMU_KINDS, dialect._LCR_KINDS):
        keys |= set(kinds)
    missing = sorted(keys - _documented("dialects.md"))
    assert not missing, f"docs/dialects.md does not mention {missing}"


def test_run_folder_page_names_every_points_column():
    from pnbench.sweeps import store

    missing = sorted(set(store.COLUMNS) - _documented("run-folder.md"))
    assert not missing, f"docs/run-folder.md does not mention {missing}"
