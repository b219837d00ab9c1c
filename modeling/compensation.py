"""Open/short compensation of LCR readings in software (docs/physics.md §5).

A fixture adds a series residual impedance Zs (leads, contacts) and a stray admittance Yo
across the device's terminals. The meter then reads Zm = Zs + 1/(Yo + Ydut), so

    Zdut = (Zm - Zs) / (1 - (Zm - Zs)*Yo),   i.e.  Ydut = 1/(Zm - Zs) - Yo

with Zs the impedance measured with the fixture shorted and Yo the admittance measured
with it open. The open is measured through the same series residual, Zo = Zs + 1/Yo, so
Yo = 1/(Zo - Zs) here; the usual form takes Yo = 1/Zo, which is the same where
|Zs| << |Zo|. Algebra of series and parallel impedances (no outside source needed); the
expression is the open/short compensation LCR-meter manuals state (from memory).

The correction is measured at a few frequencies (and, when pnbench reads the open and
the short itself, at each test level: the rows of the level nearest a step's are used);
in between, and beyond the ends, the
open's conductance and capacitance (B/w) and the short's resistance and inductance (X/w)
are interpolated linearly in log f and held at the end values: a fixture's stray C, R and
L change slowly with frequency.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from pnbench.modeling.smallsignal import admittance_from_parallel, parallel_from_admittance


@dataclass(frozen=True)
class FixtureResiduals:
    """What an open and/or a short correction measured, per frequency (SI units)."""

    open_frequency_Hz: np.ndarray | None = None
    open_G_S: np.ndarray | None = None
    open_B_S: np.ndarray | None = None
    short_frequency_Hz: np.ndarray | None = None
    short_R_ohm: np.ndarray | None = None
    short_X_ohm: np.ndarray | None = None

    @property
    def has_open(self) -> bool:
        return self.open_frequency_Hz is not None

    @property
    def has_short(self) -> bool:
        return self.short_frequency_Hz is not None

    @classmethod
    def from_values(cls, values: Mapping | None,
                    ac_level_V: float | None = None) -> FixtureResiduals | None:
        """From a run's recorded correction values ({"open": {"frequency_Hz", "G_S",
        "B_S"}, "short": {"frequency_Hz", "R_ohm", "X_ohm"}}; a kind may be None or
        absent). A table with an ``ac_level_V`` column (read at several test levels)
        gives the rows of the level nearest ``ac_level_V`` (the lowest when None). None
        when neither holds usable numbers; ValueError when one is malformed."""
        if not isinstance(values, Mapping):
            return None
        got: dict[str, np.ndarray] = {}
        for which, keys in (("open", ("G_S", "B_S")), ("short", ("R_ohm", "X_ohm"))):
            table = values.get(which)
            if table is None:
                continue
            if not isinstance(table, Mapping):
                raise ValueError(f"{which} correction values: expected a table")
            names = ("frequency_Hz", *keys) + (("ac_level_V",) if "ac_level_V" in table
                                               else ())
            try:
                cols = [np.asarray(table[k], dtype=float).ravel() for k in names]
            except (KeyError, TypeError, ValueError) as exc:
                raise ValueError(f"{which} correction values: {exc}") from None
            f = cols[0]
            if not f.size or any(c.shape != f.shape for c in cols) \
                    or not all(np.all(np.isfinite(c)) for c in cols) or np.any(f <= 0):
                raise ValueError(f"{which} correction values: columns of equal length, "
                                 "finite numbers, frequencies > 0 expected")
            if len(cols) == 4:  # per test level: the rows of the nearest one
                cols = _at_level(cols, ac_level_V, which)
            got[f"{which}_frequency_Hz"] = cols[0]
            got[f"{which}_{keys[0]}"], got[f"{which}_{keys[1]}"] = cols[1], cols[2]
        return cls(**got) if got else None

    def open_admittance(self, frequency_Hz) -> np.ndarray:
        """The open's measured admittance at these frequencies (0 without an open)."""
        f = np.asarray(frequency_Hz, dtype=float)
        if not self.has_open:
            return np.zeros(f.shape, dtype=complex)
        w0 = 2 * math.pi * self.open_frequency_Hz
        g = _interp(f, self.open_frequency_Hz, self.open_G_S)
        c = _interp(f, self.open_frequency_Hz, self.open_B_S / w0)
        return g + 2j * math.pi * f * c

    def short_impedance(self, frequency_Hz) -> np.ndarray:
        """The short's measured impedance at these frequencies (0 without a short)."""
        f = np.asarray(frequency_Hz, dtype=float)
        if not self.has_short:
            return np.zeros(f.shape, dtype=complex)
        w0 = 2 * math.pi * self.short_frequency_Hz
        r = _interp(f, self.short_frequency_Hz, self.short_R_ohm)
        inductance = _interp(f, self.short_frequency_Hz, self.short_X_ohm / w0)
        return r + 2j * math.pi * f * inductance

    def open_capacitance_F(self) -> float | None:
        """The open's capacitance (B/w, its median over frequency); None without one."""
        if not self.has_open:
            return None
        return float(np.median(self.open_B_S / (2 * math.pi * self.open_frequency_Hz)))


def _at_level(cols: list[np.ndarray], ac_level_V: float | None,
              which: str) -> list[np.ndarray]:
    """The frequency and value columns of the rows at the test level nearest
    ``ac_level_V`` (cols[3]; the lowest level when None)."""
    levels = np.unique(cols[3])
    level = levels[0] if ac_level_V is None else levels[
        np.argmin(np.abs(np.log(levels / ac_level_V)) if ac_level_V > 0 and levels[0] > 0
                  else np.abs(levels - ac_level_V))]
    rows = cols[3] == level
    f = cols[0][rows]
    if np.unique(f).size != f.size:
        raise ValueError(f"{which} correction values: a frequency twice at one test level")
    return [c[rows] for c in cols[:3]]


def _interp(f: np.ndarray, at: np.ndarray, values: np.ndarray) -> np.ndarray:
    order = np.argsort(at)
    return np.interp(np.log(f), np.log(at[order]), values[order])


def compensate(admittance_S, frequency_Hz, residuals: FixtureResiduals) -> np.ndarray:
    """The device's admittance from the meter's reading: Ydut = 1/(Zm - Zs) - Yo."""
    y = np.asarray(admittance_S, dtype=complex)
    f = np.asarray(frequency_Hz, dtype=float)
    zs = residuals.short_impedance(f)
    yo = residuals.open_admittance(f)
    if residuals.has_open and residuals.has_short:
        with np.errstate(divide="ignore", invalid="ignore"):
            yo = 1.0 / (1.0 / yo - zs)  # the open's stray without the series residual
    with np.errstate(divide="ignore", invalid="ignore"):
        z = 1.0 / y - zs
        return 1.0 / z - yo


def compensate_parallel(capacitance_F, conductance_S, frequency_Hz,
                        residuals: FixtureResiduals) -> tuple[np.ndarray, np.ndarray]:
    """Parallel C and G readings compensated (a missing conductance counts as 0 and
    stays missing)."""
    c = np.asarray(capacitance_F, dtype=float)
    g_in = np.broadcast_to(np.asarray(np.nan if conductance_S is None else conductance_S,
                                      dtype=float), c.shape)
    f = np.asarray(frequency_Hz, dtype=float)
    y = compensate(admittance_from_parallel(c, np.nan_to_num(g_in, nan=0.0), f), f,
                   residuals)
    cp, gp = parallel_from_admittance(y, f)
    gp = np.where(np.isnan(g_in), np.nan, gp)  # an unread conductance stays unread
    return np.asarray(cp, dtype=float), np.asarray(gp, dtype=float)
