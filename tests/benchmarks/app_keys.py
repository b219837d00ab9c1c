"""How fast the app answers a key while a simulated sweep streams points at time scale 0.

A key event is posted to the app as the terminal driver would post it; the latency is the
time until the run screen's action for that key has run. The same is measured with the
app idle (no sweep) in the same process: the ratio says what the running sweep costs
the keyboard. The aim of the design is every key answered within 100 ms at time scale 0.

    python tests/benchmarks/app_keys.py

Last line: one JSON object with the figures.
"""

from __future__ import annotations

import asyncio
import json
import statistics
import sys
import tempfile
import time
from pathlib import Path

from textual import events

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
from plantext import sweep_plan  # noqa: E402

from pnbench.tui.app.application import PnbenchApp

PLAN = sweep_plan("LH-QT16-bench", 4000, 4000, reverse_stop="-10 V",
                  title="key latency benchmark")

PRESSES = 40
GAP_S = 0.05


async def latencies(app: PnbenchApp, pilot, running: bool) -> tuple[list[float], int]:
    screen = app.screen
    seen: list[float] = []
    original = screen.action_next_panel

    def timed() -> None:
        seen.append(time.perf_counter())
        original()

    screen.action_next_panel = timed
    out = []
    points_before = app.state.point_count
    for _ in range(PRESSES):
        if running and not (app.live and app.live.running):
            break
        count = len(seen)
        sent = time.perf_counter()
        app._driver.send_message(events.Key("p", "p"))
        while len(seen) == count:
            await asyncio.sleep(0.0005)
        out.append(seen[-1] - sent)
        await pilot.pause(GAP_S)
    return out, app.state.point_count - points_before


async def main() -> dict:
    with tempfile.TemporaryDirectory() as tmp:
        plan = Path(tmp) / "plan.toml"
        plan.write_text(PLAN, encoding="utf-8")
        app = PnbenchApp(plan, bench="lh-qt16@pnsim:time_scale=0", out_dir=Path(tmp) / "r")
        async with app.run_test(size=(80, 24)) as pilot:
            await pilot.pause(0.5)
            idle, _ = await latencies(app, pilot, running=False)
            await pilot.press("s", "y")  # start, and confirm
            while app.state.point_count < 50:
                await pilot.pause(0.02)
            busy, streamed = await latencies(app, pilot, running=True)
            await pilot.press("ctrl+q")
            await pilot.pause(0.2)
            if app.screen.__class__.__name__ == "ConfirmDialog":
                await pilot.press("y")
            for _ in range(600):
                if not app.is_running:
                    break
                await pilot.pause(0.05)
    idle_ms = [1000 * x for x in idle]
    busy_ms = [1000 * x for x in busy]
    figures = {
        "idle_median_ms": round(statistics.median(idle_ms), 2),
        "idle_max_ms": round(max(idle_ms), 2),
        "running_median_ms": round(statistics.median(busy_ms), 2),
        "running_max_ms": round(max(busy_ms), 2),
        "running_presses": len(busy_ms),
        "running_over_100ms": sum(1 for x in busy_ms if x > 100.0),
        "points_streamed_meanwhile": streamed,
        "median_ratio_running_to_idle": round(statistics.median(busy_ms)
                                              / statistics.median(idle_ms), 2),
        "max_ratio_running_to_idle": round(max(busy_ms) / max(idle_ms), 2),
    }
    return figures


if __name__ == "__main__":
    result = asyncio.run(main())
    print(f"key answered, app idle:      median {result['idle_median_ms']} ms, "
          f"max {result['idle_max_ms']} ms")
    print(f"key answered, sweep running: median {result['running_median_ms']} ms, "
          f"max {result['running_max_ms']} ms over {result['running_presses']} presses, "
          f"{result['points_streamed_meanwhile']} points streamed meanwhile")
    print(f"presses answered after more than 100 ms while running: "
          f"{result['running_over_100ms']}")
    print(f"ratio running/idle: median {result['median_ratio_running_to_idle']}, "
          f"max {result['max_ratio_running_to_idle']}")
    print(json.dumps(result))
    sys.exit(0)
