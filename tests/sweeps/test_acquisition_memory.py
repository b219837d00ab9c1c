"""The acquisition side of a long run: what stays in memory per point, and what the
acquisition thread leaves to other threads (fsync, run.json), so that a night of points
costs flat memory and no pause waits for the disk (issue: overnight scale)."""

from __future__ import annotations

import json
import os
import threading
import time
import tracemalloc
from pathlib import Path

import numpy as np
from plantext import forward, limits, plan_text
from sweepfake import FakeBench, FakeSmu

from pnbench.sweeps import fitmodel
from pnbench.sweeps.events import EventBus
from pnbench.sweeps.fitfeed import FitWorker
from pnbench.sweeps.plan import parse_plan
from pnbench.sweeps.record import Point
from pnbench.sweeps.runner import Runner
from pnbench.sweeps.store import RunFolder, read_run

PROJECT = Path(__file__).resolve().parents[2]


def wait_for(condition, timeout_s: float = 30.0) -> bool:
    """Poll ``condition`` until it holds (a generous bound: the machine may be loaded)."""
    end = time.monotonic() + timeout_s
    while time.monotonic() < end:
        if condition():
            return True
        time.sleep(0.01)
    return condition()


def test_columns_keep_the_kind_s_values_at_eight_bytes_each():
    """An I-V step keeps voltage, current and the compliance flag (17 bytes a point), a
    C-V step voltage, frequency, C and G (33 bytes); absent cells read as NaN and a view
    taken while points are appended holds the rows there were."""
    iv = fitmodel.Columns("iv_forward")
    cv = fitmodel.Columns("cv")
    for k in range(1000):
        iv.append(Point("f", k, "iv", 0.0, 0.001 * k, None if k == 3 else 1e-6 * k,
                        compliance=k == 5))
        cv.append(Point("c", k, "cv", 0.0, -0.01 * k, None, 1e5, 1e-12, 1e-9))
    assert set(iv.view()) == {"voltage_V", "current_A", "compliance"}
    assert set(cv.view()) == {"voltage_V", "frequency_Hz", "capacitance_F", "conductance_S",
                              "compliance"}
    assert iv.nbytes() == 17 * 1000 and cv.nbytes() == 33 * 1000
    col = iv.view(2)
    assert np.isnan(col["current_A"][1]) and col["current_A"][2] == 4e-6
    assert col["compliance"].tolist() == [k == 5 for k in range(2, 1000)]
    assert fitmodel.Columns("iv_reverse", temperature=True).names[-1] == "temperature_K"


def test_columns_read_while_another_thread_appends():
    """A view is consistent (every column the same length, the rows in order) however
    the appending thread interleaves with it."""
    cols = fitmodel.Columns("cv")
    n = 20000
    done = threading.Event()

    def writer() -> None:
        for k in range(n):
            cols.append(Point("c", k, "cv", 0.0, float(k), None, float(k), float(k), float(k)))
        done.set()

    threading.Thread(target=writer).start()
    seen = 0
    while not done.is_set() or seen < n:
        view = cols.view(seen)
        lengths = {len(v) for v in view.values()}
        assert len(lengths) == 1
        got = view["voltage_V"]
        assert np.array_equal(got, np.arange(seen, seen + got.size, dtype=float))
        assert np.array_equal(view["conductance_S"], got)
        seen += got.size
    assert seen == n


def _plan(points: int):
    text = plan_text(forward("fwd", start="0.3 V", stop="0.75 V", points=points),
                     limits=limits(max_reverse_voltage=None, max_power="1 W"))
    return parse_plan(text, "t.toml")


def test_no_object_per_point_stays_in_memory(tmp_path):
    """Between a run's 1500th and its 4500th point, the memory kept by the run's own code
    (runner, run folder, events, fit worker: allocations in the project outside the
    modeling package) grows by the typed columns alone: 17 bytes an I-V point, with the
    columns' growth margin. One object kept per point (a Point is over 100 bytes, a
    list slot 8) would show. Fitting on; the fitter's own arrays (modeling) are the
    step's, freed at its end. Common practice, no source."""
    first, last = 1500, 4500
    plan = _plan(last)
    folder = RunFolder.create(tmp_path, plan.text, {"device": {"name": "d"}}, {})
    bus = EventBus(sink=folder.append_event)
    snaps: dict[int, tracemalloc.Snapshot] = {}
    count = [0]

    def listener(event) -> None:
        if event.kind == "point":
            count[0] += 1
            if count[0] in (first, last):
                snaps[count[0]] = tracemalloc.take_snapshot()

    bus.add_listener(listener)
    fit = FitWorker(plan.steps, bus, temperature_K=300.15, snapshot_interval_s=0.05)
    bench = FakeBench(roles={"smu": FakeSmu(noise_rel=1e-3, io_delay_s=2e-5)})
    tracemalloc.start(1)
    try:
        outcome = Runner(plan, folder, bench, bus, fit=fit, time_scale=0.0).run()
    finally:
        tracemalloc.stop()
        folder.close()
    assert outcome.status == "completed" and count[0] == last
    # the run's own code by folder: a filter on the whole checkout would also take in a
    # virtual environment kept inside it (numpy's short-lived allocations)
    ours = [tracemalloc.Filter(True, str(PROJECT / part / "*"))
            for part in ("pnbench", "drivers", "sweeps", "tui")]
    diff = snaps[last].filter_traces(ours).compare_to(snaps[first].filter_traces(ours),
                                                      "filename")
    grown = {s.traceback[0].filename: s.size_diff for s in diff if s.size_diff > 0}
    columns = grown.pop(str(PROJECT / "sweeps" / "fitcolumns.py"), 0)
    assert columns <= 17 * 1.25 * (last - first) + 4096, columns
    assert sum(grown.values()) < 2 * (last - first), grown


def test_the_acquisition_thread_never_fsyncs_between_points(tmp_path, monkeypatch):
    """fsync and the run.json refresh run on the run folder's own thread: a run's points
    and step ends call neither on the acquisition thread, yet points.csv is fsynced
    and run.json carries every step's done count once the folder is closed."""
    calls: list[str] = []
    real_fsync = os.fsync

    def fsync(fd):
        calls.append(threading.current_thread().name)
        return real_fsync(fd)

    monkeypatch.setattr(os, "fsync", fsync)
    plan = _plan(400)
    folder = RunFolder.create(tmp_path, plan.text, {"device": {"name": "d"}}, {})
    bus = EventBus(sink=folder.append_event)
    between: list[str] = []
    seen = [0]

    def listener(event) -> None:
        if event.kind == "point":
            seen[0] += 1
            if seen[0] == 2:
                calls.clear()
            if seen[0] == 399:
                between.extend(calls)

    bus.add_listener(listener)
    runner = Runner(plan, folder, FakeBench(roles={"smu": FakeSmu(io_delay_s=1e-3)}), bus)
    assert runner.run().status == "completed"
    folder.close()
    acquisition = threading.current_thread().name
    assert acquisition not in between
    assert calls and "pnbench-sync" in calls + between
    run = read_run(folder.path)
    assert run["status"] == "completed" and run["steps"][0]["done"] == 400


def test_run_json_soon_is_written_by_the_background_thread(tmp_path):
    """update_run_soon returns before run.json changes; the folder's thread writes the
    latest document, and close() writes one still pending."""
    folder = RunFolder.create(tmp_path, "", {"device": {"name": "d"}}, {})
    path = folder.path / "run.json"
    for k in range(50):
        folder.update_run_soon(progress=k)
    assert wait_for(lambda: json.loads(path.read_text()).get("progress") == 49)
    folder.update_run(status="paused")  # a change of state: written before it returns
    assert json.loads(path.read_text())["status"] == "paused"
    folder.update_run_soon(progress=50)
    folder.close()
    doc = json.loads(path.read_text())
    assert doc["progress"] == 50 and doc["status"] == "paused"


def test_points_are_fsynced_without_a_call(tmp_path, monkeypatch):
    """A point appended and nothing else: the folder's thread fsyncs points.csv (a
    power cut then takes at most about a second of points)."""
    synced: list[int] = []
    real_fsync = os.fsync
    monkeypatch.setattr(os, "fsync", lambda fd: (synced.append(fd), real_fsync(fd))[1])
    folder = RunFolder.create(tmp_path, "", {"device": {"name": "d"}}, {})
    synced.clear()
    folder.append_point(Point("a", 0, "iv", 0.0, 0.1, 1e-9))
    points_fd = folder._points.fileno()
    assert wait_for(lambda: points_fd in synced)
    folder.close()
