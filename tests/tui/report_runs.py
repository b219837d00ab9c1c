"""Synthetic run folders for the report tests, written per the run-folder contract.

Points come from the project's own physics (modeling.junction, modeling.smallsignal) for
an invented switching diode of an invented lab, with a little seeded noise, so the tests
need neither the sweep engine nor the simulated bench.
"""

from __future__ import annotations

import io
import json
from html.parser import HTMLParser
from pathlib import Path

import numpy as np

from pnbench.modeling import junction, smallsignal
from pnbench.modeling.fitresult import FitResult
from pnbench.modeling.modelset import ModelSet
from pnbench.modeling.params import DiodeParams

#: The invented device: a small-signal silicon diode of the Halden Ridge test lab.
TRUE = DiodeParams(IS=2.0e-14, N=1.05, RS=0.8, CJO=4.0e-12, VJ=0.75, M=0.5, TT=5.0e-9,
                   BV=60.0, IBV=1.0e-5)
AREA_M2 = 1.0e-8
TEMPERATURE_K = 300.15
IV_COMPLIANCE_A = 0.1
REVERSE_COMPLIANCE_A = 1.0e-3
CV_FREQUENCY_HZ = 1.0e6
SPECTRUM_BIASES_V = (0.55, 0.6, 0.65)
SPECTRUM_FREQUENCIES_HZ = (1e3, 1e4, 1e5, 1e6)

HEADER = ("step,index,kind,time_s,voltage_V,current_A,frequency_Hz,capacitance_F,"
          "conductance_S,compliance")


def _rows(params: DiodeParams, rng: np.random.Generator, parts: tuple[str, ...]):
    rows = []
    t = 0.0
    if "forward" in parts:
        for k, v in enumerate(np.arange(0.0, 1.0001, 0.02)):
            i = float(junction.current(v, params, TEMPERATURE_K))
            hit = i >= IV_COMPLIANCE_A
            i = IV_COMPLIANCE_A if hit else i * (1 + 0.003 * rng.standard_normal())
            t += 0.05
            rows.append(("forward_iv", k, "iv", t, v, i, "", "", "", int(hit)))
    if "reverse" in parts:
        for k, v in enumerate(np.arange(0.0, -61.0001, -1.0)):
            i = float(junction.current(v, params, TEMPERATURE_K))
            hit = i <= -REVERSE_COMPLIANCE_A
            i = -REVERSE_COMPLIANCE_A if hit else i * (1 + 0.003 * rng.standard_normal())
            t += 0.05
            rows.append(("reverse_iv", k, "iv", t, v, i, "", "", "", int(hit)))
    if "cv" in parts:
        for k, v in enumerate(np.arange(-10.0, 0.30001, 0.25)):
            y = smallsignal.device_admittance(v, CV_FREQUENCY_HZ, params, TEMPERATURE_K)
            c, g = smallsignal.parallel_from_admittance(y, CV_FREQUENCY_HZ)
            t += 0.1
            rows.append(("cv", k, "cv", t, v, "", CV_FREQUENCY_HZ,
                         float(c) * (1 + 0.002 * rng.standard_normal()), float(g), 0))
    if "admittance" in parts:
        k = 0
        for v in SPECTRUM_BIASES_V:
            for f in SPECTRUM_FREQUENCIES_HZ:
                y = smallsignal.device_admittance(v, f, params, TEMPERATURE_K)
                c, g = smallsignal.parallel_from_admittance(y, f)
                t += 0.1
                rows.append(("admittance", k, "cv", t, v, "", f,
                             float(c) * (1 + 0.003 * rng.standard_normal()),
                             float(g) * (1 + 0.003 * rng.standard_normal()), 0))
                k += 1
    return rows


def _cell(x) -> str:
    return x if isinstance(x, str) else repr(float(x)) if isinstance(x, float) else str(x)


def write_points(path: Path, rows, *, area: bool = True) -> None:
    lines = ["# device = hr-sw-101", f"# temperature_K = {TEMPERATURE_K}"]
    if area:
        lines.append(f"# area_m2 = {AREA_M2}")
    lines.append(HEADER)
    lines += [",".join(_cell(c) for c in row) for row in rows]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")


STEPS = {
    "forward": ("forward_iv", "iv_forward", 51),
    "reverse": ("reverse_iv", "iv_reverse", 62),
    "cv": ("cv", "cv", 42),
    "admittance": ("admittance", "admittance", 12),
}


def make_run(root: Path, *, parts=("forward", "reverse", "cv", "admittance"),
             status: str = "completed", area: bool = True, model: bool = True,
             seed: int = 7, name: str = "20260101-120000_hr-sw-101") -> Path:
    """A run folder with the chosen steps measured; the others are planned, not done."""
    run_dir = root / name
    run_dir.mkdir(parents=True)
    rng = np.random.default_rng(seed)
    rows = _rows(TRUE, rng, parts)
    write_points(run_dir / "points.csv", rows, area=area)
    steps = []
    for step, kind, planned in STEPS.values():
        done = sum(1 for r in rows if r[0] == step)
        steps.append({"name": step, "kind": kind, "planned": planned, "done": done,
                      "status": "completed" if done == planned else
                      ("interrupted" if done else "pending")})
    run = {
        "format": 1, "status": status,
        "reason": "" if status == "completed" else "the operator pressed abort",
        "device": {"name": "hr-sw-101", "area_m2": AREA_M2 if area else None,
                   "material": "Si", "temperature_K": TEMPERATURE_K,
                   "notes": "Halden Ridge lot 7 <sample 3> & spare"},
        "instruments": {
            "smu": {"resource": "TCPIP::127.0.0.1::5025::SOCKET", "backend": "@py",
                    "dialect": "default", "identity": "Simulated,SMU-SIM,0001,1.0"},
            "lcr": {"resource": "TCPIP::127.0.0.1::5026::SOCKET", "backend": "@py",
                    "dialect": "default", "identity": "Simulated,LCR-SIM,0002,1.0"},
        },
        "software_version": "0.1.0",
        "started": "2026-01-01T12:00:00Z", "ended": "2026-01-01T12:03:10Z",
        "limits": {"max_voltage_V": 80.0, "max_current_A": 0.1, "max_power_W": 0.5},
        "steps": steps, "outputs_off_confirmed": True,
        "simulated": "hr-sw-101.toml", "resume_count": 0,
    }
    (run_dir / "run.json").write_text(json.dumps(run, indent=2), encoding="utf-8")
    (run_dir / "plan.toml").write_text(
        '[device]\nname = "hr-sw-101"\n\n[[step]]\nname = "forward_iv"\nkind = "iv"\n'
        'start_V = 0\nstop_V = 1.0\n', encoding="utf-8")
    events = [{"seq": 0, "time_s": 0.0, "kind": "run_started", "step": None}]
    seq = 1
    for s in steps:
        if not s["done"]:
            continue
        events.append({"seq": seq, "time_s": seq * 1.0, "kind": "step_started",
                       "step": s["name"]})
        seq += 1
        if s["name"] == "reverse_iv":
            events.append({"seq": seq, "time_s": seq * 1.0, "kind": "compliance",
                           "step": s["name"], "voltage_V": -60.0, "current_A": -1e-3,
                           "message": "current compliance at -60 V <reached>"})
            seq += 1
        events.append({"seq": seq, "time_s": seq * 1.0, "kind": "fit", "step": s["name"],
                       "parameters": {"IS": {"value": 2e-14, "sigma": 1e-16,
                                             "settled": True}}})
        events.append({"seq": seq + 1, "time_s": seq + 1.0, "kind": "step_finished",
                       "step": s["name"]})
        seq += 2
    events.append({"seq": seq, "time_s": seq * 1.0, "kind": "warning", "step": "admittance",
                   "message": "AC level 20 mV is not small against N*Vt at forward bias"})
    events.append({"seq": seq + 1, "time_s": seq + 1.0, "kind": "run_finished",
                   "step": None, "status": status})
    (run_dir / "events.jsonl").write_text(
        "".join(json.dumps(e) + "\n" for e in events), encoding="utf-8")
    if model:
        write_model(run_dir, parts)
    return run_dir


def write_model(run_dir: Path, parts) -> None:
    names = []
    if "forward" in parts:
        names += ["IS", "N", "RS"]
    if "reverse" in parts:
        names += ["BV", "IBV"]
    if "cv" in parts:
        names += ["CJO", "VJ", "M"]
    if "admittance" in parts:
        names += ["TT"]
    values = {n: getattr(TRUE, n) for n in names}
    sigmas = {n: abs(v) * 0.01 for n, v in values.items()}
    extras = {"device": "hr-sw-101"}
    if "forward" in parts:
        extras["fits"] = {"iv_forward": forward_fit_summary()}
    model = ModelSet(values=values, sigmas=sigmas, temperature_K=TEMPERATURE_K,
                     extras=extras)
    (run_dir / "model.json").write_text(json.dumps(model.to_json_dict(), indent=2),
                                        encoding="utf-8")
    (run_dir / "hr-sw-101.lib").write_text(model.card_text("hr-sw-101"), encoding="utf-8")


def forward_fit_summary() -> dict:
    """The digest a forward fit leaves in model.json (FitResult.summary())."""
    names = ("IS", "N", "RS")
    sig = np.array([TRUE.IS * 0.01, TRUE.N * 0.01, TRUE.RS * 0.01])
    corr = np.array([[1.0, 0.97, -0.62], [0.97, 1.0, -0.55], [-0.62, -0.55, 1.0]])
    result = FitResult(kind="iv_forward", names=names,
                       values={n: getattr(TRUE, n) for n in names},
                       sigmas=dict(zip(names, sig, strict=True)),
                       covariance=corr * np.outer(sig, sig), correlation=corr,
                       used=np.ones(51, dtype=bool), n_points=51, reduced_chi2=1.04,
                       success=True, message="converged <ftol> & settled")
    return result.summary()


def append_lines(path: Path, text: str) -> None:
    with open(path, "a", encoding="utf-8") as f:
        f.write(text)


# --- reading a report back ---------------------------------------------------------------

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


class PageScan(HTMLParser):
    """Collects every tag, every URL-bearing attribute and the visible text."""

    URL_ATTRIBUTES = {"src", "href", "srcset", "data", "action", "poster", "xlink:href",
                      "background", "formaction", "manifest"}

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, dict]] = []
        self.urls: list[tuple[str, str, str]] = []
        self.text: list[str] = []
        self.styles: list[str] = []
        self._in_style = False

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        self.tags.append((tag, attrs))
        for name, value in attrs.items():
            if name in self.URL_ATTRIBUTES:
                self.urls.append((tag, name, value or ""))
        self._in_style = tag == "style"

    def handle_endtag(self, tag):
        self._in_style = False

    def handle_data(self, data):
        (self.styles if self._in_style else self.text).append(data)


def scan(path: Path) -> PageScan:
    page = PageScan()
    page.feed(path.read_text(encoding="utf-8"))
    page.close()
    return page


def check_png(payload: bytes) -> tuple[int, int]:
    """Signature, then a full decode with matplotlib (shape of the decoded image)."""
    import matplotlib.image

    assert payload.startswith(PNG_SIGNATURE)
    image = matplotlib.image.imread(io.BytesIO(payload), format="png")
    assert image.ndim == 3 and image.shape[0] > 200 and image.shape[1] > 300
    return image.shape[0], image.shape[1]
