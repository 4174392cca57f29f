"""``replay_scaling``: the amax-history (delayed scaling) recipe replayed over training steps.

At step ``i`` the recipe cannot know the step's own amax before it casts, so it scales by the
amax rule (``rules.py``: a power of two, ``margin`` binades of headroom) applied to the largest
amax of the ``history`` steps before it, ``i - history .. i - 1``. Step 0 has no history and
casts with scale 1; a history whose amaxes are all 0 keeps the previous scale. A spike, a
step whose amax jumps above what the history allowed, overflows: the replay reports, per step,
the overflow and the underflow to zero the scale causes (``scan``'s words: overflow when the
value rounded with an unbounded exponent range exceeds the largest finite value), the finite
values made NaN or Inf, and the first step that overflows.

Counting needs no cast: rounding is monotone, so each class is a range of ``|x * 2^k|``
(``numerics.thresholds``), compared with each value once per step. Whether an overflow becomes
NaN/Inf or the largest finite value depends on the format, the rounding direction and the sign,
not on the value, and is read off one cast of a value far beyond the range.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Iterable

import numpy as np

from ...display import Plottable
from ...errors import BitprismError
from ...formats import Format, FormatLike, get_format
from ...numerics.codes import cast
from ...numerics.options import CastOptions
from ...numerics.thresholds import cast_thresholds
from .rules import amax_exponent

__all__ = ["ScalingReplay", "replay_scaling"]


@dataclass(frozen=True, eq=False)
class ScalingReplay(Plottable):
    """Per step (arrays aligned): the step's amax, the scale exponent the recipe used, and
    what the cast did.

    Attributes:
        format, options, history, margin: the recipe.
        amax: float64, the largest finite magnitude of each step (0.0 without one).
        exponents: int64, ``k`` of the scale ``2^k`` each step was cast with.
        overflow, underflow, nonfinite, size: int64 counts per step.
        first_overflow: the first step with an overflow (None if none).
    """

    format: Format
    options: CastOptions
    history: int
    margin: int
    amax: np.ndarray
    exponents: np.ndarray
    overflow: np.ndarray
    underflow: np.ndarray
    nonfinite: np.ndarray
    size: np.ndarray
    first_overflow: int | None = None
    notes: tuple[str, ...] = field(default=())

    @property
    def steps(self) -> int:
        return int(self.amax.size)

    def __repr__(self) -> str:
        where = "no step overflows" if self.first_overflow is None else (
            f"first overflow at step {self.first_overflow}")
        return (f"<ScalingReplay {self.format.name} {self.steps} steps, history {self.history}: "
                f"{where}>")


def _overflow_makes_nonfinite(fmt: Format, options: CastOptions) -> tuple[bool, bool]:
    """(positive, negative): whether an overflow of that sign becomes NaN or Inf."""
    huge = np.array([1e300, -1e300])
    with np.errstate(over="ignore", invalid="ignore"):
        q = np.asarray(cast(huge, fmt, options=options), dtype=np.float64)
    return not np.isfinite(q[0]), not np.isfinite(q[1])


def _steps(tensors: Any) -> Iterable[Any]:
    if isinstance(tensors, (str, bytes)) or not hasattr(tensors, "__iter__"):
        raise BitprismError(
            f"tensors must be a sequence of tensors (one per step), got {type(tensors).__name__}"
        )
    return tensors


def replay_scaling(
    tensors: Any,
    fmt: FormatLike,
    history: int = 16,
    margin: int = 0,
    *,
    rounding: str = "roundTiesToEven",
    overflow: str = "standard",
    subnormals: str = "keep",
) -> ScalingReplay:
    """Replay delayed scaling over ``tensors`` (an iterable of tensors, one per step; an array
    is read along its first axis). See the module notes for the recipe."""
    from ..adapters import as_array

    f = get_format(fmt)
    if isinstance(history, bool) or not isinstance(history, (int, np.integer)) or history < 1:
        raise BitprismError(f"history must be a positive integer number of steps, got {history!r}")
    if isinstance(margin, bool) or not isinstance(margin, (int, np.integer)):
        raise BitprismError(f"margin must be an integer number of binades, got {margin!r}")
    options = CastOptions(rounding, overflow, subnormals)  # type: ignore[arg-type]
    if options.rounding == "stochastic":
        raise BitprismError("replay_scaling counts by thresholds, which needs a deterministic rounding")
    pos = cast_thresholds(f, options, False)
    neg = cast_thresholds(f, options, True) if f.signed else None
    bad_pos, bad_neg = _overflow_makes_nonfinite(f, options)
    amaxes: list[float] = []
    rows: list[tuple[int, int, int, int, int]] = []
    k = 0
    for step in _steps(tensors):
        x = np.asarray(as_array(step), dtype=np.float64).reshape(-1)
        past = amaxes[-int(history):]
        if past and max(past) > 0:
            k = amax_exponent(f, max(past), int(margin))[0]
        y = np.ldexp(x, k)
        fin = np.isfinite(y)
        a = np.abs(y)
        plus, minus = fin & (y > 0), fin & (y < 0)
        over_p = int(np.count_nonzero(plus & (a >= pos.overflow_from)))
        under = int(np.count_nonzero(plus & (a < pos.nonzero_from)))
        if neg is not None:
            over_n = int(np.count_nonzero(minus & (a >= neg.overflow_from)))
            under += int(np.count_nonzero(minus & (a < neg.nonzero_from)))
            invalid = 0
        else:
            over_n, invalid = 0, int(np.count_nonzero(minus))
        made = over_p * bad_pos + over_n * bad_neg + invalid
        fin_x = np.isfinite(x)
        amaxes.append(float(np.max(np.abs(x[fin_x]))) if fin_x.any() else 0.0)
        rows.append((k, over_p + over_n, under, made, int(x.size)))
    if not rows:
        raise BitprismError("tensors must hold at least one step; got none")
    cols = [np.array(c, np.int64) for c in zip(*rows)]
    hits = np.flatnonzero(cols[1])
    return ScalingReplay(
        f, options, int(history), int(margin), np.array(amaxes), cols[0], cols[1], cols[2],
        cols[3], cols[4], int(hits[0]) if hits.size else None,
    )
