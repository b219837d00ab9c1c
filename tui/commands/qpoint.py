"""`pnbench qpoint`: the small-signal equivalent of a model at one bias point.

    pnbench qpoint MODEL (--bias-voltage V | --bias-current I) [--freq F [F ...]]
                   [--temperature K] [--ac-level V] [--json]

MODEL is a model.json, a model-card file (``.model NAME D(...)``) or a run folder that
holds model.json. Quantities take SI prefixes and an optional unit ("650m", "2.5mA",
"1MHz", "300 K"; a negative value with a prefix as ``--bias-voltage=-500m``, since
argparse takes "-500m" for an option). The temperature defaults to the model's; away
from it the whole card moves with the reference simulator's temperature equations
(docs/physics.md §3; modeling.temperature: IS with EG and XTI, VJ and CJO through the
band gap, RS and BV with TRS, TRS2 and TCV), so rd, Cj, Cd and Y(f) are those a
simulator gives there.
"""

from __future__ import annotations

import math

HELP = "small-signal equivalent (rd, gd, Cj, Cd, RS, admittance) of a model at a bias point"


def add_arguments(parser) -> None:
    parser.add_argument("model", metavar="MODEL",
                        help="model.json, model-card file (.model NAME D(...)) or run folder")
    bias = parser.add_mutually_exclusive_group(required=True)
    bias.add_argument("--bias-voltage", metavar="V",
                      help="terminal bias voltage, e.g. 0.65, 650m, -5V (write a negative "
                           "value with a prefix as --bias-voltage=-500m)")
    bias.add_argument("--bias-current", metavar="I",
                      help="bias current (anode to cathode), e.g. 1m, 2.5mA, 1e-3 (write a "
                           "negative value with a prefix as --bias-current=-10uA)")
    parser.add_argument("--freq", metavar="F", nargs="+", default=[],
                        help="one or more frequencies for the admittance, e.g. 1k 100k 1MHz")
    parser.add_argument("--temperature", metavar="K",
                        help="temperature in kelvin (default: the model's, else 300.15 K)")
    parser.add_argument("--ac-level", metavar="V",
                        help="rms AC test level of a meter: say whether it is small against "
                             "N*Vt at this bias and what error it implies")
    parser.add_argument("--json", action="store_true", help="print one JSON object")


def load_model(path_text: str):
    """A ModelSet from a model.json, a model-card file or a run folder (DataFileError)."""
    import json
    from pathlib import Path

    from pnbench.errors import DataFileError
    from pnbench.modeling.modelset import ModelSet

    path = Path(path_text)
    if path.is_dir():
        from pnbench.sweeps import record

        if not record.has(path, record.layout.MODEL):
            raise DataFileError(f"{path}: a folder without model.json; give a model.json, "
                                f"a model-card file, or a run folder that has a fitted model")
        path = Path(record.model_source(path))
    if not path.is_file():
        raise DataFileError(f"{path}: no such file or folder; give a model.json, a "
                            f"model-card file or a run folder")
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise DataFileError(f"{path}: cannot read it as text ({exc})") from None
    if path.suffix.lower() == ".json" or text.lstrip().startswith("{"):
        try:
            document = json.loads(text)
        except json.JSONDecodeError as exc:
            raise DataFileError(f"{path}, line {exc.lineno}, column {exc.colno}: not valid "
                                f"JSON ({exc.msg})") from None
        return ModelSet.from_json_dict(document, source=str(path))
    return ModelSet.from_card_text(text, source=str(path))


#: What a diode model card can plausibly hold (SI units; inclusive). Far outside these a
#: card is a typo or a hostile file, and the exponentials of the junction law overflow.
#: Common practice, no source: the widest values found in data sheets and model libraries
#: with a margin of several decades.
MODEL_RANGES = {
    "IS": (1e-40, 1.0), "N": (0.1, 50.0), "RS": (0.0, 1e9), "RSH": (1e-3, math.inf),
    "CJO": (0.0, 1e-3), "VJ": (0.01, 10.0), "M": (0.0, 5.0), "FC": (0.0, 0.99),
    "TT": (0.0, 1.0), "BV": (1e-3, math.inf), "IBV": (1e-18, 1e3), "EG": (0.05, 10.0),
    "XTI": (-100.0, 100.0),
}
#: Option ranges: a bench diode's bias, the frequencies an LCR meter or network analyser
#: covers, temperatures from a cryostat to a furnace, a meter's AC test level.
BIAS_V_MAX = 1e4
BIAS_A_MAX = 1e3
FREQ_HZ = (1e-3, 1e12)
TEMPERATURE_K = (1.0, 2000.0)
AC_LEVEL_V_MAX = 100.0


def check_model(params, source: str) -> None:
    """BadInput naming the parameter when a model holds a value no diode has."""
    from pnbench.errors import BadInput

    for name, (low, high) in MODEL_RANGES.items():
        value = getattr(params, name)
        if not (low <= value <= high):
            raise BadInput(f"{source}: {name} = {value:g} is outside what a diode model "
                           f"can hold here ({low:g} to {high:g}); check the model")


def _finite_or_none(value: float) -> float | None:
    return float(value) if math.isfinite(value) else None


def evaluate(model, *, bias_voltage_V=None, bias_current_A=None, frequencies_Hz=(),
             temperature_K=None, ac_level_V_rms=None) -> dict:
    """The qpoint document (JSON-able) of a ModelSet at one bias; BadInput when the model
    or the bias is out of range or the model gives no finite value there."""
    import numpy as np

    from pnbench.errors import BadInput

    t = model.temperature_K if temperature_K is None else float(temperature_K)
    check_model(model.to_params(), "the model")
    with np.errstate(all="ignore"):
        try:
            doc = _evaluate(model, t, bias_voltage_V, bias_current_A, frequencies_Hz,
                            ac_level_V_rms)
        except (OverflowError, ZeroDivisionError, FloatingPointError) as exc:
            raise BadInput(f"the model cannot be evaluated at this bias and temperature "
                           f"({exc})") from None
    for key in ("bias_voltage_V", "bias_current_A", "junction_voltage_V", "gd_S", "cj_F",
                "cd_F", "rs_ohm"):
        if not math.isfinite(doc[key]):
            raise BadInput(f"the model gives no finite {key} at this bias and temperature; "
                           "check the model's values and the bias")
    for entry in doc["admittance"]:
        if not (math.isfinite(entry["conductance_S"]) and math.isfinite(
                entry["susceptance_S"])):
            raise BadInput(f"the model gives no finite admittance at "
                           f"{entry['frequency_Hz']:g} Hz")
    return doc


def _evaluate(model, t, bias_voltage_V, bias_current_A, frequencies_Hz, ac_level_V_rms):
    import numpy as np

    from pnbench.errors import BadInput
    from pnbench.modeling import aclevel, junction, smallsignal
    from pnbench.modeling.modelset import OTHER_CARD_PARAMETERS

    try:
        params = junction.params_at_temperature(model.to_params(), t, model.temperature_K)
    except ValueError as exc:
        raise BadInput(f"--temperature {t:g} K: {exc}") from None
    notes = []
    if t != model.temperature_K:
        notes.append(f"model values hold at {model.temperature_K:g} K (TNOM); moved to "
                     f"{t:g} K with the simulator's temperature equations (IS with EG and "
                     f"XTI, VJ and CJO through the band gap, RS and BV with TRS and TCV)")
        absent = [n for n in ("EG", "XTI") if n not in model.values]
        if absent:
            notes.append(f"the model has no {' or '.join(absent)}: the simulator defaults "
                         f"(EG 1.11 eV, XTI 3, silicon pn) are used")
    other = model.extras.get(OTHER_CARD_PARAMETERS) or {}
    if other:
        notes.append("card parameters not modeled, ignored: " + ", ".join(sorted(other)))
    if bias_current_A is not None:
        v = float(junction.voltage(bias_current_A, params, t))
        if not math.isfinite(v):
            raise BadInput(
                f"--bias-current {bias_current_A:g} A: this model cannot carry it (without "
                f"a shunt or breakdown the reverse current stays above -IS = "
                f"{-params.IS:.4g} A); give a smaller reverse current or --bias-voltage")
    q = smallsignal.operating_point(params, voltage=bias_voltage_V, current=bias_current_A,
                                    temperature_K=t)
    if not (math.isfinite(q.bias_current_A) and math.isfinite(q.bias_voltage_V)):
        raise BadInput("the bias point lies outside what the model can evaluate")
    f = np.asarray(frequencies_Hz, dtype=float)
    y = np.atleast_1d(q.admittance(f)) if f.size else np.array([], dtype=complex)
    admittance = []
    for freq, yk in zip(f, y, strict=True):
        z = 1.0 / yk if yk != 0 else complex(math.inf, 0.0)
        admittance.append({
            "frequency_Hz": float(freq),
            "conductance_S": float(yk.real), "susceptance_S": float(yk.imag),
            "resistance_ohm": _finite_or_none(z.real), "reactance_ohm": _finite_or_none(z.imag),
        })
    doc = {
        "model": model.extras.get("model_name") or model.extras.get("device"),
        "temperature_K": t,
        "bias_voltage_V": q.bias_voltage_V,
        "bias_current_A": q.bias_current_A,
        "junction_voltage_V": q.junction_voltage_V,
        "rd_ohm": _finite_or_none(q.rd_ohm),
        "gd_S": q.gd_S,
        "cj_F": q.cj_F,
        "cd_F": q.cd_F,
        "rs_ohm": q.rs_ohm,
        "rsh_ohm": _finite_or_none(q.rsh_ohm),
        "admittance": admittance,
        "notes": notes,
        "junction_off": smallsignal.junction_off(q),
    }
    if doc["junction_off"]:
        doc.update(off_figures(q, model.extras.get("leakage")))
    if ac_level_V_rms is not None:
        check = aclevel.check_ac_level(
            params, ac_level_V_rms, bias_voltage_V=q.bias_voltage_V,
            frequency_Hz=float(f.max()) if f.size else None, temperature_K=t)
        doc["ac_level"] = {
            "level_V_rms": check.level_V_rms, "junction_amplitude_V": check.junction_amplitude_V,
            "ratio_to_n_vt": check.ratio, "conductance_error": check.conductance_error,
            "distortion": check.distortion, "small": check.small,
            "recommended_level_V_rms": _finite_or_none(check.recommended_level_V_rms),
            "message": check.message,
        }
    return doc


def off_figures(q, leakage) -> dict:
    """What can be said of a junction that is off: a lower bound on its rd (N*Vt/IS), and
    the conductance that leakage sets instead: 1/RSH, or the measured leakage current
    over its voltage (a chord conductance), or an upper bound when it was below the
    floor."""
    from pnbench.modeling import smallsignal

    out: dict = {"rd_bound_ohm": smallsignal.off_rd_bound_ohm(q)}
    if math.isfinite(q.rsh_ohm):
        out["leakage_conductance_S"] = 1.0 / q.rsh_ohm
        out["leakage_from"] = "RSH"
    elif isinstance(leakage, dict) and leakage.get("voltage_V"):
        v = abs(float(leakage["voltage_V"]))
        if leakage.get("current_A") is not None:
            out["leakage_conductance_S"] = abs(float(leakage["current_A"])) / v
            out["leakage_from"] = f"measured leakage at {leakage['voltage_V']:.4g} V"
        elif leakage.get("below_A") is not None:
            out["leakage_conductance_below_S"] = abs(float(leakage["below_A"])) / v
            out["leakage_from"] = f"leakage below the floor at {leakage['voltage_V']:.4g} V"
    return out


def off_lines(doc: dict, q) -> list[tuple[str, str]]:
    """The rd/gd and Cj/Cd rows of a junction that is off, in words and bounds."""
    rd = f"junction off (reverse biased): rd > {q(doc['rd_bound_ohm'], 'ohm')} (N*Vt/IS)"
    if "leakage_conductance_S" in doc:
        g = doc["leakage_conductance_S"]
        leak = (f"leakage-limited: about {q(g, 'S')} ({q(1.0 / g, 'ohm')}) from "
                f"{doc['leakage_from']}")
    elif "leakage_conductance_below_S" in doc:
        leak = (f"leakage-limited: below {q(doc['leakage_conductance_below_S'], 'S')} "
                f"({doc['leakage_from']})")
    else:
        leak = "leakage-limited: measure the leakage for the real conductance"
    return [("rd / gd", rd), ("", leak),
            ("Cj / Cd", f"{q(doc['cj_F'], 'F')}   Cd negligible (no stored charge when off)")]


def format_table(doc: dict, source: str) -> str:
    """The compact human table of a qpoint document."""
    from pnbench.sweeps.quantities import format_quantity as fq

    def q(value, unit):
        return "inf" if value is None else fq(value, unit)

    rows = [
        ("model", f"{source}" + (f" ({doc['model']})" if doc.get("model") else "")),
        ("temperature", f"{doc['temperature_K']:.6g} K"),
        ("bias", f"{q(doc['bias_voltage_V'], 'V')}   {q(doc['bias_current_A'], 'A')}"),
        ("rd / gd", f"{q(doc['rd_ohm'], 'ohm')}   {q(doc['gd_S'], 'S')}"),
        ("Cj / Cd", f"{q(doc['cj_F'], 'F')}   {q(doc['cd_F'], 'F')}"),
        ("RS / RSH", f"{q(doc['rs_ohm'], 'ohm')}   {q(doc['rsh_ohm'], 'ohm')}"),
    ]
    if doc.get("junction_off"):
        rows[3:5] = off_lines(doc, q)
    lines = [f"{name:<12} {value}" for name, value in rows]
    if doc["admittance"]:
        lines.append("")
        head = ("frequency", "G", "B", "R", "X")
        lines.append("  ".join(f"{h:>12}" for h in head))
        for e in doc["admittance"]:
            cells = (q(e["frequency_Hz"], "Hz"), q(e["conductance_S"], "S"),
                     q(e["susceptance_S"], "S"), q(e["resistance_ohm"], "ohm"),
                     q(e["reactance_ohm"], "ohm"))
            lines.append("  ".join(f"{c:>12}" for c in cells))
    if "ac_level" in doc:
        lines.append("")
        verdict = "ok" if doc["ac_level"]["small"] else "WARNING"
        lines.append(f"AC level {verdict}: {doc['ac_level']['message']}")
    for note in doc["notes"]:
        lines.append(f"note: {note}")
    return "\n".join(lines)


def run(args) -> int:
    import json

    from pnbench.errors import BadInput
    from pnbench.sweeps.quantities import parse_quantity, within

    model = load_model(args.model)
    check_model(model.to_params(), args.model)
    bias_v = bias_i = None
    if args.bias_voltage is not None:
        bias_v = parse_quantity(args.bias_voltage, "V", what="--bias-voltage",
                                low=-BIAS_V_MAX, high=BIAS_V_MAX)
    else:
        bias_i = parse_quantity(args.bias_current, "A", what="--bias-current",
                                low=-BIAS_A_MAX, high=BIAS_A_MAX)
    freqs = [parse_quantity(text, "Hz", what="--freq", high=FREQ_HZ[1])
             for text in args.freq]
    for text, value in zip(args.freq, freqs, strict=True):
        if value <= 0:
            raise BadInput(f"--freq: {text!r} is not above 0 Hz")
        within(value, "Hz", "--freq", *FREQ_HZ)
    temperature = None
    if args.temperature is not None:
        temperature = parse_quantity(args.temperature, "K", what="--temperature")
        if temperature <= 0:
            raise BadInput(f"--temperature: {args.temperature!r} is not above 0 K "
                           f"(the value is in kelvin, e.g. 300.15)")
        within(temperature, "K", "--temperature", *TEMPERATURE_K)
    level = None
    if args.ac_level is not None:
        level = parse_quantity(args.ac_level, "V", what="--ac-level")
        if level <= 0:
            raise BadInput(f"--ac-level: {args.ac_level!r} is not above 0 V rms")
        within(level, "V", "--ac-level", high=AC_LEVEL_V_MAX)
    doc = evaluate(model, bias_voltage_V=bias_v, bias_current_A=bias_i,
                   frequencies_Hz=freqs, temperature_K=temperature, ac_level_V_rms=level)
    if args.json:
        print(json.dumps(doc, allow_nan=False))
    else:
        print(format_table(doc, args.model))
    return 0
