"""Plan files: typed values, expanded points, and a message naming line and key for every
problem (no instrument is involved anywhere in this file)."""

from __future__ import annotations

import math
import textwrap
from importlib import resources
from pathlib import Path

import pytest
import tomli_w
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from pnbench.errors import PlanError
from pnbench.sweeps.limits import HAZARDOUS_VOLTAGE_V
from pnbench.sweeps.plan import load_plan, parse_plan
from pnbench.sweeps.tomllines import key_lines

GOOD = textwrap.dedent("""\
    [plan]
    title = "test plan"

    [device]
    name = "LH-T1"
    area = "0.25 mm2"
    temperature = "25 degC"

    [limits]
    max_voltage = "2 V"
    max_reverse_voltage = "30 V"
    max_current = "100 mA"
    max_power = "150 mW"

    [[steps]]
    name = "fwd"
    kind = "iv_forward"
    stop = "0.9 V"
    points = 46
    compliance = "100 mA"

    [[steps]]
    name = "fwd_i"
    kind = "iv_forward"
    source = "current"
    start = "1 nA"
    stop = "1 mA"
    points_per_decade = 5
    compliance = "2 V"

    [[steps]]
    name = "rev"
    kind = "iv_reverse"
    stop = "-25 V"
    points = 26
    compliance = "1 mA"
    breakdown_guard = "100 uA"

    [[steps]]
    name = "cv"
    kind = "cv"
    bias_start = 0
    bias_stop = "-10 V"
    bias_points = 11
    frequencies = ["100 kHz", "1 MHz"]

    [[steps]]
    name = "adm"
    kind = "admittance"
    bias = [0.5, 0.55, 0.6]
    frequency = "1 MHz"
    ac_level = "5 mV"
    end_when_settled = 0.02
    """)


def problems_of(text: str) -> str:
    with pytest.raises(PlanError) as info:
        parse_plan(text, "t.toml")
    return str(info.value)


def replace(text: str, old: str, new: str) -> str:
    assert old in text, old
    return text.replace(old, new, 1)


def test_good_plan_is_typed_and_expanded():
    plan = parse_plan(GOOD, "t.toml")
    assert plan.device.area_m2 == pytest.approx(0.25e-6)
    assert plan.device.temperature_K == pytest.approx(298.15)
    assert plan.limits.max_power_W == pytest.approx(0.15)
    fwd, fwd_i, rev, cv, adm = plan.steps
    assert fwd.planned == 46 and fwd.levels[0] == 0.0 and fwd.levels[-1] == pytest.approx(0.9)
    assert fwd.levels[1] == pytest.approx(0.02)
    # 6 decades at 5 per decade, both ends included
    assert fwd_i.planned == 31 and fwd_i.levels[-1] == pytest.approx(1e-3)
    ratios = [b / a for a, b in zip(fwd_i.levels, fwd_i.levels[1:], strict=False)]
    assert all(r == pytest.approx(10 ** 0.2) for r in ratios)
    assert rev.levels[-1] == -25.0 and rev.breakdown_guard_A == pytest.approx(1e-4)
    assert cv.planned == 22
    # bias outer, frequency inner, indices 0..n-1
    assert [(p.level, p.frequency_Hz) for p in cv.points[:3]] == [
        (0.0, 1e5), (0.0, 1e6), (-1.0, 1e5)]
    assert [p.index for p in cv.points] == list(range(22))
    assert adm.end_when_settled == 0.02 and adm.ac_level_V == pytest.approx(0.005)
    assert plan.total_points == 46 + 31 + 26 + 22 + 3
    assert plan.roles_needed == {"smu", "lcr"}


def test_unknown_key_names_line_and_suggests():
    text = replace(GOOD, 'points = 46', 'points = 46\nsetle = "1 ms"')
    message = problems_of(text)
    line = text.splitlines().index('setle = "1 ms"') + 1
    assert f"line {line}, steps[1].setle: unknown key 'setle'; did you mean 'settle'?" in message


def test_wrong_unit_names_key_and_line():
    message = problems_of(replace(GOOD, 'max_current = "100 mA"', 'max_current = "5 V"'))
    assert "line 12, limits.max_current" in message
    assert "'V'" in message and "expected 'A'" in message


def test_reversed_ranges_are_refused():
    message = problems_of(replace(GOOD, 'stop = "0.9 V"', 'start = "1 V"\nstop = "0.5 V"'))
    assert "steps[1].stop: a forward step goes up" in message
    message = problems_of(replace(GOOD, 'stop = "-25 V"', 'start = "-5 V"\nstop = "-1 V"'))
    assert "steps[3].stop: a reverse step goes down" in message


def test_zero_points_and_empty_lists():
    assert "steps[1].points: 0 is out of range" in problems_of(
        replace(GOOD, "points = 46", "points = 0"))
    assert "zero points" in problems_of(replace(GOOD, "bias = [0.5, 0.55, 0.6]", "bias = []"))
    assert "a range of zero width" in problems_of(
        replace(GOOD, 'bias_stop = "-10 V"', 'bias_stop = "0 V"'))


def test_levels_and_compliance_beyond_limits():
    assert "outside the limits" in problems_of(replace(GOOD, 'stop = "0.9 V"', 'stop = "3 V"'))
    assert "above max_current" in problems_of(
        replace(GOOD, 'compliance = "100 mA"', 'compliance = "200 mA"'))
    assert "the guard could never fire" in problems_of(
        replace(GOOD, 'breakdown_guard = "100 uA"', 'breakdown_guard = "10 mA"'))


def test_limits_beyond_the_instrument_rating():
    text = GOOD + textwrap.dedent("""\
        [instruments.smu]
        resource = "TCPIP0::192.0.2.10::5025::SOCKET"
        max_voltage = "20 V"
        max_current = "1 A"
        """)
    message = problems_of(text)
    assert "limits.max_reverse_voltage: 30 V is beyond the SMU's rating of 20 V" in message


def test_hazardous_voltage_needs_an_acknowledgment():
    """IEC 61010-1 counts DC above 60 V as hazardous-live in its older editions (from
    memory); the plan must acknowledge a higher limit explicitly, with the voltage."""
    assert HAZARDOUS_VOLTAGE_V == 60.0
    text = replace(GOOD, 'max_reverse_voltage = "30 V"', 'max_reverse_voltage = "100 V"')
    message = problems_of(text)
    assert "limits.max_reverse_voltage: 100 V is above the 60 V DC" in message
    assert 'acknowledge_hazardous_voltage = "100 V"' in message
    short = replace(text, "[limits]", '[limits]\nacknowledge_hazardous_voltage = "80 V"')
    assert "covers only 80 V" in problems_of(short)
    ok = replace(text, "[limits]", '[limits]\nacknowledge_hazardous_voltage = "100 V"')
    assert parse_plan(ok).limits.hazardous_ack_V == 100.0
    # exactly at the threshold needs nothing
    at = replace(GOOD, 'max_reverse_voltage = "30 V"', 'max_reverse_voltage = "60 V"')
    parse_plan(at)


def test_every_problem_listed_in_file_order():
    text = replace(GOOD, 'name = "LH-T1"', 'name = "LH-T1"\ncolour = "red"')
    text = replace(text, "points = 46", "points = -1")
    message = problems_of(text)
    assert message.startswith("plan t.toml: 2 problems:")
    assert message.index("device.colour") < message.index("steps[1].points")


def test_first_level_must_be_safe_into_a_short():
    text = replace(GOOD, 'stop = "0.9 V"', 'start = "1.8 V"\nstop = "1.9 V"')
    assert "a short would take" in problems_of(text)


def test_step_names_unique_and_plain():
    assert "used by an earlier step" in problems_of(replace(GOOD, 'name = "fwd_i"',
                                                            'name = "fwd"'))
    assert "a step name is" in problems_of(replace(GOOD, 'name = "fwd_i"',
                                                   'name = "fwd, i"'))


def test_not_toml_and_not_utf8():
    assert "not valid TOML" in problems_of("[device\nname = 1")
    assert "not UTF-8" in str(pytest.raises(PlanError, parse_plan, b"\xff\xfe[device]").value)


def test_missing_file(tmp_path):
    with pytest.raises(PlanError, match="cannot read it"):
        load_plan(tmp_path / "none.toml")


def test_key_lines_tracks_tables_arrays_and_multiline_values():
    text = textwrap.dedent('''\
        [limits]
        max_voltage = 1
        [[steps]]
        name = "a"
        bias = [
          1,
          2, # x = 3
        ]
        notes = """
        fake = 1
        """
        [[steps]]
        "quoted key" = 2
        a.b = 3
        ''')
    lines = key_lines(text)
    assert lines[("limits", "max_voltage")] == 2
    assert lines[("steps", 0)] == 3 and lines[("steps", 0, "bias")] == 5
    assert ("steps", 0, "fake") not in lines
    assert lines[("steps", 1, "quoted key")] == 13 and lines[("steps", 1, "a", "b")] == 14


def test_bundled_plans_all_validate():
    folder = resources.files("pnbench.sim_configs") / "plans"
    names = [p.name for p in folder.iterdir() if p.name.endswith(".toml")]
    assert names
    for name in names:
        plan = load_plan(Path(str(folder / name)))
        assert plan.steps


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.binary(max_size=400))
def test_random_bytes_give_plan_error_only(data):
    try:
        parse_plan(data, "random.toml")
    except PlanError as exc:
        assert str(exc).startswith("plan random.toml")


_values = st.one_of(st.integers(-10**6, 10**6), st.floats(allow_nan=True), st.booleans(),
                    st.text(max_size=12), st.lists(st.integers(-5, 5), max_size=3))
_step_keys = st.sampled_from(["name", "kind", "start", "stop", "points", "spacing",
                              "compliance", "bias", "frequencies", "settle", "average",
                              "breakdown_guard", "source", "points_per_decade", "typo"])


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.dictionaries(_step_keys, _values, max_size=8),
       st.dictionaries(st.sampled_from(["max_voltage", "max_current", "max_power",
                                        "max_reverse_voltage", "oops"]), _values, max_size=5))
def test_random_plan_tables_give_plan_or_plan_error(step, limits):
    doc = {"device": {"name": "X"}, "limits": limits, "steps": [step]}
    try:
        text = tomli_w.dumps(doc)
    except (TypeError, ValueError):
        return
    try:
        plan = parse_plan(text, "random.toml")
    except PlanError as exc:
        assert "random.toml" in str(exc)
        return
    assert all(math.isfinite(x) for s in plan.steps for x in s.levels)


def test_large_ac_level_at_forward_bias_is_warned_with_the_reading_error():
    """The reading error of the fundamental is x**2/8 with x = peak/(N*Vt) (series of
    exp(x cos wt), see modeling/aclevel.py): 20 mV rms on a junction at N = 1 is
    x = 1.09, about 15 %; 5 mV rms stays under 1 %."""
    quiet = parse_plan(GOOD, "t.toml")
    assert not any("ac_level" in w for w in quiet.warnings)
    loud = parse_plan(replace(GOOD, 'ac_level = "5 mV"', 'ac_level = "20 mV"'), "t.toml")
    (warning,) = [w for w in loud.warnings if "ac_level" in w]
    assert "'adm'" in warning and "14.9%" in warning and "under 1 %" in warning


def test_early_end_on_a_reverse_step_is_warned_as_without_effect():
    plan = parse_plan(replace(GOOD, 'breakdown_guard = "100 uA"',
                              'breakdown_guard = "100 uA"\nend_when_settled = 0.05'), "t.toml")
    assert any("'rev'" in w and "no effect" in w for w in plan.warnings)
