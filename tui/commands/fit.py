"""`pnbench fit`: extract the diode model from data files or a run folder.

    pnbench fit FILE_OR_RUN_DIR [FILE ...] [--kind iv|cv|auto] [--temperature K]
                [--area M2] [--ibv A] [--leakage-at V] [--fixture] [--tnom K]
                [--smu-noise REL,FLOOR] [--lcr-noise REL,FLOOR] [--json]

Several files are fitted into one model, each at its own temperature (its
``temperature_K`` metadata, else ``--temperature``); with two temperatures or more EG
and XTI are extracted too (fit_over, modeling.fit_temperature).

The file holds the CSV columns of docs/run-folder.md (``voltage_V,current_A`` for I–V;
``voltage_V,frequency_Hz,capacitance_F[,conductance_S]`` for C–V); ``# key = value``
comment lines carry metadata such as ``temperature_K`` and ``area_m2``. A run folder is
fitted jointly (I–V, C–V and admittance). Prints a table of parameters with their
one-sigma uncertainties and what each fit could and could not determine, or with
``--json`` the model.json document.
"""

from __future__ import annotations

HELP = "fit the diode model (IS N RS RSH BV CJO VJ M TT) to a data file or a run folder"


def add_arguments(parser) -> None:
    parser.add_argument("source", metavar="FILE_OR_RUN_DIR", nargs="+",
                        help="CSV data file or run folder (its points.csv); several files "
                             "are fitted into one model, each at its own temperature")
    parser.add_argument("--kind", choices=("iv", "cv", "auto"), default="auto",
                        help="which data to fit (default: whatever the columns hold)")
    parser.add_argument("--temperature", metavar="K",
                        help="device temperature in kelvin (one file: overrides the "
                             "file's temperature_K; several files: for those without it; "
                             "default 300.15 K)")
    parser.add_argument("--tnom", metavar="K",
                        help="with several temperatures: the temperature the model's values "
                             "hold at (TNOM; default: the measured one nearest 300.15 K)")
    parser.add_argument("--area", metavar="M2",
                        help="junction area in m^2 for the Mott-Schottky doping, e.g. 1e-6")
    parser.add_argument("--ibv", metavar="A",
                        help="reverse current at which BV is read (default 1 mA), e.g. 10u")
    parser.add_argument("--leakage-at", metavar="V",
                        help="reverse voltage for the leakage figure (default: the deepest "
                             "bias before breakdown), e.g. 20 or 20V")
    parser.add_argument("--fixture", action="store_true",
                        help="always fit a parallel (fixture) capacitance in C-V data "
                             "(by default it is fitted when the data determine it)")
    parser.add_argument("--smu-noise", metavar="REL,FLOOR",
                        help="the SMU's stated current noise, relative and floor, e.g. "
                             "2e-4,5pA: the I-V fit is judged against it (chi-square) "
                             "instead of estimating it")
    parser.add_argument("--lcr-noise", metavar="REL,FLOOR",
                        help="the LCR meter's stated noise, relative of |Y| and floor as "
                             "a capacitance, e.g. 3e-4,2fF")
    parser.add_argument("--column-names", metavar="FILE=OURS,...", default=None,
                        help="read a file whose columns are named otherwise, e.g. "
                        "'V=voltage_V,I=current_A' (pnbench's names: voltage_V, "
                        "current_A, frequency_Hz, capacitance_F, conductance_S)")
    parser.add_argument("--json", action="store_true",
                        help="print the model.json document instead of the table")


def column_names(text: str | None) -> dict[str, str] | None:
    """--column-names 'V=voltage_V,I=current_A' as {file name: pnbench name}."""
    from pnbench.errors import BadInput
    from pnbench.sweeps.datafile import NUMERIC

    if text is None:
        return None
    found: dict[str, str] = {}
    for part in (p.strip() for p in text.split(",") if p.strip()):
        theirs, sep, ours = (x.strip() for x in part.partition("="))
        if not sep or not theirs or not ours:
            raise BadInput(f"--column-names {text!r}: write FILE_NAME=PNBENCH_NAME pairs "
                           "separated by commas, e.g. V=voltage_V,I=current_A")
        if ours not in NUMERIC:
            raise BadInput(f"--column-names: {ours!r} is not a pnbench column (accepted: "
                           f"{', '.join(NUMERIC)})")
        found[theirs] = ours
    if not found:
        raise BadInput("--column-names: give at least one FILE_NAME=PNBENCH_NAME pair")
    return found


def run(args) -> int:
    import json
    import math

    from pnbench.errors import DataFileError
    from pnbench.modeling import joint
    from pnbench.modeling.params import DEFAULT_TEMPERATURE_K
    from pnbench.sweeps.datafile import read_data
    from pnbench.sweeps.quantities import parse_quantity

    if len(args.source) > 1 or args.tnom is not None or _over_temperature(args):
        from pnbench.tui.commands import fit_over

        return fit_over.run(args)
    source = args.source[0]
    data = read_data(source, args.kind, column_names(args.column_names))
    notes = list(data.notes)
    if args.temperature is not None:
        temperature = parse_quantity(args.temperature, "K", what="--temperature",
                                     low=1.0, high=2000.0)
    elif data.temperature_K is not None:
        temperature = data.temperature_K
    else:
        temperature = DEFAULT_TEMPERATURE_K
        notes.append(f"no temperature in the file or options: assumed {temperature} K (27 C)")
    if not temperature > 0:
        raise DataFileError(f"--temperature must be > 0 K, got {args.temperature!r}")
    area = parse_quantity(args.area, "m2", what="--area", high=1.0) if args.area else data.area_m2
    if area is not None and not area > 0:
        raise DataFileError(f"--area must be > 0 m^2, got {args.area!r}")
    ibv = parse_quantity(args.ibv, "A", what="--ibv", high=1e3) if args.ibv else None
    if ibv is not None and not ibv > 0:
        raise DataFileError(f"--ibv must be > 0 A, got {args.ibv!r}")
    if ibv is None:
        ibv = _run_breakdown_current(source, notes)
    leak = (parse_quantity(args.leakage_at, "V", what="--leakage-at", low=-1e4, high=1e4)
            if args.leakage_at else None)
    noise = _run_noise(source, notes)
    if not noise and data.stated_noise:  # a data file's header or sidecar
        noise = dict(data.stated_noise)
        notes += [note for key, note in data.noise_notes.items()
                  if not (args.smu_noise if key == "iv" else args.lcr_noise)]
    noise.update({key: _noise_option(text, option, unit)
                  for key, text, option, unit in (("iv", args.smu_noise, "--smu-noise", "A"),
                                                  ("cv", args.lcr_noise, "--lcr-noise", "F"))
                  if text})
    options = {"reference_V": leak, "with_fixture": True if args.fixture else None,
               "ibv_A": ibv, "noise": noise or None}
    run_inputs = _run_inputs(source, args.kind)
    if run_inputs is not None:  # a run folder: fitted as its run's own model was
        from dataclasses import replace

        from pnbench.sweeps.runfit import fit_inputs

        notes += run_inputs.notes
        temperature = temperature if args.temperature is not None \
            else run_inputs.temperature_K
        run_inputs = replace(run_inputs, temperature_K=temperature,
                             area_m2=area if args.area else run_inputs.area_m2,
                             extras={**run_inputs.extras, "source": str(data.path)})
        result = fit_inputs(run_inputs, **{k: v for k, v in options.items()
                                           if v is not None or k == "with_fixture"})
        if result is None:
            raise DataFileError(f"{data.path}: no points of the run to fit")
    else:
        kinds = data.kinds if args.kind == "auto" else (args.kind,)
        fit_data = {k: data.select(k) for k in kinds if data.select(k) is not None}
        result = joint.fit_all(fit_data, temperature_K=temperature, area_m2=area,
                               extras={"source": str(data.path)}, **options)
    if not any(r.success for r in result.results.values()):
        reasons = "; ".join(f"{k}: {r.message}" for k, r in result.results.items())
        raise DataFileError(f"{data.path}: nothing could be fitted ({reasons})")
    if args.json:
        print(json.dumps(result.model.to_json_dict(), indent=2, default=_json_default))
        return 0
    print(format_table(result, data, temperature, notes, math))
    if run_inputs is not None:  # a rehearsal on the simulated bench: against its part
        _print_part_check(source, result.model.to_json_dict())
    return 0


def _print_part_check(folder: str, model_doc: dict) -> None:
    from pathlib import Path

    from pnbench.sweeps import record
    from pnbench.sweeps.rehearsal import against_part

    check = against_part(record.read_run_doc(folder), model_doc, Path(folder).expanduser())
    if check is not None and check.rows:
        print(f"\n  {check.summary()}")


def _over_temperature(args) -> bool:
    """A run folder of a run over temperature (fitted per set point)."""
    from pnbench.tui.commands.fit_over import run_folder_sets

    return run_folder_sets(args.source[0], args.kind) is not None


def _run_breakdown_current(source: str, notes: list[str]) -> float | None:
    """For a run folder, the current its plan states BV at (the breakdown guard), so a
    refit agrees with the run's own model.json; None elsewhere (the fitter's 1 mA)."""

    from pnbench.errors import PlanError
    from pnbench.sweeps.fitmodel import breakdown_current_A
    from pnbench.sweeps.plan import load_plan
    from pnbench.sweeps.record import plan_path as run_plan_path

    plan_path = run_plan_path(source)
    if not plan_path.is_file():
        return None
    try:
        plan = load_plan(plan_path)
    except PlanError as exc:
        notes.append(f"{plan_path} does not load ({exc}); BV is stated at 1 mA")
        return None
    ibv = breakdown_current_A(plan.steps)
    if ibv is not None:
        notes.append(f"BV is stated at IBV = {ibv:.3g} A, the run's breakdown guard "
                     "(--ibv sets another)")
    return ibv


def _noise_option(text: str, option: str, unit: str) -> tuple[float, float]:
    """(relative, floor) from 'REL,FLOOR' (e.g. 2e-4,5pA); DataFileError naming the
    option otherwise."""
    from pnbench.errors import DataFileError
    from pnbench.sweeps.quantities import parse_quantity

    parts = [p.strip() for p in str(text).split(",")]
    if len(parts) != 2:
        raise DataFileError(f"{option}: expected REL,FLOOR such as 2e-4,5p{unit}; "
                            f"got {text!r}")
    try:
        rel = float(parts[0])
    except ValueError:
        raise DataFileError(f"{option}: the relative part {parts[0]!r} is not a number "
                            f"(e.g. 2e-4 for 0.02 %)") from None
    floor = parse_quantity(parts[1], unit, what=option, low=0.0, high=1.0)
    if not (0 < rel < 1) or not floor >= 0:
        raise DataFileError(f"{option}: need 0 < REL < 1 and FLOOR >= 0, got {text!r}")
    return rel, floor


def _run_noise(source: str, notes: list[str]) -> dict:
    """For a run folder, the stated noise its run.json records (its final fit was
    judged against it); {} elsewhere. --smu-noise and --lcr-noise win over it."""
    from pathlib import Path

    from pnbench.errors import PnbenchError
    from pnbench.sweeps import record
    from pnbench.sweeps.statednoise import fit_noise

    folder = Path(source)
    if not (folder.is_dir() and record.has(folder, record.layout.RUN)):
        return {}
    try:
        stated = record.read_run(folder).doc.get("stated_noise")
    except (PnbenchError, OSError):
        return {}
    noise = fit_noise(stated) or {}
    for key in noise:
        where = (stated[key].get("source") if isinstance(stated[key], dict) else None) \
            or "run.json"
        notes.append(f"{'I-V' if key == 'iv' else 'C-V'} fits judged against the stated "
                     f"noise of {where} (run.json; "
                     f"{'--smu-noise' if key == 'iv' else '--lcr-noise'} sets another)")
    return noise


def _run_inputs(source: str, kind: str):
    """For a run folder (run.json and points.csv), its fit inputs (`sweeps.runfit`, only
    the steps of ``kind`` unless "auto"); None for a data file."""
    from pathlib import Path

    from pnbench.sweeps import record
    from pnbench.sweeps.runfit import read_inputs

    folder = Path(source).expanduser()
    if not (folder.is_dir() and record.has(folder, record.layout.RUN)
            and record.has(folder, record.layout.POINTS)):
        return None
    return read_inputs(folder).only(kind)


def _json_default(value):
    import numpy as np

    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, np.ndarray):
        return value.tolist()
    raise TypeError(f"not JSON-able: {type(value).__name__}")


def parameter_lines(model) -> list[str]:
    """One line per parameter of a ModelSet: value, sigma, relative sigma."""
    from pnbench.modeling.params import UNITS
    from pnbench.sweeps.quantities import format_estimate, format_quantity

    lines = [f"  {'parameter':<10}{'value':>16}{'sigma':>16}{'rel. sigma':>12}"]
    for name in UNITS:
        if name not in model.values:
            continue
        value, sigma, unit = model.values[name], model.sigma(name), UNITS[name]
        plain = not unit or "/" in unit  # per-kelvin coefficients: plain numbers
        val = format_estimate(value, sigma, "" if plain else unit)
        if sigma is None:
            sig, rel = "stated" if name == "IBV" else "-", ""
        else:
            sig = f"{sigma:.3g}" if plain else format_quantity(sigma, unit, prec=2)
            rel = f"{100 * sigma / abs(value):.3g} %" if value else ""
        if plain and unit:
            val, sig = f"{val} {unit}", (f"{sig} {unit}" if sigma is not None else sig)
        lines.append(f"  {name:<10}{val:>16}{sig:>16}{rel:>12}")
    return lines


def format_table(result, data, temperature, notes, math) -> str:
    """The human-readable report: one line per parameter, then what each fit said."""
    from pnbench.sweeps.quantities import format_quantity

    counts = ", ".join(f"{int((data.row_kind == k).sum())} {k.upper()} points"
                       for k in data.kinds)
    lines = [f"{data.path}: {counts}, {temperature:.6g} K", ""]
    model = result.model
    lines += parameter_lines(model)
    extras = model.extras
    if "leakage" in extras:
        leak = extras["leakage"]
        sd = leak.get("sigma_A")
        if leak.get("current_A") is None:
            lines.append(f"  leakage at {leak['voltage_V']:.4g} V: below "
                         f"{format_quantity(leak.get('below_A', 0.0), 'A')}")
        else:
            lines.append(f"  leakage at {leak['voltage_V']:.4g} V: "
                         f"{format_quantity(leak['current_A'], 'A')}"
                         + (f" +- {format_quantity(sd, 'A')}" if sd is not None else ""))
    if "fixture_capacitance_F" in extras:
        fx = extras["fixture_capacitance_F"]
        lines.append(f"  fixture capacitance (the bench's, not on the card): "
                     f"{format_quantity(fx['value'], 'F')}")
    if "fixture_resistance_ohm" in extras:
        fx = extras["fixture_resistance_ohm"]
        lines.append(f"  fixture series resistance (the bench's leads, not RS; not on the "
                     f"card): {format_quantity(fx['value'], 'ohm')}")
    doping = extras.get("doping")
    if isinstance(doping, dict):
        if "doping_per_m3" in doping:
            lines.append(f"  Mott-Schottky: doping {doping['doping_per_m3'] * 1e-6:.4g} cm^-3 "
                         f"+- {doping['doping_sigma_per_m3'] * 1e-6:.2g}, built-in voltage "
                         f"{doping['built_in_voltage_V']:.4g} V ({doping['material']}, "
                         f"area {doping['area_m2']:.4g} m^2)")
        else:
            lines.append(f"  {doping.get('message')}")
        if doping.get("note"):
            lines.append(f"  caution: {doping['note']}")
    lines.append("")
    for kind, r in result.results.items():
        chi = (f", reduced chi-square {r.reduced_chi2:.3g}"
               if math.isfinite(r.reduced_chi2) else "")
        lines.append(f"  {kind}: {r.message}{chi}")
    lines += [f"  note: {n}" for n in notes]
    return "\n".join(lines)
