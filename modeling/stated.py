"""An instrument's stated noise in the fits' form (no numpy at import: plans and dialects
read it, and `pnbench check` and `--help` load no numpy)."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    import numpy as np


@dataclass(frozen=True)
class StatedNoise:
    """An instrument's stated 1-sigma noise of one reading at 1 NPLC, in the fits' form:

        sigma = relative * |reading| + max(floor, floor_of_range * range,
                                           floor_by_range[range'])

    (the two parts add, as instrument specifications state them), where ``range`` is the
    smallest of ``ranges`` at or above |reading| (the autorange rule; no ranges: the
    floor alone), and ``floor_by_range`` a table of (range, floor) pairs, a floor per
    range as a specification lists it, ``range'`` the smallest range of that table at or
    above |reading| (its largest above them all). For I-V the reading is the current (A)
    and ``voltage`` the voltage reading's own noise (same form, V); for C-V it is |Y| and
    the floor a capacitance (F, times 2 pi f in siemens). Readings averaged or integrated
    longer scale it by 1/sqrt(NPLC x readings), white noise assumed (the fits take that
    per point).
    """

    relative: float
    floor: float
    floor_of_range: float = 0.0
    ranges: tuple[float, ...] = ()
    voltage: StatedNoise | None = None
    floor_by_range: tuple[tuple[float, float], ...] = ()

    def floors(self, reading: np.ndarray) -> np.ndarray:
        """The floor of each reading: max(floor, floor_of_range x its range)."""
        import numpy as np

        mag = np.abs(np.asarray(reading, dtype=float))
        out = np.full(mag.shape, self.floor)
        if self.ranges and self.floor_of_range > 0:
            ranges = np.asarray(sorted(self.ranges))
            k = np.minimum(np.searchsorted(ranges, mag * (1 - 1e-9)), ranges.size - 1)
            out = np.maximum(out, self.floor_of_range * ranges[k])
        if self.floor_by_range:
            table = np.asarray(sorted(self.floor_by_range), dtype=float)
            k = np.minimum(np.searchsorted(table[:, 0], mag * (1 - 1e-9)), len(table) - 1)
            out = np.maximum(out, table[k, 1])
        return out

    def sigma(self, reading: np.ndarray) -> np.ndarray:
        import numpy as np

        return self.relative * np.abs(np.asarray(reading, dtype=float)) \
            + self.floors(reading)

    @property
    def smallest_floor(self) -> float:
        """The floor of a reading of zero (the smallest range)."""
        low = self.floor_of_range * min(self.ranges) if self.ranges else 0.0
        table = min(self.floor_by_range)[1] if self.floor_by_range else 0.0
        return max(self.floor, low, table)

    def to_json_dict(self) -> dict:
        out = {"relative": self.relative, "floor": self.floor}
        if self.ranges and self.floor_of_range > 0:
            out.update(floor_of_range=self.floor_of_range, ranges=list(self.ranges))
        if self.floor_by_range:
            out["floor_by_range"] = [[r, f] for r, f in sorted(self.floor_by_range)]
        if self.voltage is not None:
            out["voltage"] = self.voltage.to_json_dict()
        return out

    @classmethod
    def from_json_dict(cls, doc: dict) -> StatedNoise:
        """From ``to_json_dict``'s form; ValueError naming what is wrong."""
        if not isinstance(doc, dict):
            raise ValueError(f"a stated noise is a table, found {doc!r}")
        try:
            rel, floor = float(doc["relative"]), float(doc["floor"])
            of_range = float(doc.get("floor_of_range", 0.0))
            ranges = tuple(float(r) for r in doc.get("ranges", ()))
        except (KeyError, TypeError, ValueError) as exc:
            raise ValueError(f"a stated noise needs numbers relative and floor "
                             f"({exc})") from None
        if not (0 <= rel < 1 and floor >= 0 and of_range >= 0
                and all(r > 0 for r in ranges)) or not all(
                math.isfinite(z) for z in (rel, floor, of_range, *ranges)):
            raise ValueError(f"a stated noise needs 0 <= relative < 1 and floors and "
                             f"ranges >= 0, found {doc!r}")
        volt = doc.get("voltage")
        return cls(rel, floor, of_range, ranges,
                   None if volt is None else cls.from_json_dict(volt),
                   floor_table(doc.get("floor_by_range", ())))


def floor_table(raw) -> tuple[tuple[float, float], ...]:
    """(range, floor) pairs, sorted by range, from pairs or a {range: floor} mapping
    (numbers, or text a float reads); ValueError naming what is wrong: each range above
    zero, each floor zero or above, every number finite, no range twice."""
    items = raw.items() if isinstance(raw, dict) else raw
    try:
        pairs = sorted((float(r), float(f)) for r, f in items)
    except (TypeError, ValueError):
        raise ValueError(f"a floor per range is pairs of numbers (range, floor), found "
                         f"{raw!r}") from None
    bad = [p for p in pairs if not (math.isfinite(p[0]) and math.isfinite(p[1])
                                    and p[0] > 0 and p[1] >= 0)]
    if bad:
        raise ValueError(f"a floor per range needs ranges above zero and floors of zero "
                         f"or more, found range {bad[0][0]!r} floor {bad[0][1]!r}")
    if len({r for r, _ in pairs}) != len(pairs):
        raise ValueError("a floor per range lists a range twice")
    return tuple(pairs)


def as_stated(noise) -> StatedNoise | None:
    """A StatedNoise from one, from (relative, floor) or from its JSON form."""
    if noise is None or isinstance(noise, StatedNoise):
        return noise
    if isinstance(noise, dict):
        return StatedNoise.from_json_dict(noise)
    rel, floor = noise
    return StatedNoise(float(rel), float(floor))
