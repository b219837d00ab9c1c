"""The numbers a report shows besides the raw points: the model, the curves it predicts,
the Mott-Schottky line and doping, and the small-signal equivalent at a few Q-points.

Pure: takes a `RunData`, returns an `Analysis`; no files, no matplotlib. Each part that
cannot be made says why in `Analysis.missing`, so the report can say what is absent.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from pnbench.errors import DataFileError
from pnbench.modeling import smallsignal
from pnbench.modeling.modelset import ModelSet
from pnbench.modeling.params import DEFAULT_TEMPERATURE_K, DiodeParams
from pnbench.sweeps.events import Limit
from pnbench.sweeps.record import model_source
from pnbench.sweeps.record.layout import MODEL as MODEL_FILE
from pnbench.tui.app.words import guard_words, status_words
from pnbench.tui.report.data import Points, RunData

#: A C-V curve needs this many biases at one frequency; a spectrum this many frequencies.
MIN_CURVE_POINTS = 3
#: At most this many frequencies become |Z| columns of the Q-point table.
MAX_TABLE_FREQUENCIES = 5
#: Breakdown counts as reached when the reverse sweep went this close to -BV (fraction).
BV_REACHED_FRACTION = 0.98


@dataclass(frozen=True)
class Curve:
    """Measured points sharing a frequency (C-V curve) or a bias (spectrum)."""

    label_value: float  # the frequency [Hz] of a C-V curve, the bias [V] of a spectrum
    step: str
    voltage_V: np.ndarray
    frequency_Hz: np.ndarray
    capacitance_F: np.ndarray
    conductance_S: np.ndarray


@dataclass(frozen=True)
class QRow:
    """One row of the small-signal table: model values at a bias, measured |Z| if any."""

    origin: str  # why this Q-point was chosen
    point: smallsignal.QPoint
    impedance_ohm: dict[float, float]  # frequency -> model |Z|
    measured_ohm: dict[float, float]  # frequency -> measured |Z| at this bias


@dataclass
class Analysis:
    temperature_K: float
    temperature_known: bool
    model: ModelSet | None = None
    params: DiodeParams | None = None
    model_source: str = ""
    correlations: list[tuple[str, tuple[str, ...], np.ndarray]] = field(default_factory=list)
    fits: list[tuple[str, dict]] = field(default_factory=list)
    forward: Points | None = None
    reverse: Points | None = None
    cv_curves: list[Curve] = field(default_factory=list)
    spectra: list[Curve] = field(default_factory=list)
    reverse_extreme_V: float | None = None
    #: Where the reverse figure marks breakdown (V < 0), and what the mark says.
    breakdown_V: float | None = None
    breakdown_label: str = ""
    mott_schottky: object | None = None  # depletion module's result (see report_depletion)
    profile: tuple[np.ndarray, np.ndarray] | None = None  # (W [m], N [m^-3])
    table_frequencies_Hz: tuple[float, ...] = ()
    table_frequencies_measured: bool = False
    qrows: list[QRow] = field(default_factory=list)
    missing: list[str] = field(default_factory=list)
    #: a run over temperature: every forward point (``forward`` keeps those at TNOM)
    forward_all_temperatures: Points | None = None

    @property
    def fixture_F(self) -> float:
        """The fitted fixture capacitance (the bench's, across the terminals), else 0: model
        curves drawn against readings include it, since the meter saw it too."""
        return self._fixture("fixture_capacitance_F")

    @property
    def fixture_ohm(self) -> float:
        """The fitted series resistance of the fixture (the bench's), else 0."""
        return self._fixture("fixture_resistance_ohm")

    def _fixture(self, key: str) -> float:
        fixture = self.model.extras.get(key) if self.model else None
        value = fixture.get("value") if isinstance(fixture, dict) else None
        return float(value) if isinstance(value, (int, float)) else 0.0


def split_iv(iv: Points) -> tuple[Points | None, Points | None]:
    """(forward, reverse): points with positive bias, and with negative bias."""
    ok = np.isfinite(iv.current_A)
    return iv.subset(ok & (iv.voltage_V > 0)), iv.subset(ok & (iv.voltage_V < 0))


def step_kinds(data: RunData) -> dict[str, str]:
    """Step name -> step kind (iv_forward, iv_reverse, cv, admittance) from run.json."""
    kinds = {}
    for step in (data.run or {}).get("steps") or []:
        if isinstance(step, dict) and step.get("name") is not None:
            kinds[str(step["name"])] = str(step.get("kind", ""))
    return kinds


def group_cv(cv: Points, kinds: dict[str, str]) -> tuple[list[Curve], list[Curve]]:
    """(C-V curves, spectra) with enough points to draw a line, step by step.

    A ``cv`` step gives one curve per frequency, an ``admittance`` step one spectrum per
    bias. A step of unknown kind gives curves when it has at least as many biases as
    frequencies, and spectra when it has three frequencies or more.
    """
    ok = np.isfinite(cv.capacitance_F) & np.isfinite(cv.frequency_Hz)
    v = np.round(cv.voltage_V, 9)
    f = cv.frequency_Hz
    steps = np.array(cv.step, dtype=object)
    curves, spectra = [], []
    for name in dict.fromkeys(cv.step):
        in_step = ok & (steps == name)
        n_v, n_f = np.unique(v[in_step]).size, np.unique(f[in_step]).size
        kind = kinds.get(name)
        make_curves = kind == "cv" or (kind != "admittance" and n_v >= n_f)
        make_spectra = kind == "admittance" or (kind != "cv" and n_f >= MIN_CURVE_POINTS)
        if make_curves:
            for freq in np.unique(f[in_step]):
                sel = in_step & (f == freq)
                if np.unique(v[sel]).size >= MIN_CURVE_POINTS:
                    curves.append(_curve(cv, sel, float(freq), name, order=cv.voltage_V))
        if make_spectra:
            for bias in np.unique(v[in_step]):
                sel = in_step & (v == bias)
                if np.unique(f[sel]).size >= MIN_CURVE_POINTS:
                    spectra.append(_curve(cv, sel, float(bias), name, order=f))
    curves.sort(key=lambda c: -len(c.voltage_V))
    return curves, spectra


def compensated_cv(data: RunData) -> Points:
    """The C-V points as the run's fits used them: compensated with the recorded LCR
    correction of each step's set point where pnbench applied it in software
    (sweeps.fitcorrection; points.csv keeps them raw), else as read."""
    from dataclasses import replace

    from pnbench.modeling.compensation import compensate_parallel
    from pnbench.sweeps.fitcorrection import residuals_for, runs_of
    from pnbench.tui.report.arrhenius import set_point_of

    cv, record = data.cv, (data.run or {}).get("lcr_correction")
    if not any(r.get("applied_by") == "software" for r in runs_of(record)):
        return cv
    c, g = cv.capacitance_F.copy(), cv.conductance_S.copy()
    steps = np.array(cv.step, dtype=object)
    for name in dict.fromkeys(cv.step):
        residuals = residuals_for(record, set_point_of(str(name)), step=str(name))
        if residuals is not None:
            at = steps == name
            c[at], g[at] = compensate_parallel(c[at], g[at], cv.frequency_Hz[at], residuals)
    return replace(cv, capacitance_F=c, conductance_S=g)


def _curve(cv: Points, sel: np.ndarray, label: float, step: str, order: np.ndarray) -> Curve:
    idx = np.flatnonzero(sel)
    idx = idx[np.argsort(order[idx], kind="stable")]
    return Curve(label, step, cv.voltage_V[idx], cv.frequency_Hz[idx], cv.capacitance_F[idx],
                 cv.conductance_S[idx])


def _matrix(raw) -> tuple[tuple[str, ...], np.ndarray] | None:
    """A correlation as ``{"names": [...], "matrix": [[...]]}`` or ``{A: {B: r}}``."""
    try:
        if isinstance(raw, dict) and "names" in raw and "matrix" in raw:
            names = tuple(str(n) for n in raw["names"])
            matrix = np.array(raw["matrix"], dtype=float)
        elif isinstance(raw, dict) and raw and all(isinstance(v, dict) for v in raw.values()):
            names = tuple(str(n) for n in raw)
            matrix = np.array([[float(raw[a].get(b, math.nan)) for b in names]
                               for a in names])
        else:
            return None
    except (TypeError, ValueError):
        return None
    if matrix.shape != (len(names), len(names)) or len(names) < 2:
        return None
    return names, matrix


def fit_records(extras: dict) -> list[tuple[str, dict]]:
    """(label, record) of every fit digest in model.json's extra keys, depth first.

    A record is a dict with a ``correlation`` or with ``success`` and ``message`` (the
    form `FitResult.summary()` gives); labels are the key path ("fits / iv_forward").
    """
    found: list[tuple[str, dict]] = []

    def walk(node: object, path: tuple[str, ...], depth: int) -> None:
        if not isinstance(node, dict) or depth > 3:
            return
        if "correlation" in node or ("success" in node and "message" in node):
            found.append((" / ".join(path) or "fit", node))
            return
        for key, value in node.items():
            walk(value, (*path, str(key)), depth + 1)

    walk({k: v for k, v in extras.items()}, (), 0)
    return found


def read_correlations(model: ModelSet) -> list[tuple[str, tuple[str, ...], np.ndarray]]:
    """Every correlation matrix a fitter left in model.json: (label, names, matrix)."""
    out = []
    for label, record in fit_records(model.extras):
        found = _matrix(record.get("correlation"))
        if found is not None:
            out.append((str(record.get("kind") or label), *found))
    return out


def model_from_json(data: RunData) -> ModelSet | None:
    if data.model_json is None:
        return None
    model = ModelSet.from_json_dict(data.model_json, source=model_source(data.run_dir))
    try:
        model.to_params()
    except ValueError as exc:  # from_json_dict checks this too; keep the message clear
        raise DataFileError(f"{data.run_dir / 'model.json'}: {exc}") from None
    return model


def analyze(data: RunData) -> Analysis:
    """Everything derived from the run that the figures and tables need."""
    t = data.temperature_K
    out = Analysis(temperature_K=t or DEFAULT_TEMPERATURE_K, temperature_known=t is not None)
    if t is None:
        out.missing.append(f"the temperature is not recorded: {DEFAULT_TEMPERATURE_K} K "
                           "is assumed for the model curves")
    out.model = model_from_json(data)
    if out.model is not None:
        out.params = out.model.to_params()
        out.model_source = MODEL_FILE
        out.correlations = read_correlations(out.model)
        out.fits = fit_records(out.model.extras)
        if not out.correlations and len(out.model.values) > 1:
            out.missing.append("model.json carries no correlation matrix of the parameters")
    else:
        out.missing.append("model.json is missing: no extracted parameters, and the "
                           "figures show the measured points without a model")
    if data.iv is not None:
        out.forward, out.reverse = split_iv(data.iv)
        from pnbench.tui.report.arrhenius import keep_tnom

        keep_tnom(out)  # a run over temperature: the I-V figures at TNOM
    if out.forward is None:
        out.missing.append("no forward I-V points: the semilog I-V figure is missing")
    if out.reverse is None:
        out.missing.append("no reverse I-V points: the reverse I-V figure is missing")
    else:
        out.reverse_extreme_V = float(np.min(out.reverse.voltage_V))
        _breakdown(out, data)
    if data.cv is not None:
        out.cv_curves, out.spectra = group_cv(compensated_cv(data), step_kinds(data))
    if not out.cv_curves:
        out.missing.append("no C-V sweep (three or more biases at one frequency): the C-V, "
                           "1/C\u00b2 and doping figures are missing")
    if not any(s.label_value > 0 for s in out.spectra):
        out.missing.append("no admittance spectra at forward bias (three or more "
                           "frequencies at one bias): the admittance figure is missing")
    from pnbench.tui.report import depletion as report_depletion

    report_depletion.add_depletion(out, data)
    _qpoint_table(out)
    return out


def _breakdown(out: Analysis, data: RunData) -> None:
    """Mark breakdown when the sweep reached it: the model's BV if the sweep went that
    far, else where a breakdown guard tripped, else where reverse compliance began."""
    rev = out.reverse
    bv = out.model.values.get("BV", math.inf) if out.model is not None else math.inf
    if math.isfinite(bv) and out.reverse_extreme_V <= -BV_REACHED_FRACTION * bv:
        out.breakdown_V, out.breakdown_label = -bv, f"BV = {bv:.4g} V (model)"
        return
    for event in data.events:
        if not isinstance(event, Limit):
            continue
        if "breakdown" in f"{event.guard or ''} {event.message or ''}":
            in_step = np.asarray(rev.step == event.step, dtype=bool)
            volts = rev.voltage_V[in_step] if in_step.any() else rev.voltage_V
            out.breakdown_V = float(np.min(volts))
            out.breakdown_label = f"breakdown guard tripped at {out.breakdown_V:.4g} V"
            return
    if rev.compliance.any():
        out.breakdown_V = float(np.max(rev.voltage_V[rev.compliance]))
        out.breakdown_label = f"reverse compliance from {out.breakdown_V:.4g} V"


def _table_frequencies(out: Analysis) -> tuple[tuple[float, ...], bool]:
    measured = sorted({float(f) for c in out.cv_curves + out.spectra for f in c.frequency_Hz})
    if not measured:
        return (1e3, 1e5, 1e6), False
    if len(measured) > MAX_TABLE_FREQUENCIES:
        pick = np.unique(np.round(np.linspace(0, len(measured) - 1, MAX_TABLE_FREQUENCIES)))
        measured = [measured[int(k)] for k in pick]
    return tuple(measured), True


def _qpoint_table(out: Analysis) -> None:
    if out.params is None:
        out.missing.append("no model: the small-signal table is missing")
        return
    freqs, measured = _table_frequencies(out)
    out.table_frequencies_Hz, out.table_frequencies_measured = freqs, measured
    p, t = out.params, out.temperature_K
    picks: list[tuple[str, dict]] = []
    if out.cv_curves:
        lowest = float(np.min(out.cv_curves[0].voltage_V))
        if lowest < 0:
            picks.append(("deepest C-V bias", {"voltage": lowest}))
    picks.append(("zero bias", {"voltage": 0.0}))
    forward_spectra = [s for s in out.spectra if s.label_value > 0]
    for s in forward_spectra:
        picks.append(("measured admittance bias", {"voltage": s.label_value}))
    if not forward_spectra and out.forward is not None:
        i = out.forward.current_A[~out.forward.compliance]
        i = i[i > 0]
        if i.size:
            for level in (1e-5, 1e-4, 1e-3, 1e-2):
                if i.min() <= level <= i.max():
                    picks.append(("forward current", {"current": level}))
    for origin, bias in picks:
        try:
            q = smallsignal.operating_point(p, temperature_K=t, **bias)
        except (ValueError, FloatingPointError):
            continue
        z = np.abs(q.impedance(np.array(freqs)))
        meas = {}
        for s in out.spectra:
            if "voltage" not in bias or abs(s.label_value - bias["voltage"]) > 1e-9:
                continue
            ok = np.isfinite(s.conductance_S)  # |Z| needs both parts of the admittance
            y = smallsignal.admittance_from_parallel(s.capacitance_F[ok], s.conductance_S[ok],
                                                     s.frequency_Hz[ok])
            meas = {float(f): float(abs(1 / yy))
                    for f, yy in zip(s.frequency_Hz[ok], y, strict=True)}
        out.qrows.append(QRow(origin, q, dict(zip(freqs, map(float, z), strict=True)), meas))


def missing_items(data: RunData, an: Analysis) -> list[str]:
    """Every sentence on what the report lacks, the run's own shortfalls first."""
    items = []
    run = data.run or {}
    status = run.get("status")
    reason = f": {run['reason']}" if run.get("reason") else ""
    if status in ("running", "paused"):
        items.append(f"run.json says the run is {status}: it is still going, or its "
                     "process ended without closing the folder; this report shows the "
                     "points taken so far")
    elif status and status != "completed":
        items.append(f"the run did not complete (status {status}{reason}); this report "
                     "shows what was measured before it stopped")
    for step in run.get("steps") or []:
        if not isinstance(step, dict):
            continue
        done, planned = step.get("done", 0), step.get("planned", 0)
        if step.get("ended_by") == "breakdown_guard":
            continue  # a reverse step ends at its guard current by design: nothing missing
        if isinstance(done, int) and isinstance(planned, int) and done < planned:
            why = status_words(step.get("status") or "status unknown")
            if step.get("ended_by"):
                why += f": ended by {guard_words(step['ended_by'])}"
            items.append(f"step {step.get('name')}: {done} of {planned} planned points "
                         f"measured ({why})")
    return items + list(data.missing) + list(an.missing)
