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
