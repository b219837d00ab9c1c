"""A rehearsal on the simulated bench, checked against the part it simulated.

A run on the simulated bench knows the truth: the device file gives every parameter of
the part, the fixture's stray capacitance and series resistance. After such a run,

    check = against_part(run, model_doc, run_dir)      # None for real instruments

compares each fitted value with the part's, z = (value - truth)/sigma, so an operator
rehearsing a plan sees whether the plan determines what it is meant to, and how the
sigmas behave. What the truth is:

* The card's parameters at the model's temperature (TNOM), with the device file's area
  factor applied, as the simulated bench draws its readings (drivers/sim/device.py).
* BV is stated at the plan's IBV: the junction voltage where the part's breakdown term
  IBV_part*exp((|Vd| - BV_part)/(N*Vt)) reaches it (docs/physics.md section 3).
* The fixture (CFIX, RFIX) only when no open/short correction ran: after one, what is
  left of it is a residual the device file does not state.
* Doping and Vbi only for an abrupt part (M = 1/2) of known area: N = 2*VJ*CJO^2 /
  (q*eps*A^2) and Vbi = VJ + kT/q (docs/physics.md section 7). A graded part's doping is
  an average of a profile, with no single true value.

With honest sigmas z is a standard normal draw: one run's value lies outside its +-1
sigma about one time in three (31.7 %) and outside +-3 sigma about one time in 370
(0.27 %). Values fitted to the same data move together (the C-V parameters, the
doping and Vbi share one set of readings), so a run often has several of them outside
+-1 sigma at once. Beyond three sigma points at the plan (too few points where the
parameter shows) or at something the model lacks.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

from pnbench.errors import PnbenchError

#: Card parameters compared when the model has them with a sigma.
CARD = ("IS", "N", "RS", "RSH", "CJO", "VJ", "M", "TT", "BV", "EG", "XTI")
#: |z| beyond which a value is called out.
CALL_OUT_Z = 3.0


@dataclass(frozen=True)
class Row:
    """One compared quantity."""

    name: str
    value: float
    sigma: float | None
    truth: float
    unit: str

    @property
    def z(self) -> float | None:
        if not self.sigma or not math.isfinite(self.sigma) or self.sigma <= 0:
            return None
        return (self.value - self.truth) / self.sigma


@dataclass(frozen=True)
class PartCheck:
    """The comparison of one run's model with its simulated part."""

    part: str
    temperature_K: float
    rows: tuple[Row, ...]
    notes: tuple[str, ...] = ()

    def zs(self) -> list[float]:
        return [z for z in (r.z for r in self.rows) if z is not None]

    def worst(self) -> Row | None:
        rated = [r for r in self.rows if r.z is not None]
        return max(rated, key=lambda r: abs(r.z or 0.0)) if rated else None

    def called_out(self) -> list[Row]:
        return [r for r in self.rows if r.z is not None and abs(r.z) > CALL_OUT_Z]

    def summary(self) -> str:
        """One line: how many values lie within 1 and 3 sigma, the largest z."""
        return f"against the simulated part {self.part}: {self.counts()}"

    def counts(self) -> str:
        """How many values lie within 1 and 3 sigma, the largest z, those beyond 3."""
        zs = self.zs()
        worst = self.worst()
        if not zs or worst is None:
            return "nothing to compare"
        within1 = sum(abs(z) <= 1.0 for z in zs)
        within3 = sum(abs(z) <= CALL_OUT_Z for z in zs)
        text = (f"{within1} of {len(zs)} values within 1 sigma, {within3} within 3 sigma; "
                f"largest {worst.name} {worst.z:+.2f} sigma")
        out = self.called_out()
        if out:
            text += ("; beyond 3 sigma: " + ", ".join(f"{r.name} {r.z:+.1f}" for r in out)
                     + " (the plan does not determine it, or the model lacks something)")
        return text


def against_part(run: dict | None, model_doc: dict | None,
                 run_dir: Path | str | None = None) -> PartCheck | None:
    """The check of a simulated run's model against its part; None for a run on real
    instruments, a run without a model, or a device file that cannot be read now (its
    path moved): a rehearsal aid is never an error."""
    if not isinstance(run, dict) or not isinstance(model_doc, dict):
        return None
    spec = run.get("simulated")
    if not spec:
        return None
    device = _device(str(spec), run, run_dir)
    if device is None:
        return None
    params = model_doc.get("parameters")
    if not isinstance(params, dict):
        return None
    temperature = _number(model_doc.get("temperature_K")) or device.temperature_K
    try:
        part = device.params_at(temperature)
    except (PnbenchError, ValueError, ArithmeticError):
        return None
    rows: list[Row] = []
    notes: list[str] = []
    for name in CARD:
        entry = params.get(name)
        truth = getattr(part, name, None)
        if not isinstance(entry, dict) or truth is None:
            continue
        value = _number(entry.get("value"))
        if value is None:
            continue
        if name == "BV":
            truth = _bv_at(part, params, temperature)
        if truth is None or not math.isfinite(truth):
            notes.append(f"{name} is fitted but the part has none")
            continue
        rows.append(Row(name, value, _number(entry.get("sigma")), float(truth),
                        str(entry.get("unit") or "")))
    rows.extend(_fixture(model_doc, run, device, notes))
    rows.extend(_doping(model_doc, device, part, temperature, notes))
    return PartCheck(part=device.part, temperature_K=temperature, rows=tuple(rows),
                     notes=tuple(notes))


def _device(spec: str, run: dict, run_dir):
    from pnbench.drivers.sim.device import resolve_device

    tries = [spec]
    source = run.get("plan_source")
    if isinstance(source, str) and not Path(spec).is_absolute():
        tries.append(str(Path(source).parent / spec))
    if run_dir is not None and not Path(spec).is_absolute():
        tries.append(str(Path(run_dir) / spec))
    for one in tries:
        try:
            return resolve_device(one)
        except (PnbenchError, OSError, ValueError):
            continue
    return None


def _number(x) -> float | None:
    if isinstance(x, bool) or not isinstance(x, (int, float)):
        return None
    return float(x) if math.isfinite(x) else None


def _bv_at(part, params: dict, temperature_K: float) -> float | None:
    from pnbench.modeling.junction import thermal_voltage

    ibv = _number((params.get("IBV") or {}).get("value"))
    if ibv is None or ibv <= 0 or not math.isfinite(part.BV) or part.IBV <= 0:
        return part.BV if math.isfinite(part.BV) else None
    return part.BV + part.N * thermal_voltage(temperature_K) * math.log(ibv / part.IBV)


def _fixture(model_doc: dict, run: dict, device, notes: list[str]) -> list[Row]:
    found = [(key, name, unit, device.lcr.get(part_key, 0.0)) for key, name, unit, part_key in
             (("fixture_capacitance_F", "CFIX", "F", "fixture_capacitance_F"),
              ("fixture_resistance_ohm", "RFIX", "ohm", "fixture_resistance_ohm"))
             if isinstance(model_doc.get(key), dict)]
    if not found:
        return []
    if run.get("lcr_correction"):
        notes.append("the open/short correction changed the fixture: what is left of it "
                     "is not stated by the device file, so CFIX and RFIX are not compared")
        return []
    rows = []
    for key, name, unit, truth in found:
        entry = model_doc[key]
        value = _number(entry.get("value"))
        if value is not None:
            rows.append(Row(name, value, _number(entry.get("sigma")), float(truth), unit))
    return rows


def _doping(model_doc: dict, device, part, temperature_K: float,
            notes: list[str]) -> list[Row]:
    doping = model_doc.get("doping")
    area = _number(model_doc.get("area_m2"))
    if not isinstance(doping, dict) or area is None or "doping_per_m3" not in doping:
        return []
    if abs(part.M - 0.5) > 1e-9:
        notes.append(f"the part is not abrupt (M = {part.M:g}): its doping is a profile, "
                     "so the Mott-Schottky figures are not compared")
        return []
    from pnbench.modeling.depletion import abrupt_doping

    try:
        truth_n, truth_vbi = abrupt_doping(part.CJO, part.VJ, area,
                                           str(device.device.get("material") or "Si"),
                                           temperature_K)
    except (PnbenchError, KeyError, ValueError):
        return []
    rows = []
    for name, key, sigma_key, truth, unit in (
            ("doping", "doping_per_m3", "doping_sigma_per_m3", truth_n, "1/m3"),
            ("Vbi", "built_in_voltage_V", "built_in_sigma_V", truth_vbi, "V")):
        value = _number(doping.get(key))
        if value is not None:
            rows.append(Row(name, value, _number(doping.get(sigma_key)), truth, unit))
    return rows


def from_folder(run_dir: Path | str) -> PartCheck | None:
    """`against_part` on a run folder's run.json and model.json; None where either is
    missing or damaged (the report and the run's own messages say so elsewhere)."""
    from pnbench.sweeps import record

    try:
        return against_part(record.read_run_doc(run_dir), record.read_model_doc(run_dir),
                            run_dir)
    except (PnbenchError, OSError, ValueError):
        return None


def folder_summary(run_dir: Path | str) -> str:
    """The one-line check of a run folder against its simulated part; "" for a run on
    real instruments (what headless and the app print at a run's end)."""
    check = from_folder(run_dir)
    return check.summary() if check is not None and check.rows else ""
