"""Typed events: one class per kind, each round-tripping through its events.jsonl line
in the format DEVELOPERS.md documents; statuses and exit codes from one module."""

from __future__ import annotations

import json
import signal

import pytest

from pnbench.errors import BadInput, InstrumentError, OperatorStop, SafetyStop
from pnbench.sweeps import events as ev
from pnbench.sweeps.statuses import (
    ExitCode,
    RunStatus,
    StepStatus,
    exit_code_for,
    status_for_signal,
    step_finished,
)

#: One example of every kind, with the fields the runner and the fit worker give it.
EXAMPLES = {
    ev.RunStarted: dict(resumed=True, resume_count=1, planned=40, done=12,
                        steps=["fwd", "cv"], run_dir="/r",
                        progress={"fwd": {"done": 12, "status": "running"}},
                        seconds_per_point={"fwd": 0.02}),
    ev.StepStarted: dict(step_kind="iv_forward", planned=30, done=12, instrument="smu"),
    ev.PointTaken: dict(index=3, point_kind="iv", voltage_V=0.5, current_A=1e-3,
                        compliance=True, planned=30),
    ev.Compliance: dict(index=3, voltage_V=0.5, current_A=1e-2, limit=1e-2, count=2),
    ev.Limit: dict(guard="breakdown_guard", message="reached", level=-30.0),
    ev.WarningEvent: dict(message="plan: large AC level", index=4),
    ev.Fit: dict(fit_kind="iv_forward", success=True, message="ok", n_points=30,
                 parameters={"IS": {"value": 1e-14, "sigma": 1e-16, "settled": True}},
                 not_determined={"RS": "at the edge of the allowed range"}, final=True,
                 ibv_A=1e-5, leakage={"voltage_V": -5.0, "current_A": 1e-12,
                                      "sigma_A": None}),
    ev.StepFinished: dict(status="limit", done=20, planned=30, ended_by="power",
                          compliance_count=1),
    ev.Paused: dict(done=5),
    ev.Resumed: dict(done=5),
    ev.Output: dict(role="lcr", on=False, confirmed=True),
    ev.OperatorPrompt: dict(topic="open_correction", message="open the fixture"),
    ev.Correction: dict(corrections=["open", "short"], confirmed=False,
                        values={"open": {"frequency_Hz": [1e6], "G_S": [0.0], "B_S": [2e-6],
                                         "C_F": [3.2e-13]}, "short": None}),
    ev.ErrorEvent: dict(message="could not confirm"),
    ev.RunFinished: dict(status="aborted", reason="stopped", outputs_off_confirmed=True,
                         done=20, planned=40),
    ev.StageRamping: dict(set_point_K=398.15, temperature_K=300.1, ramp_K_per_min=20.0),
    ev.StageStable: dict(set_point_K=398.15, temperature_K=398.12, waited_s=324.0),
    ev.StageDrifting: dict(set_point_K=398.15, temperature_K=398.4, band_K=0.1,
                           during="forward@398.15K"),
}


def test_every_kind_has_a_class_and_an_example():
    assert set(EXAMPLES) == set(ev.EVENT_CLASSES)
    assert ev.KINDS == ("run_started", "step_started", "point", "compliance", "limit",
                        "warning", "fit", "step_finished", "paused", "resumed", "output",
                        "operator_prompt", "lcr_correction", "error", "run_finished",
                        "stage_ramping", "stage_stable", "stage_drifting")


@pytest.mark.parametrize("cls", ev.EVENT_CLASSES, ids=lambda c: c.KIND)
def test_each_kind_round_trips_through_its_json_line(cls):
    bus = ev.EventBus(started_epoch_s=0.0)
    sent = bus.emit(cls, "fwd", time_s=12.5, **EXAMPLES[cls])
    assert type(sent) is cls and sent.kind == cls.KIND
    line = sent.to_json()
    doc = json.loads(line)
    # the documented envelope, then the fields, flat
    assert list(doc)[:4] == ["seq", "time_s", "kind", "step"]
    assert doc["kind"] == cls.KIND and doc["step"] == "fwd" and doc["time_s"] == 12.5
    for key, value in EXAMPLES[cls].items():
        assert doc[key] == value
    back = ev.parse_event_line(line)
    assert back == sent and type(back) is cls


def test_a_line_from_an_older_or_newer_writer_still_reads():
    """Keys this version does not know are kept and written back; missing optional keys
    take their defaults; an unknown kind is kept whole."""
    line = ('{"seq": 4, "time_s": 1.5, "kind": "step_finished", "step": "a", '
            '"status": "done", "done": 3, "planned": 3, "cooled_to_K": 77.0}')
    event = ev.parse_event_line(line)
    assert isinstance(event, ev.StepFinished) and event.ended_by is None
    assert event.extra == {"cooled_to_K": 77.0} and event["cooled_to_K"] == 77.0
    assert json.loads(event.to_json())["cooled_to_K"] == 77.0
    other = ev.parse_event_line('{"seq": 5, "time_s": 2, "kind": "stage_settled", '
                                '"step": null, "temperature_K": 300.0}')
    assert isinstance(other, ev.OtherEvent) and other.kind == "stage_settled"
    assert json.loads(other.to_json()) == {"seq": 5, "time_s": 2.0, "kind": "stage_settled",
                                           "step": None, "temperature_K": 300.0}
    with pytest.raises(ValueError, match="'seq'"):
        ev.parse_event_line('{"kind": "warning"}')


def test_points_stay_in_process_and_do_not_advance_the_numbering():
    written = []
    bus = ev.EventBus(sink=written.append)
    bus.emit(ev.RunStarted)
    bus.emit(ev.PointTaken, "a", index=0)
    last = bus.emit("warning", None, message="x")  # the kind's name works too
    assert [e.seq for e in written] == [1, 2] and last.seq == 2
    with pytest.raises(ValueError, match="unknown event kind"):
        bus.emit("no_such_kind")


def test_statuses_compare_and_serialise_as_their_words():
    assert RunStatus.COMPLETED == "completed" and json.dumps(RunStatus.SAFETY_STOP) == \
        '"safety_stop"'
    assert {s.value for s in RunStatus} == {"running", "paused", "completed", "aborted",
                                            "safety_stop", "failed", "interrupted"}
    assert [s for s in StepStatus if s.finished] == [StepStatus.DONE, StepStatus.LIMIT,
                                                     StepStatus.SETTLED]
    assert step_finished("limit") and not step_finished("interrupted")


def test_exit_codes_agree_with_the_error_family():
    """The errors carry the same numbers the statuses map to (common practice of this
    project's design: 2 bad input, 3 instrument, 4 stopped)."""
    assert exit_code_for("completed") == ExitCode.OK == 0
    assert exit_code_for("completed", outputs_off_confirmed=False) == 3
    assert exit_code_for("failed") == InstrumentError.exit_code == 3
    for status in ("aborted", "interrupted"):
        assert exit_code_for(status) == OperatorStop.exit_code == 4
    assert exit_code_for("safety_stop") == SafetyStop.exit_code == 4
    assert ExitCode.BAD_INPUT == BadInput.exit_code


def test_one_rule_for_signals():
    assert status_for_signal(signal.SIGINT) == "aborted"
    assert status_for_signal(signal.SIGTERM) == status_for_signal(signal.SIGHUP) \
        == "interrupted"
