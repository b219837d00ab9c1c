"""What a run's recorded LCR correction does to its fits (the record: run.json's
``lcr_correction``, sweeps.correction).

* Compensated in software (``applied_by = "software"``): the C-V and admittance readings
  of a step are compensated with the entry that holds for the step's stage set point
  (modeling.compensation) before any fit sees them. points.csv keeps the raw readings;
  the live fits, the run's model and every refit derive the compensated values the same
  way from the same record.
* Applied by the meter: the readings are already corrected, and a fixture capacitance
  the C-V fit still finds is the residual. It is stated against the open capacitance the
  meter measured: a residual of more than `STALE_FRACTION` of it (and three standard
  errors from none) says the correction no longer matches the fixture.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

from pnbench.modeling.compensation import FixtureResiduals, compensate_parallel
from pnbench.sweeps.correction import entry_for, runs_of

#: A residual CFIX above this fraction of the open capacitance marks the correction stale
#: (a meter's open correction leaves well under one percent of it; common practice, no
#: source).
STALE_FRACTION = 0.05
SOFTWARE = ("open/short compensation applied in software from the recorded open and "
            "short readings (points.csv keeps the raw readings; the fits use the "
            "compensated ones)")
_LCR_KINDS = ("cv", "admittance")


def residuals_for(record: object, set_point_K: float | None,
                  ac_level_V: float | None = None,
                  step: str | None = None) -> FixtureResiduals | None:
    """The recorded values to compensate points at this set point (and test level, where
    the open and short were read at several: ``ac_level_V``, else the one the entry
    records for ``step``) with, when the record says pnbench applies them (None
    otherwise, or when they are unusable)."""
    entry = entry_for(record, set_point_K)
    if entry is None or entry.get("applied_by") != "software":
        return None
    if ac_level_V is None and step is not None:
        level = (entry.get("step_ac_level_V") or {}).get(step)
        ac_level_V = level if isinstance(level, (int, float)) else None
    try:
        return FixtureResiduals.from_values(entry.get("values"), ac_level_V)
    except ValueError:
        return None


def compensated(step, col: Mapping[str, np.ndarray], record: object) -> Mapping:
    """A step's columns with C and G compensated when the record asks it (new arrays;
    ``col`` is left as it is); the columns themselves otherwise."""
    if getattr(step, "kind", None) not in _LCR_KINDS or not len(col["voltage_V"]):
        return col
    residuals = residuals_for(record, getattr(step, "set_point_K", None),
                              getattr(step, "ac_level_V", None))
    if residuals is None:
        return col
    c, g = compensate_parallel(col["capacitance_F"], col["conductance_S"],
                               col["frequency_Hz"], residuals)
    return {**col, "capacitance_F": c, "conductance_S": g}


def compensated_columns(steps: Mapping, columns: Mapping, record: object) -> Mapping:
    """Every step's columns through `compensated`."""
    if not any(r.get("applied_by") == "software" for r in runs_of(record)):
        return columns
    return {name: compensated(steps[name], col, record) if name in steps else col
            for name, col in columns.items()}


def residual_note(cfix: object, open_F: float | None) -> tuple[str, bool] | None:
    """What a fitted residual CFIX ({"value", "sigma"} or None: none kept) says against
    the open capacitance the meter measured; (text, stale). None without an open."""
    if open_F is None or not open_F > 0:
        return None
    open_text = f"the open's {open_F * 1e12:.4g} pF"
    if not isinstance(cfix, Mapping) or not isinstance(cfix.get("value"), (int, float)):
        return (f"no residual fixture capacitance stands out of the noise against "
                f"{open_text}: the correction holds", False)
    value, sd = float(cfix["value"]), cfix.get("sigma")
    fraction = abs(value) / open_F
    firm = isinstance(sd, (int, float)) and sd > 0 and abs(value) > 3 * sd
    stale = firm and fraction > STALE_FRACTION
    text = (f"residual fixture capacitance {value * 1e15:.4g} fF is {100 * fraction:.2g} % "
            f"of {open_text}")
    if stale:
        text += ("; more than a few percent of the open: the correction looks stale (the "
                 "fixture or its leads moved since it was measured); run it again")
    else:
        text += ": small against the open, as a correction leaves it"
    return text, stale


def series_note(rfix: object, short_ohm: float | None) -> tuple[str, bool] | None:
    """What a fitted residual RFIX says against the short's resistance the meter
    measured, as `residual_note` for CFIX; None without a short (or a short of 0 ohm)."""
    if short_ohm is None or not short_ohm > 0 or not isinstance(rfix, Mapping) \
            or not isinstance(rfix.get("value"), (int, float)):
        return None
    value, sd = float(rfix["value"]), rfix.get("sigma")
    fraction = abs(value) / short_ohm
    stale = (isinstance(sd, (int, float)) and sd > 0 and abs(value) > 3 * sd
             and fraction > STALE_FRACTION)
    text = (f"residual fixture series resistance {value:.4g} ohm is {100 * fraction:.2g} % "
            f"of the short's {short_ohm:.4g} ohm")
    return (text + ("; the short correction looks stale: run it again" if stale else
                    ": small against the short"), stale)


def short_resistance(entry: dict | None) -> float | None:
    try:
        residuals = FixtureResiduals.from_values((entry or {}).get("values"))
    except ValueError:
        return None
    if residuals is None or not residuals.has_short:
        return None
    return float(np.median(residuals.short_R_ohm))


def open_capacitance(entry: dict | None) -> float | None:
    try:
        residuals = FixtureResiduals.from_values((entry or {}).get("values"))
    except ValueError:
        return None
    return residuals.open_capacitance_F() if residuals is not None else None


def judge(model, record: object) -> None:
    """State in model.extras (and the C-V fit's message) what the recorded correction
    did: compensated in software, or the residual against the open (per temperature in
    a run over temperature: ``extras["temperatures"]`` rows get ``correction_note``)."""
    runs = runs_of(record)
    if model is None or not runs:
        return
    if any(r.get("applied_by") == "software" for r in runs):
        model.extras["lcr_compensated_in_software"] = True
        _add_message(model, SOFTWARE)
    rows = model.extras.get("temperatures")
    if isinstance(rows, list) and rows and isinstance(record, dict) \
            and record.get("every_set_point"):
        for row in rows:
            if not isinstance(row, dict) or "temperature_K" not in row:
                continue
            entry = _nearest(runs, row["temperature_K"])
            if entry is None or entry.get("applied_by") == "software":
                continue
            cfix = ({"value": row["CFIX"], "sigma": row.get("CFIX_sigma")}
                    if "CFIX" in row else None)
            note = residual_note(cfix, open_capacitance(entry))
            if note is not None:
                row["correction_note"] = note[0]
        return
    entry = runs[-1]
    if entry.get("applied_by") == "software":
        return
    note = residual_note(model.extras.get("fixture_capacitance_F"), open_capacitance(entry))
    if note is not None:
        model.extras["correction_residual"] = {"note": note[0], "stale": note[1]}
        _add_message(model, note[0])
    series = series_note(model.extras.get("fixture_resistance_ohm"), short_resistance(entry))
    if series is not None:
        model.extras["correction_series_residual"] = {"note": series[0], "stale": series[1]}
        _add_message(model, series[0])


def _nearest(runs: list[dict], t: float) -> dict | None:
    at = [r for r in runs if isinstance(r.get("set_point_K"), (int, float))]
    if not at:
        return runs[-1] if runs else None
    best = min(at, key=lambda r: abs(r["set_point_K"] - t))
    return best if abs(best["set_point_K"] - t) < 5.0 else None


def _add_message(model, note: str) -> None:
    fits = model.extras.get("fits")
    for kind in _LCR_KINDS:
        fit = fits.get(kind) if isinstance(fits, dict) else None
        if isinstance(fit, dict) and note not in str(fit.get("message", "")):
            fit["message"] = f"{fit.get('message', '')}; {note}"




