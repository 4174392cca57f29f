"""Floating-point format descriptions and the registry of built-in formats.

A format is one frozen record of its few free parameters (exponent width, trailing significand
width, bias, the special-value convention, signedness); every other property is derived from
them exactly, with the formula beside it. Built-in formats are instances of the same record as
the ones a person defines, so a custom layout works everywhere a built-in one does.
"""

from __future__ import annotations

import difflib
from dataclasses import dataclass, field
from fractions import Fraction
from functools import cached_property
from typing import Any, Literal, Mapping, Union

import numpy as np

from . import ml_types
from .errors import BitprismError

__all__ = [
    "FORMATS",
    "Format",
    "FormatAlias",
    "FormatLike",
    "SPECIALS",
    "Specials",
    "format_aliases",
    "format_key",
    "format_of_dtype",
    "get_format",
]

Specials = Literal["ieee", "fn", "fnuz", "finite"]
SPECIALS: tuple[str, ...] = ("ieee", "fn", "fnuz", "finite")
_SPECIALS_HELP = {
    "ieee": "Inf and NaNs in the all-ones exponent (IEEE 754)",
    "fn": "no Inf; NaN only where exponent and significand are all ones",
    "fnuz": "no Inf, no negative zero; the negative-zero pattern is the single NaN",
    "finite": "every pattern is a finite number",
}

# float64 is the exact carrier for every decoded value, so a format must fit inside it.
_F64_EMAX = 1023
_F64_EMIN = -1022
_F64_T = 52


@dataclass(frozen=True)
class Format:
    """A binary floating-point format: ``(-1)^s * 2^(E - bias) * 1.F`` plus its special codes.

    Attributes:
        name: display name (canonical for built-ins).
        exponent_bits: width ``w`` of the biased exponent field, 1..11.
        significand_bits: width ``t`` of the trailing significand field, 0..52.
        bias: exponent bias; ``None`` means the IEEE default ``2**(w-1) - 1``.
        specials: ``"ieee"``, ``"fn"``, ``"fnuz"`` or ``"finite"`` (see ``SPECIALS``).
        signed: whether a sign bit exists.
        has_zero: ``False`` makes the all-zero exponent an ordinary binade with no zero and no
            subnormals, as in the E8M0 scale format of the OCP Microscaling specification.
        storage_bits: width of the container the format is stored in (``None``: its own width);
            tf32 keeps its 19 bits in a 32-bit container.
        dtype_name: the numpy / ml_dtypes dtype with exactly this layout, when one exists.
    """

    name: str
    exponent_bits: int
    significand_bits: int
    bias: int = None  # type: ignore[assignment]  # resolved in __post_init__
    specials: Specials = "ieee"
    signed: bool = True
    has_zero: bool = True
    storage_bits: int | None = None
    dtype_name: str | None = field(default=None, compare=False)

    def __post_init__(self) -> None:
        w, t = self.exponent_bits, self.significand_bits
        if not isinstance(self.name, str) or not self.name:
            raise BitprismError(f"Format name must be a non-empty string, got {self.name!r}")
        for arg, value, lo, hi in (("exponent_bits", w, 1, 11), ("significand_bits", t, 0, 52)):
            if isinstance(value, bool) or not isinstance(value, int) or not lo <= value <= hi:
                raise BitprismError(
                    f"Format {self.name!r}: {arg} must be an integer in {lo}..{hi}, got {value!r}"
                )
        if self.bias is None:
            object.__setattr__(self, "bias", (1 << (w - 1)) - 1)
        elif isinstance(self.bias, bool) or not isinstance(self.bias, int):
            raise BitprismError(f"Format {self.name!r}: bias must be an integer, got {self.bias!r}")
        if self.specials not in SPECIALS:
            raise BitprismError(
                f"Format {self.name!r}: specials must be one of {', '.join(SPECIALS)}; "
                f"got {self.specials!r}"
            )
        if self.specials == "ieee" and t == 0:
            raise BitprismError(
                f"Format {self.name!r}: 'ieee' specials need at least one trailing significand "
                "bit to tell NaN from Inf; use 'fn' or 'finite' for significand_bits=0"
            )
        if self.specials == "fnuz" and not self.signed:
            raise BitprismError(
                f"Format {self.name!r}: 'fnuz' puts NaN at the negative-zero pattern, which "
                "needs a sign bit; use signed=True or another specials convention"
            )
        if self.specials == "fn" and w + t == 1 and self.has_zero:
            raise BitprismError(f"Format {self.name!r}: 'fn' with one bit leaves no nonzero value")
        if not self.has_zero and self.signed:
            raise BitprismError(
                f"Format {self.name!r}: has_zero=False is supported for unsigned formats only"
            )
        if self.emax > _F64_EMAX or self.emin < _F64_EMIN:
            low, high = self._bias_bounds()
            if low > high:
                raise BitprismError(
                    f"Format {self.name!r}: {w} exponent bits span more binades than float64 "
                    f"holds ({_F64_EMIN}..{_F64_EMAX}) with specials={self.specials!r}; "
                    "no bias fits; use fewer exponent bits"
                )
            raise BitprismError(
                f"Format {self.name!r}: exponent range [{self.emin}, {self.emax}] does not fit "
                f"in float64's [{_F64_EMIN}, {_F64_EMAX}]; choose a bias in "
                f"{self._bias_range_text()}"
            )
        if self.storage_bits is not None and self.storage_bits < self.bits:
            raise BitprismError(
                f"Format {self.name!r}: storage_bits={self.storage_bits!r} is smaller than the "
                f"{self.bits} bits of the layout"
            )

    def _bias_bounds(self) -> tuple[int, int]:
        top = self.max_biased_exponent
        bottom = 1 if self.has_zero else 0
        return top - _F64_EMAX, bottom - _F64_EMIN

    def _bias_range_text(self) -> str:
        low, high = self._bias_bounds()
        return f"{low}..{high}"

    # ----- widths -------------------------------------------------------------------------
    @property
    def sign_bits(self) -> int:
        return 1 if self.signed else 0

    @cached_property
    def bits(self) -> int:
        """Total width of the layout: sign + exponent + trailing significand."""
        return self.sign_bits + self.exponent_bits + self.significand_bits

    @cached_property
    def container_bits(self) -> int:
        """Width of the unsigned integer dtype that holds one code (8, 16, 32 or 64)."""
        width = self.storage_bits or self.bits
        return next(b for b in (8, 16, 32, 64) if b >= width)

    @cached_property
    def code_dtype(self) -> np.dtype:
        return np.dtype(f"uint{self.container_bits}")

    @property
    def t(self) -> int:
        return self.significand_bits

    @cached_property
    def precision(self) -> int:
        """p = t + 1 significant bits, counting the implicit leading bit."""
        return self.significand_bits + 1

    # ----- field masks --------------------------------------------------------------------
    @cached_property
    def significand_mask(self) -> int:
        return (1 << self.significand_bits) - 1

    @cached_property
    def exponent_field_max(self) -> int:
        """All-ones biased exponent, 2^w - 1."""
        return (1 << self.exponent_bits) - 1

    @cached_property
    def sign_mask(self) -> int:
        return (1 << (self.bits - 1)) if self.signed else 0

    @cached_property
    def magnitude_mask(self) -> int:
        return (1 << (self.exponent_bits + self.significand_bits)) - 1

    # ----- exponent range -----------------------------------------------------------------
    @cached_property
    def max_biased_exponent(self) -> int:
        """Largest biased exponent of a finite number: 2^w - 2 for 'ieee', else 2^w - 1
        (unless the all-ones exponent holds nothing but the NaN, as in 'fn' with t = 0)."""
        if self.specials == "ieee" or (self.specials == "fn" and self.significand_bits == 0):
            return self.exponent_field_max - 1
        return self.exponent_field_max

    @cached_property
    def emax(self) -> int:
        """Exponent of the largest binade: max biased exponent - bias."""
        return self.max_biased_exponent - self.bias

    @cached_property
    def emin(self) -> int:
        """Exponent of the smallest normal binade: 1 - bias (0 - bias without zero)."""
        return (1 if self.has_zero else 0) - self.bias

    # ----- special values -----------------------------------------------------------------
    @property
    def has_inf(self) -> bool:
        return self.specials == "ieee"

    @property
    def has_nan(self) -> bool:
        return self.specials != "finite"

    @property
    def has_negative_zero(self) -> bool:
        return self.signed and self.has_zero and self.specials != "fnuz"

    @property
    def has_subnormals(self) -> bool:
        return self.has_zero and self.significand_bits > 0

    @cached_property
    def inf_code(self) -> int | None:
        """Code of +Inf (exponent all ones, significand zero), or None."""
        return self.exponent_field_max << self.significand_bits if self.has_inf else None

    @cached_property
    def nan_code(self) -> int | None:
        """The canonical (quiet, positive where signed) NaN code, or None.

        'ieee': exponent all ones and the first trailing bit set (754-2008 §6.2.1 quiet NaN);
        'fn': every exponent and significand bit set; 'fnuz': the negative-zero pattern.
        """
        if self.specials == "ieee":
            return self.inf_code | (1 << (self.significand_bits - 1))  # type: ignore[operator]
        if self.specials == "fn":
            return self.magnitude_mask
        if self.specials == "fnuz":
            return self.sign_mask
        return None

    @cached_property
    def max_code(self) -> int:
        """Code of the largest finite value."""
        if self.specials == "ieee":
            return (self.max_biased_exponent << self.significand_bits) | self.significand_mask
        if self.specials == "fn":
            return self.magnitude_mask - 1
        return self.magnitude_mask

    @cached_property
    def max_finite(self) -> Fraction:
        """Largest finite value, (2 - 2^-t) * 2^emax (less one ulp for 'fn' with t > 0)."""
        return self.code_value(self.max_code)

    @cached_property
    def smallest_normal(self) -> Fraction:
        """2^emin."""
        return Fraction(2) ** self.emin

    @cached_property
    def smallest_subnormal(self) -> Fraction:
        """2^(emin - t); equal to the smallest normal when the format has no subnormals."""
        if not self.has_subnormals:
            return self.smallest_normal
        return Fraction(2) ** (self.emin - self.significand_bits)

    @cached_property
    def epsilon(self) -> Fraction:
        """ULP of 1: 2^-t."""
        return Fraction(1, 1 << self.significand_bits)

    # ----- exact value of one code (the scalar reference used by the vector paths) ------
    def code_value(self, code: int) -> Fraction:
        """Exact value of a finite code; raises for NaN and Inf codes."""
        kind = self.classify(code)
        if kind in ("nan", "inf"):
            raise BitprismError(f"code {code:#x} of {self.name} is {kind}, not a finite value")
        sign = -1 if code & self.sign_mask else 1
        e_field = (code >> self.significand_bits) & self.exponent_field_max
        frac = code & self.significand_mask
        if e_field == 0 and self.has_zero:
            return sign * Fraction(frac) * Fraction(2) ** (self.emin - self.significand_bits)
        return (
            sign
            * Fraction((1 << self.significand_bits) | frac)
            * Fraction(2) ** (e_field - self.bias - self.significand_bits)
        )

    def classify(self, code: int) -> str:
        """'nan', 'inf' or 'finite' for one code (the full class lives in numerics.fields)."""
        if not isinstance(code, (int, np.integer)) or not 0 <= int(code) < (1 << self.bits):
            raise BitprismError(
                f"code for {self.name} must be an integer in 0..{(1 << self.bits) - 1:#x}, "
                f"got {code!r}"
            )
        code = int(code)
        mag = code & self.magnitude_mask
        if self.specials == "ieee":
            if mag >> self.significand_bits == self.exponent_field_max:
                return "inf" if mag & self.significand_mask == 0 else "nan"
            return "finite"
        if self.specials == "fn":
            return "nan" if mag == self.magnitude_mask else "finite"
        if self.specials == "fnuz":
            return "nan" if code == self.sign_mask else "finite"
        return "finite"

    # ----- library counterparts -----------------------------------------------------------
    @cached_property
    def dtype(self) -> np.dtype | None:
        """The numpy / ml_dtypes dtype with this layout, or None (tf32, custom formats)."""
        if self.dtype_name is None:
            return None
        return self._numpy_dtype or np.dtype(getattr(ml_types.module(), self.dtype_name))

    @cached_property
    def _numpy_dtype(self) -> np.dtype | None:
        """numpy's own dtype with this layout (float16, float32, float64), else None."""
        name = self.dtype_name
        if name is not None and name.startswith("float") and hasattr(np, name):
            base = np.dtype(getattr(np, name))
            if base.itemsize * 8 == self.bits:
                return base
        return None

    def is_dtype(self, dt: np.dtype) -> bool:
        """Whether ``dt`` is this format's numpy / ml_dtypes dtype; imports ml_dtypes only when
        something else has (before that, no dtype is one of its types)."""
        if self._numpy_dtype is not None:
            return dt == self._numpy_dtype
        return self.dtype_name is not None and ml_types.loaded() and dt == self.dtype

    @property
    def layout(self) -> str:
        """Short layout text, e.g. '1-5-10' (sign-exponent-significand)."""
        return f"{self.sign_bits}-{self.exponent_bits}-{self.significand_bits}"

    def describe(self) -> str:
        """One line for error messages and listings."""
        extra = [] if self.signed else ["unsigned"]
        if not self.has_zero:
            extra.append("no zero")
        tail = f", {', '.join(extra)}" if extra else ""
        return (
            f"{self.name} ({self.layout}, bias {self.bias}, {self.specials}{tail}; "
            f"max {float(self.max_finite):.6g})"
        )

    def __str__(self) -> str:
        return self.name

    def __format__(self, spec: str) -> str:
        """Formatted like its name, so ``f"{fmt:14}"`` pads it as it pads a string."""
        return format(self.name, spec)

    def to_params(self) -> dict[str, Any]:
        """The free parameters, JSON-friendly (what a case file stores for a custom format)."""
        return {
            "name": self.name,
            "exponent_bits": self.exponent_bits,
            "significand_bits": self.significand_bits,
            "bias": self.bias,
            "specials": self.specials,
            "signed": self.signed,
            "has_zero": self.has_zero,
            "storage_bits": self.storage_bits,
        }


def _builtin(
    name: str,
    w: int,
    t: int,
    bias: int | None = None,
    specials: Specials = "ieee",
    *,
    signed: bool = True,
    has_zero: bool = True,
    storage_bits: int | None = None,
    dtype_name: str | None = "",
) -> Format:
    return Format(
        name,
        w,
        t,
        bias,  # type: ignore[arg-type]  # None asks for the IEEE default
        specials,
        signed,
        has_zero,
        storage_bits,
        name if dtype_name == "" else dtype_name,
    )


# Display order: widest first, then the 8-bit family, then the MX element and scale formats.
# Parameters: IEEE 754-2008 Table 3.5 (binary16/32/64); OCP OFP8 rev 1.0 and the FP8 paper's
# Table 1 (E4M3 bias 7 no Inf, E5M2 bias 15 IEEE-like); OCP MX v1.0 Tables 4-7 (FP6/FP4 finite,
# E8M0 unsigned bias 127); ml_dtypes for its non-OCP variants (fnuz, b11, e3m4, e5m3fnu).
_BUILTINS: tuple[Format, ...] = (
    _builtin("float64", 11, 52),
    _builtin("float32", 8, 23),
    _builtin("tf32", 8, 10, storage_bits=32, dtype_name=None),
    _builtin("bfloat16", 8, 7),
    _builtin("float16", 5, 10),
    _builtin("float8_e5m2", 5, 2),
    _builtin("float8_e4m3fn", 4, 3, specials="fn"),
    _builtin("float8_e4m3", 4, 3),
    _builtin("float8_e3m4", 3, 4),
    _builtin("float8_e4m3fnuz", 4, 3, 8, "fnuz"),
    _builtin("float8_e5m2fnuz", 5, 2, 16, "fnuz"),
    _builtin("float8_e4m3b11fnuz", 4, 3, 11, "fnuz"),
    _builtin("float8_e5m3fnu", 5, 3, 15, "fn", signed=False),
    _builtin("float8_e8m0fnu", 8, 0, 127, "fn", signed=False, has_zero=False),
    _builtin("float6_e2m3fn", 2, 3, 1, "finite"),
    _builtin("float6_e3m2fn", 3, 2, 3, "finite"),
    _builtin("float4_e2m1fn", 2, 1, 1, "finite"),
)

FORMATS: Mapping[str, Format] = {f.name: f for f in _BUILTINS}

@dataclass(frozen=True)
class FormatAlias:
    """A short name for a built-in format.

    Attributes:
        name: the alias as looked up (``format_key`` form: lower case, ``_`` for ``-``).
        format: the canonical name of the format it resolves to.
        note: for a name that could be read as another format, what it means and where the
            other one is; None for a name with one reading.
    """

    name: str
    format: str
    note: str | None = None


_OCP_E4M3 = (
    "the OCP E4M3 without Inf (largest 448); the IEEE-style E4M3 with Inf (largest 240) is "
    "float8_e4m3"
)
# Short names in common use in papers, framework docs and code (common practice), in display
# order. What each resolves to is fixed: a script written against one version reads the same
# format in the next.
_ALIAS_TABLE: tuple[FormatAlias, ...] = (
    FormatAlias("fp64", "float64"),
    FormatAlias("f64", "float64"),
    FormatAlias("double", "float64"),
    FormatAlias("binary64", "float64"),
    FormatAlias("fp32", "float32"),
    FormatAlias("f32", "float32"),
    FormatAlias("single", "float32"),
    FormatAlias("binary32", "float32"),
    FormatAlias(
        "float",
        "float32",
        "the C float; Python's float is float64 (get_format(float) gives float64)",
    ),
    FormatAlias("tensorfloat32", "tf32"),
    FormatAlias("bf16", "bfloat16"),
    FormatAlias("fp16", "float16"),
    FormatAlias("f16", "float16"),
    FormatAlias("half", "float16"),
    FormatAlias("binary16", "float16"),
    FormatAlias("e5m2", "float8_e5m2"),
    FormatAlias("fp8_e5m2", "float8_e5m2"),
    FormatAlias("e4m3", "float8_e4m3fn", _OCP_E4M3),
    FormatAlias("e4m3fn", "float8_e4m3fn"),
    FormatAlias("fp8_e4m3", "float8_e4m3fn", _OCP_E4M3),
    FormatAlias(
        "fp8",
        "float8_e4m3fn",
        _OCP_E4M3 + "; the other 8-bit formats have names of their own (float8_e5m2, ...)",
    ),
    FormatAlias("e3m4", "float8_e3m4"),
    FormatAlias("e4m3fnuz", "float8_e4m3fnuz"),
    FormatAlias("e5m2fnuz", "float8_e5m2fnuz"),
    FormatAlias("e4m3b11fnuz", "float8_e4m3b11fnuz"),
    FormatAlias("e5m3fnu", "float8_e5m3fnu"),
    FormatAlias("e8m0", "float8_e8m0fnu"),
    FormatAlias("e8m0fnu", "float8_e8m0fnu"),
    FormatAlias(
        "fp6",
        "float6_e2m3fn",
        "the OCP MX FP6 E2M3 (largest 7.5); the other FP6, E3M2 (largest 28), is fp6_e3m2",
    ),
    FormatAlias("fp6_e2m3", "float6_e2m3fn"),
    FormatAlias("e2m3", "float6_e2m3fn"),
    FormatAlias("fp6_e3m2", "float6_e3m2fn"),
    FormatAlias("e3m2", "float6_e3m2fn"),
    FormatAlias("fp4", "float4_e2m1fn"),
    FormatAlias("fp4_e2m1", "float4_e2m1fn"),
    FormatAlias("e2m1", "float4_e2m1fn"),
)
_ALIASES: dict[str, str] = {a.name: a.format for a in _ALIAS_TABLE}


def format_aliases(format: str | None = None) -> tuple[FormatAlias, ...]:
    """Every alias of the built-in formats, in display order; only those of ``format`` (a
    canonical name, alias, dtype or ``Format``) when given. An alias with a ``note`` could be
    read as another format: the note says which it is."""
    if format is None:
        return _ALIAS_TABLE
    name = get_format(format).name
    return tuple(a for a in _ALIAS_TABLE if a.format == name)


FormatLike = Union[str, Format, np.dtype, type]


def _by_dtype(spec: Any) -> Format | None:
    try:
        dt = np.dtype(spec)
    except TypeError:
        return None
    for fmt in _BUILTINS:
        if fmt.is_dtype(dt):
            return fmt
    return None


def format_of_dtype(dt: np.dtype) -> Format | None:
    """The built-in format whose values a numpy or ml_dtypes dtype holds, or None."""
    return _by_dtype(dt)


def format_key(name: str) -> str:
    """The lookup key of a format name as a person writes it: case, surrounding spaces and
    '-' against '_' do not matter ("Float8-E4M3FN" is float8_e4m3fn). The one place a name is
    normalised; block-format names (``tensors.mx``) are looked up the same way."""
    return name.strip().lower().replace("-", "_")


def get_format(spec: FormatLike) -> Format:
    """Resolve a canonical name, an alias, a numpy/ml_dtypes dtype or a Format to a Format."""
    if isinstance(spec, Format):
        return spec
    if isinstance(spec, str):
        key = format_key(spec)
        if key in FORMATS:
            return FORMATS[key]
        if key in _ALIASES:
            return FORMATS[_ALIASES[key]]
        known = sorted(set(FORMATS) | set(_ALIASES))
        close = difflib.get_close_matches(key, known, n=4, cutoff=0.5)
        hint = f"; did you mean {', '.join(repr(c) for c in close)}?" if close else ""
        raise BitprismError(
            f"unknown format {spec!r}{hint} Known formats: {', '.join(FORMATS)} "
            "(or a Format(...) of your own)"
        )
    if isinstance(spec, (np.dtype, type)):
        fmt = _by_dtype(spec)
    elif hasattr(spec, "dtype"):  # an array or numpy scalar: its dtype
        fmt = _by_dtype(spec.dtype)
    else:
        fmt = None
    if fmt is not None:
        return fmt
    raise BitprismError(
        f"format must be a name, a numpy/ml_dtypes float dtype or a Format; got {spec!r}"
    )
