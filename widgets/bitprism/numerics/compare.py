"""``compare()``: one exact value refracted into several formats, side by side.

Every row is computed exactly: the input is parsed as a rational (never through a binary
float), rounded once into each format (or, with ``via``, first into the ``via`` format and then
into each format: double rounding made visible), and the errors are Fractions measured against
the exact input. The result is an immutable record whose text and HTML come from the render
layer (imported lazily, so this module stays free of presentation code).
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache
from fractions import Fraction
from typing import Any, Iterable

import numpy as np

from ..errors import BitprismError
from ..formats import Format, FormatLike, get_format
from .decimal_text import exact_decimal, exact_text, shortest_decimal
from .exact import ExactValue, _floor_log2, as_exact
from .inspect import CodeClass, Fields
from .options import CastOptions, Overflow, Rounding, Subnormals
from .scalar import decode_exact, encode_exact

__all__ = [
    "DEFAULT_FORMATS",
    "Comparison",
    "FormatRow",
    "Neighbour",
    "compare",
    "compare_row",
    "exact_ulp",
    "neighbour_codes",
    "scalar_fields",
]

DEFAULT_FORMATS: tuple[str, ...] = (
    "float32",
    "bfloat16",
    "float16",
    "float8_e4m3fn",
    "float8_e5m2",
)


@dataclass(frozen=True)
class Neighbour:
    """An adjacent representable value: its code, exact value and shortest decimal."""

    code: int
    value: ExactValue
    shortest: str


@dataclass(frozen=True)
class FormatRow:
    """One format's view of the compared value.

    Attributes:
        format: the Format.
        code: the bit pattern the (source) value rounds to.
        fields: sign, biased exponent, trailing significand, class and NaN payload of ``code``.
        stored: the exact value ``code`` holds.
        shortest: the shortest decimal reading back to ``code`` (``shortest_decimal``).
        exact: the full exact decimal expansion of ``stored`` (``nan``/``inf`` for specials).
        abs_error: stored - input, exactly; None where undefined (NaN/Inf on either side).
        rel_error: abs_error / input; None also for a zero input.
        ulp_error: abs_error / ulp(stored) (ULP taken at the rounded value, Handbook of
            Floating-Point Arithmetic definition); None where undefined.
        ulp: the ULP at the stored value (``exact_ulp``), None for NaN/Inf.
        next_down, next_up: the adjacent values below and above ``stored`` (None where none).
        overflowed: the input's magnitude rounds (unbounded exponent) past the largest finite.
        underflowed: a nonzero input became zero.
        subnormal: the stored value is subnormal.
        not_representable: the input's kind or sign does not exist in the format (NaN into
            FP4 becomes a signed zero, Inf into E4M3FN becomes NaN, -1 into E8M0 becomes NaN).
    """

    format: Format
    code: int
    fields: Fields
    stored: ExactValue
    shortest: str
    exact: str
    abs_error: Fraction | None
    rel_error: Fraction | None
    ulp_error: Fraction | None
    ulp: Fraction | None
    next_down: Neighbour | None
    next_up: Neighbour | None
    overflowed: bool
    underflowed: bool
    subnormal: bool
    not_representable: bool

    @property
    def kind(self) -> CodeClass:
        return CodeClass(self.fields.kind)

    @property
    def inexact(self) -> bool:
        return self.abs_error is not None and self.abs_error != 0

    def bits(self) -> str:
        """The code as a string of ``format.bits`` binary digits, most significant first."""
        return format(self.code, f"0{self.format.bits}b")


@dataclass(frozen=True)
class Comparison:
    """One value across formats: the exact input, the options used and one row per format.

    Attributes:
        input: the exact input value.
        text: the input as text (what was typed, or exact text for a number).
        options: the cast options every row used.
        via: the format the input was rounded to first (double rounding), or None.
        via_code: the input's code in ``via`` (None without ``via``).
        source: the value every row was rounded from (``input``, or its ``via`` rounding).
        rows: one FormatRow per requested format, in the requested order.
    """

    input: ExactValue
    text: str
    options: CastOptions
    via: Format | None
    via_code: int | None
    source: ExactValue
    rows: tuple[FormatRow, ...]

    def row(self, fmt: FormatLike) -> FormatRow:
        """The row of one format (by name, alias or Format)."""
        f = get_format(fmt)
        for r in self.rows:
            if r.format == f:
                return r
        raise BitprismError(
            f"format {f.name!r} is not in this comparison; it has "
            f"{', '.join(r.format.name for r in self.rows)}"
        )

    def to_text(self, width: int = 120) -> str:
        from ..render.compare_text import comparison_text

        return comparison_text(self, width=width)

    def to_html(self, aligned: bool = True) -> str:
        from ..render.compare_html import comparison_html

        return comparison_html(self, aligned=aligned)

    def __str__(self) -> str:
        return self.to_text()

    def _repr_html_(self) -> str:
        return self.to_html()

    def _repr_mimebundle_(self, include: Any = None, exclude: Any = None) -> dict[str, str]:
        return {"text/plain": self.to_text(), "text/html": self.to_html()}


# ----- exact helpers --------------------------------------------------------------------------
def exact_ulp(value: ExactValue, fmt: Format) -> Fraction | None:
    """ULP at a value of ``fmt`` (Goldberg / Handbook): for |x| in [2^e, 2^(e+1)),
    2^(max(e, emin) - t), e capped at emax; ulp(0) is the smallest subnormal; None for NaN/Inf."""
    if not value.is_finite:
        return None
    t = fmt.significand_bits
    if value.is_zero:
        e = fmt.emin
    else:
        e = min(max(_floor_log2(value.magnitude), fmt.emin), fmt.emax)
    return Fraction(2) ** (e - t)


def _top_magnitude(fmt: Format) -> int:
    """Magnitude code of the largest non-NaN value (+Inf where it exists)."""
    return fmt.inf_code if fmt.inf_code is not None else fmt.max_code


def _code_of_rank(rank: int, fmt: Format) -> int:
    if rank < 0:
        return fmt.sign_mask | -rank
    return rank


def neighbour_codes(code: int, fmt: Format) -> tuple[int | None, int | None]:
    """Codes of the values next below and next above ``code`` (IEEE nextDown / nextUp on the
    value set: ±0 count as one value; Inf has nothing beyond it; NaN has no neighbours)."""
    kind = fmt.classify(code)
    if kind == "nan":
        return None, None
    mag = code & fmt.magnitude_mask
    rank = -mag if (fmt.signed and code & fmt.sign_mask) else mag
    top = _top_magnitude(fmt)
    bottom = -top if fmt.signed else 0
    down = _code_of_rank(rank - 1, fmt) if rank - 1 >= bottom else None
    up = _code_of_rank(rank + 1, fmt) if rank + 1 <= top else None
    if rank == 0 and fmt.signed and fmt.has_zero:
        down = fmt.sign_mask | 1  # below either zero: the negative smallest subnormal
    return down, up


def _neighbour(code: int | None, fmt: Format) -> Neighbour | None:
    if code is None:
        return None
    return Neighbour(code, _decode(code, fmt), _shortest(code, fmt))


# Moving to a neighbour and back recomputes the same codes: keep the exact work of recent ones.
@lru_cache(maxsize=4096)
def _decode(code: int, fmt: Format) -> ExactValue:
    return decode_exact(code, fmt)


@lru_cache(maxsize=4096)
def _shortest(code: int, fmt: Format) -> str:
    return shortest_decimal(code, fmt)


def scalar_fields(code: int, fmt: Format) -> Fields:
    """``inspect.fields`` for one code, in plain integers (no array round trip)."""
    t = fmt.significand_bits
    sign = (code >> (fmt.bits - 1)) & 1 if fmt.signed else 0
    e = (code >> t) & fmt.exponent_field_max
    sig = code & fmt.significand_mask
    kind = CodeClass.NORMAL
    payload = 0
    if fmt.has_zero and e == 0:
        kind = CodeClass.ZERO if sig == 0 else CodeClass.SUBNORMAL
    cls = fmt.classify(code)
    if cls == "inf":
        kind = CodeClass.INFINITE
    elif cls == "nan":
        kind = CodeClass.QUIET_NAN
        if fmt.specials == "ieee":
            quiet = sig >> (t - 1) & 1
            kind = CodeClass.QUIET_NAN if quiet else CodeClass.SIGNALING_NAN
            payload = sig & ((1 << (t - 1)) - 1) if t > 1 else 0
    elif fmt.specials == "fnuz" and code == 0:
        kind = CodeClass.ZERO
    return Fields(fmt, sign, e, sig, kind, payload)


def _exceeds_max(x: ExactValue, fmt: Format, options: CastOptions) -> bool:
    """IEEE 754 §7.4 overflow: |x| rounded with an unbounded exponent exceeds the largest
    finite value (stochastic rounding: |x| itself lies beyond it)."""
    if not x.is_finite or x.is_zero:
        return False
    mag = x.magnitude
    if mag <= fmt.max_finite:
        return False
    mode = options.rounding
    if mode == "stochastic":
        return True
    t = fmt.significand_bits
    if t == 0 and mode == "roundTiesToEven":
        mode = "roundTiesToAway"
    q = _floor_log2(mag) - t
    scaled = mag / Fraction(2) ** q
    n = scaled.numerator // scaled.denominator
    rem = scaled - n
    half = Fraction(1, 2)
    up = rem != 0 and (
        (mode == "roundTiesToEven" and (rem > half or (rem == half and n & 1)))
        or (mode == "roundTiesToAway" and rem >= half)
        or (mode == "roundTowardPositive" and not x.negative)
        or (mode == "roundTowardNegative" and x.negative)
    )
    return (n + up) * Fraction(2) ** q > fmt.max_finite


def _not_representable(x: ExactValue, fmt: Format, stored: ExactValue) -> bool:
    if x.is_nan:
        return not stored.is_nan
    if x.is_inf:
        return not stored.is_inf
    if x.negative and not x.is_zero and not fmt.signed:
        return True
    if x.is_zero:
        return not fmt.has_zero or (x.negative and not fmt.has_negative_zero)
    return False


def compare_row(
    x: ExactValue,
    fmt: Format,
    options: CastOptions,
    source: ExactValue | None = None,
    code: int | None = None,
) -> FormatRow:
    """One row: ``source`` (default ``x``) rounded into ``fmt``, errors measured against ``x``.

    ``code`` pins the row to a given bit pattern (one set by hand: a NaN payload or the sign of
    a NaN survives, where rounding the decoded value would give the canonical NaN).
    """
    src = x if source is None else source
    if code is None:
        rng = np.random.default_rng(options.seed) if options.rounding == "stochastic" else None
        code = encode_exact(src, fmt, options, rng)
    else:
        fmt.classify(code)  # range check with a clear message
    stored = _decode(code, fmt)
    fl = scalar_fields(code, fmt)
    ulp = exact_ulp(stored, fmt)
    abs_err = rel_err = ulp_err = None
    if x.is_finite and stored.is_finite and not x.clamped:
        abs_err = stored.value - x.value
        rel_err = abs_err / x.value if not x.is_zero else None
        ulp_err = abs_err / ulp if ulp is not None else None
    down, up = neighbour_codes(code, fmt)
    return FormatRow(
        format=fmt,
        code=code,
        fields=fl,
        stored=stored,
        shortest=_shortest(code, fmt),
        exact=exact_decimal(stored.value) if stored.is_finite else _shortest(code, fmt),
        abs_error=abs_err,
        rel_error=rel_err,
        ulp_error=ulp_err,
        ulp=ulp,
        next_down=_neighbour(down, fmt),
        next_up=_neighbour(up, fmt),
        overflowed=_exceeds_max(src, fmt, options) or (src.is_finite and not stored.is_finite),
        underflowed=src.is_finite and not src.is_zero and stored.is_zero,
        subnormal=fl.kind == CodeClass.SUBNORMAL,
        not_representable=_not_representable(src, fmt, stored),
    )


def _input(value: Any) -> tuple[ExactValue, str]:
    if isinstance(value, str):
        from .parse import parse

        return parse(value), value.strip()
    x = as_exact(value)
    return x, exact_text(x)


def compare(
    value: Any,
    formats: Iterable[FormatLike] = DEFAULT_FORMATS,
    rounding: Rounding = "roundTiesToEven",
    overflow: Overflow = "standard",
    subnormals: Subnormals = "keep",
    seed: int | None = None,
    via: FormatLike | None = None,
    *,
    pinned: tuple[FormatLike, int] | None = None,
) -> Comparison:
    """Round one value into each of ``formats`` and report bits, stored value and errors.

    ``value`` is text (parsed exactly: decimals, hex floats, fractions, ``2**-24``, inf, nan,
    -0), any number ``as_exact`` accepts, or an ExactValue. ``via`` names a format the input is
    rounded to first (e.g. ``"float32"``), to show double rounding; errors are still measured
    against the exact input. Stochastic rounding draws from ``seed`` afresh for every format, so
    a row does not depend on which other formats are listed. ``pinned=(format, code)`` shows
    that band at exactly ``code`` (the widget's bit toggles: a hand-set NaN payload stays).
    """
    x, text = _input(value)
    options = CastOptions(rounding, overflow, subnormals, seed)
    fmts = [get_format(f) for f in (formats if not isinstance(formats, (str, Format)) else [formats])]
    if not fmts:
        raise BitprismError("compare() needs at least one format, got none")
    via_fmt = None if via is None else get_format(via)
    via_code = None
    source = x
    if via_fmt is not None:
        rng = np.random.default_rng(seed) if options.rounding == "stochastic" else None
        via_code = encode_exact(x, via_fmt, options, rng)
        source = decode_exact(via_code, via_fmt)
    pin_fmt, pin_code = (get_format(pinned[0]), int(pinned[1])) if pinned else (None, None)
    rows = tuple(
        compare_row(x, f, options, source, pin_code if f == pin_fmt else None) for f in fmts
    )
    return Comparison(x, text, options, via_fmt, via_code, source, rows)

