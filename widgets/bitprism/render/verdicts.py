"""What a cast did, in words: the verdict heading each band, the input line, the stored value.

One model for every screen: the Prism's bands, ``compare()``'s HTML and text and the command
line's ``show`` read their words from here, and their outcome names and marks from
``render.vocabulary``. Pure functions of a ``Comparison`` and its rows.

Numbers are written exactly when they are short (at most ``SHORT_DIGITS`` significant digits),
else rounded for reading and marked ``≈``; an exact decimal that is too long to write is
shortened with its digit count (``decimal_text.abbreviate_decimal``), never cut silently. Zero
keeps its sign ("-0").
"""

from __future__ import annotations

from dataclasses import dataclass
from fractions import Fraction

from ..formats import Format
from ..numerics.compare import Comparison, FormatRow
from ..numerics.decimal_text import (
    abbreviate_decimal,
    decimal_digit_count,
    exact_decimal,
)
from ..numerics.digits import fraction_text
from ..numerics.exact import ExactValue, floor_log2
from ..numerics.inspect import CodeClass
from .vocabulary import OUTCOMES, UNITS, WORDS

__all__ = [
    "ARROW",
    "EXACT_DIGITS",
    "SHORT_DIGITS",
    "PayloadFate",
    "brief_number",
    "exact_input_text",
    "nan_text",
    "neighbour_text",
    "options_text",
    "payload_fate",
    "plain_decimal",
    "power_text",
    "row_outcome",
    "source_row",
    "stored_pair",
    "stored_text",
    "verdict",
]

ARROW = "→"
SHORT_DIGITS = 12  # significant digits a number keeps before it is rounded for reading
EXACT_DIGITS = 40  # digits of an exact decimal written out before it is shortened
_ULP = UNITS["ulp"]


def plain_decimal(text: str) -> str:
    """A decimal without a trailing ``.0`` ("131008.0" -> "131008"); other text unchanged."""
    if text.endswith(".0") and "e" not in text:
        return text[:-2]
    return text.replace(".0e", "e")


def power_text(e: int) -> str:
    """2^e written for people: ``2^-24``."""
    return f"2^{e}"


def brief_number(q: Fraction, negative_zero: bool = False, digits: int = 6) -> str:
    """``q`` exactly when short (65504, 0.0625), else about 6 digits marked ``≈``; powers of two
    beyond that are written ``2^-149``. Zero keeps its sign when ``negative_zero``."""
    if q == 0:
        return "-0" if negative_zero else "0"
    count = decimal_digit_count(q)
    if count is not None and count <= SHORT_DIGITS:
        return plain_decimal(exact_decimal(q))
    power = _power_of_two(q)
    if power is not None:
        return power
    from .compare_text import format_number

    return "≈" + format_number(q, digits)


def _power_of_two(q: Fraction) -> str | None:
    """``2^-24`` for ±a power of two, else None."""
    mag = abs(q)
    n, d = mag.numerator, mag.denominator
    if (n == 1 and d & (d - 1) == 0) or (d == 1 and n & (n - 1) == 0):
        return f"{'-' if q < 0 else ''}{power_text(floor_log2(mag))}"
    return None


def _value_words(x: ExactValue) -> str:
    if x.is_nan:
        return "NaN"
    if x.is_inf:
        return "-Inf" if x.negative else "+Inf"
    if x.clamped:
        return str(x)
    return brief_number(x.value, negative_zero=x.negative)


def exact_input_text(c: Comparison) -> str:
    """The exact input, stated: "0.1 exactly (1/10)", "131008 exactly", "1/3 exactly (0.333…)"."""
    x = c.input
    if x.is_nan:
        return nan_text(x, source_row(c))
    if x.is_inf or x.clamped:
        return _value_words(x) + ("" if x.is_inf else " (beyond every format)")
    q = x.value
    if q == 0:
        return "-0 exactly" if x.negative else "0 exactly"
    full = exact_decimal(q, max_digits=EXACT_DIGITS)
    if "…" not in full:
        text = f"{plain_decimal(full)} exactly"
        power = _power_of_two(q)
        if power is not None and abs(q) > 1024 or q.denominator != 1:
            other = power or fraction_text(q)
            if len(other) <= 24:
                text += f" ({other})"
        return text
    frac = fraction_text(q)
    if len(frac) <= 40 and q.denominator & (q.denominator - 1):  # not a binary fraction
        return f"{frac} exactly ({full})"
    return f"exactly {full}"


def stored_pair(row: FormatRow) -> tuple[str, str]:
    """(shortest, exact) decimal of the stored value: the shortest text that reads back to the
    code and the exact value, shortened with its digit count when long. Specials and zeros
    give the same words twice."""
    s = row.stored
    if not s.is_finite:
        words = _value_words(s)
        return words, words
    if s.is_zero:
        z = "-0" if s.negative else "0"
        return z, z
    shortest = plain_decimal(row.shortest)
    exact = plain_decimal(abbreviate_decimal(row.exact, EXACT_DIGITS))
    return shortest, exact


def stored_text(row: FormatRow) -> str:
    """"shortest 0.1 · exact 0.100000001490116119384765625" (or "exact 0.5" when they agree)."""
    shortest, exact = stored_pair(row)
    if not row.stored.is_finite or row.stored.is_zero:
        return shortest
    if shortest == exact:
        return f"exact {exact}"
    return f"shortest {shortest} · exact {exact}"


@dataclass(frozen=True)
class PayloadFate:
    """What a cast did to a NaN source's payload in one format.

    Attributes:
        word: 'kept', 'quieted' (payload kept, signaling made quiet), 'cut' (only its top bits
            fit) or 'lost' (the format has one NaN, or none).
        text: the words shown ("quieted, payload 0x101 kept").
    """

    word: str
    text: str


def _source_nan(c: Comparison) -> tuple[ExactValue, bool] | None:
    """The NaN every row came from, if it carries a payload, and whether it was signaling."""
    x = c.source
    if not x.is_nan or x.payload is None:
        return None
    # payload = T / 2^t, quiet bit first (IEEE 754-2019 §6.2.1): signaling when it is clear
    return x, x.payload < Fraction(1, 2) and x.payload != 0


def source_row(c: Comparison) -> FormatRow | None:
    """A row holding the NaN source itself (same sign, class and payload), if any."""
    if c.source.payload is None:
        return None
    for row in c.rows:
        if row.stored == c.source and row.stored.is_nan:
            return row
    return None


def payload_fate(c: Comparison, row: FormatRow) -> PayloadFate | None:
    """How a NaN source's payload (``ExactValue.payload``) came through into ``row``'s format
    (a cast keeps the payload's top bits and quiets it: IEEE 754-2019 §6.2.3, ``encode``):
    kept, quieted, cut to its top bits, or lost. None when the source is no NaN with a payload
    or ``row`` holds the source itself."""
    src = _source_nan(c)
    if src is None or row.stored == c.source:
        return None
    x, signaling = src
    assert x.payload is not None
    if not row.stored.is_nan:
        return PayloadFate("lost", "payload lost: no NaN in this format")
    if row.stored.payload is None:
        return PayloadFate("lost", "payload lost: a single NaN in this format")
    half = Fraction(1, 2)
    want = x.payload % half  # the payload below the quiet bit, as a fraction of the field
    got = row.stored.payload % half
    quieted = signaling and row.kind == CodeClass.QUIET_NAN
    lead = "quieted, " if quieted else ""
    if got == want:
        return PayloadFate("quieted" if quieted else "kept", f"{lead}payload kept")
    t = row.format.significand_bits
    kept_top = Fraction(int(want * (1 << t)), 1 << t)  # its top t - 1 bits below the quiet bit
    if got == kept_top:
        return PayloadFate("cut", f"{lead}payload cut to its top {t - 1} bits")
    return PayloadFate("lost", f"{lead}payload lost")


def nan_text(x: ExactValue, row: FormatRow | None) -> str:
    """A NaN in words: "quiet NaN, payload 0x0" / "signaling NaN, payload 0x101" (a row's
    code), "NaN (the one NaN of this format)", or for an input without a row "NaN"."""
    sign = "-" if x.negative else ""
    if row is not None and row.kind in (CodeClass.QUIET_NAN, CodeClass.SIGNALING_NAN):
        if row.format.specials != "ieee":
            return f"{sign}NaN (the one NaN of this format)"
        word = WORDS["quiet"] if row.kind == CodeClass.QUIET_NAN else WORDS["signaling"]
        return f"{sign}{word}, {WORDS['payload']} {int(row.fields.payload):#x}"
    if x.payload is None:
        return f"{sign}NaN (no payload given)"
    quiet = x.payload >= Fraction(1, 2) or x.payload == 0
    return f"{sign}{WORDS['quiet'] if quiet else WORDS['signaling']} with a {WORDS['payload']}"


def row_outcome(row: FormatRow, source: ExactValue | None = None) -> str:
    """The outcome key (``vocabulary.OUTCOMES``) naming what the cast did to this row;
    ``source`` is the value the row was rounded from (``Comparison.source``), when known."""
    x = row.stored
    src = source
    if src is not None and src.is_zero and not row.format.has_zero:
        return "nan"  # zero into a format without zero (E8M0): its NaN
    if row.not_representable and not row.format.signed and x.is_nan and not (
            src is not None and src.is_nan):
        return "invalid"  # a negative value (or -0, or -Inf) sent to an unsigned format
    if row.overflowed and (src is None or src.is_finite):
        return "overflow"
    if row.underflowed:
        return "underflow"
    if src is not None and src.is_nan or x.is_nan:
        return "nan"
    if src is not None and src.is_inf or x.is_inf:
        return "inf"
    if row.subnormal:
        return "subnormal"
    if row.abs_error == 0 and not row.not_representable:
        return "exact"
    return "rounded"


def _largest(f: Format) -> str:
    return f"{WORDS['largest']} {brief_number(f.max_finite)}"


def _direction(row: FormatRow) -> str:
    assert row.abs_error is not None
    err = row.abs_error
    how = "up" if err > 0 else "down"
    ulp = ""
    if row.ulp_error is not None:
        from .compare_text import format_error

        ulp = f" ({format_error(row.ulp_error)} {_ULP})"
    return f"rounded {how} by {brief_number(abs(err), digits=4)}{ulp}"


def _significant_bits(row: FormatRow) -> int:
    """Significant bits a subnormal keeps: those from its leading one down."""
    return int(row.fields.significand).bit_length()


def verdict(c: Comparison, row: FormatRow) -> tuple[str, str]:
    """(outcome key, words) for one band: what the cast did to the input in this format.

    ``"131008 → +Inf (overflow; largest finite 65504)"``, ``"→ NaN (overflow; no Inf in this
    format; largest finite 448)"``, ``"131072, rounded up by 64 (+0.0625 ULP)"``,
    ``"0.1015625, rounded up by …"``, ``"1, exact"``. The format's name is not part of it.
    """
    f = row.format
    x = c.source
    key = row_outcome(row, x)
    src = _value_words(x)
    stored = _value_words(row.stored)
    if row.stored.is_finite and not row.stored.is_zero:
        stored = brief_number(row.stored.value)
        if stored.startswith("≈"):  # long: the shortest text that reads back, marked ≈
            stored = "≈" + plain_decimal(row.shortest)
    if key == "overflow" and x.is_finite:
        if row.stored.is_inf:
            why = f"{OUTCOMES['overflow'].name}; {_largest(f)}"
        elif row.stored.is_nan:
            why = f"{OUTCOMES['overflow'].name}; no Inf in this format; {_largest(f)}"
        elif c.options.overflow == "saturate":
            why = f"{OUTCOMES['overflow'].name}, saturated to the {WORDS['largest']}"
        else:
            why = f"{OUTCOMES['overflow'].name}; {_largest(f)}, {c.options.rounding}"
        return key, f"{src} {ARROW} {stored} ({why})"
    if key == "underflow":
        if c.options.subnormals == "flush" and f.has_subnormals:
            why = f"subnormals flushed; {WORDS['normal']} {brief_number(f.smallest_normal)}"
        else:
            why = f"{WORDS['subnormal']} {brief_number(f.smallest_subnormal)}"
        return key, f"{src} {ARROW} {stored} ({OUTCOMES['underflow'].name}; {why})"
    if x.is_nan:
        if row.stored.is_nan:
            fate = payload_fate(c, row)
            words = nan_text(row.stored, row)
            return key, words + (f" ({fate.text})" if fate is not None else "")
        return key, f"NaN {ARROW} {stored} (no NaN in this format)"
    if x.is_inf:
        if row.stored.is_inf:
            return key, f"{stored}, {OUTCOMES['exact'].name}"
        if row.stored.is_nan:
            return key, f"{src} {ARROW} NaN (no Inf in this format)"
        return key, f"{src} {ARROW} {stored} (no Inf in this format: the {WORDS['largest']})"
    if x.is_zero and not f.has_zero:
        return key, f"{src} {ARROW} {stored} (no zero in this format)"
    if key == "invalid":
        return key, f"{src} {ARROW} {stored} (no negative values in this format)"
    if row.stored.is_nan:  # e.g. a value no format can hold
        return key, f"{src} {ARROW} {nan_text(row.stored, row)}"
    if row.not_representable and x.is_zero:
        return key, f"{src} {ARROW} {stored} (no {src} in this format)"
    sub = ""
    if row.subnormal:
        n = _significant_bits(row)
        sub = f"; {OUTCOMES['subnormal'].name}: {n} significant bit{'s' if n != 1 else ''}"
    if row.abs_error is None:  # an input beyond 2^±131072: no error to state
        return key, f"{src} {ARROW} {stored}{sub}"
    if row.abs_error == 0:
        return key, f"{stored}, {OUTCOMES['exact'].name}{sub}"
    return key, f"{stored}, {_direction(row)}{sub}"


def options_text(c: Comparison, sep: str = " · ") -> str:
    """The cast options in words: rounding direction, overflow, subnormals, rounding path."""
    o = c.options
    parts = [o.rounding + (f" (seed {o.seed})" if o.rounding == "stochastic" else ""),
             f"{OUTCOMES['overflow'].name} {o.overflow}", f"subnormals {o.subnormals}",
             f"through {c.via.name} first" if c.via is not None else "one rounding"]
    return sep.join(parts)


def neighbour_text(row: FormatRow, which: str) -> str:
    """The value next below or above the stored one, with its code ("none" at the ends)."""
    n = row.next_down if which == "down" else row.next_up
    if n is None:
        return "none"
    shown = plain_decimal(n.shortest)
    if n.value.is_finite and not n.value.is_zero:
        shown = brief_number(n.value.value)
        if shown.startswith("≈"):
            shown = "≈" + plain_decimal(n.shortest)
    elif n.value.is_zero:
        shown = "-0" if n.value.negative else "0"
    return f"{shown} (0x{n.code:0{(row.format.bits + 3) // 4}x})"
