"""The seam between the runner and `pnbench.modeling`'s fitters.

Three calls: a new incremental fitter for a step kind, adding one run point to it, and the
run's model (a `ModelSet`) from every point so far. Keeping them here means the runner
and the fit worker never depend on how the modeling package spells its arguments.
"""

from __future__ import annotations

import importlib
import importlib.util

import numpy as np

from pnbench.modeling.smallsignal import admittance_from_parallel
from pnbench.sweeps.fitcolumns import (  # noqa: F401  (re-exported)
    KIND_COLUMNS,
    VALUE_COLUMNS,
    Columns,
    kind_columns,
)
from pnbench.sweeps.record import Point

#: The fitter kind of each step kind (the same names).
FIT_KIND = {"iv_forward": "iv_forward", "iv_reverse": "iv_reverse", "cv": "cv",
            "admittance": "admittance"}


def available() -> bool:
    """Whether the incremental fitters are installed (they are part of pnbench)."""
    return importlib.util.find_spec("pnbench.modeling.incremental") is not None


#: What the fit thread would import on a step's first fit and at its end (the provisional
#: model): `warm_up` imports them before the run's first point.
WARM_MODULES = ("pnbench.modeling.incremental", "pnbench.modeling.cvstream",
                "pnbench.modeling.joint", "pnbench.modeling.fit_iv",
                "pnbench.modeling.fit_cv", "pnbench.modeling.fit_reverse",
                "pnbench.modeling.mottschottky", "pnbench.sweeps.statednoise")


def warm_up(step_kinds) -> None:
    """Import what the live fits of these step kinds use and build one fitter of each
    kind (their specs import the rest), on the calling thread: done before a run's first
    point, so no import (its module locks, an extension's loading with the interpreter
    lock held) runs on the fit thread beside the acquisition."""
    for name in WARM_MODULES:
        importlib.import_module(name)
    for kind in sorted(set(step_kinds)):
        new_fitter(kind, 300.0, {"IS": 1e-14, "N": 1.0} if kind in ("cv", "admittance")
                   else None)


def new_fitter(step_kind: str, temperature_K: float, fixed: dict | None = None,
               ibv_A: float | None = None, *, ac_level_V: float | None = None,
               held_covariance=None, stated_noise: dict | None = None, step=None):
    """An incremental fitter for a step. ``fixed`` holds model-card values from earlier
    steps for a C-V or admittance fit to keep (see `live_holds`), ``held_covariance``
    their uncertainty; ``ac_level_V`` is the step's LCR test level. ``stated_noise``
    (run.json's) judges the live fit against the instrument's noise (scaled for
    ``step``'s NPLC and averaging); without it the live fit estimates the noise."""
    from pnbench.modeling.incremental import IncrementalFitter
    from pnbench.sweeps.statednoise import fit_noise

    noise = (fit_noise(stated_noise) or {}).get("iv" if step_kind.startswith("iv") else "cv")
    live = {"noise": noise, "noise_scale": noise_scale(step)} if noise is not None \
        and step is not None else {}
    if step_kind in ("cv", "admittance") and fixed:
        return IncrementalFitter(step_kind, temperature_K=temperature_K, fixed=fixed,
                                 ac_level_V=ac_level_V, held_covariance=held_covariance,
                                 **live)
    if step_kind == "iv_reverse" and ibv_A is not None:
        return IncrementalFitter("iv_reverse", temperature_K=temperature_K, ibv_A=ibv_A,
                                 **live)
    return IncrementalFitter(FIT_KIND[step_kind], temperature_K=temperature_K, **live)


#: What a live admittance step holds from the C-V step besides the DC part.
CV_HOLDS = ("CJO", "VJ", "M", "CFIX")


def admittance_holds(results) -> dict[str, float]:
    """What a live admittance fit holds, from the fits of the run's earlier steps
    (FitResults of any kind, in step order).

    A forward-bias admittance step alone cannot pin the depletion curve nor, beside TT,
    the DC parameters: CJO, VJ, M come from the latest successful C-V fit (with its
    fixture capacitance, none when it kept none), and IS, N, RS, RSH as the I-V fits
    found them (absent ones held absent, `joint.dc_holds`). The run's model.json is
    still fitted from every point together.
    """
    return live_holds("admittance", results)[0] or {}


def live_holds(step_kind: str, results) -> tuple[dict[str, float] | None, tuple | None]:
    """What a live C-V or admittance fit holds from the run's earlier steps' fits
    (FitResults in step order), and (names, covariance) of those values.

    The DC part (IS, N, RS, RSH as the I-V fits found them, `joint.dc_holds`) for
    both kinds: with it the points are fitted on the network the meter sees, like the
    run's final fit. An admittance step holds the latest C-V fit's CJO, VJ, M and CFIX
    too (see `admittance_holds`). (None, None) when nothing is held.
    """
    from pnbench.modeling.joint import dc_hold_covariance, dc_holds

    results = [r for r in results if r is not None]
    held = dc_holds(results)
    blocks: list[tuple[list[str], np.ndarray]] = []
    ok = [r for r in results if r.success]
    by_kind = {f"{r.kind}#{k}": r for k, r in enumerate(ok)}
    fwd = [r for r in ok if r.kind == "iv_forward"]
    if fwd:
        by_kind["iv_forward"] = fwd[-1]
    dc_cov = dc_hold_covariance(by_kind, held) if held else None
    if dc_cov is not None:
        names = [n for n in ("IS", "N", "RS", "RSH") if n in held
                 and np.isfinite(held[n]) and not (n == "RS" and held[n] == 0.0)]
        blocks.append((names, dc_cov))
    cv = [r for r in ok if r.kind == "cv"]
    if step_kind == "admittance" and cv and all(n in cv[-1].values for n in CV_HOLDS[:3]):
        held.update({n: cv[-1].values.get(n, 0.0) for n in CV_HOLDS})
        names = [n for n in CV_HOLDS if n in cv[-1].names]
        at = [cv[-1].names.index(n) for n in names]
        blocks.append((names, np.asarray(cv[-1].covariance)[np.ix_(at, at)]))
    if step_kind == "cv" and not ("IS" in held and "N" in held):
        return None, None
    if not held:
        return None, None
    names = [n for b in blocks for n in b[0]]
    cov = np.zeros((len(names), len(names)))
    at = 0
    for b_names, b_cov in blocks:  # independent fits: nothing across the blocks
        cov[at:at + len(b_names), at:at + len(b_names)] = b_cov
        at += len(b_names)
    cov = np.where(np.isfinite(cov), cov, 0.0)
    return held, ((tuple(names), cov) if names else None)


def breakdown_current_A(steps) -> float | None:
    """The current at which BV is stated: the smallest breakdown guard of the reverse
    steps, but not above the simulators' customary 1 mA (a step only ends at its guard,
    so the data always reach it)."""
    guards = [g for s in steps if (g := getattr(s, "breakdown_guard_A", None))]
    return min(min(guards), 1e-3) if guards else None


def admittance_of(point: Point) -> complex:
    """The complex admittance of a C-V or admittance point (parallel model)."""
    return complex(admittance_from_parallel(point.capacitance_F, point.conductance_S or 0.0,
                                            point.frequency_Hz))


def add_points(fitter, step_kind: str, points: list[Point]) -> None:
    """Add run points to a step's fitter as one batch."""
    if points:
        add_columns(fitter, step_kind, arrays(points, {points[0].step}))


def add_columns(fitter, step_kind: str, col: dict[str, np.ndarray]) -> None:
    """Add a batch of points, given as columns, to a step's fitter."""
    if not len(col["voltage_V"]):
        return
    if step_kind in ("iv_forward", "iv_reverse"):
        fitter.add(col["voltage_V"], col["current_A"], compliance=col["compliance"])
    else:
        fitter.add(col["voltage_V"], frequency_Hz=col["frequency_Hz"],
                   capacitance_F=col["capacitance_F"], conductance_S=col["conductance_S"])


def arrays(points: list[Point], step_names: set[str]) -> dict[str, np.ndarray]:
    """Columns of the points of the given steps."""
    chosen = [p for p in points if p.step in step_names]
    col = {name: np.array([getattr(p, name) for p in chosen], dtype=float)
           for name in VALUE_COLUMNS}
    col["compliance"] = np.array([p.compliance for p in chosen], dtype=bool)
    return col


def run_model(steps: dict, points: list[Point], latest: dict, temperature_K: float, *,
              area_m2: float | None = None, extras: dict | None = None):
    """The run's ModelSet from a list of points (None when nothing can be fitted).
    ``steps`` maps step names to objects with ``.kind``; ``latest`` is unused (kept for
    callers that hold live snapshots)."""
    by_step = {name: arrays(points, {name}) for name in steps}
    return model_of_columns(steps, by_step, temperature_K, area_m2=area_m2, extras=extras)


def model_of_columns(steps: dict, columns: dict[str, dict[str, np.ndarray]],
                     temperature_K: float, *, area_m2: float | None = None,
                     extras: dict | None = None, consume: bool = False):
    """The run's ModelSet fitted from every point, given per step as columns (`Columns`
    views); None when nothing can be fitted. Steps of one kind are pooled; ``consume``:
    see `joint_of_columns`."""
    fit = joint_of_columns(steps, columns, temperature_K, area_m2=area_m2, extras=extras,
                           consume=consume)
    return None if fit is None else fit.model


def joint_of_columns(steps: dict, columns: dict[str, dict[str, np.ndarray]],
                     temperature_K: float, *, area_m2: float | None = None,
                     extras: dict | None = None, consume: bool = False, **options):
    """The run's joint fit (`joint.JointFit`, its model stating the meter's correction)
    from every point, given per step as columns; None when nothing can be fitted. The
    one fit of a run's model: the end of a run, `pnbench fit RUN_DIR` and the review
    refit (`runfit`) all come here. ``options`` override the joint fit's defaults (the
    run's breakdown current, run.json's stated noise). With ``consume`` the mapping is
    emptied and each step's arrays are let go as soon as they are pooled by kind (the
    run's end: a night's points are then held once during the fit)."""
    from pnbench.modeling.joint import fit_all
    from pnbench.sweeps.fitcorrection import compensated_columns

    given = compensated_columns(steps, columns, (extras or {}).get("lcr_correction"))
    parts_of: dict[str, list[tuple[object, dict]]] = {}
    for name, step in steps.items():
        if name in given and len(given[name]["voltage_V"]):
            parts_of.setdefault(step.kind, []).append((step, dict(given[name])))
    given = None
    if consume:
        columns.clear()
    if not parts_of:
        return None
    data = {kind: _pooled(kind, parts) for kind, parts in parts_of.items()}
    parts_of.clear()
    from pnbench.sweeps.statednoise import fit_noise

    options = {"ibv_A": breakdown_current_A(steps.values()),
               "noise": fit_noise((extras or {}).get("stated_noise")), **options}
    fit = fit_all(data, temperature_K=temperature_K, area_m2=area_m2, extras=extras,
                  **options)
    note_correction(fit.model, (extras or {}).get("lcr_correction"))
    return fit


def _pooled(kind: str, parts: list[tuple[object, dict]]) -> dict[str, np.ndarray]:
    """One kind's steps as one set of columns, with each point's step's noise scale and
    (C-V kinds) LCR test level; every column is concatenated in turn and the steps' own
    arrays of it dropped from ``parts`` (the caller's last reference, when it let go)."""
    lengths = [len(col["voltage_V"]) for _, col in parts]
    constants = {"noise_scale": [noise_scale(step) for step, _ in parts]}
    if kind in ("cv", "admittance"):  # the LCR test level, for the C-V fit
        levels = [getattr(step, "ac_level_V", None) for step, _ in parts]
        constants["ac_level_V"] = [np.nan if v is None else v for v in levels]
    out: dict[str, np.ndarray] = {}
    for name in list(parts[0][1]):
        arrays = [col.pop(name) for _, col in parts]
        out[name] = arrays[0] if len(arrays) == 1 else np.concatenate(arrays)
        del arrays
    for name, values in constants.items():
        out[name] = np.concatenate([np.full(n, v) for n, v in zip(lengths, values,
                                                                strict=True)]) \
            if len(set(values)) > 1 else np.full(sum(lengths), values[0])
    return out


def noise_scale(step) -> float:
    """How a step's readings' noise compares with one reading at 1 NPLC:
    1/sqrt(NPLC x readings averaged) for the SMU, 1/sqrt(readings averaged) for the LCR
    meter (its measurement time is its own); white noise assumed."""
    nplc = float(getattr(step, "nplc", 1.0) or 1.0) if step.kind in ("iv_forward",
                                                                    "iv_reverse") else 1.0
    return 1.0 / float(np.sqrt(max(nplc, 1e-9) * max(int(getattr(step, "average", 1)), 1)))


#: What the C-V and admittance fits say when the meter's open correction was run.
OPEN_CORRECTED = ("open correction applied by the meter: the stray capacitance of the "
                  "fixture is subtracted from the readings, and a fitted CFIX is only what "
                  "the correction left (the residual after correction)")


#: What they say when the meter's short correction was run (run.json records the
#: short's R and X): a fitted fixture series resistance is what it left.
SHORT_CORRECTED = ("short correction applied by the meter: the fixture's series "
                   "impedance is subtracted from the readings, and a fitted RFIX is only "
                   "what the correction left (the residual after correction)")


def open_corrected(record: object, which: str = "open") -> bool:
    """Whether a run's ``lcr_correction`` record (run.json) says the open (or with
    ``which`` the short) correction was run."""
    return (isinstance(record, dict) and bool(record.get("done"))
            and which in (record.get("corrections") or ()))


def note_correction(model, record: object):
    """The model with its C-V/admittance fit messages stating the meter's open and short
    corrections (model extras ``open_corrected``, ``short_corrected``); unchanged
    without any."""
    if model is None:
        return model
    from pnbench.sweeps.fitcorrection import judge, runs_of

    judge(model, record)
    if all(r.get("applied_by") == "software" for r in runs_of(record)):
        return model  # the meter applied nothing
    for which, note in (("open", OPEN_CORRECTED), ("short", SHORT_CORRECTED)):
        if not open_corrected(record, which):
            continue
        model.extras[f"{which}_corrected"] = True
        fits = model.extras.get("fits")
        for kind in ("cv", "admittance"):
            fit = fits.get(kind) if isinstance(fits, dict) else None
            if isinstance(fit, dict) and note not in str(fit.get("message", "")):
                fit["message"] = f"{fit.get('message', '')}; {note}"
    return model


def model_of_snapshots(steps: dict, latest: dict, temperature_K: float, *,
                       area_m2: float | None = None, extras: dict | None = None):
    """A provisional ModelSet from the live fits' latest snapshots (the last step of each
    kind that has one), with no new fitting: what model.json holds between step ends
    until the run's model is fitted from every point at its end. None without any."""
    from pnbench.modeling.joint import model_from_results

    results = {}
    for name, step in steps.items():
        result = latest.get(name)
        if result is not None and result.success:
            results[FIT_KIND[step.kind]] = result
    if not results:
        return None
    more = dict(extras or {})
    if area_m2 is not None:
        more["area_m2"] = float(area_m2)
    more["provisional"] = True
    return note_correction(model_from_results(results, temperature_K, more),
                           more.get("lcr_correction"))
