"""Cast options: rounding direction, overflow behaviour and subnormal handling.

The names are IEEE 754-2008/2019 §4.3 rounding-direction attributes plus 'stochastic'; the
overflow and subnormal choices are always explicit, never silent.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Literal, get_args

import numpy as np

from ..errors import BitprismError

__all__ = [
    "DEFAULT_OPTIONS",
    "OVERFLOW_MODES",
    "ROUNDING_MODES",
    "SUBNORMAL_MODES",
    "CastOptions",
    "Overflow",
    "Rounding",
    "Subnormals",
    "check_option",
    "child_seed",
    "resolve_options",
]

Rounding = Literal[
    "roundTiesToEven",
    "roundTiesToAway",
    "roundTowardPositive",
    "roundTowardNegative",
    "roundTowardZero",
    "stochastic",
]
ROUNDING_MODES: tuple[str, ...] = get_args(Rounding)
Overflow = Literal["standard", "saturate"]
OVERFLOW_MODES: tuple[str, ...] = get_args(Overflow)
Subnormals = Literal["keep", "flush"]
SUBNORMAL_MODES: tuple[str, ...] = get_args(Subnormals)

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


_ALLOWED = {"rounding": ROUNDING_MODES, "overflow": OVERFLOW_MODES, "subnormals": SUBNORMAL_MODES}


def check_option(name: str, value: object) -> str:
    """The standard spelling of one option ("rounding", "overflow" or "subnormals"), or a
    ``BitprismError`` naming the allowed values (case is ignored; rounding also takes the
    short names rne, rtz, up, down, ...)."""
    return _check(name, value, _ALLOWED[name])


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


DEFAULT_OPTIONS = CastOptions()


def resolve_options(
    options: CastOptions | None = None,
    rounding: str | None = None,
    overflow: str | None = None,
    subnormals: str | None = None,
    seed: int | None = None,
) -> CastOptions:
    """The options of one call: ``options`` (default: roundTiesToEven, standard overflow,
    subnormals kept, no seed) with each keyword shorthand that is given replacing its field.

    Public entry points accept both spellings (``encode(x, f, options=opts)`` and
    ``encode(x, f, rounding="rtz")``) and resolve them here, once; everything below them passes
    the resulting object on, so options are validated once per call, not once per use.
    """
    if options is not None and not isinstance(options, CastOptions):
        raise BitprismError(f"options must be a CastOptions or None, got {options!r}")
    base = DEFAULT_OPTIONS if options is None else options
    given = {
        name: value
        for name, value in (
            ("rounding", rounding), ("overflow", overflow), ("subnormals", subnormals), ("seed", seed)
        )
        if value is not None
    }
    return replace(base, **given) if given else base  # type: ignore[arg-type]


def child_seed(seed: int | None, key: int) -> int | None:
    """The seed of one part of a stochastic computation (a scan block, a search chunk, a tensor
    window), derived from the call's ``seed`` and the part's position ``key`` with numpy's
    ``SeedSequence`` spawn keys, so parts draw independently of each other and a part draws the
    same bits however the rest of the work is cut. None stays None (fresh draws)."""
    if seed is None:
        return None
    ss = np.random.SeedSequence(entropy=seed, spawn_key=(key,))
    return int(ss.generate_state(1, np.uint64)[0] >> np.uint64(1))
