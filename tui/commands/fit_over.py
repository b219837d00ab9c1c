"""`pnbench fit FILE [FILE ...]`: several files into one model, each at its temperature.

Each file is read as `pnbench fit` reads one (sweeps.datafile); its temperature is its
``temperature_K`` metadata (a run folder's run.json), else ``--temperature``, else
300.15 K with a note. Files at the same temperature are fitted together (any mix of I–V
and C–V); with two temperatures or more modeling.fit_temperature fits EG and XTI (and
TRS, TCV, N's drift when the data show them) and the model holds its values at TNOM.
"""

from __future__ import annotations


def run_folder_sets(folder, kind: str = "auto") -> list[tuple[float, dict, str]] | None:
    """A run folder over temperature as (temperature, data, label) per stage set point
    (steps named NAME@<T>K); the temperature is the mean of the points' temperature_K
    readings, else the set point. None for a run at one temperature."""
    from pathlib import Path

    import numpy as np

    from pnbench.sweeps import record
    from pnbench.tui.report.arrhenius import set_point_of

    folder = Path(folder)
    if not (folder.is_dir() and record.has(folder, record.layout.POINTS)):
        return None
    points = record.read_columns(folder)
    set_points = {set_point_of(name) for name in points.step_names} - {None}
    if len(set_points) < 2:
        return None
    steps = points.steps()
    kinds = points.kinds().astype(str)
    scale = _step_noise_scales(folder, steps)
    out = []
    for sp in sorted(set_points):
        rows = np.array([set_point_of(s) == sp for s in steps], dtype=bool)
        t = points.temperature_K[rows]
        t = t[np.isfinite(t)]
        data = {}
        for k in ("iv", "cv"):
            pick = rows & (kinds == k)
            if pick.any() and kind in ("auto", k):
                data[k] = {n: getattr(points, n)[pick] for n in (
                    "voltage_V", "current_A", "frequency_Hz", "capacitance_F",
                    "conductance_S", "compliance")}
                if scale is not None:  # each step's NPLC and averaging, as the run's fit
                    data[k]["noise_scale"] = scale[pick]
        if "cv" in data:  # compensated as the run's own fit did, with this set point's
            data["cv"] = _compensated(data["cv"], folder, sp,  # recorded correction
                                      steps[rows & (kinds == "cv")])
        if data:
            out.append((float(np.mean(t)) if t.size else sp, data, f"{folder} @ {sp:g} K"))
    return out


def _step_noise_scales(folder, steps):
    """Per row, 1/sqrt(NPLC x readings) of its step in the run's plan (None when the
    plan cannot be read: the stated noise then holds unscaled)."""
    import numpy as np

    from pnbench.errors import PnbenchError
    from pnbench.sweeps.fitmodel import noise_scale
    from pnbench.sweeps.launch import plan_of_run

    try:
        table = {s.name: noise_scale(s) for s in plan_of_run(folder).steps}
    except (PnbenchError, OSError):
        return None
    return np.array([table.get(str(s), 1.0) for s in steps], dtype=float)


def _compensated(col: dict, folder, set_point_K: float, steps) -> dict:
    """C-V columns (of the rows of ``steps``) compensated with the run's correction entry
    for this set point when the run applied it in software, each step with the values of
    its test level (sweeps.fitcorrection); as they are otherwise."""
    import numpy as np

    from pnbench.errors import PnbenchError
    from pnbench.modeling.compensation import compensate_parallel
    from pnbench.sweeps import record
    from pnbench.sweeps.fitcorrection import residuals_for

    try:
        correction = record.read_run(folder).get("lcr_correction")
    except (PnbenchError, OSError):
        return col
    c, g = col["capacitance_F"].copy(), col["conductance_S"].copy()
    names = np.asarray(steps).astype(str)
    for name in dict.fromkeys(names.tolist()):
        residuals = residuals_for(correction, set_point_K, step=name)
        if residuals is None:
            return col
        at = names == name
        c[at], g[at] = compensate_parallel(c[at], g[at], col["frequency_Hz"][at], residuals)
    return {**col, "capacitance_F": c, "conductance_S": g}


def run(args) -> int:
    import json

    from pnbench.errors import DataFileError
    from pnbench.modeling.fit_temperature import fit_over_temperature
    from pnbench.modeling.params import DEFAULT_TEMPERATURE_K
    from pnbench.sweeps.datafile import read_data
    from pnbench.tui.commands.fit import _noise_option, _run_noise, column_names

    names = column_names(getattr(args, "column_names", None))
    from pnbench.sweeps.quantities import parse_quantity

    default_t = None
    if args.temperature is not None:
        default_t = parse_quantity(args.temperature, "K", what="--temperature",
                                   low=1.0, high=2000.0)
        if not default_t > 0:
            raise DataFileError(f"--temperature must be > 0 K, got {args.temperature!r}")
    tnom = None
    if args.tnom is not None:
        tnom = parse_quantity(args.tnom, "K", what="--tnom", low=1.0, high=2000.0)
        if not tnom > 0:
            raise DataFileError(f"--tnom must be > 0 K, got {args.tnom!r}")
    area = parse_quantity(args.area, "m2", what="--area", high=1.0) if args.area else None
    if area is not None and not area > 0:
        raise DataFileError(f"--area must be > 0 m^2, got {args.area!r}")
    ibv = parse_quantity(args.ibv, "A", what="--ibv", high=1e3) if args.ibv else None
    if ibv is not None and not ibv > 0:
        raise DataFileError(f"--ibv must be > 0 A, got {args.ibv!r}")
    leak = (parse_quantity(args.leakage_at, "V", what="--leakage-at", low=-1e4, high=1e4)
            if args.leakage_at else None)
    notes: list[str] = []
    sets, files = [], []
    noise: dict = {}
    for source in args.source:
        if not noise:  # a run folder's stated noise (the first that states one)
            noise = _run_noise(source, notes)
        over_t = run_folder_sets(source, args.kind)
        if over_t is not None:
            for t, fit_data, label in over_t:
                sets.append((t, fit_data))
                files.append((_Label(label, fit_data), t))
            notes.append(f"{source}: a run over temperature, fitted per stage set point")
            continue
        data = read_data(source, args.kind, names)
        notes += [f"{data.path}: {n}" for n in data.notes]
        if data.temperature_K is not None:
            t = data.temperature_K
        elif default_t is not None:
            t = default_t
        else:
            t = DEFAULT_TEMPERATURE_K
            notes.append(f"{data.path}: no temperature_K in the file or --temperature: "
                         f"assumed {t} K (27 C)")
        if area is None and data.area_m2 is not None:
            area = data.area_m2
        kinds = data.kinds if args.kind == "auto" else (args.kind,)
        fit_data = {k: data.select(k) for k in kinds if data.select(k) is not None}
        sets.append((t, fit_data))
        files.append((data, t))
    noise.update({key: _noise_option(text, option, unit)
                  for key, text, option, unit in (
                      ("iv", getattr(args, "smu_noise", None), "--smu-noise", "A"),
                      ("cv", getattr(args, "lcr_noise", None), "--lcr-noise", "F")) if text})
    try:
        fit = fit_over_temperature(sets, tnom_K=tnom, area_m2=area, ibv_A=ibv,
                                   reference_V=leak,
                                   extras={"sources": [str(d.path) for d, _ in files]},
                                   noise=noise or None)
    except ValueError as exc:
        raise DataFileError(f"{', '.join(args.source)}: {exc}") from None
    if not any(r.success for _, jf in fit.per_temperature for r in jf.results.values()):
        reasons = "; ".join(f"{t:g} K: {jf.message}" for t, jf in fit.per_temperature)
        raise DataFileError(f"{', '.join(args.source)}: nothing could be fitted ({reasons})")
    if args.json:
        from pnbench.tui.commands.fit import _json_default

        print(json.dumps(fit.model.to_json_dict(), indent=2, default=_json_default))
        return 0
    print(format_table(fit, files, notes))
    return 0


class _Label:
    """A set point of a run folder, shown like a file in the table."""

    def __init__(self, label: str, data: dict) -> None:
        import numpy as np

        self.path = label
        self.kinds = tuple(data)
        self.row_kind = np.concatenate([np.full(len(data[k]["voltage_V"]), k)
                                        for k in self.kinds])


def format_table(fit, files, notes) -> str:
    """Files and their temperatures, the model at TNOM, the per-temperature values."""
    from pnbench.tui.commands.fit import parameter_lines

    lines = []
    for data, t in files:
        counts = ", ".join(f"{int((data.row_kind == k).sum())} {k.upper()} points"
                           for k in data.kinds)
        lines.append(f"{data.path}: {counts}, {t:.6g} K")
    model = fit.model
    lines += ["", f"model at TNOM = {model.temperature_K:.6g} K", *parameter_lines(model)]
    corr = fit.result.extras.get("EG_XTI_correlation")
    if corr is not None:
        lines.append(f"  correlation of EG and XTI: {corr:+.4f}")
    drift = model.extras.get("N_drift")
    if drift is not None:
        lines.append(f"  N drift: {drift['slope_per_K']:.3g} +- {drift['sigma_per_K']:.2g} "
                     f"per K" + (" (significant)" if drift["significant"] else ""))
    lines += ["", f"  {'T [K]':>8}{'IS [A]':>14}{'N':>10}{'RS [ohm]':>12}{'BV [V]':>10}"]
    for row in model.extras.get("temperatures", []):
        cells = "".join(f"{format(row[name], '.4g') if name in row else '-':>{width}}"
                        for name, width in (("IS", 14), ("N", 10), ("RS", 12), ("BV", 10)))
        lines.append(f"  {row['temperature_K']:>8.5g}{cells}")
    lines += ["", f"  over temperature: {fit.result.message}"]
    for t, jf in fit.per_temperature:
        lines.append(f"  {t:g} K: {jf.message}")
    lines += [f"  note: {n}" for n in (*model.extras.get("temperature_notes", []), *notes)]
    return "\n".join(lines)
