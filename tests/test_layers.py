"""The layers import one way: modeling <- drivers <- sweeps <- tui (docs/architecture.md).

Common practice, no source: a static scan of every import statement (ast), so a module
that is never imported by a test is checked too.
"""

from __future__ import annotations

import ast
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
#: Folder -> (package name, rank); a module may import packages of its rank or below.
LAYERS = {"modeling": 0, "drivers": 1, "sweeps": 2, "tui": 3}
#: Third-party packages modeling may use besides the standard library.
MODELING_THIRD_PARTY = {"numpy", "scipy"}


def _modules():
    for folder in (*LAYERS, "pnbench"):
        for path in sorted((ROOT / folder).rglob("*.py")):
            yield folder, path


def _imports(path: Path) -> list[str]:
    tree = ast.parse(path.read_text(encoding="utf-8"), str(path))
    names = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names += [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
            names.append(node.module)
    return names


def _layer_of(name: str) -> str | None:
    parts = name.split(".")
    if parts[0] == "pnbench" and len(parts) > 1 and parts[1] in LAYERS:
        return parts[1]
    return None


MODULES = list(_modules())


def test_the_scan_sees_every_layer():
    """Guards the scan itself: each layer has modules, and some import a lower layer."""
    folders = {folder for folder, _ in MODULES}
    assert folders == {*LAYERS, "pnbench"}
    uses = {_layer_of(n) for f, p in MODULES if f == "tui" for n in _imports(p)}
    assert {"modeling", "drivers", "sweeps"} <= uses


@pytest.mark.parametrize(("folder", "path"), MODULES,
                         ids=[str(p.relative_to(ROOT)) for _, p in MODULES])
def test_no_module_imports_upward(folder, path):
    rank = LAYERS.get(folder, -1)
    for name in _imports(path):
        target = _layer_of(name)
        if target is not None:
            assert LAYERS[target] <= rank, f"{path.relative_to(ROOT)} imports {name}"
        if name.split(".")[0] == "textual":
            assert folder == "tui", f"{path.relative_to(ROOT)} imports Textual"


@pytest.mark.parametrize("path", [p for f, p in MODULES if f == "modeling"],
                         ids=lambda p: p.name)
def test_modeling_uses_only_numpy_scipy_and_the_standard_library(path):
    for name in _imports(path):
        top = name.split(".")[0]
        allowed = (top in sys.stdlib_module_names or top in MODELING_THIRD_PARTY
                   or name == "pnbench.errors" or name.startswith("pnbench.modeling"))
        assert allowed, f"{path.name} imports {name}"
        assert top not in {"socket", "subprocess", "asyncio"}, f"{path.name} imports {top}"
    # A lock is fine in modeling (DEVELOPERS.md); a thread is not.
    tree = ast.parse(path.read_text(encoding="utf-8"))
    threads = [n for n in ast.walk(tree) if isinstance(n, (ast.Attribute, ast.Name))
               and (getattr(n, "attr", None) or getattr(n, "id", None)) == "Thread"]
    assert not threads, f"{path.name} starts a thread"
