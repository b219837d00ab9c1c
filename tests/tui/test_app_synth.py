"""A synthetic run written to the run-folder contract of DEVELOPERS.md, for app tests.

`SyntheticRun` writes run.json (atomically), points.csv and events.jsonl for a diode
model as a runner would, step by step, so `watch` can be tested against a folder that
another process (or thread) is writing. The points come from the exact model in
`pnbench.modeling`; the fit events carry the true values with a shrinking sigma. The
tests here check that the synthetic folder follows the contract as the engine's own
readers (`sweeps.store`) read it.
"""

from __future__ import annotations

import json
import os
import sys
import time
from pathlib import Path

import numpy as np

from pnbench.modeling import junction, smallsignal
from pnbench.modeling.params import DiodeParams

HEADER = ("step,index,kind,time_s,voltage_V,current_A,frequency_Hz,capacitance_F,"
          "conductance_S,compliance")

TRUE = DiodeParams(IS=2e-14, N=1.05, RS=0.8, CJO=4e-12, VJ=0.7, M=0.45, TT=5e-9)

STEPS = (
    ("forward", "iv_forward", [("iv", float(v), None) for v in np.linspace(0.2, 0.8, 25)]),
    ("reverse", "iv_reverse", [("iv", float(v), None) for v in np.linspace(0, -5, 11)]),
    ("cv", "cv", [("cv", float(v), 1e5) for v in np.linspace(-5, 0.3, 12)]),
    ("adm", "admittance", [("cv", v, f) for v in (0.5, 0.6) for f in (1e3, 1e4, 1e5, 1e6)]),
)


def _cell(value: float | None) -> str:
    return "" if value is None else repr(float(value))


class SyntheticRun:
    """Writes one run folder per the contract; `advance(n)` appends n more points."""

    def __init__(self, folder: Path, params: DiodeParams = TRUE, temperature_K=300.15):
        self.folder = Path(folder)
        self.folder.mkdir(parents=True, exist_ok=True)
        self.params = params
        self.temperature_K = temperature_K
        self.queue = [(name, kind, item) for name, kind, items in STEPS for item in items]
        self.done = {name: 0 for name, _, _ in STEPS}
        self.seq = 0
        self.t = 0.0
        self.status = "running"
        self.current: str | None = None
        (self.folder / "plan.toml").write_text("# synthetic\n", encoding="utf-8")
        with open(self.folder / "points.csv", "w", encoding="utf-8") as f:
            f.write(f"# temperature_K = {temperature_K}\n# device = synth\n{HEADER}\n")
        (self.folder / "events.jsonl").write_text("", encoding="utf-8")
        self.write_run()
        self.event("run_started")
        self.event("output", role="smu", on=True)

    @property
    def total(self) -> int:
        return sum(len(items) for _, _, items in STEPS)

    def write_run(self) -> None:
        doc = {
            "format": 1, "status": self.status, "reason": "",
            "device": {"name": "synth", "area_m2": None, "material": "Si",
                       "temperature_K": self.temperature_K, "notes": ""},
            "instruments": {"smu": {"resource": "TCPIP0::127.0.0.1::1::SOCKET",
                                    "backend": "@py", "dialect": None,
                                    "identity": "Synthetic Lab,SMU-0,0001,1.0"}},
            "software_version": "test", "started": "2026-01-01T00:00:00Z", "ended": None,
            "limits": {}, "outputs_off_confirmed": self.status != "running",
            "simulated": None, "resume_count": 0,
            "steps": [{"name": name, "kind": kind, "planned": len(items),
                       "done": self.done[name],
                       "status": ("running" if name == self.current else
                                  "completed" if self.done[name] == len(items) else
                                  "pending")}
                      for name, kind, items in STEPS],
        }
        tmp = self.folder / ".run.json.tmp"
        tmp.write_text(json.dumps(doc), encoding="utf-8")
        os.replace(tmp, self.folder / "run.json")

    def event(self, kind: str, step: str | None = None, **data) -> dict:
        self.seq += 1
        doc = {"seq": self.seq, "time_s": self.t, "kind": kind, "step": step, **data}
        with open(self.folder / "events.jsonl", "a", encoding="utf-8") as f:
            f.write(json.dumps(doc) + "\n")
        return doc

    def point_row(self, step: str, kind: str, v: float, f: float | None) -> dict:
        index = self.done[step]
        row = {"step": step, "index": index, "kind": kind, "time_s": self.t,
               "voltage_V": v, "current_A": None, "frequency_Hz": None,
               "capacitance_F": None, "conductance_S": None, "compliance": 0}
        if kind == "iv":
            row["current_A"] = float(junction.current(v, self.params, self.temperature_K))
        else:
            y = smallsignal.device_admittance(v, f, self.params, self.temperature_K)
            cp, gp = smallsignal.parallel_from_admittance(y, f)
            row.update(frequency_Hz=f, capacitance_F=float(cp), conductance_S=float(gp))
        return row

    def advance(self, count: int = 1) -> list[dict]:
        """Append up to `count` points (with step and fit events); returns the rows."""
        rows = []
        for _ in range(count):
            if not self.queue:
                self.finish()
                break
            step, kind_step, (kind, v, f) = self.queue.pop(0)
            if step != self.current:
                if self.current is not None:
                    self.event("step_finished", self.current, status="completed")
                self.current = step
                self.event("step_started", step, planned=self.done_planned(step))
                self.write_run()
            self.t += 0.01
            row = self.point_row(step, kind, v, f)
            with open(self.folder / "points.csv", "a", encoding="utf-8") as out:
                out.write(",".join(_cell(row[c]) if c not in ("step", "kind", "index",
                                                              "compliance")
                                   else str(row[c]) for c in HEADER.split(",")) + "\n")
            self.done[step] += 1
            rows.append(row)
            if self.done[step] % 5 == 0:
                self.event("fit", step, parameters=self.fit_parameters(step))
            if step == "reverse" and self.done[step] == 3:
                self.event("compliance", step, message="current at the compliance limit",
                           voltage_V=v)
        return rows

    def done_planned(self, step: str) -> int:
        return next(len(items) for name, _, items in STEPS if name == step)

    def fit_parameters(self, step: str) -> dict:
        n = self.done[step]
        names = {"forward": ("IS", "N", "RS"), "reverse": ("RSH",),
                 "cv": ("CJO", "VJ", "M"), "adm": ("TT",)}[step]
        out = {}
        for name in names:
            value = getattr(self.params, name)
            if name == "RSH":
                value = 5e9
            out[name] = {"value": value, "sigma": abs(value) * 0.5 / n, "settled": n >= 10}
        return out

    def finish(self, status: str = "completed") -> None:
        if self.status != "running":
            return
        if self.current is not None:
            self.event("step_finished", self.current, status="completed")
        self.event("output", role="smu", on=False)
        self.status = status
        self.current = None
        self.event("run_finished", status=status)
        self.write_run()


def _writer_main(folder: str, delay_s: float) -> None:
    """Entry point of a separate writer process (for the watch test)."""
    run = SyntheticRun(Path(folder))
    while run.queue:
        run.advance(2)
        time.sleep(delay_s)
    run.finish()


# ---------------------------------------------------------------------- tests
def test_synthetic_folder_reads_with_the_engine_readers(tmp_path):
    """The synthetic folder follows the contract as sweeps.store reads it (the contract
    of DEVELOPERS.md is the reference)."""
    from pnbench.sweeps import store

    run = SyntheticRun(tmp_path / "r")
    run.advance(1000)
    points = store.read_points(tmp_path / "r")
    assert len(points) == run.total
    assert {p.kind for p in points} == {"iv", "cv"}
    events = store.read_events(tmp_path / "r")
    assert [e.seq for e in events] == list(range(1, len(events) + 1))
    assert store.read_run(tmp_path / "r")["status"] == "completed"
    assert store.read_metadata(tmp_path / "r")["temperature_K"] == "300.15"


if __name__ == "__main__":
    _writer_main(sys.argv[1], float(sys.argv[2]))
