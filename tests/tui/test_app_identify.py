"""The Bench screen's identify goes through the bench layer a run opens its instruments
with, so it asks a VISA backend (here pyvisa-sim with the bundled canned bench) and the
simulated bench (``DEVICE@pnsim``, in the plan or from --simulate) the same way. The
identities compared are the canned replies of sim_configs/protocol_bench.yaml."""

from __future__ import annotations

import shutil
from importlib import resources
from pathlib import Path

from plantext import sweep_plan

from pnbench.drivers.sim.backend import REGISTRY
from pnbench.sweeps.plan import load_plan
from pnbench.tui.app.bench import identify_rows, plan_rows


def canned_backend(folder: Path) -> str:
    target = folder / "protocol_bench.yaml"
    with resources.as_file(resources.files("pnbench.sim_configs")
                           / "protocol_bench.yaml") as p:
        shutil.copy(p, target)
    return f"{target}@sim"


def plan_on(folder: Path, backend: str, smu: str = "TCPIP0::192.0.2.11::5025::SOCKET",
            lcr: str = "TCPIP0::192.0.2.12::5025::SOCKET") -> Path:
    instruments = "".join(f'[instruments.{role}]\nresource = "{resource}"\n'
                          f'backend = "{backend}"\ntimeout = "0.5 s"\n\n'
                          for role, resource in (("smu", smu), ("lcr", lcr)))
    path = folder / "plan.toml"
    path.write_text(sweep_plan("LH-QT16-id", 5, 11).replace("[limits]",
                                                             instruments + "[limits]"),
                    encoding="utf-8")
    return path


def test_a_visa_backend_answers_through_the_bench_layer(tmp_path):
    plan = load_plan(plan_on(tmp_path, canned_backend(tmp_path)))
    rows = identify_rows(plan_rows(plan), plan)
    found = {r.role: (r.state, r.identity) for r in rows}
    assert found == {"lcr": ("answered", "Harrow Lane Lab,protocol LCR,HL-0002,1.0"),
                     "smu": ("answered", "Harrow Lane Lab,protocol SMU,HL-0001,1.0")}


def test_an_instrument_that_is_not_there_is_its_rows_error_and_the_others_answer(tmp_path):
    plan = load_plan(plan_on(tmp_path, canned_backend(tmp_path),
                             smu="TCPIP0::192.0.2.99::5025::SOCKET"))
    rows = {r.role: r for r in identify_rows(plan_rows(plan), plan)}
    assert rows["smu"].state.startswith("error: ") and "192.0.2.99" in rows["smu"].state
    assert rows["smu"].identity == ""
    assert rows["lcr"].state == "answered"


def test_the_simulated_bench_in_the_plan_answers_as_with_simulate(tmp_path):
    """A plan naming DUT@pnsim itself and the same plan with --simulate DUT get the same
    identities, and identify leaves no simulated bench running."""
    backend = "lh-vc510@pnsim:time_scale=0"
    in_plan = load_plan(plan_on(tmp_path, backend, smu="PNSIM::SMU", lcr="PNSIM::LCR"))
    direct = identify_rows(plan_rows(in_plan), in_plan)
    assert [r.state for r in direct] == ["answered", "answered"]
    simulated = identify_rows(plan_rows(in_plan, "lh-vc510"), in_plan, "lh-vc510")
    assert [r.identity for r in simulated] == [r.identity for r in direct]
    assert "simulated SMU" in direct[1].identity
    assert REGISTRY.running(backend) is None


async def test_the_bench_screen_identifies_a_visa_backend_at_80x24(tmp_path):
    from pnbench.tui.app.application import PnbenchApp

    app = PnbenchApp(plan_on(tmp_path, canned_backend(tmp_path)), out_dir=tmp_path / "r")
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.press("f2", "i")
        for _ in range(200):
            if app.screen._identified:
                break
            await pilot.pause(0.05)
        await pilot.pause(0.6)
        text = str(app.screen.query_one("#bench-instruments").render())
        assert text.count("[answered]") == 2
        assert "Harrow Lane Lab,protocol SMU,HL-0001,1.0" in text
    assert app.live is None  # identifying never starts a sweep
