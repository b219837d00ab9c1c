"""A non-editable install carries every module and the bundled data under `pnbench` only."""

from __future__ import annotations

import subprocess
import sys
import zipfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
FOLDERS = ("modeling", "drivers", "sweeps", "tui", "sim_configs")


def _build_wheel(out: Path) -> Path:
    subprocess.run(
        [sys.executable, "-m", "pip", "wheel", str(ROOT), "--no-deps", "-q", "-w", str(out)],
        check=True, capture_output=True, text=True,
    )
    return next(out.glob("pnbench-*.whl"))


def test_wheel_holds_only_pnbench_with_modules_and_data(tmp_path):
    wheel = _build_wheel(tmp_path / "dist")
    names = zipfile.ZipFile(wheel).namelist()
    tops = {n.split("/")[0] for n in names}
    assert tops == {"pnbench", wheel.name.split("-py3")[0] + ".dist-info"}, tops
    for folder in FOLDERS:
        for source in (ROOT / folder).rglob("*.py"):
            assert f"pnbench/{source.relative_to(ROOT).as_posix()}" in names, source
    for source in (ROOT / "pnbench").glob("*.py"):
        assert f"pnbench/{source.name}" in names, source
    data = [*ROOT.glob("sim_configs/*.toml"), *ROOT.glob("sim_configs/*.yaml"),
            *ROOT.glob("sim_configs/plans/*.toml")]
    assert data
    for path in data:
        assert f"pnbench/{path.relative_to(ROOT).as_posix()}" in names, path
    assert "pnbench/drivers/dialects/default.toml" in names
    assert "pnbench/tui/app/app.tcss" in names

    # Import the wheel's own copy from elsewhere, with the editable install hidden.
    unpacked = tmp_path / "site"
    zipfile.ZipFile(wheel).extractall(unpacked)
    probe = (
        "import sys\n"
        "sys.meta_path[:] = [f for f in sys.meta_path if 'editable' not in repr(f).lower()]\n"
        f"sys.path.insert(0, {str(unpacked)!r})\n"
        "import pnbench.errors, pnbench.modeling, pnbench.drivers.sim.bench, pnbench.sweeps\n"
        "import pnbench.tui.app.application, pnbench.tui.report\n"
        "from importlib import resources\n"
        "assert pnbench.tui.__file__.startswith(sys.path[0]), pnbench.tui.__file__\n"
        "names = [p.name for p in resources.files('pnbench.sim_configs').iterdir()]\n"
        "assert 'lh-vc510.toml' in names, names\n"
        "print('ok')\n"
    )
    out = subprocess.run([sys.executable, "-c", probe], cwd=tmp_path, capture_output=True,
                         text=True)
    assert out.returncode == 0, out.stderr
    assert out.stdout.strip() == "ok"
