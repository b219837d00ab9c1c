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


_FIT_PROBE = """
import json, sys
import numpy as np
from pnbench.modeling import joint, junction
from pnbench.modeling.params import DiodeParams
v = np.linspace(0.3, 0.75, 200)
i = junction.current(v, DiodeParams(IS=4e-15, N=1.03, RS=0.42))
i = i * (1 + 1e-3 * np.random.default_rng(1).standard_normal(v.size))
model = joint.fit_run({"iv_forward": {"voltage_V": v, "current_A": i}})
print(json.dumps(["IS" in model.values,
                  sorted(m for m in ("scipy.stats", "matplotlib", "textual")
                         if m in sys.modules)]))
"""


def test_fitting_a_run_loads_no_statistics_package():
    """The run's final fit happens after its last point: loading scipy.stats there
    (about 50 MB and a second) would lengthen every run's end; the chi-square tail it
    needs comes from scipy.special."""
    out = subprocess.run([sys.executable, "-c", _FIT_PROBE], capture_output=True,
                         text=True, timeout=120)
    assert json.loads(out.stdout.strip().splitlines()[-1]) == [True, []], out.stderr[-500:]


def test_the_chi_square_tail_is_scipy_stats_one():
    """scipy.special.chdtrc against scipy.stats.chi2.sf (the function it replaces)."""
    from scipy import special, stats

    for x, k in [(10.0, 5), (1e4, 9990), (5.0, 1), (1e6, 999_990), (0.0, 3), (123.4, 100)]:
        assert special.chdtrc(k, x) == pytest.approx(stats.chi2.sf(x, k), rel=1e-12)
