"""The real bench and the tests' fake bench satisfy the same Protocols (sweeps.benchtypes).

Common practice, no source: membership by isinstance on runtime_checkable Protocols, and
the members' signatures compared with inspect, so a method added, renamed or given a new
required argument on one side only fails here rather than in a runner test that happens to
use the fake.
"""

from __future__ import annotations

import inspect

import pytest
from sweepfake import FakeBench, FakeLcr, FakeSmu

from pnbench.drivers.roles import LcrMeter, Smu
from pnbench.sweeps.bench import Bench
from pnbench.sweeps.benchtypes import BenchLike, LcrRole, SmuRole

PAIRS = [(BenchLike, Bench), (BenchLike, FakeBench), (SmuRole, Smu), (SmuRole, FakeSmu),
         (LcrRole, LcrMeter), (LcrRole, FakeLcr)]


def _members(protocol) -> dict[str, object]:
    """The Protocol's own methods and properties (attributes are checked on instances)."""
    return {name: value for name, value in vars(protocol).items()
            if not name.startswith("_") and (callable(value) or isinstance(value, property))}


def _parameters(function) -> list[inspect.Parameter]:
    return list(inspect.signature(function).parameters.values())[1:]  # without self


@pytest.mark.parametrize(("protocol", "cls"), PAIRS,
                         ids=[f"{c.__name__}-{p.__name__}" for p, c in PAIRS])
def test_class_has_every_member_with_a_compatible_signature(protocol, cls):
    for name, wanted in _members(protocol).items():
        have = inspect.getattr_static(cls, name, None)
        assert have is not None, f"{cls.__name__} lacks {name}"
        if isinstance(wanted, property):
            assert isinstance(have, property), f"{cls.__name__}.{name} is not a property"
            continue
        assert callable(have), f"{cls.__name__}.{name} is not a method"
        asked, given = _parameters(wanted), _parameters(have)
        names = [p.name for p in given]
        assert names[:len(asked)] == [p.name for p in asked], \
            f"{cls.__name__}.{name}{inspect.signature(have)} against {inspect.signature(wanted)}"
        for a, g in zip(asked, given, strict=False):
            if a.default is not inspect.Parameter.empty:
                assert g.default == a.default, f"{cls.__name__}.{name}: default of {a.name}"
        for extra in given[len(asked):]:
            assert extra.default is not inspect.Parameter.empty, \
                f"{cls.__name__}.{name} requires {extra.name}, which the runner never gives"


def test_instances_are_benches_and_roles():
    """isinstance on the runtime-checkable Protocols: data attributes included."""
    fake = FakeBench(roles={"smu": FakeSmu(), "lcr": FakeLcr()})
    for bench in (Bench(), fake):
        assert isinstance(bench, BenchLike)
    assert isinstance(fake.smu, SmuRole) and isinstance(fake.lcr, LcrRole)
    assert not isinstance(fake.smu, LcrRole)  # the check can say no


def test_a_bench_missing_a_member_is_not_a_bench():
    """Guards the check itself: drop check_errors and the Protocol refuses the object."""
    class Partial:
        last_off: dict = {}
        identity_changes: list = []
        smu = lcr = None
        instruments: dict = {}

        def safe_off(self) -> dict[str, bool]:
            return {}

    assert not isinstance(Partial(), BenchLike)
