"""The app's live feed at overnight scale: points taken in batches as columns, the plots'
data bounded (thinned for display, every point still counted), the log bounded with a
count of the rest. The diode curve here is the Shockley law, I = IS (exp(V / (N Vt)) - 1)
(Sze & Ng, Physics of Semiconductor Devices, 3rd ed., eq. 2.70), with made-up IS and N;
nothing is compared with it, it only gives the points a realistic shape."""

from __future__ import annotations

import math

import numpy as np

from pnbench.sweeps import events as ev
from pnbench.tui.app.columns import CAPACITY, Columns, display_keep
from pnbench.tui.app.intake import batches, point_columns
from pnbench.tui.app.plots import plot_data
from pnbench.tui.app.state import IV_CELLS, RunState

VT = 0.025852  # kT/q at 300 K, V


def iv_events(step: str, n: int, start: int = 0, t0: float = 0.0, seed: int = 0,
              compliance_from: float = math.inf) -> list[ev.PointTaken]:
    rng = np.random.default_rng(seed)
    v = np.linspace(0.0, 0.8, n)
    i = 1e-14 * np.expm1(v / (1.02 * VT)) * (1 + 0.01 * rng.standard_normal(n)) + 1e-12
    return [ev.PointTaken(seq=start + k, time_s=t0 + 1e-3 * k, step=step, index=k,
                          point_kind="iv", voltage_V=float(v[k]), current_A=float(i[k]),
                          compliance=bool(v[k] >= compliance_from), planned=n)
            for k in range(n)]


def cv_events(step: str, n: int, t0: float = 0.0) -> list[ev.PointTaken]:
    v = np.linspace(-5.0, 0.0, n)
    c = 10e-12 / (1 - v / 0.7) ** 0.5
    return [ev.PointTaken(seq=k, time_s=t0 + 1e-3 * k, step=step, index=k, point_kind="cv",
                          voltage_V=float(v[k]), frequency_Hz=1e5 if k % 2 else 1e6,
                          capacitance_F=float(c[k]), conductance_S=1e-9 * (1 + k % 3))
            for k in range(n)]


def test_a_batch_of_point_events_gives_what_one_by_one_gives():
    stream = [ev.StepStarted(seq=0, step="fwd", step_kind="iv_forward", planned=40),
              *iv_events("fwd", 40, compliance_from=0.7),
              ev.StepStarted(seq=50, step="cv", step_kind="cv", planned=30),
              *cv_events("cv", 30, t0=1.0)]
    one, many = RunState(), RunState()
    for event in stream:
        one.apply_event(event)
    shapes = []
    for item in batches(stream):
        shapes.append(type(item).__name__)
        if isinstance(item, ev.Event):
            many.apply_event(item)
        else:
            many.add_points(item)
    assert shapes == ["StepStarted", "PointColumns", "StepStarted", "PointColumns"]
    for kind in ("iv", "cv"):
        a, b = getattr(one, kind), getattr(many, kind)
        assert a.step_names == b.step_names and list(a.step_ids) == list(b.step_ids)
        for name in a.names:
            assert np.array_equal(a.column(name), b.column(name), equal_nan=True), name
    assert many.point_count == one.point_count == 70
    assert {s: p.done for s, p in many.steps.items()} == {"fwd": 40, "cv": 30}
    assert many.last_time_s == one.last_time_s
    assert int(many.iv.column("compliance").sum()) == 5


def test_a_point_without_a_kind_is_cv_when_it_has_a_capacitance():
    bare = ev.PointTaken(step="x", point_kind="", voltage_V=-1.0, capacitance_F=1e-12,
                         frequency_Hz=1e5)
    cols = point_columns([bare, ev.PointTaken(step="x", point_kind="", voltage_V=0.5,
                                              current_A=1e-6)])
    assert list(cols.kinds()) == ["cv", "iv"]


def test_columns_stay_bounded_and_count_every_point():
    """A night of repeated forward sweeps: the kept points never pass the capacity, the
    total counts every one, and the kept ones still look like all of them: every point
    has a kept one of the same step within a few of the finest grid's cells (in V and
    log |I|), and the newest point of the run is kept."""
    cols = Columns(("voltage_V", "current_A", "time_s", "compliance"), IV_CELLS)
    every_v, every_logi, every_step = [], [], []
    for repeat in range(12):
        pts = iv_events(f"fwd{repeat % 4}", 9000, seed=repeat)
        v = np.array([p.voltage_V for p in pts])
        i = np.array([p.current_A for p in pts])
        cols.extend({"voltage_V": v, "current_A": i, "time_s": np.arange(v.size) * 1e-3,
                     "compliance": np.zeros(v.size)}, np.array([p.step for p in pts]))
        assert len(cols) <= CAPACITY
        every_v.append(v)
        every_logi.append(np.log10(i))
        every_step += [p.step for p in pts]
    assert cols.total == 12 * 9000 and cols.thinned and len(cols) <= CAPACITY
    assert cols.column("voltage_V")[-1] == every_v[-1][-1]  # the newest is kept
    v_all, logi_all = np.concatenate(every_v), np.concatenate(every_logi)
    v_kept, logi_kept = cols.column("voltage_V"), np.log10(cols.column("current_A"))
    kept_steps = np.array([cols.step_of(k) for k in range(len(cols))])
    sample = np.random.default_rng(1).choice(v_all.size, 400, replace=False)
    span_v, span_i = np.ptp(v_all), np.ptp(logi_all)
    for k in sample:
        mine = kept_steps == every_step[k]
        distance = np.maximum(np.abs(v_kept[mine] - v_all[k]) / span_v,
                              np.abs(logi_kept[mine] - logi_all[k]) / span_i)
        assert distance.min() <= 4.0 / cols.grid


def test_small_steps_are_kept_whole_and_thinning_never_passes_its_target():
    rng = np.random.default_rng(3)
    n = 30000
    ids = np.repeat(np.arange(3), [n - 120, 60, 60]).astype(np.int32)
    data = {"x": rng.uniform(size=n), "y": rng.uniform(size=n)}  # noise fills every cell
    keep, grid = display_keep(data, ids, (("x", "lin"), ("y", "lin")), 5000)
    assert len(keep) <= 5000 and np.all(np.diff(keep) > 0)
    assert grid < 1024  # the finest grid could not free the room: it went coarser
    assert np.isin(np.arange(n - 120, n), keep).all()  # both small steps, whole


def test_the_plot_of_a_thinned_run_spans_what_the_run_spans():
    state = RunState()
    state.set_plan_steps([("fwd", "iv_forward", 0)])
    pts = iv_events("fwd", 60000, compliance_from=0.79)
    for item in batches(pts):
        state.add_points(item)
    assert state.point_count == 60000 and len(state.iv) <= CAPACITY
    data = plot_data("fwd", state.snapshot())
    measured = next(s for s in data.series if s.label == "measured")
    flagged = next(s for s in data.series if s.label == "in compliance")
    # within a cell of the ends (the thinning keeps the newest point of a cell)
    assert measured.x.min() < 0.01 and 0.79 > measured.x.max() > 0.78
    assert flagged.x.max() == 0.8 and len(flagged.x) >= 1


class StreamLive:
    """A stand-in for the app's LiveRun that hands out a long recorded stream, as much
    as the real one's queue would hold at each drain."""

    def __init__(self, stream: list, per_drain: int):
        self.stream, self.per_drain, self.running, self.run_dir = stream, per_drain, False, None
        self.drains: list[int] = []

    def start(self) -> None:
        self.running = True

    def drain(self, limit: int = 20000) -> list:
        out = self.stream[:min(limit, self.per_drain)]
        del self.stream[:len(out)]
        self.drains.append(len(out))
        self.running = bool(self.stream)
        return out

    def failure(self):
        return None

    def outputs(self):
        return None

    def close(self) -> None:
        self.running = False

    pause = resume = abort = answer = wait = close


def long_stream(points_per_step: int, steps: int, compliance_events: int) -> list:
    out: list = [ev.RunStarted(seq=0)]
    for k in range(steps):
        name = f"fwd{k}"
        out.append(ev.StepStarted(seq=1, step=name, step_kind="iv_forward",
                                  planned=points_per_step))
        out += iv_events(name, points_per_step, t0=100.0 * k, seed=k)
        out += [ev.Compliance(seq=2, step=name, time_s=100.0 * k + 99, index=j,
                              voltage_V=0.8, current_A=0.1, limit=0.1, count=j + 1)
                for j in range(compliance_events // steps)]
        out.append(ev.StepFinished(seq=3, step=name, done=points_per_step,
                                   planned=points_per_step))
    out.append(ev.RunFinished(seq=4, status="completed", outputs_off_confirmed=True))
    return out


async def test_the_run_screen_takes_a_long_stream_in_batches_at_80x24(tmp_path):
    """60 000 points and 1 200 compliance events through the app's drain timer: every
    point is counted on screen, the plots keep at most their capacity, the log holds
    its last lines and says how many earlier ones it left out."""
    from plantext import sweep_plan
    from textual.widgets import RichLog, Static

    from pnbench.tui.app.application import PnbenchApp
    from pnbench.tui.app.screens.run import LOG_LINES

    plan = tmp_path / "plan.toml"
    plan.write_text(sweep_plan("LH-QT16-feed", 40, 11), encoding="utf-8")
    stream = long_stream(20000, 3, 1200)
    made: list[StreamLive] = []

    def factory(_plan, **_options):
        made.append(StreamLive(list(stream), per_drain=7000))
        return made[-1]

    app = PnbenchApp(plan, out_dir=tmp_path / "runs", autostart=True, live_factory=factory)
    async with app.run_test(size=(80, 24)) as pilot:
        for _ in range(400):
            if app.state.finished and not made[0].running:
                break
            await pilot.pause(0.05)
        assert app.state.point_count == 60000 and app.state.status == "completed"
        assert len(app.state.iv) <= CAPACITY and app.state.iv.thinned
        assert max(made[0].drains) == 7000  # whole batches, not a point at a time

        def summary() -> str:
            return str(app.screen.query_one("#progress-summary", Static).render())

        for _ in range(100):  # the ended run is drawn at the next tick (a loaded machine
            if "60000 pts" in summary():  # may be slow to give the timer its turn)
                break
            await pilot.pause(0.05)
        assert "60000 pts" in summary()
        await pilot.press("p", "p")  # the log panel
        log = app.screen.query_one(RichLog)
        assert len(log.lines) <= LOG_LINES
        title = str(app.screen.query_one("#panel-title", Static).render())
        earlier = app.state.log_total - LOG_LINES
        assert earlier > 600 and f"+{earlier} earlier in events.jsonl" in title


def test_words_are_set_only_when_changed_and_laid_out_only_when_their_size_may_change():
    """Common practice, no source: a redraw of the same words costs nothing, and a
    layout pass (the screen's costliest step after the plot) only when rows change."""
    from types import SimpleNamespace

    from pnbench.tui.app.widgets.text import set_text

    calls = []
    widget = SimpleNamespace(size=SimpleNamespace(width=20), display=True,
                             update=lambda text, layout: calls.append((text, layout)))
    set_text(widget, "12 pts")
    set_text(widget, "12 pts")
    set_text(widget, "13 pts")
    set_text(widget, "13 pts and a line longer than twenty")  # wraps to two rows
    set_text(widget, "two\nlines")
    set_text(widget, "two\nLINES")
    widget.display = False
    set_text(widget, "hidden\nthree\nrows")
    assert calls == [("12 pts", True), ("13 pts", False),
                     ("13 pts and a line longer than twenty", True), ("two\nlines", False),
                     ("two\nLINES", False), ("hidden\nthree\nrows", False)]
