"""The run record: exact round trips, torn lines cut on reopen, malformed lines named,
columns, atomic documents and folders, the lock, and following a live run."""

from __future__ import annotations

import json
import os
import threading
from datetime import UTC, datetime

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from pnbench.errors import BadInput, DataFileError
from pnbench.sweeps.events import Event, EventBus
from pnbench.sweeps.record import (
    FolderTail,
    Point,
    RunFolder,
    folder_name,
    read_columns,
    read_events,
    read_metadata,
    read_points,
    read_run,
)
from pnbench.sweeps.record.layout import HEADER, STAGING


def make(tmp_path, name="LH-T1"):
    return RunFolder.create(tmp_path, "[device]\nname = 'x'\n",
                            {"device": {"name": name}, "status": "running"},
                            {"device": name, "temperature_K": 300.15})


def test_layout_and_metadata(tmp_path):
    folder = make(tmp_path)
    folder.close()
    names = {p.name for p in folder.path.iterdir()}
    assert {"plan.toml", "run.json", "points.csv", "events.jsonl", "run.log"} <= names
    assert read_metadata(folder.path) == {"device": "LH-T1", "temperature_K": "300.15"}
    lines = (folder.path / "points.csv").read_text().splitlines()
    assert lines[-1] == HEADER
    assert read_run(folder.path)["format"] == 1


def test_folder_name_from_start_time_and_device():
    start = datetime(2031, 4, 5, 6, 7, 8, tzinfo=UTC)
    assert folder_name(start, "LH D/1 (b)") == "20310405-060708_LH_D_1_b"


def test_same_second_gets_a_second_folder(tmp_path):
    start = datetime(2031, 4, 5, 6, 7, 8, tzinfo=UTC)
    a = RunFolder.create(tmp_path, "", {"device": {"name": "X"}}, {}, started=start)
    b = RunFolder.create(tmp_path, "", {"device": {"name": "X"}}, {}, started=start)
    assert a.path != b.path and b.path.name.endswith("-2")
    a.close()
    b.close()


_floats = st.floats(allow_nan=False, allow_infinity=False)


@settings(max_examples=200, deadline=None)
@given(st.integers(0, 10**6), _floats, _floats, st.one_of(st.none(), _floats),
       st.booleans())
def test_point_rows_round_trip_exactly(index, v, i, c, comp):
    p = Point("fwd", index, "iv", 1.5, v, i, None, c, None, comp)
    assert Point.from_row(p.to_row()) == p


def test_torn_last_line_is_cut_on_reopen(tmp_path):
    folder = make(tmp_path)
    for k in range(5):
        folder.append_point(Point("fwd", k, "iv", 0.1 * k, 0.1 * k, 1e-9 * k))
    bus = EventBus(sink=folder.append_event)
    bus.emit("run_started")
    folder.close()
    with open(folder.path / "points.csv", "a") as f:
        f.write("fwd,5,iv,0.5,0.5,1")  # killed mid-write
    with open(folder.path / "events.jsonl", "a") as f:
        f.write('{"seq": 2, "ti')
    assert len(read_points(folder.path)) == 5  # readers skip the torn line
    again = RunFolder.reopen(folder.path)
    again.append_point(Point("fwd", 5, "iv", 0.5, 0.5, 5e-9))
    again.close()
    assert [p.index for p in read_points(folder.path)] == list(range(6))
    assert [e.seq for e in read_events(folder.path)] == [1]
    assert "removed" in (folder.path / "run.log").read_text()


def test_run_json_is_replaced_atomically(tmp_path):
    folder = make(tmp_path)
    stop = threading.Event()
    seen = []

    def reader():
        while not stop.is_set():
            seen.append(json.loads((folder.path / "run.json").read_text())["n"])

    folder.update_run(n=0)
    t = threading.Thread(target=reader)
    t.start()
    for n in range(200):
        folder.update_run(n=n, padding="x" * (n * 50))
    stop.set()
    t.join()
    folder.close()
    assert seen and seen == sorted(seen)
    assert not [p for p in folder.path.iterdir() if p.name.endswith(".tmp")]


def test_a_folder_open_for_writing_is_locked(tmp_path):
    folder = make(tmp_path)
    with pytest.raises(BadInput, match=f"in use by pnbench process {os.getpid()}"):
        RunFolder.reopen(folder.path)
    folder.close()
    RunFolder.reopen(folder.path).close()


def test_folder_tail_follows_a_live_run(tmp_path):
    folder = make(tmp_path)
    tail = FolderTail(folder.path)
    first = tail.poll()
    assert len(first.points) == 0 and first.run is not None
    assert first.metadata["device"] == "LH-T1"
    folder.append_point(Point("a", 0, "iv", 0.0, 0.1, 1e-9))
    folder._points.write("a,1,iv,0.1,0.2")  # half a row, not yet flushed as a line
    folder._points.flush()
    got = tail.poll().points
    assert got.index.tolist() == [0]
    folder._points.write(",2e-09,,,,0\n")
    folder._points.flush()
    EventBus(sink=folder.append_event).emit("warning", "a", message="hot")
    batch = tail.poll()
    assert [(p.index, p.current_A) for p in batch.points.rows()] == [(1, 2e-9)]
    assert [(e.kind, e.message) for e in batch.events] == [("warning", "hot")]
    assert batch.run is None  # run.json has not changed
    folder.close()


def test_damaged_folders_name_the_file(tmp_path):
    with pytest.raises(DataFileError, match="no run.json"):
        read_run(tmp_path)
    folder = make(tmp_path)
    folder.close()
    with open(folder.path / "points.csv", "a") as f:
        f.write("fwd,zero,iv,0,,,,,,0\n")
    with pytest.raises(DataFileError, match=r"points.csv, line 4: row cannot be read"):
        read_points(folder.path)


def test_a_malformed_event_line_is_named(tmp_path):
    folder = make(tmp_path)
    bus = EventBus(sink=folder.append_event)
    bus.emit("run_started")
    folder.close()
    with open(folder.path / "events.jsonl", "a") as f:
        f.write("{not json\n")
        f.write('{"seq": 3, "time_s": 1.0, "kind": "warning", "step": null, "message": "x"}\n')
    with pytest.raises(DataFileError, match=r"events.jsonl, line 2: unreadable event"):
        read_events(folder.path)
    batch = FolderTail(folder.path).poll()  # a live viewer says so and goes on
    assert [e.seq for e in batch.events] == [1, 3]
    assert any("line 2: unreadable event" in p for p in batch.problems)


def test_columns_read_every_row_with_codes_and_nan_for_empty_cells(tmp_path):
    folder = make(tmp_path)
    for k in range(300):  # interleaved steps (worst case for the step codes)
        if k % 2:
            folder.append_point(Point("fwd", k // 2, "iv", 0.01 * k, 0.5, 1e-3 * k,
                                      compliance=k % 7 == 1))
        else:
            folder.append_point(Point("cv", k // 2, "cv", 0.01 * k, -1.0, None, 1e5,
                                      1e-12 * k, 1e-6))
    folder.close()
    cols = read_columns(folder.path)
    assert len(cols) == 300 and set(cols.step_names) == {"fwd", "cv"}
    fwd = cols.select(cols.step_mask("fwd"))
    assert fwd.index.tolist() == list(range(150))
    assert fwd.current_A.tolist() == [1e-3 * k for k in range(1, 300, 2)]
    assert np.isnan(fwd.capacitance_F).all() and not np.isnan(fwd.current_A).any()
    assert fwd.compliance.tolist() == [k % 7 == 1 for k in range(1, 300, 2)]
    cv = cols.select(cols.kind_mask("cv"))
    assert np.isnan(cv.current_A).all() and cv.frequency_Hz.tolist() == [1e5] * 150
    assert list(cols.rows()) == read_points(folder.path)
    assert cols.row(1) == Point("fwd", 0, "iv", 0.01, 0.5, 1e-3, compliance=True)


def test_columns_of_a_large_file_read_in_blocks(tmp_path, monkeypatch):
    """Many blocks: rows cut between two blocks are read whole, once."""
    from pnbench.sweeps.record import columns

    monkeypatch.setattr(columns, "BLOCK_BYTES", 1000)
    folder = make(tmp_path)
    for k in range(2000):
        folder.append_point(Point("fwd", k, "iv", 0.001 * k, 0.001 * k, 1e-9 * k))
    folder.close()
    cols = read_columns(folder.path)
    assert cols.index.tolist() == list(range(2000))
    assert np.allclose(cols.voltage_V, 0.001 * np.arange(2000))


def test_a_new_folder_appears_only_with_its_run_json(tmp_path):
    folder = make(tmp_path)
    assert (folder.path / "run.json").is_file() and not folder.path.name.startswith(".")
    assert [p.name for p in tmp_path.iterdir()] == [folder.path.name]  # no staging left
    folder.update_run(status="completed")  # files opened before the rename still work
    folder.append_point(Point("a", 0, "iv", 0.0, 0.1, 1e-9))
    folder.close()
    assert read_run(folder.path)["status"] == "completed"
    assert len(read_points(folder.path)) == 1


def test_a_folder_killed_while_being_created_says_nothing_was_measured(tmp_path):
    partial = tmp_path / STAGING / "20310405-060708_X.123"
    partial.mkdir(parents=True)
    (partial / "plan.toml").write_text("# plan\n")
    with pytest.raises(DataFileError, match="nothing was measured here"):
        read_run(partial)


def test_run_info_is_typed_and_reads_like_the_document(tmp_path):
    folder = make(tmp_path)
    folder.update_run(status="interrupted", steps=[{"name": "a", "kind": "iv_forward",
                                                    "planned": 5, "done": 2,
                                                    "status": "interrupted"}],
                      finishing={"status": "aborted", "reason": "x"}, extra_key=1)
    folder.close()
    info = read_run(folder.path)
    assert info.status == "interrupted" and info.end_status == "aborted"
    assert info.steps[0].planned == 5 and info.steps[0].status == "interrupted"
    assert info["extra_key"] == 1 and info.get("missing", 7) == 7


def test_events_are_numbered_without_gaps_across_threads(tmp_path):
    folder = make(tmp_path)
    bus = EventBus(sink=folder.append_event, start_seq=10)
    got = []
    bus.add_listener(got.append)

    def emit_many():
        for _ in range(200):
            bus.emit("warning", None, message="x")
            bus.emit("point", "s", index=0)

    threads = [threading.Thread(target=emit_many) for _ in range(4)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    folder.close()
    written = read_events(folder.path)
    assert [e.seq for e in written] == list(range(11, 811))
    assert len(got) == 1600
    assert Event.from_json_dict(written[0].to_json_dict()) == written[0]


def test_columns_not_asked_for_read_as_nan_and_take_no_memory(tmp_path):
    folder = make(tmp_path)
    for k in range(50):
        folder.append_point(Point("fwd", k, "iv", 0.1 * k, 0.01 * k, 1e-9 * k))
    folder.close()
    cols = read_columns(folder.path, fields=("voltage_V", "current_A"))
    assert cols.voltage_V.tolist() == [0.01 * k for k in range(50)]
    assert np.isnan(cols.time_s).all() and (cols.index == -1).all()
    assert cols.time_s.strides == (0,)  # one value seen 50 times, not 50 values
    assert len(cols.select(cols.step_mask("fwd")).time_s) == 50


def test_columns_of_a_file_that_grows_while_it_is_read(tmp_path, monkeypatch):
    """A live run appends rows between the count of the lines and their parse: the
    rows there were at the count are read, a row cut there is a torn tail, and the rows
    appended after are left for the next read (they used to overflow the columns)."""
    from pnbench.sweeps.record import columns

    monkeypatch.setattr(columns, "BLOCK_BYTES", 700)  # the parse takes several blocks
    folder = make(tmp_path)
    for k in range(40):
        folder.append_point(Point("fwd", k, "iv", 0.1 * k, 0.01 * k, 1e-9 * k))
    folder.close()
    path = folder.path / "points.csv"
    with open(path, "a") as f:
        f.write("fwd,40,iv,4.0,0.4")  # a row still being written
    counted = columns._count_lines

    def count_then_grow(p):
        out = counted(p)
        with open(p, "a") as f:  # the writer goes on: the row completes, more follow
            f.write(",4e-08,,,,0\n")
            f.writelines(Point("fwd", k, "iv", 0.1 * k, 0.01 * k, 1e-9 * k).to_row()
                         for k in range(41, 400))
        return out

    monkeypatch.setattr(columns, "_count_lines", count_then_grow)
    cols = read_columns(folder.path)
    assert cols.index.tolist() == list(range(40)) and cols.torn
    monkeypatch.setattr(columns, "_count_lines", counted)
    again = read_columns(folder.path)
    assert again.index.tolist() == list(range(400)) and not again.torn


def test_columns_read_while_another_thread_appends(tmp_path):
    """Reads racing a writer that appends rows in pieces (cut anywhere, as a buffered
    writer may leave them) always give whole rows, in order, from the first on."""
    folder = make(tmp_path)
    folder.close()
    path = folder.path / "points.csv"
    text = "".join(Point("fwd", k, "iv", 1e-3 * k, 1e-4 * k, 1e-12 * k).to_row()
                   for k in range(20_000))
    done = threading.Event()

    def writer():
        with open(path, "a") as f:
            for a in range(0, len(text), 997):  # pieces that cut rows anywhere
                f.write(text[a:a + 997])
                f.flush()
        done.set()

    thread = threading.Thread(target=writer)
    thread.start()
    seen = [0]
    while not done.is_set():
        cols = read_columns(folder.path)
        assert cols.index.tolist() == list(range(len(cols)))
        assert np.array_equal(cols.voltage_V, 1e-4 * np.arange(len(cols)))
        assert len(cols) >= seen[-1]
        seen.append(len(cols))
    thread.join()
    last = read_columns(folder.path)
    assert len(last) == 20_000 and not last.torn
