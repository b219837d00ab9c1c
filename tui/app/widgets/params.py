"""The parameter table: model-card name, value, +- sigma, and whether it has settled."""

from __future__ import annotations

import math

from textual.widgets import DataTable

from pnbench.modeling.params import UNITS
from pnbench.sweeps.quantities import format_estimate, format_quantity
from pnbench.tui.app.state import Estimate

#: Display order: DC first, then capacitance, then transit time; others after.
ORDER = ("IS", "N", "RS", "RSH", "BV", "IBV", "CJO", "VJ", "M", "FC", "TT", "EG", "XTI")

#: CFIX is the fixture's stray capacitance, RFIX its series resistance: the bench's, not
#: the device's (label and unit of each).
FIXTURE = {"CFIX": ("CFIX bench", "F"), "RFIX": ("RFIX bench", "ohm")}
FIXTURE_LABEL = FIXTURE["CFIX"][0]

#: The settled column: settled to the step's target, or still moving; a fit whose
#: lack-of-fit checks fail marks its parameters instead (the sigma is a lower bound).
SETTLED_MARK = "ok"
MOVING_MARK = ".."
MISFIT_MARK = "misfit"


def format_value(value: float, unit: str, sigma: float | None = None) -> str:
    """The value with the digits its sigma supports (3 at least); ohm spelt "ohm"."""
    if not math.isfinite(value):
        return "inf" if math.isinf(value) else "--"
    if sigma is None:
        return format_quantity(value, unit, prec=3) if unit not in ("", "-") else (
            f"{value:.4g}")
    return format_estimate(value, sigma, unit)


def format_sigma(estimate: Estimate, unit: str, detailed: bool = False) -> str:
    """'+-2.0%' (relative) or, detailed, '400 aA (2.0%)'; absolute when the value is 0."""
    sigma = estimate.sigma
    if sigma is None or not math.isfinite(sigma):
        return "--"
    if estimate.value and math.isfinite(estimate.value):
        relative = abs(sigma / estimate.value)
        if detailed:
            return f"{format_value(sigma, unit)} ({relative:.1%})"
        return f"{relative:.1%}" if relative < 10 else ">999%"
    return format_value(sigma, unit)


def rows(parameters: dict[str, Estimate],
         detailed: bool = False) -> list[tuple[str, str, str, str]]:
    """(name, value, sigma, mark) in display order."""
    names = [n for n in ORDER if n in parameters]
    names += sorted(n for n in parameters if n not in ORDER)
    out = []
    for name in names:
        estimate = parameters[name]
        label, unit = FIXTURE.get(name, (name, UNITS.get(name, "")))
        out.append((label,
                    format_value(estimate.value, unit, estimate.sigma),
                    format_sigma(estimate, unit, detailed),
                    MISFIT_MARK if estimate.misfit else
                    SETTLED_MARK if estimate.settled else MOVING_MARK))
    return out


class ParamTable(DataTable):
    """Fitted parameters; `show(parameters)` refreshes the rows in place. `detailed`
    shows sigma in the parameter's unit too (wide layouts)."""

    DEFAULT_CSS = """
    ParamTable { height: auto; max-height: 100%; }
    """

    def __init__(self, *, id: str | None = None):
        super().__init__(id=id, cursor_type="row", zebra_stripes=False, show_cursor=False)
        self._shown: list[tuple[str, str, str, str]] = []
        self.detailed = False

    def on_mount(self) -> None:
        self.add_column("name", key="name")
        self.add_column("value", key="value")
        self.add_column("+-sigma", key="sigma")
        self.add_column("set", key="mark")

    def show(self, parameters: dict[str, Estimate]) -> None:
        new = rows(parameters, self.detailed)
        if new == self._shown and self.row_count:
            return
        old, self._shown = self._shown, new
        if old and [r[0] for r in old] == [r[0] for r in new]:  # the same names: in place
            for before, row in zip(old, new, strict=True):
                for key, was, value in zip(("value", "sigma", "mark"), before[1:], row[1:],
                                           strict=True):
                    if value != was:
                        self.update_cell(row[0], key, value, update_width=True)
            return
        self.clear()
        if not new:
            self.add_row("--", "no fit yet", "", "")
            return
        for row in new:
            self.add_row(*row, key=row[0])
