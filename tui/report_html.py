"""The report as one self-contained HTML page: inline CSS, figures as data URIs.

Every piece of text from the run folder goes through `esc` (html.escape); nothing links
outside the page (no scripts, no stylesheets, no files, no network), so it opens offline
and can be mailed as one file.
"""

from __future__ import annotations

import base64
import html
import json
import math
import re

from quantiphy import Quantity

from pnbench.modeling.params import UNITS

from .report_analysis import Analysis
from .report_data import RunData
from .report_figures import FigureFile

_CSS = """
body{font-family:system-ui,-apple-system,"Segoe UI",Roboto,"DejaVu Sans",sans-serif;
 color:#1d2733;background:#f6f7f9;margin:0;line-height:1.45;font-size:15px}
main{max-width:1040px;margin:0 auto;padding:24px 28px 48px;background:#fff;
 border-left:1px solid #e1e5ea;border-right:1px solid #e1e5ea}
h1{font-size:1.55em;margin:0 0 2px}
h2{font-size:1.2em;margin:34px 0 10px;padding-bottom:4px;border-bottom:2px solid #24476b}
h3{font-size:1.02em;margin:18px 0 6px;color:#24476b}
.sub{color:#5a636d;margin:0 0 14px}
.badge{display:inline-block;padding:1px 9px;border-radius:10px;font-size:.85em;
 font-weight:600;color:#fff;background:#5a636d;vertical-align:middle}
.badge.completed{background:#2f7d4f}.badge.running,.badge.paused{background:#b5892e}
.badge.aborted,.badge.interrupted,.badge.failed,.badge.safety_stop{background:#a8402a}
.box{border-left:4px solid #b5892e;background:#fbf6ea;padding:8px 14px;margin:12px 0}
.box.bad{border-color:#a8402a;background:#fbefec}
.box ul{margin:4px 0;padding-left:20px}
table{border-collapse:collapse;margin:6px 0 12px;font-size:.92em}
th,td{border:1px solid #dde2e8;padding:3px 9px;text-align:left;vertical-align:top}
th{background:#eef2f6;font-weight:600}
td.num{text-align:right;font-variant-numeric:tabular-nums;white-space:nowrap}
table.kv th{width:190px}
figure{margin:14px 0 22px}
figure img{max-width:100%;height:auto;border:1px solid #e1e5ea}
figcaption{font-size:.9em;color:#3c4652;margin-top:4px}
pre{background:#f3f5f8;border:1px solid #e1e5ea;padding:8px 12px;overflow-x:auto;
 font-size:.85em}
tr.warn td{background:#fbf6ea}tr.bad td{background:#fbefec}
footer{margin-top:36px;color:#5a636d;font-size:.85em}
"""

_CAPTIONS = {
    "iv_forward": "Forward I\u2013V on a log current axis with the model, and the residual "
                  "of each measured point against it.",
    "iv_reverse": "Reverse I\u2013V on a log current axis; the breakdown voltage is "
                  "marked when the sweep reached it.",
    "cv": "Capacitance against bias with the model's prediction at the same frequency.",
    "mott_schottky": "1/C\u00b2 against bias with the Mott\u2013Schottky line; its slope "
                     "gives the doping, its intercept the built-in voltage.",
    "doping_profile": "Doping against depletion depth from the local slope of 1/C\u00b2.",
    "admittance": "Parallel conductance and capacitance against frequency at the "
                  "admittance biases, with the small-signal model's prediction.",
}
_TITLES = {"iv_forward": "Forward I\u2013V", "iv_reverse": "Reverse I\u2013V",
           "cv": "C\u2013V", "mott_schottky": "Mott\u2013Schottky (1/C\u00b2)",
           "doping_profile": "Doping profile N(W)", "admittance": "Admittance"}
_NOTICE_KINDS = ("warning", "compliance", "limit", "error")
_MICRO = re.compile(r"(?<=[\d.]) u(?=\S)")
_EVENT_ROWS = 400
_DETAIL_CHARS = 400  # an event's detail column is cut after this many characters
DASH = "\u2014"
#: Currents, capacitances and conductances below this print as 0 (zepto scale).
_NEGLIGIBLE = 1e-21


def esc(value: object) -> str:
    return html.escape(str(value), quote=True)


def qty(value: float | None, unit: str, prec: int = 4) -> str:
    """A value with SI prefix and unit for people ("2.5 mA", "800 m\u03a9")."""
    if value is None:
        return "\u2014"
    value = float(value)
    unit = "\u03a9" if unit == "ohm" else unit
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


def _table(head: list[str], rows: list[list[str]], cls: str = "",
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


def _num(text: str) -> str:
    return f'<td class="num">{text}</td>'


def _kv(pairs: list[tuple[str, str]]) -> str:
    rows = "".join(f"<tr><th>{esc(k)}</th><td>{v}</td></tr>" for k, v in pairs)
    return f'<table class="kv">{rows}</table>'


def _header(data: RunData, an: Analysis, version: str) -> str:
    run = data.run or {}
    status = str(run.get("status", "unknown"))
    t = f"{an.temperature_K:.2f} K" + ("" if an.temperature_known else " (assumed)")
    simulated = run.get("simulated")
    pairs = [
        ("Status", f'<span class="badge {esc(status)}">{esc(status)}</span> '
                   f"{esc(run.get('reason') or '')}"),
        ("Started / ended", esc(run.get("started") or DASH) + " / "
         + esc(run.get("ended") or DASH)),
        ("Temperature", esc(t)),
        ("Run recorded by", esc(f"pnbench {run['software_version']}"
                                if run.get("software_version") else "unknown version")),
        ("Report made by", esc(f"pnbench {version}")),
        ("Instruments", esc(f"simulated bench (device {simulated})") if simulated
         else "real instruments" if data.run else "unknown"),
    ]
    if run.get("resume_count"):
        pairs.append(("Resumed", esc(f"{run['resume_count']} time(s)")))
    if "outputs_off_confirmed" in run:
        pairs.append(("Outputs off at the end",
                      "confirmed" if run["outputs_off_confirmed"] else
                      "<strong>not confirmed</strong>"))
    return (f"<h1>Run report: {esc(data.device_name)}</h1>"
            f'<p class="sub">Run folder {esc(data.run_dir.name)}</p>' + _kv(pairs))


def _missing(data: RunData, items: list[str]) -> str:
    if not items:
        return ""
    status = (data.run or {}).get("status")
    cls = "box bad" if status and status != "completed" else "box"
    lis = "".join(f"<li>{esc(i)}</li>" for i in items)
    return (f'<div class="{cls}" id="missing"><strong>Missing from this report</strong>'
            f"<ul>{lis}</ul></div>")


def _parameters(data: RunData, an: Analysis) -> str:
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
        rows.append([f"<strong>{esc(name)}</strong>", _num(esc(qty(value, UNITS[name]))),
                     _num(esc(qty(sigma, UNITS[name], prec=2) if sigma is not None else "unknown")),
                     _num(esc(rel))])
    parts.append(_table(["Parameter", "Value", "\u03c3", "\u03c3 / value"], rows))
    parts.append(_fit_quality(an))
    for label, names, matrix in an.correlations:
        parts.append(f"<h3>Correlation of the estimates ({esc(label)})</h3>")
        parts.append(_correlation_table(names, matrix))
    if an.correlations:
        parts.append("<p>|r| above 0.9 (bold) means the data hardly tell those "
                     "parameters apart.</p>")
    parts.append(_depletion(an))
    card = data.card_text or m.card_text(_card_name(data.device_name))
    source = data.card_name or "made from model.json"
    parts.append(f"<h3>Model card ({esc(source)})</h3><pre>{esc(card)}</pre>")
    return "".join(parts)


def _correlation_table(names: tuple[str, ...], matrix) -> str:
    rows = []
    for a, line in zip(names, matrix, strict=True):
        cells = [f"<strong>{esc(a)}</strong>"]
        for r in line:
            if not math.isfinite(r):
                cells.append(_num("\u2014"))
                continue
            weight = "font-weight:600;" if abs(r) > 0.9 else ""
            colour = "36,71,107" if r >= 0 else "209,96,61"
            cells.append(f'<td class="num" style="{weight}background:rgba({colour},'
                         f'{0.45 * min(1.0, abs(r)):.2f})">{esc(f"{r:+.2f}")}</td>')
        rows.append(cells)
    return _table([""] + [esc(n) for n in names], rows)


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
                     _num(esc(f"{used} of {total}" if used is not None else total or "")),
                     _num(esc(f"{chi2:.3g}" if isinstance(chi2, (int, float)) else "\u2014")),
                     esc(rec.get("message") or "")])
    if not rows:
        return ""
    return "<h3>Fits</h3>" + _table(["Fit", "Converged", "Points used", "Reduced \u03c7\u00b2",
                                     "Message"], rows)


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
    if ms.doping_m3 is not None:
        pairs.append(("Doping N", esc(f"{ms.doping_m3 * 1e-6:.4g} cm\u207b\u00b3 \u00b1 "
                                      f"{ms.doping_sigma_m3 * 1e-6:.2g} cm\u207b\u00b3 "
                                      f"({ms.material})")))
    else:
        pairs.append(("Doping N", esc(f"not available: {ms.doping_note}")))
    return "<h3>Depletion (Mott\u2013Schottky)</h3>" + _kv(pairs)


def _area(area_m2: float) -> str:
    if area_m2 >= 1e-8:
        return f"{area_m2 * 1e6:.4g} mm\u00b2 ({area_m2:.4g} m\u00b2)"
    return f"{area_m2 * 1e12:.4g} \u00b5m\u00b2 ({area_m2:.4g} m\u00b2)"


def _card_name(name: str) -> str:
    clean = re.sub(r"[^A-Za-z0-9_.+\-]", "_", name) or "dut"
    return clean if clean[0].isalpha() else "d" + clean


def _figures(figures: list[FigureFile]) -> str:
    parts = ['<h2 id="figures">Figures</h2>']
    if not figures:
        parts.append("<p>No figure could be drawn from this run.</p>")
    for fig in figures:
        data = base64.b64encode(fig.png).decode("ascii")
        parts.append(
            f'<figure id="fig-{esc(fig.name)}"><h3>{esc(_TITLES[fig.name])}</h3>'
            f'<img alt="{esc(_TITLES[fig.name])}" src="data:image/png;base64,{data}">'
            f"<figcaption>{esc(_CAPTIONS[fig.name])} Files: figures/{esc(fig.png_path.name)}"
            f", figures/{esc(fig.svg_path.name)}.</figcaption></figure>")
    return "".join(parts)


def _qpoints(an: Analysis) -> str:
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
        cells = [esc(row.origin), _num(esc(qty(q.bias_voltage_V, "V"))),
                 _num(esc(qty(q.bias_current_A, "A"))), _num(esc(qty(q.rd_ohm, "ohm"))),
                 _num(esc(qty(q.gd_S, "S"))), _num(esc(qty(q.cj_F, "F"))),
                 _num(esc(qty(q.cd_F, "F"))), _num(esc(qty(q.rs_ohm, "ohm")))]
        for f in freqs:
            text = qty(row.impedance_ohm[f], "ohm")
            if f in row.measured_ohm:
                text += f" ({qty(row.measured_ohm[f], 'ohm')})"
            cells.append(_num(esc(text)))
        rows.append(cells)
    parts.append(_table(head, rows))
    return "".join(parts)


def _device_and_instruments(data: RunData, an: Analysis) -> str:
    dev = data.device
    parts = ['<h2 id="device">Device and instruments</h2>']
    area = data.area_m2
    parts.append(_kv([
        ("Device", esc(data.device_name)),
        ("Area", esc(_area(area)) if area else "not recorded"),
        ("Material", esc(data.material or "not recorded")),
        ("Temperature", esc(f"{an.temperature_K:.2f} K")),
        ("Notes", esc(dev.get("notes") or "\u2014")),
    ]))
    instruments = (data.run or {}).get("instruments") or {}
    if isinstance(instruments, dict) and instruments:
        rows = []
        for role, info in instruments.items():
            info = info if isinstance(info, dict) else {"identity": info}
            rows.append([esc(role), esc(info.get("identity") or "not identified"),
                         esc(info.get("resource", "")), esc(info.get("backend", "")),
                         esc(info.get("dialect") or "default")])
        parts.append(_table(["Role", "Identity", "Resource", "Backend", "Dialect"], rows))
    else:
        parts.append("<p>No instrument record.</p>")
    return "".join(parts)


def _plan(data: RunData) -> str:
    run = data.run or {}
    parts = ['<h2 id="plan">Plan and limits</h2>']
    limits = run.get("limits")
    if isinstance(limits, dict) and limits:
        parts.append("<h3>Safety limits</h3>")
        parts.append(_kv([(k, esc("none" if v is None else _plain(v)))
                          for k, v in limits.items()]))
    steps = run.get("steps")
    if isinstance(steps, list) and steps:
        rows = [[esc(s.get("name", "")), esc(s.get("kind", "")),
                 _num(esc(s.get("done", ""))), _num(esc(s.get("planned", ""))),
                 esc(s.get("status", "")), esc(s.get("ended_by") or "")]
                for s in steps if isinstance(s, dict)]
        parts.append("<h3>Steps</h3>")
        parts.append(_table(["Step", "Kind", "Done", "Planned", "Status", "Ended by"], rows))
    parts.append("<h3>Plan as run (plan.toml)</h3>")
    parts.append(f"<pre>{esc(data.plan_text)}</pre>" if data.plan_text is not None
                 else "<p>plan.toml is missing.</p>")
    return "".join(parts)


def _plain(value: object) -> str:
    return value if isinstance(value, str) else json.dumps(value)


def _event_detail(event: dict) -> str:
    rest = {k: v for k, v in event.items() if k not in ("seq", "time_s", "kind", "step")}
    message = rest.pop("message", None)
    text = "; ".join(f"{k} = {_plain(v)}" for k, v in rest.items())
    detail = " \u2014 ".join(x for x in (message and str(message), text) if x)
    return detail if len(detail) <= _DETAIL_CHARS else detail[:_DETAIL_CHARS] + " \u2026"


def _events(data: RunData) -> str:
    events = data.events
    parts = ['<h2 id="events">Warnings and events</h2>']
    notices = [e for e in events if e.get("kind") in _NOTICE_KINDS]
    if notices:
        lis = "".join(f"<li><strong>{esc(e.get('kind'))}</strong>"
                      f"{esc(' in ' + str(e['step']) if e.get('step') else '')}: "
                      f"{esc(_event_detail(e))}</li>" for e in notices)
        parts.append(f'<div class="box"><strong>{len(notices)} warning(s), compliance or '
                     f"limit event(s) and error(s)</strong><ul>{lis}</ul></div>")
    else:
        parts.append("<p>No warnings, compliance, limit or error events.</p>")
    fits = sum(1 for e in events if e.get("kind") == "fit")
    shown = [e for e in events if e.get("kind") != "fit"]
    if fits:
        parts.append(f"<p>{fits} fit updates are in events.jsonl and not listed here.</p>")
    if len(shown) > _EVENT_ROWS:
        parts.append(f"<p>The first {_EVENT_ROWS} of {len(shown)} events are listed.</p>")
    rows, classes = [], []
    for e in shown[:_EVENT_ROWS]:
        t = e.get("time_s")
        rows.append([_num(esc(e.get("seq", ""))),
                     _num(esc(f"{t:.3f} s" if isinstance(t, (int, float)) else "")),
                     esc(e.get("kind", "")), esc(e.get("step") or ""),
                     esc(_event_detail(e))])
        kind = e.get("kind")
        classes.append("bad" if kind in ("error", "limit") else
                       "warn" if kind in _NOTICE_KINDS else "")
    if rows:
        parts.append(_table(["#", "Time", "Kind", "Step", "Detail"], rows,
                            row_classes=classes))
    return "".join(parts)


def render(data: RunData, an: Analysis, figures: list[FigureFile], missing: list[str],
           version: str, made_at: str) -> str:
    """The whole report page as a string."""
    body = "".join([
        _header(data, an, version), _missing(data, missing), _parameters(data, an),
        _figures(figures), _qpoints(an), _device_and_instruments(data, an), _plan(data),
        _events(data),
        f"<footer>Made by pnbench {esc(version)} at {esc(made_at)} from the files of this "
        "run folder.</footer>",
    ])
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            "<meta name=\"viewport\" content=\"width=device-width,initial-scale=1\">"
            f"<title>Run report: {esc(data.device_name)}</title><style>{_CSS}</style>"
            f"</head><body><main>{body}</main></body></html>\n")
