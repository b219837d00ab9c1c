"""Fuzzing the command line with hypothesis: mutated plans (check, and run on the
simulated bench), mutated data files (fit) and odd option values (qpoint, fit, run) must
end with a defined exit code (0 done, 2 bad input, 3 instrument, 4 stopped) and a message,
never a traceback or a warning leaking to the user. Bounded: a few dozen examples each,
no deadline, no example database, so the suite stays fast and repeatable."""

from __future__ import annotations

import contextlib
import io
import tempfile
import warnings
from pathlib import Path

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from pnbench.tui.cli import main

FUZZ = settings(max_examples=30, deadline=None, database=None, derandomize=True,
                suppress_health_check=[HealthCheck.too_slow])
MORE = settings(FUZZ, max_examples=80)

PLAN = """[plan]
format = 1
title = "fuzz"

[device]
name = "LH-ZL560"
area = "0.25 mm2"
temperature = "300 K"

[instruments.smu]
resource = "TCPIP0::192.0.2.31::5025::SOCKET"
backend = "@py"
dialect = "default"
timeout = "2 s"
max_voltage = "20 V"
max_current = "1 A"

[limits]
max_voltage = "2 V"
max_reverse_voltage = "8 V"
max_current = "100 mA"
max_power = "100 mW"
ramp_rate = "10 V/s"

[[steps]]
name = "forward"
kind = "iv_forward"
start = "0.2 V"
stop = "0.75 V"
points = 5
compliance = "50 mA"

[[steps]]
name = "reverse"
kind = "iv_reverse"
stop = "-5 V"
points = 4
compliance = "1 mA"
breakdown_guard = "100 uA"
"""

IV = "# temperature_K = 300\nvoltage_V,current_A\n" + "".join(
    f"{0.3 + 0.05 * k:.2f},{1e-12 * 10 ** (0.8 * k):.4g}\n" for k in range(10))
CV = "voltage_V,frequency_Hz,capacitance_F,conductance_S\n" + "".join(
    f"{-0.5 * k:.1f},1e6,{2e-12 / (1 + 0.5 * k / 0.7) ** 0.5:.4g},1e-9\n" for k in range(8))

# Values that break naive code: non-finite and extreme numbers, wrong types, odd text.
ODD_VALUES = ["nan", "inf", "-inf", "1e308", "-1e308", "1e-308", "0", "-0", "-1", "",
              "\"\"", "\"nan V\"", "\"inf A\"", "\"1e308 V\"", "\"-1e308 A\"", "true", "[]",
              "{}", "[[1]]", "\"\\u0000\"", "\"10 V/s\"", "\"5 kV\"", "1_000", "0x10",
              "\"2.5 mA\"", "\"-3 V\"", "1e3", "\"1 MHz\"", "\"abc\"", "9.9e37", "\"9.91E37\""]
ODD_OPTIONS = ["nan", "inf", "-inf", "1e308", "-1e308", "1e-308", "0", "-1", "", "abc",
               "2.5m", "1k", "1MHz", "5 V", "1e-30", "300 K", "-0", "9.9e37", "1e3"]


def invoke(argv: list[str], cwd: str) -> tuple[int, str]:
    """Run the command line in-process in ``cwd`` (a relative --out lands there);
    (exit code, stdout + stderr)."""
    out, err = io.StringIO(), io.StringIO()
    with contextlib.chdir(cwd), contextlib.redirect_stdout(out), \
            contextlib.redirect_stderr(err), warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            code = main(argv)
        except SystemExit as stop:  # --help and the like
            code = stop.code if isinstance(stop.code, int) else 2
    leaked = [f"{w.category.__name__}: {w.message}" for w in caught
              if issubclass(w.category, (RuntimeWarning, UserWarning))]
    text = out.getvalue() + err.getvalue() + "".join(leaked)
    return int(code or 0), text


def assert_clean(argv: list[str], code: int, text: str) -> None:
    assert code in (0, 2, 3, 4), (argv, code, text[-2000:])
    assert "Traceback" not in text and "Warning:" not in text, (argv, text[-2000:])
    if code != 0:
        assert "pnbench" in text, (argv, text)  # a message says what went wrong


@st.composite
def mutated(draw, text: str) -> str:
    """``text`` with a few lines changed: a value replaced, a line dropped, doubled or
    cut short, or odd bytes put in."""
    lines = text.splitlines()
    for _ in range(draw(st.integers(1, 3))):
        k = draw(st.integers(0, len(lines) - 1))
        how = draw(st.sampled_from(["value", "value", "drop", "double", "cut", "junk"]))
        line = lines[k]
        if how == "value" and "=" in line:
            key = line.split("=", 1)[0]
            lines[k] = f"{key}= {draw(st.sampled_from(ODD_VALUES))}"
        elif how == "drop":
            del lines[k]
        elif how == "double":
            lines.insert(k, line)
        elif how == "cut":
            lines[k] = line[: draw(st.integers(0, max(0, len(line) - 1)))]
        else:
            lines.insert(k, draw(st.text(max_size=20)))
        if not lines:
            lines = [""]
    return "\n".join(lines) + "\n"


@MORE
@given(mutated(PLAN))
def test_mutated_plans_are_checked_and_run_without_a_traceback(text):
    with tempfile.TemporaryDirectory() as tmp:
        plan = Path(tmp) / "plan.toml"
        plan.write_text(text, encoding="utf-8", errors="surrogatepass")
        argv = ["check", str(plan)]
        code, out = invoke(argv, tmp)
        assert_clean(argv, code, out)
        if code != 0:
            return
        from pnbench.sweeps.plan import load_plan

        if load_plan(plan).total_points > 40:
            return  # a valid plan, just long: the run itself is not what is fuzzed here
        argv = ["run", str(plan), "--simulate", "lh-zl560", "--time-scale", "0",
                "--headless", "--no-report", "--out", str(Path(tmp) / "runs")]
        code, out = invoke(argv, tmp)
        assert_clean(argv, code, out)


@MORE
@given(st.sampled_from([IV, CV]).flatmap(mutated), st.booleans())
def test_mutated_data_files_are_fitted_or_refused_without_a_traceback(text, as_json):
    with tempfile.TemporaryDirectory() as tmp:
        data = Path(tmp) / "data.csv"
        data.write_text(text, encoding="utf-8", errors="surrogatepass")
        argv = ["fit", str(data)] + (["--json"] if as_json else [])
        code, out = invoke(argv, tmp)
        assert_clean(argv, code, out)


CARD = ".model LH D(IS=4f N=1.03 RS=1.2 CJO=12p VJ=0.62 M=0.45 TT=4n BV=30 IBV=10u)\n"


@FUZZ
@given(st.sampled_from(["--bias-voltage", "--bias-current"]), st.sampled_from(ODD_OPTIONS),
       st.lists(st.sampled_from(ODD_OPTIONS), max_size=2),
       st.sampled_from([None, *ODD_OPTIONS]), st.sampled_from([None, *ODD_OPTIONS]))
def test_odd_qpoint_options_without_a_traceback(bias, value, freqs, temperature, level):
    with tempfile.TemporaryDirectory() as tmp:
        card = Path(tmp) / "lh.lib"
        card.write_text(CARD, encoding="utf-8")
        argv = ["qpoint", str(card), f"{bias}={value}"]
        if freqs:
            argv += ["--freq", *freqs]
        if temperature is not None:
            argv.append(f"--temperature={temperature}")
        if level is not None:
            argv.append(f"--ac-level={level}")
        code, out = invoke(argv, tmp)
        assert_clean(argv, code, out)
        if code == 0:
            assert "nan" not in out.lower()


@FUZZ
@given(st.sampled_from(["--temperature", "--area", "--ibv", "--leakage-at"]),
       st.sampled_from(ODD_OPTIONS), st.sampled_from(["--time-scale", "--out"]),
       st.sampled_from([o for o in ODD_OPTIONS if o != "1e3"]  # not 1000x real time
                       + ["/dev/null", "/proc/1/x", "a\0b"]))
def test_odd_fit_and_run_options_without_a_traceback(fit_option, fit_value, run_option,
                                                     run_value):
    with tempfile.TemporaryDirectory() as tmp:
        data = Path(tmp) / "iv.csv"
        data.write_text(IV, encoding="utf-8")
        argv = ["fit", str(data), f"{fit_option}={fit_value}"]
        code, out = invoke(argv, tmp)
        assert_clean(argv, code, out)
        plan = Path(tmp) / "plan.toml"
        plan.write_text(PLAN, encoding="utf-8")
        out_dir = ["--out", str(Path(tmp) / "runs")] if run_option != "--out" else []
        argv = ["run", str(plan), "--simulate", "lh-zl560", "--headless", "--no-report",
                f"{run_option}={run_value}", *out_dir]
        if run_option != "--time-scale":
            argv += ["--time-scale", "0"]
        code, out = invoke(argv, tmp)
        assert_clean(argv, code, out)
