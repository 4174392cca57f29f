"""Emulating a format: every floating-point result computed in float64 and rounded once.

``Emulator(fmt, options, accumulate, chunk)`` is what ``trace(..., emulate=fmt)`` runs every
operation through, for numpy and torch alike (torch tensors are handed over as numpy arrays).
Values are kept in float64 arrays: every value of every format fits float64 exactly.

* Inputs and constants are rounded to ``fmt`` on entry (``entry``, ``constant``).
* An elementwise result is computed in float64 and rounded once (``Rounder``). The product of
  two values of a format of at most 26 significant bits is exact in float64 when nothing
  overflows; a sum, difference, quotient or square root rounded to nearest in float64 and then
  to a format of ``p`` bits with ``2p + 2 <= 53`` is the correctly rounded one (Figueroa,
  "When is double rounding innocuous?", SIGNUM 1995). Where those conditions fail (directed or
  stochastic rounding, wider formats), the float64 result is rounded to odd first with the exact
  error from TwoSum or Dekker's product (``rounding.nudge_to_odd``). Other functions (exp, log,
  tanh, ...) take numpy's float64 result, which is within an ULP of float64, rounded once.
* Sums and products that accumulate (``sum``, ``mean``, ``matmul``, ``dot``, ``einsum``) add
  their terms ``chunk`` at a time: each chunk's terms are summed in float64 (exact when they
  span fewer binades than float64's spare bits allow), added to the running sum, and the
  running sum rounded to ``accumulate`` after every chunk, as a hardware accumulator of that
  format does; the final value is rounded to ``fmt``. ``chunk=None`` rounds the accumulator
  once, at the end. An ``accumulate`` format of float64 adds in float64 throughout.
"""

from __future__ import annotations

import string
from typing import Any, Callable, Sequence

import numpy as np

from ..errors import BitprismError
from ..formats import Format
from ..numerics.options import CastOptions
from .rounding import NEAREST, Rounder, nudge_to_odd, product_error, sum_error

__all__ = ["Emulator", "einsum_letters"]

_SMALL_REST = 16  # accumulations with at most this many outputs run as Python floats
Parts = Callable[[int, int, Any], Any]  # (start, stop, out array or None) -> chunk sums


def _is_float(x: Any) -> bool:
    return isinstance(x, np.ndarray | np.generic) and x.dtype.kind == "f"


class Emulator:
    """Rounds results to ``fmt`` and accumulates in ``accumulate`` (see the module docstring)."""

    def __init__(
        self, fmt: Format, options: CastOptions, accumulate: Format, chunk: int | None
    ) -> None:
        self.fmt = fmt
        self.options = options
        self.accumulate = accumulate
        self.chunk = chunk
        rng = np.random.default_rng(options.seed) if options.rounding == "stochastic" else None
        self.round = Rounder(fmt, options, rng)
        self.round_acc = Rounder(accumulate, options, rng)
        p = fmt.precision
        self.odd = self.round.can_odd and (options.rounding not in NEAREST or 2 * p + 2 > 53)
        self.exact_products = p <= 26
        # every value of the format is a float32 value (its results may be counted as float32)
        self.fits_float32 = p <= 24 and fmt.emax <= 127 and fmt.emin - fmt.significand_bits >= -149
        self._constants: dict[float, float] = {}

    # ----- entry -------------------------------------------------------------------------------
    def entry(self, arr: np.ndarray) -> np.ndarray:
        """A floating-point array arriving from outside, rounded to the format (float64)."""
        return self.round(arr)

    def constant(self, value: float) -> float:
        """A Python float constant rounded to the format (kept a Python float, so numpy's
        promotion rules see the same kind of operand)."""
        out = self._constants.get(value)
        if out is None:
            out = self.round.scalar(float(value))
            if len(self._constants) < 4096:
                self._constants[value] = out
        return out

    def finish(self, result: Any, fresh: bool = False) -> Any:
        """Round every floating-point array or scalar in a result (tuples walked); ``fresh``:
        the arrays are new and ours, rounded where they are (no second array)."""
        if isinstance(result, tuple):
            return tuple(self.finish(r, fresh) for r in result)
        if isinstance(result, np.ndarray) and result.dtype.kind == "f":
            if fresh and result.dtype == np.float64 and result.flags.c_contiguous:
                return self.round(result, out=result)
            return self.round(result).reshape(result.shape)
        if isinstance(result, np.generic) and result.dtype.kind == "f":
            return np.float64(self.round.scalar(float(result)))
        return result

    # ----- elementwise -------------------------------------------------------------------------
    def ufunc(self, ufunc: np.ufunc, inputs: Sequence[Any], kwargs: dict[str, Any]) -> Any:
        """``ufunc(*inputs)`` in float64 (inputs already in the format), rounded once."""
        result = ufunc(*inputs, **kwargs)
        name = ufunc.__name__
        if not self.odd and not (name == "multiply" and not self.exact_products):
            return self.finish(result, fresh=True)
        if not _is_float(result) or ufunc.nout != 1 or len(inputs) > 2:
            return self.finish(result, fresh=True)
        with np.errstate(all="ignore"):
            if name in ("add", "subtract") and len(inputs) == 2:
                a, b = inputs
                err = sum_error(a, -b if name == "subtract" else b, result)
            elif name == "multiply" and len(inputs) == 2:
                err = product_error(inputs[0], inputs[1], result)
            elif name == "divide" and len(inputs) == 2:
                a, b = inputs
                err = _residual_div(a, b, result) * np.sign(b)
            elif name == "sqrt":
                err = _residual_sqrt(inputs[0], result)
            else:
                return self.finish(result, fresh=True)
            err = np.where(np.isfinite(err), err, 0.0)
        shaped = np.asarray(result, np.float64)
        return self.finish(nudge_to_odd(shaped, err).reshape(shaped.shape)[()])

    # ----- accumulation ------------------------------------------------------------------------
    def _accumulate(self, parts: Parts, total: int) -> np.ndarray:
        """The running sum over chunks: ``parts(start, stop, out)`` is the float64 sum of the
        terms ``start .. stop - 1`` (written into ``out`` when it is an array); the running sum
        is rounded to the accumulator format after each chunk. The running sum and the chunk
        sums live in two arrays made once, so the loop allocates nothing."""
        step = total if self.chunk is None else max(self.chunk, 1)
        if total == 0 or self.round_acc.identity or step >= total:
            whole = _own_float64(parts(0, total, None))
            return self.round_acc(whole, out=whole)
        starts = range(0, total, step)
        acc = _own_float64(parts(0, step, None))
        if acc.size <= _SMALL_REST:
            rest = [np.asarray(parts(s, min(s + step, total), None), np.float64)
                    for s in starts[1:]]
            return self._accumulate_small([acc] + rest)
        self.round_acc(acc, out=acc)
        part = np.empty_like(acc)
        for start in starts[1:]:
            parts(start, min(start + step, total), part)
            self.round_acc.sum(acc, part, out=acc)
        return acc

    def _accumulate_small(self, pieces: list[np.ndarray]) -> np.ndarray:
        """Few outputs, many chunks: the running sums as Python floats."""
        shape = pieces[0].shape
        flat = np.stack([p.reshape(-1) for p in pieces])  # (chunks, outputs)
        out = np.empty(flat.shape[1])
        for j in range(flat.shape[1]):
            column = flat[:, j].tolist()
            acc = self.round_acc.scalar(column[0])
            for part in column[1:]:
                acc = self.round_acc.scalar_sum(acc, part)
            out[j] = acc
        return out.reshape(shape)

    def sum(self, x: np.ndarray, axis: Any = None, keepdims: bool = False,
            where: Any = True, initial: Any = None, mean: bool = False) -> Any:
        """``x.sum(axis)`` (or ``mean`` with ``mean=True``) accumulated in chunks, rounded."""
        x = np.asarray(x, np.float64)
        if where is not True:
            x = np.where(where, x, 0.0)
        axes = _axes(axis, x.ndim)
        moved = np.moveaxis(x, axes, tuple(range(x.ndim - len(axes), x.ndim)))
        rest = moved.shape[: x.ndim - len(axes)]
        count = int(np.prod([x.shape[a] for a in axes], dtype=np.int64))
        terms = moved.reshape(tuple(rest) + (count,))
        if initial is not None:
            terms = np.concatenate([np.full(tuple(rest) + (1,), float(initial)), terms], axis=-1)
        total = int(terms.shape[-1])
        acc = self._accumulate(lambda s, e, out: terms[..., s:e].sum(axis=-1, out=out), total)
        if mean:
            with np.errstate(all="ignore"):
                acc = _own_float64(acc / count if count else acc * np.nan)
        out = self.round(acc, out=acc)
        if keepdims:
            out = np.expand_dims(out, axes)
        return out[()] if out.ndim == 0 else out

    def contract(self, op: Callable[..., Any], a: Any, b: Any, bias: Any = None) -> Any:
        """``op(a, b)`` for ``np.matmul`` or ``np.dot`` (the last axis of ``a`` against the
        second-to-last of ``b``, or its only one), accumulated in chunks; ``bias`` is added to
        the accumulator before the final rounding."""
        a = np.asarray(a, np.float64)
        b = np.asarray(b, np.float64)
        if a.ndim == 0 or b.ndim == 0:
            return self.ufunc(np.multiply, (a, b), {})
        k = a.shape[-1]
        if b.ndim == 1:
            acc = self._accumulate(lambda s, e, out: op(a[..., s:e], b[s:e], out=out), k)
        else:
            acc = self._accumulate(lambda s, e, out: op(a[..., s:e], b[..., s:e, :], out=out), k)
        if bias is not None:
            acc = self.round_acc.sum(acc, np.asarray(bias, np.float64))
        out = self.round(acc, out=acc) if isinstance(acc, np.ndarray) else self.round(acc)
        return out[()] if out.ndim == 0 else out

    def einsum(self, subscripts: str, operands: Sequence[Any], kwargs: dict[str, Any]) -> Any:
        """``np.einsum(subscripts, *operands)`` with the contracted terms accumulated in chunks
        along the last contracted letter. With several contracted letters, each value of the
        others runs its own chunked sum along the last one, and these sums are added in turn
        to the running sum (rounded to the accumulator format after each)."""
        ops = [np.asarray(o, np.float64) for o in operands]
        inputs, output = einsum_letters(subscripts, len(ops))
        contracted = [c for c in dict.fromkeys("".join(inputs)) if c not in output and c != "."]
        if not contracted:
            return self.finish(np.einsum(subscripts, *ops, **kwargs))
        sizes = {c: _letter_size(c, inputs, ops) for c in contracted}
        last = contracted[-1]
        outer = contracted[:-1]
        acc: np.ndarray | None = None
        for fixed in np.ndindex(*[sizes[c] for c in outer]) if outer else [()]:
            pinned = {c: slice(i, i + 1) for c, i in zip(outer, fixed)}

            def parts(s: int, e: int, out: Any, pinned: dict[str, slice] = pinned) -> Any:
                view = dict(pinned)
                view[last] = slice(s, e)
                sliced = [_slice_letters(o, sub, view) for o, sub in zip(ops, inputs)]
                return np.einsum(subscripts, *sliced, out=out, **kwargs)

            total = self._accumulate(parts, sizes[last])
            acc = total if acc is None else self.round_acc.sum(acc, total)
        assert acc is not None
        out = self.round(acc, out=acc) if isinstance(acc, np.ndarray) else self.round(acc)
        return out[()] if out.ndim == 0 else out


def _own_float64(x: Any) -> np.ndarray:
    """A C-contiguous float64 array of ``x`` (0-d stays 0-d), to be rounded in place."""
    arr = np.asarray(x, dtype=np.float64)
    return arr if arr.flags.c_contiguous and arr.flags.writeable else arr.copy()


def _residual_div(a: Any, b: Any, q: Any) -> Any:
    """``a - q * b`` exactly (its sign is the side of ``a / b`` that ``q`` missed)."""
    p = q * b
    return (a - p) - product_error(q, b, p)


def _residual_sqrt(a: Any, s: Any) -> Any:
    p = s * s
    return (a - p) - product_error(s, s, p)


def _axes(axis: Any, ndim: int) -> tuple[int, ...]:
    if axis is None:
        return tuple(range(ndim))
    items = axis if isinstance(axis, tuple) else (axis,)
    try:
        return tuple(sorted(int(a) % ndim if ndim else 0 for a in items))
    except (TypeError, ValueError):
        raise BitprismError(f"axis must be an int, a tuple of ints or None; got {axis!r}") from None


_LETTERS = set(string.ascii_letters)


def einsum_letters(subscripts: str, count: int) -> tuple[list[str], str]:
    """The input subscripts (``"..."`` kept as ``"."``) and the output subscript of an einsum,
    the implicit output worked out as numpy does (letters seen once, in alphabetical order)."""
    if not isinstance(subscripts, str):
        raise BitprismError("an emulated einsum needs its subscripts as a string, e.g. 'ij,jk->ik'; "
                            f"got {type(subscripts).__name__}")
    text = subscripts.replace(" ", "").replace("...", ".")
    left, arrow, right = text.partition("->")
    inputs = left.split(",")
    if len(inputs) != count or any(c not in _LETTERS and c != "." for c in left.replace(",", "")):
        raise BitprismError(f"cannot read the einsum subscripts {subscripts!r} for {count} operands")
    if not arrow:
        seen = "".join(inputs)
        right = ("." if "." in seen else "") + "".join(
            sorted(c for c in set(seen) if c != "." and seen.count(c) == 1))
    return inputs, right


def _positions(sub: str, letter: str, ndim: int) -> list[int]:
    """Axes of an operand that carry ``letter`` (``"."`` stands for any number of axes)."""
    if "." not in sub:
        return [i for i, c in enumerate(sub) if c == letter]
    head, tail = sub.split(".")
    out = [i for i, c in enumerate(head) if c == letter]
    out += [ndim - len(tail) + i for i, c in enumerate(tail) if c == letter]
    return out


def _letter_size(letter: str, inputs: list[str], ops: list[np.ndarray]) -> int:
    for sub, op in zip(inputs, ops):
        for axis in _positions(sub, letter, op.ndim):
            if op.shape[axis] != 1:
                return int(op.shape[axis])
    return 1


def _slice_letters(op: np.ndarray, sub: str, view: dict[str, slice]) -> np.ndarray:
    index: list[Any] = [slice(None)] * op.ndim
    for letter, sl in view.items():
        for axis in _positions(sub, letter, op.ndim):
            if op.shape[axis] != 1:
                index[axis] = sl
    return op[tuple(index)]
