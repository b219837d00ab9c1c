"""ngspice (batch mode) as a reference simulator for tests and reference data.

Use with the ``ngspice`` fixture of tests/conftest.py (the path of the executable)::

    from spicehelp import ac_admittance, dc_sweep, reference_params

    def test_something(ngspice):
        p = DiodeParams(IS=1e-14, N=1.0, RS=2.0)
        v, i = dc_sweep(ngspice, p, np.linspace(0, 0.9, 50))       # i: anode -> cathode
        expected = junction.current(v, reference_params(p), 300.15)  # GMIN folded in
        y = ac_admittance(ngspice, p, [-2.0, 0.6], [1e3, 1e6])       # complex [bias, freq]

What the runner does and what a comparison must account for:

* Every bias point is its own copy of the circuit (a DC source and one diode) inside one
  netlist, solved by one ``.op`` (DC) or by one ``ac lin 1 f f`` per frequency (AC), so
  any list of voltages works in one ngspice run (~20 ms). Results come back through
  ``write`` in ASCII raw format (16 significant digits).
* Tight options by default: reltol 1e-9, abstol 1e-18 A, vntol 1e-12 V, chgtol 1e-20 C.
* Every ngspice run has a time limit (``timeout_s``; by default TIMEOUT_BASE_S plus
  TIMEOUT_PER_POINT_S per bias point, far above the ~20 ms a run takes): beyond it the
  process is killed and ``SpiceTimeout`` says what was being solved. ngspice 39 can cycle
  without end at reltol 1e-9 on a bias point just short of a breakdown knee (e.g. the
  card IS=2.5e-15 N=1.06 BV=72 IBV=1e-4 at -71.8868 V), and a run of many points can
  fail with NaN instead.
* Fallback (``fallback=True``, the default): when the run of all points fails or times
  out, each point is solved in a run of its own at the same options; a point that still
  fails is solved once more at reltol FALLBACK_RELTOL (1e-7), which is still a thousand
  times below the tightest tolerance a test here asserts (1e-4). Pass a list as
  ``fallback_log`` to learn which voltages needed it; ``fallback=False`` raises instead.
* ngspice adds GMIN (``gmin`` here, 1e-12 S as in ngspice by default) across every
  junction: a shunt inside RS. ``reference_params(p, gmin)`` gives the DiodeParams whose
  RSH includes it; compare the project's model with that.
* ngspice's diffusion capacitance is TT times the junction's conductance with GMIN in
  it: TT*(gd + GMIN), so at reverse bias a constant TT*GMIN (5e-21 F for TT = 5 ns)
  stands beside Cj that the project's model (Cd = TT*gd) does not have; a C-V fit of
  noise-free data sees it as a fixture capacitance of that size
  (tests/modeling/test_clean_ngspice.py measures it from ``operating_point``).
* Physical constants: ngspice 39 uses the CODATA 2014 values of k and q (from memory;
  the project's come from scipy.constants, the exact 2019 SI values). Their Vt differs
  by 3.4e-7 relative, so an I-V fit of ngspice data gives N that much low (N*Vt is what
  the data fix): compare N to a few 1e-7, not to the data's precision.
* Temperature: ``.temp temperature_C`` and ``.options tnom=tnom_C`` (both 27 °C, i.e.
  300.15 K, by default). DiodeParams and ModelSet inputs get ``TNOM=tnom_C`` on the card
  (a ModelSet keeps its own temperature) so parameters mean the same in both models.
* RSH is not a card parameter. For DiodeParams or ModelSet input with a finite RSH, the
  netlist places a resistor RSH across the junction and RS as a separate resistor (the
  card then has RS=0), which is the project's equivalent circuit. A card given as text
  is used verbatim (no RSH allowed there).
* Current sign: conventional diode current, anode to cathode (positive when forward).
  Admittance: of the whole two-terminal device (RS included), Y = I/V for the AC source.
* ngspice's own diode model differs from the exact Shockley form in two places a test
  must keep away from: below -3*N*Vt (no breakdown region) it uses a cubic reverse
  approximation, and its breakdown branch replaces, not adds to, the saturation current.
  Both change currents by about IS, so compare where the current is well above IS.
  Its breakdown current at -BV is about IBV - IS*BV/Vt rather than IBV: keep
  IS*BV/(Vt*IBV) small in breakdown comparisons.
"""

from __future__ import annotations

import math
import subprocess
import tempfile
from collections.abc import Sequence
from pathlib import Path

import numpy as np

from pnbench.modeling.modelset import ModelSet
from pnbench.modeling.params import DiodeParams

#: Options that make ngspice's answers accurate far beyond the comparisons' tolerances.
TIGHT_OPTIONS = {"reltol": 1e-9, "abstol": 1e-18, "vntol": 1e-12, "chgtol": 1e-20}

#: ngspice's GMIN default [S].
NGSPICE_GMIN = 1e-12

#: Time limit of one ngspice run: a base and a share per bias point [s].
TIMEOUT_BASE_S = 5.0
TIMEOUT_PER_POINT_S = 0.05
#: reltol for a bias point ngspice cannot solve at TIGHT_OPTIONS' reltol.
FALLBACK_RELTOL = 1e-7


class SpiceError(RuntimeError):
    """ngspice ended without the results asked for."""


class SpiceTimeout(SpiceError):
    """ngspice did not finish within its time limit (it was killed)."""

_ZERO_C_K = 273.15
_MODEL_NAME = "DREF"


def reference_params(params: DiodeParams, gmin: float = NGSPICE_GMIN) -> DiodeParams:
    """``params`` with GMIN folded into the shunt, as ngspice simulates them."""
    g_sh = 0.0 if math.isinf(params.RSH) else 1.0 / params.RSH
    g = g_sh + gmin
    return params if g == 0 else params.with_values(RSH=1.0 / g)


def _model_lines(model, tnom_C: float) -> tuple[str, str, float, float]:
    """(card text, model name, external RS, RSH) for the netlist."""
    if isinstance(model, str):
        parsed = ModelSet.from_card_text(model)
        if "RSH" in parsed.values:
            raise ValueError("a card given as text may not carry RSH; pass DiodeParams")
        return model, parsed.extras["model_name"], 0.0, math.inf
    if isinstance(model, ModelSet):
        params, t_k = model.to_params(), model.temperature_K
    elif isinstance(model, DiodeParams):
        params, t_k = model, tnom_C + _ZERO_C_K
    else:
        raise TypeError(f"model must be card text, DiodeParams or ModelSet, not {type(model)}")
    rs_ext, rsh = 0.0, params.RSH
    if math.isfinite(rsh) and params.RS > 0:
        rs_ext, params = params.RS, params.with_values(RS=0.0)
    card = ModelSet.from_params(params, temperature_K=t_k).card_text(_MODEL_NAME)
    return card, _MODEL_NAME, rs_ext, rsh


def _netlist(model, voltages, temperature_C, tnom_C, gmin, options, ac: bool,
             control: list[str]) -> str:
    card, name, rs_ext, rsh = _model_lines(model, tnom_C)
    lines = ["* pnbench reference netlist", card.rstrip()]
    for k, v in enumerate(voltages):
        lines.append(f"V{k} a{k} 0 DC {float(v)!r}" + (" AC 1" if ac else ""))
        junction_node = f"a{k}"
        if rs_ext > 0:
            junction_node = f"j{k}"
            lines.append(f"RS{k} a{k} j{k} {float(rs_ext)!r}")
        lines.append(f"D{k} {junction_node} 0 {name}")
        if math.isfinite(rsh):
            lines.append(f"RSH{k} {junction_node} 0 {float(rsh)!r}")
    opts = {**TIGHT_OPTIONS, "gmin": gmin, "tnom": tnom_C, **(options or {})}
    lines.append(".options " + " ".join(f"{k}={float(v)!r}" for k, v in opts.items()))
    lines.append(f".temp {float(temperature_C)!r}")
    lines += [".control", "set filetype=ascii", *control, "quit", ".endc", ".end"]
    return "\n".join(lines) + "\n"


def _run(ngspice: str, netlist: str, outputs: list[str],
         timeout_s: float) -> list[dict[str, np.ndarray]]:
    with tempfile.TemporaryDirectory(prefix="pnbench-spice-") as tmp:
        folder = Path(tmp)
        (folder / "ref.cir").write_text(netlist)
        try:
            proc = subprocess.run([ngspice, "-b", "ref.cir"], cwd=folder,
                                  capture_output=True, text=True, timeout=timeout_s)
        except subprocess.TimeoutExpired as exc:
            options = next((ln for ln in netlist.splitlines() if ln.startswith(".options")),
                           "")
            raise SpiceTimeout(
                f"ngspice did not finish within {timeout_s:g} s and was stopped "
                f"({netlist.count(chr(10) + 'V')} bias points; {options}); at reltol 1e-9 "
                f"ngspice 39 can cycle without end just short of a breakdown knee: use "
                f"fallback=True (spicehelp's docstring)\n--- netlist ---\n{netlist}"
            ) from exc
        missing = [name for name in outputs if not (folder / name).exists()]
        if proc.returncode != 0 or missing:
            raise SpiceError(
                f"ngspice failed (exit {proc.returncode}, missing {missing}):\n"
                f"{proc.stdout[-3000:]}\n{proc.stderr[-3000:]}\n--- netlist ---\n{netlist}"
            )
        return [parse_ascii_raw((folder / name).read_text()) for name in outputs]


def parse_ascii_raw(text: str) -> dict[str, np.ndarray]:
    """Vectors of an ngspice ASCII raw file (first plot), by lower-case name."""
    lines = text.splitlines()
    header: dict[str, str] = {}
    k = 0
    while k < len(lines) and not lines[k].startswith("Variables:"):
        key, _, value = lines[k].partition(":")
        header[key.strip()] = value.strip()
        k += 1
    n_vars, n_points = int(header["No. Variables"]), int(header["No. Points"])
    complex_data = "complex" in header.get("Flags", "")
    names = [lines[k + 1 + j].split()[1].lower() for j in range(n_vars)]
    k += 1 + n_vars
    if not lines[k].startswith("Values:"):
        raise ValueError(f"raw file: expected 'Values:' at line {k + 1}, found {lines[k]!r}")
    tokens = [t for line in lines[k + 1:] for t in line.split()]
    data = np.zeros((n_points, n_vars), dtype=complex if complex_data else float)
    pos = 0
    for p in range(n_points):
        if int(tokens[pos]) != p:
            raise ValueError(f"raw file: point index {tokens[pos]} where {p} was expected")
        pos += 1
        for j in range(n_vars):
            if complex_data:
                re_, im_ = tokens[pos].split(",")
                data[p, j] = complex(float(re_), float(im_))
            else:
                data[p, j] = float(tokens[pos])
            pos += 1
    return {name: data[:, j] for j, name in enumerate(names)}


def _timeout(n_points: int, timeout_s: float | None) -> float:
    return timeout_s if timeout_s is not None else (TIMEOUT_BASE_S
                                                    + TIMEOUT_PER_POINT_S * n_points)


def _robust(solve, v: np.ndarray, options: dict | None, fallback: bool,
            fallback_log: list | None) -> np.ndarray:
    """solve(voltages, options) -> rows for those voltages, for all points at once; on
    failure, point by point, and at FALLBACK_RELTOL where the options' reltol fails."""
    try:
        return solve(v, options)
    except SpiceError as exc:
        if not fallback or v.size == 0:
            raise
        first = exc
    reltol = {**TIGHT_OPTIONS, **(options or {})}["reltol"]
    rows = []
    for x in v:
        try:
            if v.size == 1:  # that run has just failed
                raise first
            rows.append(solve(np.array([x]), options)[0])
            continue
        except SpiceError as exc:
            if reltol >= FALLBACK_RELTOL:
                raise
            first = exc
        try:
            rows.append(solve(np.array([x]), {**(options or {}),
                                              "reltol": FALLBACK_RELTOL})[0])
        except SpiceError as exc:
            raise SpiceError(f"ngspice cannot solve {x!r} V at reltol {reltol:g} "
                             f"({str(first).splitlines()[0]}) nor at the fallback "
                             f"reltol {FALLBACK_RELTOL:g}: {exc}") from exc
        if fallback_log is not None:
            fallback_log.append(float(x))
    return np.array(rows)


def dc_sweep(ngspice: str, model, voltages: Sequence[float], temperature_C: float = 27.0,
             *, tnom_C: float = 27.0, gmin: float = NGSPICE_GMIN,
             options: dict[str, float] | None = None, timeout_s: float | None = None,
             fallback: bool = True,
             fallback_log: list | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Terminal voltages [V] and diode currents [A] (anode to cathode) from ngspice.

    ``model`` is card text, DiodeParams or a ModelSet; ``options`` override or add
    ``.options`` entries (e.g. {"gmin": 1e-15}; prefer the ``gmin`` argument).
    ``timeout_s``, ``fallback`` and ``fallback_log``: see the module notes.
    """
    v = np.asarray(voltages, dtype=float).ravel()

    def solve(vs, opts):
        netlist = _netlist(model, vs, temperature_C, tnom_C, gmin, opts, False,
                           ["op", "write op.raw"])
        (vectors,) = _run(ngspice, netlist, ["op.raw"], _timeout(vs.size, timeout_s))
        return np.array([-vectors[f"i(v{k})"][0] for k in range(vs.size)])

    return v, _robust(solve, v, options, fallback, fallback_log)


def ac_admittance(ngspice: str, model, bias_voltages: Sequence[float],
                  frequencies: Sequence[float], temperature_C: float = 27.0, *,
                  tnom_C: float = 27.0, gmin: float = NGSPICE_GMIN,
                  options: dict[str, float] | None = None, timeout_s: float | None = None,
                  fallback: bool = True, fallback_log: list | None = None) -> np.ndarray:
    """Small-signal admittance [S] of the whole device (RS included), shape [bias, freq].

    Real part: conductance; imaginary part / (2*pi*f): parallel capacitance.
    ``timeout_s``, ``fallback`` and ``fallback_log``: see the module notes.
    """
    v = np.asarray(bias_voltages, dtype=float).ravel()
    f = np.asarray(frequencies, dtype=float).ravel()
    control = []
    for k, freq in enumerate(f):
        control += [f"ac lin 1 {float(freq)!r} {float(freq)!r}", f"write ac{k}.raw"]

    def solve(vs, opts):
        netlist = _netlist(model, vs, temperature_C, tnom_C, gmin, opts, True, control)
        plots = _run(ngspice, netlist, [f"ac{k}.raw" for k in range(f.size)],
                     _timeout(vs.size * f.size, timeout_s))
        y = np.empty((vs.size, f.size), dtype=complex)
        for kf, vectors in enumerate(plots):
            for kv in range(vs.size):
                y[kv, kf] = -vectors[f"i(v{kv})"][0]
        return y

    return _robust(solve, v, options, fallback, fallback_log)


def operating_point(ngspice: str, model, bias_voltages: Sequence[float],
                    temperature_C: float = 27.0, *, tnom_C: float = 27.0,
                    gmin: float = NGSPICE_GMIN, options: dict[str, float] | None = None,
                    timeout_s: float | None = None) -> dict[str, np.ndarray]:
    """The diode's own operating-point quantities from ngspice's ``.op``, per bias:
    ``vd`` (junction voltage [V]), ``id`` [A], ``gd`` (junction conductance [S], GMIN
    included, as ngspice reports it) and ``cd`` (depletion plus diffusion capacitance
    [F]); read as ``@dK[name]``. No fallback: bias points near a breakdown knee are not
    what this is for.
    """
    v = np.asarray(bias_voltages, dtype=float).ravel()
    names = ("vd", "id", "gd", "cd")
    control = ["op"]
    for k in range(v.size):
        control += [f"let {n}{k} = @d{k}[{n}]" for n in names]
    control.append("write op.raw " + " ".join(f"{n}{k}" for k in range(v.size)
                                             for n in names))
    netlist = _netlist(model, v, temperature_C, tnom_C, gmin, options, False, control)
    (vectors,) = _run(ngspice, netlist, ["op.raw"], _timeout(v.size, timeout_s))
    return {n: np.array([vectors[f"{n}{k}"][0] for k in range(v.size)]) for n in names}
