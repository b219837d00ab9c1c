"""The diode parameter set, with model-card names and SI units.

Defaults follow the common circuit-simulator convention (Nagel, SPICE2, UCB/ERL M520,
1975): a parameter left out of a card behaves as if absent from the device (RS = 0, no
shunt, no capacitance, no breakdown).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, fields, replace

#: Unit of every model-card parameter the project knows, in SI.
UNITS: dict[str, str] = {
    "IS": "A",
    "N": "",
    "RS": "ohm",
    "RSH": "ohm",
    "CJO": "F",
    "VJ": "V",
    "M": "",
    "FC": "",
    "TT": "s",
    "BV": "V",
    "IBV": "A",
    "EG": "eV",
    "XTI": "",
    "TRS": "1/K",
    "TRS2": "1/K^2",
    "TCV": "V/K",
}

#: Temperature coefficients (modeling.temperature): 0 means the card does not give them.
TEMPERATURE_COEFFICIENTS = ("TRS", "TRS2", "TCV")

#: Room temperature used when nothing else says (27 °C, the nominal temperature that
#: common circuit simulators use).
DEFAULT_TEMPERATURE_K = 300.15


@dataclass(frozen=True)
class DiodeParams:
    """A complete diode description for simulation (every field has a value).

    IS [A], N [-], RS [ohm], RSH [ohm, inf = no shunt], CJO [F], VJ [V], M [-], FC [-],
    TT [s], BV [V, inf = no breakdown], IBV [A], EG [eV], XTI [-], and the temperature
    coefficients of RS and BV as the reference simulator names them: TRS [1/K],
    TRS2 [1/K^2], TCV [V/K] (modeling.temperature; 0 = RS and BV do not move).
    """

    IS: float = 1e-14
    N: float = 1.0
    RS: float = 0.0
    RSH: float = math.inf
    CJO: float = 0.0
    VJ: float = 1.0
    M: float = 0.5
    FC: float = 0.5
    TT: float = 0.0
    BV: float = math.inf
    IBV: float = 1e-3
    EG: float = 1.11
    XTI: float = 3.0
    TRS: float = 0.0
    TRS2: float = 0.0
    TCV: float = 0.0

    def __post_init__(self) -> None:
        for f in fields(self):
            value = getattr(self, f.name)
            if not isinstance(value, (int, float)) or math.isnan(value):
                raise ValueError(f"{f.name} must be a number, got {value!r}")
        positive = ("IS", "N", "VJ", "IBV", "RSH", "BV")
        for name in positive:
            if getattr(self, name) <= 0:
                raise ValueError(f"{name} must be > 0, got {getattr(self, name)!r}")
        for name in ("RS", "CJO", "TT", "M", "FC"):
            if getattr(self, name) < 0:
                raise ValueError(f"{name} must be >= 0, got {getattr(self, name)!r}")
        if self.FC >= 1:
            raise ValueError(f"FC must be below 1, got {self.FC!r}")

    def with_values(self, **values: float) -> DiodeParams:
        """A copy with some parameters replaced."""
        return replace(self, **values)

    def as_dict(self) -> dict[str, float]:
        return asdict(self)

    @classmethod
    def from_mapping(cls, values: dict[str, float]) -> DiodeParams:
        """Build from a mapping of model-card names (case-insensitive); unknown names raise."""
        known = {f.name for f in fields(cls)}
        clean = {}
        for key, value in values.items():
            name = key.upper()
            if name not in known:
                raise KeyError(key)
            clean[name] = float(value)
        return cls(**clean)
