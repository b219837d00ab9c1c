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

        sigma = relative * |reading| + max(floor, floor_of_range * range)

    (the two parts add, as instrument specifications state them), where ``range`` is the
    smallest of ``ranges`` at or above |reading| (the autorange rule; no ranges: the
    floor alone). For I-V the reading is the current (A) and ``voltage`` the voltage
    reading's own noise (same form, V); for C-V it is |Y| and the floor a capacitance
    (F, times 2 pi f in siemens). Readings averaged or integrated longer scale it by
    1/sqrt(NPLC x readings), white noise assumed (the fits take that per point).
    """

    relative: float
    floor: float
    floor_of_range: float = 0.0
    ranges: tuple[float, ...] = ()
    voltage: StatedNoise | None = None

    def floors(self, reading: np.ndarray) -> np.ndarray:
        """The floor of each reading: max(floor, floor_of_range x its range)."""
        import numpy as np

        mag = np.abs(np.asarray(reading, dtype=float))
        if not self.ranges or self.floor_of_range <= 0:
            return np.full(mag.shape, self.floor)
        ranges = np.asarray(sorted(self.ranges))
        k = np.minimum(np.searchsorted(ranges, mag * (1 - 1e-9)), ranges.size - 1)
        return np.maximum(self.floor, self.floor_of_range * ranges[k])

    def sigma(self, reading: np.ndarray) -> np.ndarray:
        import numpy as np

        return self.relative * np.abs(np.asarray(reading, dtype=float)) \
            + self.floors(reading)

    @property
    def smallest_floor(self) -> float:
        low = self.floor_of_range * min(self.ranges) if self.ranges else 0.0
        return max(self.floor, low)

    def to_json_dict(self) -> dict:
        out = {"relative": self.relative, "floor": self.floor}
        if self.ranges and self.floor_of_range > 0:
            out.update(floor_of_range=self.floor_of_range, ranges=list(self.ranges))
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
                   None if volt is None else cls.from_json_dict(volt))


def as_stated(noise) -> StatedNoise | None:
    """A StatedNoise from one, from (relative, floor) or from its JSON form."""
    if noise is None or isinstance(noise, StatedNoise):
        return noise
    if isinstance(noise, dict):
        return StatedNoise.from_json_dict(noise)
    rel, floor = noise
    return StatedNoise(float(rel), float(floor))
