"""The extracted model: model-card values with sigmas, their temperature and free extras.

Two text forms, both pure (strings and dicts in, strings and dicts out; no files here):

* the model.json document (docs/run-folder.md)::

      {"parameters": {"IS": {"value": 1e-14, "sigma": 2e-16, "unit": "A"}, ...},
       "temperature_K": 300.15, ...extras}

  A parameter that was not extracted is absent, never a made-up default.
* a model-card line that circuit simulators read, ``.model NAME D(IS=... N=... TNOM=27)``,
  preceded by ``*`` comment lines (values with sigmas). RSH is the project's name for a
  shunt; it is not a standard model-card parameter, so the card carries it only as a
  comment (``* RSH = ...``) with the advice to place a resistor across the diode.
  ``from_card_text`` reads such comment lines back, so a card written here round-trips.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field
from typing import Any

from pnbench.errors import DataFileError
from pnbench.modeling.params import (
    DEFAULT_TEMPERATURE_K,
    TEMPERATURE_COEFFICIENTS,
    UNITS,
    DiodeParams,
)

#: Offset between kelvin and degrees Celsius.
_ZERO_C_K = 273.15
#: How messages name a model document read without a file name.
MODEL_DOCUMENT = "the model document (model.json)"

#: Order of parameters on a card (the order simulators document them in).
CARD_ORDER = ("IS", "N", "RS", "CJO", "VJ", "M", "FC", "TT", "BV", "IBV", "EG", "XTI",
              "TRS", "TRS2", "TCV")

#: Other spellings of the same parameters that simulators accept on a diode card.
CARD_ALIASES = {"CJ0": "CJO", "CJ": "CJO", "PB": "VJ", "MJ": "M", "JS": "IS"}

#: Key under which `from_card_text` keeps card parameters the model does not use.
OTHER_CARD_PARAMETERS = "other_card_parameters"

#: Scale suffixes as circuit simulators read them (case-insensitive; "meg" before "m").
_SUFFIX = {"f": 1e-15, "p": 1e-12, "n": 1e-9, "u": 1e-6, "m": 1e-3, "k": 1e3,
           "g": 1e9, "t": 1e12}
_NUMBER = re.compile(r"^([+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)([a-zA-Z]*)$")
_NAME = re.compile(r"^[A-Za-z_][A-Za-z0-9_.+\-]*$")
_COMMENT_VALUE = re.compile(
    r"^\*\s*([A-Za-z][A-Za-z0-9]*)\s*=\s*(\S+)(?:\s+[^\s+]*)?(?:\s*\+-\s*(\S+))?", re.ASCII
)
_MARKER = "* pnbench model card"


def _finite_float(value: Any) -> float | None:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return None
    value = float(value)
    return value if math.isfinite(value) else None



def card_name(device_name: str) -> str:
    """A model name simulators accept (letters, digits, _ . + -, a letter first) for a
    device name that may hold spaces or other signs ("LH-QT16 sample 3" -> "LH-QT16_sample_3")."""
    name = re.sub(r"[^A-Za-z0-9_.+-]+", "_", device_name.strip()).strip("_") or "device"
    return name if name[0].isalpha() else f"D{name}"


@dataclass(frozen=True)
class ModelSet:
    """Model-card values [SI] with one-sigma uncertainties, at ``temperature_K``.

    ``values`` holds only what was extracted or given (names from params.UNITS);
    ``sigmas`` maps a name to its sigma; a name without one (or given None) has no known
    sigma (math.inf is allowed for a parameter the data cannot determine; model.json
    writes it as null). ``extras`` is
    free-form and JSON-able (area_m2, material, device name, fit quality, ...).
    """

    values: dict[str, float]
    sigmas: dict[str, float | None] = field(default_factory=dict)
    temperature_K: float = DEFAULT_TEMPERATURE_K
    extras: dict[str, Any] = field(default_factory=dict)

    def __post_init__(self) -> None:
        values = {}
        for key, value in self.values.items():
            name = key.upper()
            if name not in UNITS:
                raise ValueError(f"unknown parameter {key!r}; known: {' '.join(UNITS)}")
            number = _finite_float(value)
            if number is None:
                raise ValueError(f"{name} must be a finite number, got {value!r}")
            values[name] = number
        sigmas: dict[str, float | None] = {}
        for key, sigma in self.sigmas.items():
            name = key.upper()
            if name not in values:
                raise ValueError(f"sigma given for {key!r}, which has no value")
            if sigma is not None:
                if isinstance(sigma, bool) or not isinstance(sigma, (int, float)) \
                        or not float(sigma) >= 0:
                    raise ValueError(f"sigma of {name} must be >= 0 or None, got {sigma!r}")
                sigmas[name] = float(sigma)
        t = _finite_float(self.temperature_K)
        if t is None or t <= 0:
            raise ValueError(f"temperature_K must be > 0, got {self.temperature_K!r}")
        clash = {"parameters", "temperature_K"} & set(self.extras)
        if clash:
            raise ValueError(f"extras may not use the reserved keys {sorted(clash)}")
        object.__setattr__(self, "values", values)
        object.__setattr__(self, "sigmas", sigmas)
        object.__setattr__(self, "temperature_K", t)
        object.__setattr__(self, "extras", dict(self.extras))

    # --- conversions -------------------------------------------------------------------

    def to_params(self) -> DiodeParams:
        """A complete DiodeParams; absent values take the DiodeParams defaults."""
        return DiodeParams.from_mapping(self.values)

    @classmethod
    def from_params(cls, params: DiodeParams, names: tuple[str, ...] | None = None,
                    temperature_K: float = DEFAULT_TEMPERATURE_K,
                    extras: dict[str, Any] | None = None) -> ModelSet:
        """The finite values of ``params`` (or only ``names``), without sigmas."""
        chosen = names if names is not None else tuple(
            n for n in UNITS if n not in TEMPERATURE_COEFFICIENTS or getattr(params, n) != 0)
        values = {n: getattr(params, n) for n in chosen if math.isfinite(getattr(params, n))}
        return cls(values=values, temperature_K=temperature_K, extras=extras or {})

    def sigma(self, name: str) -> float | None:
        return self.sigmas.get(name.upper())

    # --- model.json --------------------------------------------------------------------

    def to_json_dict(self) -> dict[str, Any]:
        """The model.json document (plain JSON types; a non-finite sigma becomes null)."""
        parameters = {}
        for name in UNITS:
            if name in self.values:
                sigma = self.sigmas.get(name)
                parameters[name] = {
                    "value": self.values[name],
                    "sigma": sigma if sigma is not None and math.isfinite(sigma) else None,
                    "unit": UNITS[name],
                }
        return {"parameters": parameters, "temperature_K": self.temperature_K, **self.extras}

    @classmethod
    def from_json_dict(cls, document: Any, source: str = MODEL_DOCUMENT) -> ModelSet:
        """Read a model.json document; DataFileError naming ``source`` and the key."""
        if not isinstance(document, dict):
            raise DataFileError(f"{source}: expected a JSON object at the top, "
                                f"found {type(document).__name__}")
        parameters = document.get("parameters")
        if not isinstance(parameters, dict):
            raise DataFileError(f"{source}: key 'parameters' must be an object mapping "
                                f"model-card names to {{value, sigma, unit}}; "
                                f"found {parameters!r:.60}")
        values: dict[str, float] = {}
        sigmas: dict[str, float | None] = {}
        for key, entry in parameters.items():
            where = f"{source}: parameters.{key}"
            name = str(key).upper()
            if name not in UNITS:
                raise DataFileError(f"{where}: unknown parameter; accepted: {' '.join(UNITS)}")
            if not isinstance(entry, dict) or "value" not in entry:
                raise DataFileError(f"{where}: expected an object with 'value' "
                                    f"(and 'sigma', 'unit'); found {entry!r:.60}")
            value = _finite_float(entry["value"])
            if value is None:
                raise DataFileError(f"{where}.value: expected a finite number, "
                                    f"found {entry['value']!r}")
            sigma = entry.get("sigma")
            if sigma is not None:
                sigma = _finite_float(sigma)
                if sigma is None or sigma < 0:
                    raise DataFileError(f"{where}.sigma: expected a number >= 0 or null, "
                                        f"found {entry['sigma']!r}")
            unit = entry.get("unit", UNITS[name])
            if unit != UNITS[name]:
                raise DataFileError(f"{where}.unit: found {unit!r}; {name} is stored in "
                                    f"{UNITS[name] or 'no unit'!r} (SI, no prefix)")
            values[name] = value
            sigmas[name] = sigma
        t_raw = document.get("temperature_K", DEFAULT_TEMPERATURE_K)
        t = _finite_float(t_raw)
        if t is None or t <= 0:
            raise DataFileError(f"{source}: temperature_K must be a number > 0, found {t_raw!r}")
        extras = {k: v for k, v in document.items() if k not in ("parameters", "temperature_K")}
        model = cls(values=values, sigmas=sigmas, temperature_K=t, extras=extras)
        _check_params(model, source)
        return model

    # --- model card --------------------------------------------------------------------

    def card_text(self, name: str) -> str:
        """Comment header and one ``.model NAME D(...)`` line (ends with a newline).

        Only standard diode-card parameters go on the line, plus TNOM (the temperature
        of the values, in °C). RSH goes in a comment: it is not a card parameter.
        """
        if not _NAME.match(name):
            raise ValueError(f"model name {name!r}: use letters, digits and _ . + - "
                             f"starting with a letter")
        t_c = self.temperature_K - _ZERO_C_K
        lines = [
            f"{_MARKER}: {name} (diode)",
            f"* values at {self.temperature_K:.6g} K (TNOM = {t_c:.6g} C), "
            f"SI units, one-sigma uncertainties after +-",
        ]
        for pname in UNITS:
            if pname not in self.values:
                continue
            sigma = self.sigmas.get(pname)
            text = f"* {pname} = {self.values[pname]!r}"
            if UNITS[pname]:
                text += f" {UNITS[pname]}"
            if sigma is not None:
                text += f" +- {sigma!r}"
            lines.append(text)
        shunt = f"{name}_RSH"
        if "RSH" in self.values:
            lines.append("* RSH (shunt) is not a standard model-card parameter: it is not "
                         f"on the .model line. To simulate the leakage, use the subcircuit "
                         f"{shunt} (pins: anode cathode) in place of the bare diode, e.g. "
                         f"X1 a k {shunt}; it places RSH across the diode (outside RS, "
                         f"which differs from across the junction by RS/RSH).")
        caution = _breakdown_caution(self.values, self.temperature_K)
        if caution:
            lines.append(f"* caution: {caution}")
        params = [f"{p}={self.values[p]!r}" for p in CARD_ORDER if p in self.values]
        params.append(f"TNOM={t_c:.10g}")
        lines.append(f".model {name} D({' '.join(params)})")
        if "RSH" in self.values:
            lines += [f".subckt {shunt} A K", f"D1 A K {name}",
                      f"R1 A K {self.values['RSH']!r}", f".ends {shunt}"]
        return "\n".join(lines) + "\n"

    def breakdown_caution(self) -> str | None:
        """Why the card's BV/IBV would not mean the measured knee in a simulator."""
        return _breakdown_caution(self.values, self.temperature_K)

    @classmethod
    def from_card_text(cls, text: str, name: str | None = None,
                       source: str = "model card") -> ModelSet:
        """Read a diode ``.model`` card (the one named ``name``, or the only one).

        Continuation lines (``+``), ``;`` and `` $ `` comments, parameters with or
        without parentheses, commas, and simulator scale suffixes (f p n u m k meg g t,
        any case; letters after them ignored) are understood. Aliases CJ0/CJ, PB, MJ,
        JS map to CJO, VJ, M, IS; TNOM sets the temperature. Other card parameters are
        kept in extras["other_card_parameters"] and do not enter the model.
        """
        statements = _statements(text, source)
        models = [s for s in statements if s[1].lower().startswith(".model")]
        if not models:
            raise DataFileError(f"{source}: no '.model NAME D(...)' line found")
        found = []
        for lineno, stmt in models:
            parts = stmt.replace("(", " ( ").split(None, 3)
            if len(parts) < 3:
                raise DataFileError(f"{source}, line {lineno}: expected '.model NAME D(...)', "
                                    f"found {stmt!r:.80}")
            found.append((lineno, parts[1], parts[2], parts[3] if len(parts) > 3 else ""))
        if name is not None:
            chosen = [f for f in found if f[1].lower() == name.lower()]
            if not chosen:
                raise DataFileError(f"{source}: no model named {name!r}; found "
                                    f"{', '.join(f[1] for f in found)}")
        else:
            chosen = [f for f in found if f[2].upper() == "D"] or found
            if len(chosen) > 1:
                raise DataFileError(f"{source}: several models ({', '.join(f[1] for f in chosen)})"
                                    f"; say which one to use")
        lineno, model_name, kind, body = chosen[0]
        if kind.upper() != "D":
            raise DataFileError(f"{source}, line {lineno}: model {model_name} is of type "
                                f"{kind!r}; only diode models (type D) are accepted")
        values, other, t_k = _card_parameters(body, f"{source}, line {lineno}")
        sigmas: dict[str, float | None] = {}
        if any(s.startswith(_MARKER) for _, s in _comment_lines(text)):
            for cline, comment in _comment_lines(text):
                m = _COMMENT_VALUE.match(comment)
                if not m or m.group(1).upper() not in UNITS:
                    continue
                pname = m.group(1).upper()
                if pname == "RSH":
                    values["RSH"] = _card_number(m.group(2), f"{source}, line {cline}: RSH")
                if m.group(3) is not None and pname in values:
                    sigma_text = m.group(3)
                    sigmas[pname] = math.inf if sigma_text.lower() == "inf" else \
                        _card_number(sigma_text, f"{source}, line {cline}: sigma")
        extras: dict[str, Any] = {"model_name": model_name}
        if other:
            extras[OTHER_CARD_PARAMETERS] = other
        try:
            model = cls(values=values, sigmas=sigmas,
                        temperature_K=t_k if t_k is not None else DEFAULT_TEMPERATURE_K,
                        extras=extras)
        except ValueError as exc:
            raise DataFileError(f"{source}, line {lineno}: {exc}") from None
        _check_params(model, f"{source}, line {lineno}")
        return model


def _breakdown_caution(values: dict[str, float], temperature_K: float) -> str | None:
    """Simulators of the SPICE2 lineage raise IBV to IS*BV/Vt when it is smaller (ngspice
    warns "breakdown current increased"), which moves the whole breakdown curve: a card
    fitted with such an IBV does not reproduce the measured knee."""
    if not all(k in values for k in ("BV", "IBV", "IS")):
        return None
    vt = 8.617333262e-5 * temperature_K  # k/q in V/K (CODATA 2018, exact)
    least = values["IS"] * values["BV"] / vt
    if values["IBV"] >= least:
        return None
    return (f"IBV = {values['IBV']:.3g} A is below IS*BV/Vt = {least:.3g} A: simulators "
            f"raise IBV to that and move the breakdown knee; state BV at a current above "
            f"it to keep the card's meaning")


def _check_params(model: ModelSet, where: str) -> None:
    try:
        model.to_params()
    except ValueError as exc:
        raise DataFileError(f"{where}: {exc}") from None


def _strip_inline(line: str) -> str:
    for marker in (";", " $", "\t$"):
        cut = line.find(marker)
        if cut >= 0:
            line = line[:cut]
    return line.rstrip()


def _comment_lines(text: str) -> list[tuple[int, str]]:
    return [(n, ln.strip()) for n, ln in enumerate(text.splitlines(), 1)
            if ln.strip().startswith("*")]


def _statements(text: str, source: str) -> list[tuple[int, str]]:
    """Logical lines (continuations joined, comments dropped) with their first line number."""
    out: list[list] = []
    for lineno, raw in enumerate(text.splitlines(), 1):
        line = raw.strip()
        if not line or line.startswith("*"):
            continue
        line = _strip_inline(line)
        if line.startswith("+"):
            if not out:
                raise DataFileError(
                    f"{source}, line {lineno}: continuation '+' with nothing before it")
            out[-1][1] += " " + line[1:]
        else:
            out.append([lineno, line])
    return [(n, s) for n, s in out]


def _card_number(token: str, where: str) -> float:
    m = _NUMBER.match(token.strip())
    if not m:
        raise DataFileError(f"{where}: cannot read {token!r} as a number (examples: "
                            f"1e-14, 10p, 2.5meg, 0.5)")
    value = float(m.group(1))
    suffix = m.group(2).lower()
    if suffix.startswith("meg"):
        value *= 1e6
    elif suffix.startswith("mil"):
        value *= 25.4e-6
    elif suffix[:1] in _SUFFIX:
        value *= _SUFFIX[suffix[:1]]
    return value


def _card_parameters(body: str, where: str) -> tuple[dict, dict, float | None]:
    flat = body.replace("(", " ").replace(")", " ").replace(",", " ")
    flat = re.sub(r"\s*=\s*", "=", flat)
    values: dict[str, float] = {}
    other: dict[str, float] = {}
    t_k = None
    for token in flat.split():
        if "=" not in token:
            raise DataFileError(f"{where}: expected NAME=VALUE, found {token!r}")
        key, _, raw = token.partition("=")
        number = _card_number(raw, f"{where}: {key}")
        pname = CARD_ALIASES.get(key.upper(), key.upper())
        if pname == "TNOM":
            t_k = number + _ZERO_C_K
        elif pname in UNITS and pname != "RSH":
            values[pname] = number
        else:
            other[key.upper()] = number
    return values, other, t_k
