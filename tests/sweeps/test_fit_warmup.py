"""What the fit thread may not do beside the acquisition (issue: overnight scale): import
modules (an import takes module locks, and an extension module loads with the
interpreter lock held, stalling the acquisition thread), keep the interpreter lock for
Python's default 5 ms whenever the acquisition thread wakes, let the cyclic collector
scan every module object in one pass, or call a BLAS that spins helper threads while
the interpreter lock is held. Each check runs in a fresh
interpreter, since the test process has everything imported already."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

TESTS = Path(__file__).resolve().parents[1]

_RUN = """
import gc, json, sys, tempfile, threading
from pathlib import Path
sys.path.insert(0, {tests!r})
from plantext import cv, forward, limits, plan_text

imports = []  # (thread, module) of every import the fit thread starts while acquiring
acquiring = [True]


class Spy:
    def find_spec(self, name, path=None, target=None):
        if acquiring[0] and threading.current_thread().name == "pnbench-fit":
            imports.append(name)
        return None


from pnbench.sweeps.launch import Launch
from pnbench.sweeps.plan import parse_plan

sys.meta_path.insert(0, Spy())
text = plan_text(forward("fwd", points=60), cv("cv", bias_points=60, frequencies=None,
                 frequency="100 kHz"), forward("fwd2", points=60, stop="0.7 V"),
                 device={{"name": "LH-VC510"}}, limits=limits(max_power="1 W"))
plan = parse_plan(text, "t.toml").on_simulated_bench("lh-vc510@pnsim:time_scale=0")
seen = [0]


switch = []  # the interpreter's switch interval at the first point
frozen = []  # objects the cyclic collector leaves out then


def listener(event):
    if event.kind == "point":
        seen[0] += 1
        if seen[0] == 1:
            switch.append(sys.getswitchinterval())
            frozen.append(gc.get_freeze_count())
        if seen[0] == plan.total_points:
            acquiring[0] = False  # the run's end work may import what it needs
    elif event.kind == "fit":
        fits.append(event.step)


fits = []
with tempfile.TemporaryDirectory() as tmp:
    Launch.new(plan, out_dir=Path(tmp), listeners=[listener]).run()
switch.append(sys.getswitchinterval())
frozen.append(gc.get_freeze_count())
print(json.dumps({{"imports": imports, "points": seen[0], "fits": sorted(set(fits)),
                  "switch": switch, "frozen": frozen}}))
"""


def test_the_fit_thread_imports_nothing_and_yields_often_while_points_are_taken():
    """The live fits' modules are imported when the fit worker starts, before the run's
    first point (`fitmodel.warm_up`): while points are taken the fit thread starts no
    import, through the first fit of every step kind and the provisional model at each
    step's end."""
    out = subprocess.run([sys.executable, "-c", _RUN.format(tests=str(TESTS))],
                         capture_output=True, text=True, timeout=300)
    assert out.returncode == 0, out.stderr[-2000:]
    got = json.loads(out.stdout.strip().splitlines()[-1])
    assert got["points"] == 180 and got["fits"] == ["cv", "fwd", "fwd2"]
    assert got["imports"] == []
    # while points are taken the interpreter hands its lock on every millisecond (not
    # Python's 5 ms), and the run's end gives the default back
    assert got["switch"] == [0.001, 0.005]
    # and the cyclic collector leaves out what existed at the start (modules, plan,
    # bench) until the run's end
    assert got["frozen"][0] > 10_000 and got["frozen"][1] == 0


_BLAS = """
import ctypes, json
import pnbench.sweeps.runner  # numpy comes in through pnbench, as in every command
names = ("openblas_get_num_threads", "openblas_get_num_threads64_",
         "scipy_openblas_get_num_threads64_", "scipy_openblas_get_num_threads")
found = []
for lib in sorted({line.split()[-1] for line in open("/proc/self/maps")
                   if "openblas" in line.lower() and ".so" in line}):
    handle = ctypes.CDLL(lib)
    found += [getattr(handle, n)() for n in names if hasattr(handle, n)]
print(json.dumps(found))
"""


@pytest.mark.skipif(not Path("/proc/self/maps").exists(), reason="reads /proc (Linux)")
def test_numpy_s_blas_runs_in_one_thread():
    """pnbench sets the BLAS thread count to one before numpy loads (the environment may
    still choose otherwise): checked by asking the OpenBLAS numpy ships with (its
    get_num_threads call); skipped for a numpy built on another BLAS."""
    env = {k: v for k, v in os.environ.items()
           if k not in ("OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "OMP_NUM_THREADS")}
    out = subprocess.run([sys.executable, "-c", _BLAS], capture_output=True, text=True,
                         timeout=120, env=env)
    assert out.returncode == 0, out.stderr[-2000:]
    found = json.loads(out.stdout.strip().splitlines()[-1])
    if not found:
        pytest.skip("numpy's BLAS here is not an OpenBLAS that reports its threads")
    assert found == [1] * len(found)
