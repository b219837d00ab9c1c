"""The report's tables: parameters with sigma, fits, correlations, depletion, Q-points.

Also the small HTML helpers the page shares: `esc` (every piece of run-folder text goes
through it), `qty` (values with SI prefix and unit), `table`, `kv`, `num`.
"""

from __future__ import annotations

import html
import json
import math
import re

from quantiphy import Quantity

from pnbench.modeling.modelset import card_name
from pnbench.modeling.params import UNITS
from pnbench.modeling.smallsignal import junction_off, off_rd_bound_ohm
from pnbench.sweeps.quantities import format_estimate
from pnbench.tui.report.analysis import Analysis
from pnbench.tui.report.data import RunData

_MICRO = re.compile(r"(?<=[\d.]) u(?=\S)")
DASH = "\u2014"
#: Currents, capacitances and conductances below this print as 0 (zepto scale).
_NEGLIGIBLE = 1e-21


def esc(value: object) -> str:
    return html.escape(str(value), quote=True)


def qty(value: float | None, unit: str, prec: int = 4) -> str:
    """A value with SI prefix and unit for people ("2.5 mA", "800 mohm": the ohm is
    spelt "ohm" everywhere pnbench prints, as in the app and on the terminal)."""
    if value is None:
        return "\u2014"
    value = float(value)
    if math.isnan(value):
        return "n/a"
    if math.isinf(value):
        sign = "\u2212" if value < 0 else ""
        return f"{sign}\u221e {unit}".strip()
    if abs(value) < _NEGLIGIBLE and unit in ("A", "F", "S"):
        return f"0 {unit}"  # rounding dust (a current at exactly zero bias, ...)
    if not unit:
        return f"{value:.{prec + 1}g}"
    return _MICRO.sub(" \u00b5", Quantity(value, unit).render(prec=prec))


def table(head: list[str], rows: list[list[str]], cls: str = "",
           row_classes: list[str] | None = None) -> str:
    out = [f'<table class="{cls}">' if cls else "<table>", "<tr>"]
    out += [f"<th>{h}</th>" for h in head] + ["</tr>"]
    for k, row in enumerate(rows):
        rc = row_classes[k] if row_classes else ""
        out.append(f'<tr class="{rc}">' if rc else "<tr>")
        out += [c if c.startswith("<td") else f"<td>{c}</td>" for c in row]
        out.append("</tr>")
    out.append("</table>")
    return "".join(out)


def num(text: str) -> str:
    return f'<td class="num">{text}</td>'


def kv(pairs: list[tuple[str, str]]) -> str:
    rows = "".join(f"<tr><th>{esc(k)}</th><td>{v}</td></tr>" for k, v in pairs)
    return f'<table class="kv">{rows}</table>'


def parameters(data: RunData, an: Analysis) -> str:
    parts = ["<h2 id=\"parameters\">Extracted parameters</h2>"]
    m = an.model
    if m is None:
        parts.append("<p>No model was extracted (model.json is missing).</p>")
        return "".join(parts)
    parts.append(f"<p>From {esc(an.model_source)}, values at {m.temperature_K:.2f} K; "
                 "\u03c3 is one standard deviation.</p>")
    rows = []
    for name in UNITS:
        if name not in m.values:
            continue
        value, sigma = m.values[name], m.sigma(name)
        rel = "\u2014" if sigma is None or value == 0 else f"{100 * sigma / abs(value):.3g} %"
        shown = format_estimate(value, sigma, UNITS[name]) if UNITS[name] else None
        rows.append([f"<strong>{esc(name)}</strong>",
                     num(esc(_MICRO.sub(" \u00b5", shown) if shown else
                             format_estimate(value, sigma, ""))),
                     num(esc(qty(sigma, UNITS[name], prec=2) if sigma is not None else "unknown")),
                     num(esc(rel))])
    parts.append(table(["Parameter", "Value", "\u03c3", "\u03c3 / value"], rows))
    fixture = _bench_part(m.extras, "fixture_capacitance_F", "F", "open_corrected",
                          "Fixture capacitance (the bench's, not the device's; fitted "
                          "across the terminals and kept off the model card)",
                          "the residual after the meter's open correction")
    if fixture:
        parts.append(fixture)
    elif m.extras.get("open_corrected"):
        parts.append("<p>The meter's open correction was run: the fixture's stray "
                     "capacitance is subtracted from the readings, and no residual (CFIX) "
                     "stands out of the noise.</p>")
    series = _bench_part(m.extras, "fixture_resistance_ohm", "ohm", "short_corrected",
                         "Fixture series resistance (the bench's leads, not the device's "
                         "RS, which the four-wire I-V measured; kept off the model card)",
                         "the residual after the meter's short correction")
    if series:
        parts.append(series)
    parts.append(_fit_quality(an))
    for label, names, matrix in an.correlations:
        parts.append(f"<h3>Correlation of the estimates ({esc(label)})</h3>")
        parts.append(_correlation_table(names, matrix))
    if an.correlations:
        parts.append("<p>|r| above 0.9 (bold) means the data hardly tell those "
                     "parameters apart.</p>")
    parts.append(_depletion(an))
    parts.append(_extras(m.extras))
    card = data.card_text or m.card_text(card_name(data.device_name))
    source = data.card_name or "made from model.json"
    parts.append(f"<h3>Model card ({esc(source)})</h3><pre>{esc(card)}</pre>")
    return "".join(parts)


def _bench_part(extras: dict, key: str, unit: str, corrected_key: str, label: str,
                residual: str) -> str:
    """A paragraph for a part of the bench the C-V fit found (fixture capacitance or
    series resistance), with its sigma and, after the meter's correction, as a residual;
    "" when the model has none."""
    part = extras.get(key)
    if not (isinstance(part, dict) and isinstance(part.get("value"), (int, float))):
        return ""
    sd = part.get("sigma")
    spread = f" \u00b1 {esc(qty(sd, unit, prec=2))}" if isinstance(sd, (int, float)) else ""
    after = f": {residual}" if extras.get(corrected_key) else ""
    return f"<p>{label}: {esc(qty(part['value'], unit))}{spread}{after}.</p>"


def _correlation_table(names: tuple[str, ...], matrix) -> str:
    rows = []
    for a, line in zip(names, matrix, strict=True):
        cells = [f"<strong>{esc(a)}</strong>"]
        for r in line:
            if not math.isfinite(r):
                cells.append(num("\u2014"))
                continue
            weight = "font-weight:600;" if abs(r) > 0.9 else ""
            colour = "36,71,107" if r >= 0 else "209,96,61"
            cells.append(f'<td class="num" style="{weight}background:rgba({colour},'
                         f'{0.45 * min(1.0, abs(r)):.2f})">{esc(f"{r:+.2f}")}</td>')
        rows.append(cells)
    return table([""] + [esc(n) for n in names], rows)


def _fit_quality(an: Analysis) -> str:
    rows = []
    for label, rec in an.fits:
        if "success" not in rec:
            continue
        chi2 = rec.get("reduced_chi2")
        used = rec.get("n_used")
        total = rec.get("n_points")
        rows.append([esc(rec.get("kind") or label),
                     "yes" if rec.get("success") else "<strong>no</strong>",
                     num(esc(f"{used} of {total}" if used is not None else total or "")),
                     num(esc(f"{chi2:.3g}" if isinstance(chi2, (int, float)) else "\u2014")),
                     misfit_cell(rec), esc(rec.get("message") or "")])
    if not rows:
        return ""
    return "<h3>Fits</h3>" + table(["Fit", "Converged", "Points used", "Reduced \u03c7\u00b2",
                                     "Misfit", "Message"], rows) + noise_note(an)


def noise_note(an: Analysis) -> str:
    """What the fits' chi-square was judged against: the stated noise and its source,
    or the noise estimated from the residuals."""
    stated = (an.model.extras.get("stated_noise") if an.model is not None else None) or {}
    said = [f"{'the SMU' if k == 'iv' else 'the LCR meter'}'s from {v.get('source', '?')}"
            for k, v in stated.items() if isinstance(v, dict)]
    if said:
        return (f"<p>Reduced \u03c7\u00b2 is judged against the instruments' stated noise "
                f"({esc('; '.join(said))}): near 1 when the model describes the data.</p>")
    return ("<p>No instrument noise was stated, so each fit estimated it from its own "
            "residuals: reduced \u03c7\u00b2 is near 1 by construction, and only the runs "
            "test of residual signs can flag a misfit (a plan or dialect can state the "
            "noise).</p>")


def misfit_cell(rec: dict) -> str:
    """Whether the lack-of-fit checks flag the fit, and against what: the stated
    instrument noise (chi-square and runs test) or the estimated one (runs test only,
    since chi-square is ~1 by construction)."""
    lack = rec.get("lack_of_fit")
    if not isinstance(lack, dict):
        return "\u2014"
    noises = [v for k, v in rec.items() if k.startswith("noise") and isinstance(v, dict)]
    stated = bool(noises) and not any(v.get("estimated", True) for v in noises)
    basis = "against the stated noise" if stated else "runs test; noise estimated"
    if lack.get("misfit"):
        return f"<strong>MISFIT</strong> ({esc(basis)})"
    return f"none found ({esc(basis)})"


#: Relative rms scatter of 1/C^2 about its line above which the report says "not straight".
_NOT_STRAIGHT = 0.05

#: Unit of a model.json extra from its key's suffix (keys carry units by convention).
_SUFFIX_UNITS = (("_ohm", "ohm"), ("_Hz", "Hz"), ("_V", "V"), ("_A", "A"), ("_F", "F"),
                 ("_S", "S"), ("_s", "s"), ("_K", "K"))


def _extra_value(key: str, value: object) -> str:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        text = value if isinstance(value, str) else json.dumps(value)
        return text if len(text) <= 200 else text[:200] + " \u2026"
    if key.endswith("_per_m3"):
        return f"{value * 1e-6:.4g} cm\u207b\u00b3"
    if key.endswith("_m2"):
        return f"{value:.4g} m\u00b2"
    for suffix, unit in _SUFFIX_UNITS:
        if key.endswith(suffix):
            return qty(value, unit)
    return f"{value:.6g}" if isinstance(value, float) else str(value)


def _extras(extras: dict) -> str:
    """Everything else model.json holds (fit digests are shown as fits and correlations)."""
    rows: list[list[str]] = []

    def walk(node: object, path: tuple[str, ...]) -> None:
        if isinstance(node, dict) and len(path) < 4:
            for key, value in node.items():
                if key != "correlation":
                    walk(value, (*path, str(key)))
        else:
            rows.append([esc(" / ".join(path)), esc(_extra_value(path[-1], node))])

    # the doping is stated once, with one sigma, in the depletion section
    walk({k: v for k, v in extras.items() if k not in ("fits", "doping")}, ())
    if not rows:
        return ""
    return "<h3>Other results in model.json</h3>" + table(["Key", "Value"], rows)


def _depletion(an: Analysis) -> str:
    ms = an.mott_schottky
    if ms is None:
        return ""
    pairs = [("C\u2013V frequency", esc(qty(ms.frequency_Hz, "Hz"))),
             ("Points on the line", esc(f"{int(ms.used.sum())} (zero and reverse bias)")),
             ("Intercept of 1/C\u00b2", esc(f"{ms.intercept_V:.4g} V")),
             ("Built-in voltage Vbi", esc(f"{ms.vbi_V:.4g} V \u00b1 {ms.vbi_sigma_V:.2g} V")),
             ("Straightness (rms of residual / 1/C\u00b2)",
              esc(f"{100 * ms.relative_rms_residual:.2g} %"))]
    if ms.fixture_F:
        pairs.append(("Fixture capacitance taken out",
                      esc(f"{qty(ms.fixture_F, 'F')} (found by {ms.fixture_fitted})")))
    if ms.from_model:
        pairs.append(("Line, Vbi and N", esc("the run's fit (model.json): every reverse "
                                             "point, weighted, with the fitted network's "
                                             "other parts and the test level removed")))
    if ms.relative_rms_residual > _NOT_STRAIGHT:
        pairs.append(("Note", esc("1/C\u00b2 is not a straight line in V: the doping is not "
                                  "uniform, so N below is an average; see N(W)")))
    if ms.doping_m3 is not None:
        pairs.append(("Doping N", esc(f"{ms.doping_m3 * 1e-6:.4g} cm\u207b\u00b3 \u00b1 "
                                      f"{ms.doping_sigma_m3 * 1e-6:.2g} cm\u207b\u00b3 "
                                      f"({ms.material})")))
    else:
        pairs.append(("Doping N", esc(f"not available: {ms.doping_note}")))
    return "<h3>Depletion (Mott\u2013Schottky)</h3>" + kv(pairs)


def area_text(area_m2: float) -> str:
    if area_m2 >= 1e-8:
        return f"{area_m2 * 1e6:.4g} mm\u00b2 ({area_m2:.4g} m\u00b2)"
    return f"{area_m2 * 1e12:.4g} \u00b5m\u00b2 ({area_m2:.4g} m\u00b2)"




def qpoints(an: Analysis) -> str:
    parts = ['<h2 id="qpoints">Small-signal equivalent at a few Q-points</h2>']
    if not an.qrows:
        parts.append("<p>Not available: no model.</p>")
        return "".join(parts)
    freqs = an.table_frequencies_Hz
    which = "measured" if an.table_frequencies_measured else "nominal (none measured)"
    parts.append(f"<p>Model values (RS in series with gd, Cj and Cd). |Z| at the {which} "
                 "frequencies; where the admittance was measured at that bias, the "
                 "measured |Z| follows in brackets.</p>")
    head = ["Q-point", "V", "I", "rd", "gd", "Cj", "Cd", "RS"]
    head += [f"|Z| at {esc(qty(f, 'Hz'))}" for f in freqs]
    rows = []
    for row in an.qrows:
        q = row.point
        rd, gd, cd = qty(q.rd_ohm, "ohm"), qty(q.gd_S, "S"), qty(q.cd_F, "F")
        if junction_off(q):  # the exact model's 1e-90 S says nothing a bench could see
            rd = f"junction off: > {qty(off_rd_bound_ohm(q), 'ohm', 3)}"
            gd = (f"leakage: {qty(1.0 / q.rsh_ohm, 'S', 3)} (RSH)"
                  if math.isfinite(q.rsh_ohm) else "leakage-limited")
            cd = "negligible"
        cells = [esc(row.origin), num(esc(qty(q.bias_voltage_V, "V"))),
                 num(esc(qty(q.bias_current_A, "A"))), num(esc(rd)), num(esc(gd)),
                 num(esc(qty(q.cj_F, "F"))), num(esc(cd)), num(esc(qty(q.rs_ohm, "ohm")))]
        for f in freqs:
            text = qty(row.impedance_ohm[f], "ohm")
            if f in row.measured_ohm:
                text += f" ({qty(row.measured_ohm[f], 'ohm')})"
            cells.append(num(esc(text)))
        rows.append(cells)
    parts.append(table(head, rows))
    return "".join(parts)
