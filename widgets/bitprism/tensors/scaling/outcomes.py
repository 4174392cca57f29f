"""What a cast does to each bin of the joint histogram, at each binary exponent it is moved to.

A coarse bin of the joint histogram (``joint.py``) is the set of values with a given sign and
top ``t + 1`` significand bits, split by whether a lower bit is set. Placed at binary exponent
``f`` (the data's ``e`` plus the scale's ``k``), every value of such a half-bin casts to the same
code, so one representative per half-bin, cast with the real encoder (``encode_with``, the same
rounding as every other cast of the package), gives the outcome of all of them:

* on the bin's lower edge: ``1.b`` exactly (the bits ``b`` followed by zeros);
* strictly inside: ``1.b`` plus half the bin's width (nothing the rounding could tell apart
  from any other inside point: no representable value nor tie lies strictly inside a bin).

Outcomes are tabulated for ``f`` from ``emin - t - 3`` (everything below rounds to zero, or to
the smallest subnormal under directed rounding) to ``emax + 10`` (everything above overflows);
beyond those ends every half-bin keeps the code it has at the end, and ``Outcomes.relative``
scales the value by ``2^-f`` for any ``f``. The class of each half-bin follows the scan's words:
overflow by the format's threshold (the rounded value with an unbounded exponent range exceeds
the largest finite one, IEEE 754-2019 §7.4), underflow when the result is zero, subnormal when
it is a nonzero subnormal, and non-finite when the result is NaN or Inf (an overflow into a
format that has no room for it, or a negative value sent to an unsigned format).
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from ...errors import BitprismError
from ...formats import Format
from ...numerics.codes import decode, encode_with
from ...numerics.options import CastOptions
from ...numerics.thresholds import cast_thresholds

__all__ = ["Outcomes", "outcomes", "sign_symmetric"]

BELOW = 3  # tabulated exponents start at emin - t - BELOW
ABOVE = 10  # ... and end at emax + ABOVE (saturated values then sit in the top error bucket)


@dataclass(frozen=True, eq=False)
class Outcomes:
    """The cast of every coarse half-bin at every tabulated exponent.

    Arrays are ``[f - f_lo, s, C]`` with ``s`` 1 for the inside of the bin, 0 for its lower
    edge, and ``C = (top t+1 bits << 1) | sign`` as in the joint histogram.

    Attributes:
        format, options: the cast.
        f_lo, f_hi: the tabulated exponents (both ends included).
        value: the result (float64, NaN and Inf kept).
        overflow, underflow, subnormal, nonfinite: the classes (bool).
    """

    format: Format
    options: CastOptions
    f_lo: int
    f_hi: int
    value: np.ndarray
    overflow: np.ndarray
    underflow: np.ndarray
    subnormal: np.ndarray
    nonfinite: np.ndarray

    @property
    def t(self) -> int:
        return self.format.significand_bits

    def index(self, f: int) -> int:
        """The tabulated row holding the codes of exponent ``f``."""
        return min(max(f, self.f_lo), self.f_hi) - self.f_lo

    def relative(self, f: int) -> np.ndarray:
        """``[s, C]``: the result divided by ``2^f`` (the data's binade), for any ``f``."""
        return np.ldexp(self.value[self.index(f)], -f)

    @property
    def interior(self) -> tuple[int, int]:
        """Exponents whose results are all normal and never overflow: the relative results
        are the same at each of them (``emin .. emax - 1``)."""
        return self.format.emin, self.format.emax - 1


def _representatives(t: int, f_lo: int, f_hi: int) -> np.ndarray:
    nf = f_hi - f_lo + 1
    bins = np.arange(1 << (t + 1), dtype=np.float64)
    edge = 1.0 + bins * 2.0 ** -(t + 1)  # 1.b exactly
    mant = np.stack((edge, edge + 2.0 ** -(t + 2)))  # [s, bins]
    signed = np.stack((mant, -mant), axis=-1).reshape(2, -1)  # [s, C]: C = bins << 1 | sign
    exps = np.arange(f_lo, f_hi + 1)[:, None, None]
    return np.ldexp(np.broadcast_to(signed, (nf, 2, signed.shape[1])), exps)


@lru_cache(maxsize=32)
def outcomes(fmt: Format, options: CastOptions) -> Outcomes:
    """The outcome tables of ``fmt`` with ``options`` (deterministic rounding only)."""
    if options.rounding == "stochastic":
        raise BitprismError(
            "the scale sweep needs a deterministic rounding (stochastic rounding draws bits "
            "below the ones the sweep keeps); got rounding='stochastic'"
        )
    t = fmt.significand_bits
    f_lo, f_hi = fmt.emin - t - BELOW, fmt.emax + ABOVE
    reps = _representatives(t, f_lo, f_hi)
    with np.errstate(invalid="ignore", over="ignore"):
        codes = np.asarray(encode_with(reps, fmt, options))
        value = np.asarray(decode(codes, fmt), dtype=np.float64)
    for a, b in ((0, 1), (-1, -2)):  # the codes are constant beyond both ends
        if not np.array_equal(codes[a], codes[b]):
            raise BitprismError(f"internal: {fmt.name} codes still change at the table's end")
    mag = np.abs(reps)
    pos = cast_thresholds(fmt, options, False)
    limit = np.full(reps.shape, pos.overflow_from)
    negative = reps < 0
    if fmt.signed:
        limit[negative] = cast_thresholds(fmt, options, True).overflow_from
    else:
        limit[negative] = np.inf  # a negative value is invalid in an unsigned format
    finite = np.isfinite(value)
    overflow = mag >= limit
    underflow = value == 0
    subnormal = finite & ~underflow & (np.abs(value) < float(fmt.smallest_normal))
    nonfinite = ~finite
    for table in (value, overflow, underflow, subnormal, nonfinite):
        table.setflags(write=False)
    return Outcomes(fmt, options, f_lo, f_hi, value, overflow, underflow, subnormal, nonfinite)


def sign_symmetric(fmt: Format, options: CastOptions) -> bool:
    """Whether the cast treats a value and its negation alike (every rounding but the two
    directed ones, in a signed format): the sweep may then bin magnitudes only."""
    if not fmt.signed or options.rounding == "stochastic":
        return False
    oc = outcomes(fmt, options)
    pos, neg = (slice(None), slice(None), slice(0, None, 2)), (slice(None), slice(None), slice(1, None, 2))
    same = all(np.array_equal(getattr(oc, k)[pos], getattr(oc, k)[neg])
               for k in ("overflow", "underflow", "subnormal", "nonfinite"))
    fin = ~oc.nonfinite[pos]
    return same and bool(np.array_equal(oc.value[pos][fin], -oc.value[neg][fin]))

