"""Rounding float64 results into an emulated format, fast where it can be and exact always.

``Rounder(fmt, options)(x)`` gives the values of ``x`` (float64) rounded once to ``fmt``, as
float64 (every value of every format fits float64 exactly). The reference is the package's
cast (``numerics.codes.encode_with`` then ``decode``); ``tests/test_emulate.py`` holds this
module to it for every signed format, rounding direction, overflow and subnormal option.

Fast paths, for a signed format with a zero and at most 51 trailing significand bits (values
they do not cover go through the package's cast, a few at a time, so every option and the
format's specials are honoured there):

* roundTiesToEven with subnormals kept: the magic-constant rounding. Adding
  ``C = 1.5 * 2^(e + 52 - t)``, where ``2^e`` is the value's binade clamped below at the
  format's smallest normal ``2^emin`` and ``t`` its trailing significand width, makes float64
  round the value to a multiple of ``2^(e - t)`` with ties to even (IEEE 754-2019 §4.3.1), and
  subtracting ``C`` again is exact (the operands are within a factor of two, Sterbenz); the
  clamp gives the fixed quantum of the subnormal range. Values whose result would pass the
  largest finite value, Inf and NaN go to the cast.
* roundTiesToAway (and roundTiesToEven with subnormals flushed): one integer addition on the
  magnitude's bit pattern and a mask (the carry runs into the exponent field exactly when the
  significand rounds up to the next binade), for values in the normal range; values below the
  smallest normal or past the largest finite value go to the cast.

Directed and stochastic rounding always take the cast. The work runs in blocks through reused
buffers (``scratch``); with numba, arrays of float32 or float64 take the magic-constant rounding
in one compiled pass instead (``compiled_rounding``, of which these numpy passes are the twin).

Round to odd (Boldo and Melquiond, "Emulation of FMA and correctly
rounded sums: proved algorithms using rounding to odd", IEEE TC 2008): a float64 result that
is not exact moved to the neighbour whose last bit is odd, rounded once more to any format of
at most 51 significant bits, equals the exact value rounded once; ``nudge_to_odd`` does it,
given the sign of the error an error-free transformation (TwoSum, Dekker's product) supplies.
"""

from __future__ import annotations

import math
import struct
from typing import Any, Callable

import numpy as np

from ..formats import Format
from ..numerics.codes import decode, encode_with
from ..numerics.options import CastOptions
from . import compiled_rounding
from .scratch import BLOCK, buffer

__all__ = [
    "NEAREST",
    "Rounder",
    "nudge_to_odd",
    "product_error",
    "sum_error",
]

NEAREST = ("roundTiesToEven", "roundTiesToAway")
_ABS = np.uint64(0x7FFF_FFFF_FFFF_FFFF)
_EXP = np.uint64(0x7FF0_0000_0000_0000)
_ONE = np.uint64(1)
_SPLIT = 134217729.0  # 2^27 + 1: Veltkamp's constant for float64 (Dekker 1971)


def _bits(value: float) -> int:
    return int(struct.unpack("<Q", struct.pack("<d", value))[0])


def sum_error(a: Any, b: Any, s: Any) -> Any:
    """The exact ``a + b - s`` for ``s = fl(a + b)`` (Knuth's TwoSum; no overflow assumed)."""
    bb = s - a
    return (a - (s - bb)) + (b - bb)


def _split(a: Any) -> tuple[Any, Any]:
    c = _SPLIT * a
    hi = c - (c - a)
    return hi, a - hi


def product_error(a: Any, b: Any, p: Any) -> Any:
    """The exact ``a * b - p`` for ``p = fl(a * b)`` (Dekker's product with Veltkamp's split;
    exact when nothing overflows or underflows)."""
    ah, al = _split(a)
    bh, bl = _split(b)
    return ((ah * bh - p) + ah * bl + al * bh) + al * bl


def nudge_to_odd(s: np.ndarray, err: Any) -> np.ndarray:
    """``s`` rounded to odd: where ``err`` (the exact value minus ``s``) is nonzero and the
    last bit of ``s`` is even, the neighbour of ``s`` on the side of the exact value."""
    s = np.asarray(s, np.float64)
    err = np.broadcast_to(np.asarray(err, np.float64), s.shape)
    even = (s.view(np.uint64) & _ONE) == 0
    fix = even & (err != 0)
    if fix.any():
        s = s.copy()
        s[fix] = np.nextafter(s[fix], np.copysign(np.inf, err[fix]))
    return s


class Rounder:
    """Rounds float64 values to ``fmt`` with ``options`` (see the module docstring)."""

    def __init__(self, fmt: Format, options: CastOptions, rng: np.random.Generator | None) -> None:
        self.fmt = fmt
        self.options = options
        self.rng = rng
        t = fmt.significand_bits
        float64_layout = fmt.exponent_bits == 11 and t == 52 and fmt.specials == "ieee"
        self.identity = float64_layout and options.overflow == "standard" and \
            options.subnormals == "keep"
        fast = options.rounding in NEAREST and fmt.signed and fmt.has_zero and t <= 51 and \
            not self.identity
        self.magic = fast and options.rounding == "roundTiesToEven" and options.subnormals == "keep"
        self.bits = fast and not self.magic
        # round to odd needs two spare bits below the format's precision (p <= 51)
        self.can_odd = fmt.precision <= 51 and not self.identity
        shift = 52 - t
        self.shift = np.uint64(shift)
        self.half = 1 << (shift - 1) if shift else 0
        self.keep = np.uint64(~((1 << shift) - 1) & 0xFFFF_FFFF_FFFF_FFFF)
        self.sn_bits = _bits(float(fmt.smallest_normal))
        self.max_bits = _bits(float(fmt.max_finite))
        self.max_finite = float(fmt.max_finite)
        # the magic constant: exponent field of max(|x|, 2^emin) plus (52 - t), times 1.5
        self.emin_field = np.uint64(self.sn_bits & 0x7FF0_0000_0000_0000)
        self.magic_add = np.uint64((shift << 52) | (1 << 51))
        # values in binades below the largest finite value's cannot round past it
        self.safe_field = (self.max_bits & 0x7FF0_0000_0000_0000) - (1 << 52)
        # the same rounding on float32 data, in float32, for a format whose every value and
        # quantum float32 holds (its subnormals' quantum 2^(emin - t) >= 2^-149) with two bits
        # to spare; the constant 1.5 * 2^(e + 23 - t) must stay below 2^128 (e <= 104 + t)
        self.magic32 = self.magic and fmt.precision <= 22 and fmt.emax <= 127 and \
            fmt.emin >= -126 and fmt.emin - t >= -149
        top32 = min(fmt.emax - 1, 104 + t)  # the highest binade done in float32
        self.safe32 = (top32 + 127) << 23 if self.magic32 else 0
        self.emin32 = (fmt.emin + 127) << 23 if self.magic32 else 0
        self.magic32_add = ((23 - t) << 23) | (1 << 22)
        self.ties_even = options.rounding == "roundTiesToEven"
        self.signed_zero = fmt.has_negative_zero
        # the magic-constant rounding in one compiled pass (tests turn it off for the twin)
        self.compiled = self.magic

    # ----- arrays ----------------------------------------------------------------------------
    def __call__(self, x: Any, out: np.ndarray | None = None) -> np.ndarray:
        """``x`` rounded once to the format, as float64 (into ``out`` when given, which may
        be ``x`` itself)."""
        arr = np.asarray(x)
        if arr.dtype.kind not in "fV" or arr.dtype.itemsize > 8 or not arr.flags.c_contiguous:
            arr = np.ascontiguousarray(arr, dtype=np.float64).reshape(np.shape(x))
        res = np.empty(arr.shape) if out is None else out
        if self.identity:
            if res is not arr:
                np.copyto(res, arr)
            return res
        if not (self.magic or self.bits):
            res[...] = self._cast(arr).reshape(arr.shape)
            return res
        flat, dest = arr.reshape(-1), res.reshape(-1)
        if self._use_compiled(flat):
            self._compiled(compiled_rounding.round_nearest, (flat,), dest)
            return res
        wide = arr.dtype == np.float64

        narrow = arr.dtype == np.float32 and self.magic32

        def work(start: int, stop: int) -> None:
            xb = flat[start:stop]
            if narrow and self._magic_float32(xb, dest[start:stop]):
                return
            if not wide:  # float32, float16, ml_dtypes: widened exactly, a block at a time
                widened = buffer("round-in", np.float64, xb.size)
                with np.errstate(invalid="ignore"):  # a signaling NaN converts quietly
                    widened[...] = xb
                xb = widened
            self._block(xb, dest[start:stop], scratch_input=not wide)

        for start in range(0, flat.size, BLOCK):
            work(start, min(start + BLOCK, flat.size))
        return res

    def _use_compiled(self, flat: np.ndarray) -> bool:
        return self.compiled and flat.dtype in (np.float32, np.float64) and \
            compiled_rounding.usable(flat.size)

    def _compiled(self, kernel: Callable[..., int], sources: tuple[np.ndarray, ...],
                  dest: np.ndarray) -> None:
        """``kernel`` (of ``compiled_rounding``) from ``sources`` into ``dest``; the values it
        flags (past the largest finite value, Inf, NaN: left in ``dest`` unrounded) go
        through the cast. A loop whose output overlaps its input does not vectorize (numba's
        overlap check sends it to the scalar loop, 5x slower), so in place it runs a block at
        a time into a buffer."""
        n = dest.size
        flags = np.empty(n, np.bool_)
        args = (int(self.emin_field), int(self.magic_add), self.max_finite, self.signed_zero)
        if not any(np.may_share_memory(s, dest) for s in sources):
            count = kernel(*sources, dest, flags, *args)
        else:
            count = 0
            work = buffer("round-out", np.float64, min(n, BLOCK))
            for start in range(0, n, BLOCK):
                stop = min(start + BLOCK, n)
                part = work[: stop - start]
                count += kernel(*(s[start:stop] for s in sources), part, flags[start:stop], *args)
                dest[start:stop] = part
        if count:
            where = np.flatnonzero(flags)
            dest[where] = self._cast(dest[where])

    def _block(self, xb: np.ndarray, ob: np.ndarray, scratch_input: bool = False) -> None:
        """One block (``ob`` may share ``xb``'s memory; ``scratch_input``: ``xb`` is a work
        buffer of ours, so the result may go to ``ob`` directly)."""
        n = xb.size
        if n == 0:
            return
        direct = scratch_input or not np.may_share_memory(xb, ob)
        work = ob if direct else buffer("round-out", np.float64, n)
        if self.magic:
            special = self._magic(xb, work)
        else:
            special = self._integer(xb, work)
        fixed = None if special is None else (special, self._cast(xb[special]))
        if not direct:
            np.copyto(ob, work)
        if fixed is not None:
            ob[fixed[0]] = fixed[1]

    def _magic(self, xb: np.ndarray, work: np.ndarray) -> np.ndarray | None:
        c = buffer("round-c", np.uint64, xb.size)
        np.bitwise_and(xb.view(np.uint64), _EXP, out=c)
        near_top = int(c.max()) > self.safe_field  # a binade where rounding may pass the top
        # below the smallest normal (zeros too) the quantum is fixed, and a result of zero
        # must keep the input's sign: without such values both steps can be left out
        low = int(c.min()) < int(self.emin_field)
        if low:
            np.maximum(c, self.emin_field, out=c)
        np.add(c, self.magic_add, out=c)
        cf = c.view(np.float64)
        np.add(xb, cf, out=work)
        np.subtract(work, cf, out=work)
        if low:
            np.copysign(work, xb, out=work)
            if not self.signed_zero:
                np.add(work, 0.0, out=work)  # -0 + +0 is +0: the format has no negative zero
        if not near_top:
            return None
        special = ~(np.abs(work) <= self.max_finite)  # past the largest finite value, Inf, NaN
        return special if special.any() else None

    def _magic_float32(self, xb: np.ndarray, ob: np.ndarray) -> bool:
        """The magic-constant rounding done on float32 data in float32 (half the bytes), the
        result widened into ``ob``; False (nothing written) for a block with values in the
        top binades, where the constant would pass float32's range."""
        n = xb.size
        c = buffer("round-c32", np.uint32, n)
        np.bitwise_and(xb.view(np.uint32), np.uint32(0x7F80_0000), out=c)
        if int(c.max()) > self.safe32:
            return False
        low = int(c.min()) < self.emin32
        if low:
            np.maximum(c, np.uint32(self.emin32), out=c)
        np.add(c, np.uint32(self.magic32_add), out=c)
        cf = c.view(np.float32)
        work = buffer("round-w32", np.float32, n)
        np.add(xb, cf, out=work)
        np.subtract(work, cf, out=work)
        if low:
            np.copysign(work, xb, out=work)
            if not self.signed_zero:
                np.add(work, np.float32(0.0), out=work)
        np.copyto(ob, work)
        return True

    def _integer(self, xb: np.ndarray, work: np.ndarray) -> np.ndarray | None:
        n = xb.size
        mag = buffer("round-mag", np.uint64, n)
        r = work.view(np.uint64)
        np.bitwise_and(xb.view(np.uint64), _ABS, out=mag)
        if self.ties_even:
            np.right_shift(mag, self.shift, out=r)
            np.bitwise_and(r, _ONE, out=r)
            np.add(r, np.uint64(self.half - 1), out=r)
        else:
            r.fill(self.half)
        np.add(r, mag, out=r)
        np.bitwise_and(r, self.keep, out=r)
        over = int(r.max()) > self.max_bits
        np.subtract(mag, _ONE, out=mag)  # zeros wrap to the top, out of the next test's way
        under = int(mag.min()) < self.sn_bits - 1
        special = None
        if over or under:
            special = mag < np.uint64(self.sn_bits - 1)
            special |= r > np.uint64(self.max_bits)
        np.copysign(work, xb, out=work)
        if not self.signed_zero:
            np.add(work, 0.0, out=work)
        return special

    def _cast(self, arr: np.ndarray) -> np.ndarray:
        codes = encode_with(arr, self.fmt, self.options, rng=self.rng)
        with np.errstate(invalid="ignore"):  # a signaling NaN kept as is reads quietly
            return np.asarray(decode(codes, self.fmt), dtype=np.float64)

    def sum(self, a: np.ndarray, b: Any, out: np.ndarray | None = None) -> np.ndarray:
        """``a + b`` rounded to the format (into ``out``, which may be ``a``). Under directed
        and stochastic rounding the float64 sum is rounded to odd first (TwoSum), so the result
        is the exact sum rounded once; under rounding to nearest the float64 sum is rounded,
        which is the same whenever float64 holds the sum exactly (the operands' bits span at
        most 53 places: the condition under which an accumulation's chunk sums are exact)."""
        a = np.ascontiguousarray(a, dtype=np.float64).reshape(np.shape(a))
        if not (isinstance(b, np.ndarray) and b.shape == a.shape and b.dtype == np.float64
                and b.flags.c_contiguous):
            b = np.ascontiguousarray(np.broadcast_to(np.asarray(b, np.float64), a.shape))
        res = np.empty(a.shape) if out is None else out
        if self.identity:
            np.add(a, b, out=res)
            return res
        fa, fb, dest = a.reshape(-1), b.reshape(-1), res.reshape(-1)
        if self._use_compiled(fa):
            self._compiled(compiled_rounding.sum_nearest, (fa, fb), dest)
            return res

        def work(start: int, stop: int) -> None:
            ab, bb = fa[start:stop], fb[start:stop]
            s = buffer("sum-s", np.float64, ab.size)
            np.add(ab, bb, out=s)
            if self.magic or self.bits:
                self._block(s, dest[start:stop], scratch_input=True)
                return
            if self.can_odd:
                s[...] = nudge_to_odd(s, sum_error(ab, bb, s))
            dest[start:stop] = self._cast(s)

        for start in range(0, fa.size, BLOCK):
            work(start, min(start + BLOCK, fa.size))
        return res

    # ----- scalars ---------------------------------------------------------------------------
    def scalar(self, value: float) -> float:
        """One Python float rounded to the format."""
        if self.identity:
            return float(value)
        if (self.magic or self.bits) and math.isfinite(value):
            mag = _bits(abs(value))
            if self.ties_even:
                r = mag + self.half - 1 + ((mag >> int(self.shift)) & 1)
            else:
                r = mag + self.half
            r &= int(self.keep)
            if (mag == 0 or mag >= self.sn_bits) and r <= self.max_bits:
                out = struct.unpack("<d", struct.pack("<Q", r))[0]
                return float(math.copysign(out, value)) if self.signed_zero or out else 0.0
        return float(self._cast(np.array([value]))[0])

    def scalar_sum(self, a: float, b: float) -> float:
        """``a + b`` (Python floats) rounded once to the format (rounded to odd first)."""
        s = a + b
        if self.identity:
            return s
        if self.can_odd and math.isfinite(s):
            err = sum_error(a, b, s)
            if err != 0 and _bits(s) & 1 == 0:
                s = math.nextafter(s, math.copysign(math.inf, err))
        return self.scalar(s)
