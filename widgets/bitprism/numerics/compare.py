"""``compare()``: one exact value refracted into several formats, side by side.

Every row is computed exactly: the input is parsed as a rational (never through a binary
float), rounded once into each format (or, with ``via``, first into the ``via`` format and then
into each format: double rounding made visible), and the errors are Fractions measured against
the exact input. The result is an immutable record whose text and HTML come from the render
layer through the display seam (``bitprism.display``), so this module holds no presentation.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache
from fractions import Fraction
from typing import Any, Iterable, Mapping, Sequence

import numpy as np

from ..display import Displayable
from ..errors import BitprismError
from ..formats import Format, FormatLike, get_format
from .codes import native_code
from .decimal_text import exact_decimal, exact_text, shortest_decimal
from .exact import ExactValue, as_exact
from .inspect import CodeClass, Fields, code_fields, exact_ulp, neighbour_codes
from .options import CastOptions, Overflow, Rounding, Subnormals, resolve_options
from .rounding import exceeds_largest
from .scalar import decode_exact, encode_exact

__all__ = [
    "DEFAULT_FORMATS",
    "Comparison",
    "FormatRow",
    "Neighbour",
    "compare",
    "compare_exact",
    "compare_row",
    "read_input",
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
class Comparison(Displayable):
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
    fl = code_fields(code, fmt)
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
        # stochastic rounding beyond the largest finite value (None) counts as overflow
        overflowed=exceeds_largest(src, fmt, options.rounding) is not False
        or (src.is_finite and not stored.is_finite),
        underflowed=src.is_finite and not src.is_zero and stored.is_zero,
        subnormal=fl.kind == CodeClass.SUBNORMAL,
        not_representable=_not_representable(src, fmt, stored),
    )


def read_input(value: Any) -> tuple[ExactValue, str]:
    """The exact value of what ``compare`` is given, and the text that names it: text is
    parsed exactly (``parse``) and shown as typed; numbers are converted without rounding and
    shown as exact text."""
    if isinstance(value, str):
        from .parse import parse

        return parse(value), value.strip()
    x = as_exact(value)
    return x, exact_text(x)


def compare(
    value: Any,
    formats: Iterable[FormatLike] = DEFAULT_FORMATS,
    rounding: Rounding | None = None,
    overflow: Overflow | None = None,
    subnormals: Subnormals | None = None,
    seed: int | None = None,
    via: FormatLike | None = None,
    *,
    pinned: tuple[FormatLike, int] | None = None,
    options: CastOptions | None = None,
) -> Comparison:
    """Round one value into each of ``formats`` and report bits, stored value and errors.

    ``value`` is text (parsed exactly: decimals, hex floats, fractions, ``2**-24``, inf, nan,
    -0), any number ``as_exact`` accepts, or an ExactValue. The cast options are ``options`` (a
    ``CastOptions``) with the keyword shorthands ``rounding``, ``overflow``, ``subnormals`` and
    ``seed`` replacing its fields (defaults: roundTiesToEven, standard, keep, no seed). ``via``
    names a format the input is rounded to first (e.g. ``"float32"``), to show double rounding;
    errors are still measured against the exact input. Stochastic rounding draws from the seed
    afresh for every format, so a row does not depend on which other formats are listed.
    ``pinned=(format, code)`` shows that band at exactly ``code`` (the widget's bit toggles: a
    hand-set NaN payload stays).
    """
    x, text = read_input(value)
    fmts = [get_format(f) for f in (formats if not isinstance(formats, (str, Format)) else [formats])]
    pin = (get_format(pinned[0]), int(pinned[1])) if pinned else None
    own: dict[Format, int] = {}
    if x.is_nan and via is None:  # a NaN in its own format is copied, not converted
        own = {f: c for f in fmts if (c := native_code(value, f)) is not None}
    return compare_exact(
        x,
        text,
        fmts,
        resolve_options(options, rounding, overflow, subnormals, seed),
        None if via is None else get_format(via),
        pin,
        own,
    )


def compare_exact(
    x: ExactValue,
    text: str,
    formats: Sequence[Format],
    options: CastOptions,
    via: Format | None = None,
    pinned: tuple[Format, int] | None = None,
    own_codes: Mapping[Format, int] | None = None,
) -> Comparison:
    """``compare`` of an already exact input with resolved formats and options (what the
    Prism calls: it parses the typed text once and keeps the value). ``own_codes`` gives rows
    whose code is the input's own bit pattern (``codes.native_code``: a NaN scalar shown in
    its own format keeps its bits, a signaling NaN included); ``pinned`` takes precedence."""
    if not formats:
        raise BitprismError("compare() needs at least one format, got none")
    via_code = None
    source = x
    if via is not None:
        rng = np.random.default_rng(options.seed) if options.rounding == "stochastic" else None
        via_code = encode_exact(x, via, options, rng)
        source = decode_exact(via_code, via)
    pin_fmt, pin_code = pinned if pinned is not None else (None, None)
    own = dict(own_codes or {})
    rows = tuple(
        compare_row(x, f, options, source, pin_code if f == pin_fmt else own.get(f))
        for f in formats
    )
    return Comparison(x, text, options, via, via_code, source, rows)
