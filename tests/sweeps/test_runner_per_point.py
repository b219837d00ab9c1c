"""What the runner does per SMU point, counted: one message to the instrument, one reply
read, one row written and flushed to points.csv before the next level is sent, one
point event. A real `Smu` role over a `Session` on a stand-in resource (no socket), so
the counts are the drivers' and the runner's own. Common practice, no source (the
durability rule is docs/run-folder.md's).
"""

from __future__ import annotations

import math
from pathlib import Path

from plantext import forward, limits, plan_text
from sweepfake import FakeBench

from pnbench.drivers import dialect as dl
from pnbench.drivers.roles import Smu
from pnbench.drivers.session import Session
from pnbench.sweeps.events import EventBus
from pnbench.sweeps.plan import parse_plan
from pnbench.sweeps.record import layout
from pnbench.sweeps.runner import Runner
from pnbench.sweeps.store import RunFolder

POINTS = 40


class Diode:
    """A pyvisa resource stand-in: a diode behind the default dialect's SMU commands.
    Each set-and-read message notes how many rows points.csv held when it came."""

    timeout = 1000

    def __init__(self) -> None:
        self.level = 0.0
        self.sent: list[str] = []
        self.reads = 0
        self.points_csv: Path | None = None
        self.rows_on_disk: list[int] = []
        self._last = ""

    def write(self, message: str) -> None:
        self.sent.append(message)
        self._last = message
        head = ":SOURce:VOLTage:LEVel "
        if message.startswith(head):
            self.level = float(message[len(head):].split(";")[0])
            if ":READ?" in message and self.points_csv is not None:
                text = self.points_csv.read_text(encoding="utf-8")
                self.rows_on_disk.append(sum(1 for line in text.splitlines()
                                             if line[:1].isalpha() and "," in line
                                             and not line.startswith("step,")))

    def read(self) -> str:
        self.reads += 1
        m = self._last
        if m.endswith("*OPC?"):
            return "1\n"
        if m.endswith(":OUTPut:STATe?"):
            return "0\n"
        if "ERRor" in m:
            return '0,"No error"\n'
        i = 1e-14 * (math.exp(self.level / 0.02585) - 1)
        return f"{self.level!r},{i!r};0\n"

    def close(self) -> None:
        pass


def test_one_message_one_reply_one_flushed_row_and_one_event_per_point(tmp_path):
    plan = parse_plan(plan_text(forward("fwd", start="0.3 V", stop="0.6 V", points=POINTS),
                                limits=limits(max_power="1 W")), "t.toml")
    dialect = dl.load_dialect()
    resource = Diode()
    smu = Smu(Session(resource, "fake::smu", dialect, "fake"), dialect)
    smu.ramp_time_scale = 0.0
    folder = RunFolder.create(tmp_path, plan.text, {"device": {"name": "LH-T1"}}, {})
    resource.points_csv = folder.path / layout.POINTS
    bus = EventBus(sink=folder.append_event)
    seen = []
    bus.add_listener(seen.append)
    runner = Runner(plan, folder, FakeBench(roles={"smu": smu}), bus, time_scale=0.0)
    sent_before = len(resource.sent)
    reads_before = resource.reads
    outcome = runner.run()
    folder.close()
    assert outcome.status == "completed"
    point_messages = [m for m in resource.sent[sent_before:] if ":READ?" in m]
    assert len(point_messages) == POINTS  # one set-and-read message a point
    # every point's row is on disk (flushed) before the next level is sent
    assert resource.rows_on_disk == list(range(POINTS))
    assert sum(e.kind == "point" for e in seen) == POINTS
    # one reply read a point; the rest are the step's own queries (errors, ramp, off)
    others = sum(":READ?" not in m and "?" in m for m in resource.sent[sent_before:])
    assert resource.reads - reads_before == POINTS + others
