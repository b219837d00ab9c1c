"""Commands do not pay for imports they do not need: `pnbench --help` and `pnbench check
PLAN` load neither numpy, scipy, Textual nor matplotlib (each in a fresh interpreter,
since the test process has them all loaded already)."""

from __future__ import annotations

import json
import subprocess
import sys
from importlib import resources

import pytest

HEAVY = ("numpy", "scipy", "textual", "matplotlib")
_PROBE = """
import json, sys
from pnbench.tui import cli
try:
    cli.main({argv!r})
except SystemExit:
    pass
sys.stdout.flush()
print(json.dumps(sorted(m for m in {heavy!r} if m in sys.modules)), file=sys.stderr)
"""


def _heavy_modules_after(argv: list[str]) -> list[str]:
    out = subprocess.run([sys.executable, "-c", _PROBE.format(argv=argv, heavy=HEAVY)],
                         capture_output=True, text=True, timeout=120)
    return json.loads(out.stderr.strip().splitlines()[-1])


def test_help_loads_no_heavy_module():
    assert _heavy_modules_after(["--help"]) == []


@pytest.mark.parametrize("plan", ["example_full.toml", "lh-qt16.toml"])
def test_check_loads_no_heavy_module(plan):
    path = resources.files("pnbench.sim_configs") / "plans" / plan
    assert _heavy_modules_after(["check", str(path)]) == []
    assert _heavy_modules_after(["check", "--json", str(path)]) == []
