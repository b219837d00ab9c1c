"""The report as one self-contained HTML page: inline CSS, figures as data URIs.

Every piece of text from the run folder goes through `esc` (html.escape); nothing links
outside the page (no scripts, no stylesheets, no files, no network), so it opens offline
and can be mailed as one file.
"""

from __future__ import annotations

import base64
import json

from pnbench.sweeps.events import Compliance, ErrorEvent, Event, Fit, Limit, WarningEvent
from pnbench.tui.report import arrhenius, rehearsal
from pnbench.tui.report.analysis import Analysis
from pnbench.tui.report.data import RunData
from pnbench.tui.report.figures import FigureFile
from pnbench.tui.report.tables import (
    DASH,
    area_text,
    esc,
    kv,
    num,
    parameters,
    qpoints,
    qty,
    table,
)

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
    arrhenius.NAME: arrhenius.CAPTION, arrhenius.IV_NAME: arrhenius.IV_CAPTION,
}
_TITLES = {"iv_forward": "Forward I\u2013V", "iv_reverse": "Reverse I\u2013V",
           "cv": "C\u2013V", "mott_schottky": "Mott\u2013Schottky (1/C\u00b2)",
           "doping_profile": "Doping profile N(W)", "admittance": "Admittance",
           arrhenius.NAME: arrhenius.TITLE, arrhenius.IV_NAME: arrhenius.IV_TITLE}
_NOTICES = (WarningEvent, Compliance, Limit, ErrorEvent)
_BAD = (ErrorEvent, Limit)
_EVENT_ROWS = 400
_DETAIL_CHARS = 400  # an event's detail column is cut after this many characters


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
            f'<p class="sub">Run folder {esc(data.run_dir.name)}</p>' + kv(pairs))


def _missing(data: RunData, items: list[str]) -> str:
    if not items:
        return ""
    status = (data.run or {}).get("status")
    cls = "box bad" if status and status != "completed" else "box"
    lis = "".join(f"<li>{esc(i)}</li>" for i in items)
    return (f'<div class="{cls}" id="missing"><strong>Missing from this report</strong>'
            f"<ul>{lis}</ul></div>")


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


def _device_and_instruments(data: RunData, an: Analysis) -> str:
    dev = data.device
    parts = ['<h2 id="device">Device and instruments</h2>']
    area = data.area_m2
    parts.append(kv([
        ("Device", esc(data.device_name)),
        ("Area", esc(area_text(area)) if area else "not recorded"),
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
        parts.append(table(["Role", "Identity", "Resource", "Backend", "Dialect"], rows))
    else:
        parts.append("<p>No instrument record.</p>")
    parts.append(_correction((data.run or {}).get("lcr_correction")))
    return "".join(parts)


def _correction(record: object) -> str:
    """The LCR meter's fixture correction as run.json records it."""
    if not isinstance(record, dict) or not record.get("done"):
        return "<p>LCR fixture correction: none run by pnbench in this run.</p>"
    which = " then ".join(str(w) for w in record.get("corrections") or ())
    how = ("unattended, the fixture states prepared in advance" if record.get("confirmed")
           else "each fixture state confirmed by the operator")
    parts = [f"<p>LCR fixture correction: {esc(which)} ({esc(how)}).</p>"]
    runs = record.get("runs") if isinstance(record.get("runs"), list) else []
    if any(isinstance(r, dict) and r.get("applied_by") == "software" for r in runs):
        parts.append("<p>Compensated in software from the values below: points.csv holds "
                     "the raw readings, the fits and this report's C–V figures use the "
                     "compensated ones.</p>")
    values = record.get("values") or {}
    if any(isinstance(v, dict) and v.get("measured_by") == "pnbench"
           for v in values.values()):
        n = next(v.get("readings") for v in values.values() if isinstance(v, dict))
        parts.append(f"<p>pnbench read the open and the short itself, as ordinary "
                     f"readings (the mean of {esc(str(n))} each), at every test level and "
                     "frequency of the C–V and admittance steps.</p>")
    for r in runs:
        if isinstance(r, dict) and r.get("reason"):
            parts.append(f"<p>{esc(str(r['reason']))}.</p>")
    at = [r["set_point_K"] for r in runs if isinstance(r, dict)
          and isinstance(r.get("set_point_K"), (int, float))]
    if len(at) > 1:
        parts.append("<p>Run at each stage set point: "
                     + esc(", ".join(f"{t:g} K" for t in at))
                     + "; the values below are the last.</p>")
    rows = []
    for which, data in values.items():
        if not isinstance(data, dict):
            rows.append([esc(which), "the meter does not report it", "", "", ""])
            continue
        cols = (("C_F", "F"), ("G_S", "S")) if which == "open" else (("R_ohm", "Ω"),
                                                                      ("X_ohm", "Ω"))
        for k, f in enumerate(data.get("frequency_Hz") or ()):
            level = _at(data.get("ac_level_V"), k)
            rows.append([esc(which), num(esc(qty(f, "Hz"))),
                         num(esc(qty(level, "V"))) if level is not None else "",
                         *[num(esc(qty(_at(data.get(c), k), u))) for c, u in cols]])
    if rows:
        parts.append(table(["Correction", "Frequency", "Test level", "C or R", "G or X"],
                           rows))
    return "".join(parts)


def _at(values: object, k: int) -> float | None:
    try:
        value = values[k]  # type: ignore[index]
    except (TypeError, IndexError, KeyError):
        return None
    return value if isinstance(value, (int, float)) else None


def _plan(data: RunData) -> str:
    run = data.run or {}
    parts = ['<h2 id="plan">Plan and limits</h2>']
    limits = run.get("limits")
    if isinstance(limits, dict) and limits:
        parts.append("<h3>Safety limits</h3>")
        parts.append(kv([(k, esc("none" if v is None else _plain(v)))
                          for k, v in limits.items()]))
    steps = run.get("steps")
    if isinstance(steps, list) and steps:
        rows = [[esc(s.get("name", "")), esc(s.get("kind", "")),
                 num(esc(s.get("done", ""))), num(esc(s.get("planned", ""))),
                 esc(s.get("status", "")), esc(s.get("ended_by") or "")]
                for s in steps if isinstance(s, dict)]
        parts.append("<h3>Steps</h3>")
        parts.append(table(["Step", "Kind", "Done", "Planned", "Status", "Ended by"], rows))
    parts.append("<h3>Plan as run (plan.toml)</h3>")
    parts.append(f"<pre>{esc(data.plan_text)}</pre>" if data.plan_text is not None
                 else "<p>plan.toml is missing.</p>")
    return "".join(parts)


def _plain(value: object) -> str:
    return value if isinstance(value, str) else json.dumps(value)


def _event_detail(event: Event) -> str:
    rest = event.payload()
    message = rest.pop("message", None)
    text = "; ".join(f"{k} = {_plain(v)}" for k, v in rest.items())
    detail = " \u2014 ".join(x for x in (message and str(message), text) if x)
    return detail if len(detail) <= _DETAIL_CHARS else detail[:_DETAIL_CHARS] + " \u2026"


def _events(data: RunData) -> str:
    events = data.events
    parts = ['<h2 id="events">Warnings and events</h2>']
    notices = [e for e in events if isinstance(e, _NOTICES)]
    if notices:
        lis = "".join(f"<li><strong>{esc(e.kind)}</strong>"
                      f"{esc(' in ' + str(e.step) if e.step else '')}: "
                      f"{esc(_event_detail(e))}</li>" for e in notices)
        parts.append(f'<div class="box"><strong>{len(notices)} warning(s), compliance or '
                     f"limit event(s) and error(s)</strong><ul>{lis}</ul></div>")
    else:
        parts.append("<p>No warnings, compliance, limit or error events.</p>")
    fits = sum(1 for e in events if isinstance(e, Fit))
    shown = [e for e in events if not isinstance(e, Fit)]
    if fits:
        parts.append(f"<p>{fits} fit updates are in events.jsonl and not listed here.</p>")
    if len(shown) > _EVENT_ROWS:
        parts.append(f"<p>The first {_EVENT_ROWS} of {len(shown)} events are listed.</p>")
    rows, classes = [], []
    for e in shown[:_EVENT_ROWS]:
        t = e.time_s
        rows.append([num(esc(e.seq)),
                     num(esc(f"{t:.3f} s" if isinstance(t, (int, float)) else "")),
                     esc(e.kind), esc(e.step or ""), esc(_event_detail(e))])
        classes.append("bad" if isinstance(e, _BAD) else
                       "warn" if isinstance(e, _NOTICES) else "")
    if rows:
        parts.append(table(["#", "Time", "Kind", "Step", "Detail"], rows,
                            row_classes=classes))
    return "".join(parts)


def render(data: RunData, an: Analysis, figures: list[FigureFile], missing: list[str],
           version: str, made_at: str) -> str:
    """The whole report page as a string."""
    body = "".join([
        _header(data, an, version), _missing(data, missing), parameters(data, an),
        rehearsal.section(data), _figures(figures), qpoints(an),
        _device_and_instruments(data, an), _plan(data), _events(data),
        f"<footer>Made by pnbench {esc(version)} at {esc(made_at)} from the files of this "
        "run folder.</footer>",
    ])
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            "<meta name=\"viewport\" content=\"width=device-width,initial-scale=1\">"
            f"<title>Run report: {esc(data.device_name)}</title><style>{_CSS}</style>"
            f"</head><body><main>{body}</main></body></html>\n")
