"""Cast options: rounding direction, overflow behaviour and subnormal handling.

The names are IEEE 754-2008/2019 §4.3 rounding-direction attributes plus 'stochastic'; the
overflow and subnormal choices are always explicit, never silent.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

from ..errors import BitprismError

__all__ = [
    "OVERFLOW_MODES",
    "ROUNDING_MODES",
    "SUBNORMAL_MODES",
    "CastOptions",
    "Overflow",
    "Rounding",
    "Subnormals",
]

Rounding = Literal[
    "roundTiesToEven",
    "roundTiesToAway",
    "roundTowardPositive",
    "roundTowardNegative",
    "roundTowardZero",
    "stochastic",
]
ROUNDING_MODES: tuple[str, ...] = (
    "roundTiesToEven",
    "roundTiesToAway",
    "roundTowardPositive",
    "roundTowardNegative",
    "roundTowardZero",
    "stochastic",
)
Overflow = Literal["standard", "saturate"]
OVERFLOW_MODES: tuple[str, ...] = ("standard", "saturate")
Subnormals = Literal["keep", "flush"]
SUBNORMAL_MODES: tuple[str, ...] = ("keep", "flush")

# Short spellings people use; each maps to the standard name (common practice).
_ROUNDING_ALIASES = {
    "rne": "roundTiesToEven",
    "nearest": "roundTiesToEven",
    "nearest_even": "roundTiesToEven",
    "rna": "roundTiesToAway",
    "nearest_away": "roundTiesToAway",
    "rtp": "roundTowardPositive",
    "up": "roundTowardPositive",
    "ceil": "roundTowardPositive",
    "rtn": "roundTowardNegative",
    "down": "roundTowardNegative",
    "floor": "roundTowardNegative",
    "rtz": "roundTowardZero",
    "truncate": "roundTowardZero",
    "sr": "stochastic",
}


def _check(arg: str, value: object, allowed: tuple[str, ...]) -> str:
    if isinstance(value, str):
        if value in allowed:
            return value
        lowered = {a.lower(): a for a in allowed}
        if value.lower() in lowered:
            return lowered[value.lower()]
        if arg == "rounding" and value.lower() in _ROUNDING_ALIASES:
            return _ROUNDING_ALIASES[value.lower()]
    raise BitprismError(f"{arg} must be one of {', '.join(allowed)}; got {value!r}")


@dataclass(frozen=True)
class CastOptions:
    """One validated set of cast options (what every cast, scan and widget passes down)."""

    rounding: Rounding = "roundTiesToEven"
    overflow: Overflow = "standard"
    subnormals: Subnormals = "keep"
    seed: int | None = None

    def __post_init__(self) -> None:
        object.__setattr__(self, "rounding", _check("rounding", self.rounding, ROUNDING_MODES))
        object.__setattr__(self, "overflow", _check("overflow", self.overflow, OVERFLOW_MODES))
        object.__setattr__(
            self, "subnormals", _check("subnormals", self.subnormals, SUBNORMAL_MODES)
        )
        if self.seed is not None and (isinstance(self.seed, bool) or not isinstance(self.seed, int)):
            raise BitprismError(f"seed must be an integer or None, got {self.seed!r}")
