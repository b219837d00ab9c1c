"""The report's section for a run on the simulated bench: the fit against the part.

It appears only when run.json names a simulated device that can still be read
(`sweeps.rehearsal` says what is compared and why).
"""

from __future__ import annotations

from pnbench.sweeps.rehearsal import CALL_OUT_Z, against_part
from pnbench.tui.report.data import RunData
from pnbench.tui.report.tables import esc, num, qty, table

_WHAT_Z_MEANS = (
    "z = (fitted value \u2212 the part's value)/\u03c3. With honest standard errors z is a "
    "standard normal draw: a single run lies outside \u00b11\u03c3 about one time in three "
    "and outside \u00b13\u03c3 about one time in 370. Values fitted to the same readings "
    "move together (the C\u2013V parameters, the doping and Vbi), so several of them often "
    "sit outside \u00b11\u03c3 in the same run. tests/benchmarks/coverage.py checks the "
    "spread of z over many noisy runs.")


def section(data: RunData) -> str:
    """The section's HTML, or "" for a run on real instruments."""
    check = against_part(data.run, data.model_json, data.run_dir)
    if check is None or not check.rows:
        return ""
    rows, classes = [], []
    for r in check.rows:
        z = r.z
        label = f"{r.name} [1/m\u00b3]" if r.unit == "1/m3" else r.name
        rows.append([esc(label), num(esc(qty(r.value, _unit(r.unit)))),
                     num(esc(qty(r.sigma, _unit(r.unit)) if r.sigma else "\u2014")),
                     num(esc(qty(r.truth, _unit(r.unit)))),
                     num(esc(f"{z:+.2f}" if z is not None else "\u2014"))])
        classes.append("bad" if z is not None and abs(z) > CALL_OUT_Z else "")
    parts = ['<h2 id="rehearsal">Against the simulated part</h2>',
             f"<p>This run was made on the simulated bench with the part "
             f"<b>{esc(check.part)}</b>, so every fitted value can be set against the "
             f"truth at {check.temperature_K:.2f} K: {esc(check.counts())}.</p>",
             table(["Quantity", "Fitted", "\u03c3", "Part", "z"], rows, row_classes=classes),
             f"<p class=\"sub\">{_WHAT_Z_MEANS}</p>"]
    if check.notes:
        parts.append("<ul>" + "".join(f"<li>{esc(n)}</li>" for n in check.notes) + "</ul>")
    return "".join(parts)


def _unit(unit: str) -> str:
    return "" if unit == "1/m3" else unit
