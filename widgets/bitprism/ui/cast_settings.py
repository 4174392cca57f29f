"""What the cast traits every bitprism widget shares mean: formats and cast options.

Both widgets hold ``formats``, ``rounding``, ``overflow``, ``subnormals`` and ``seed`` as
traits (strings and ints, so they save, sync and display as they are); this mixin turns them
into the objects the core takes, and checks them, in one place. A widget takes only what its
case file can hold (``case_codecs``), so it never writes a file it cannot read back.
"""

from __future__ import annotations

from typing import Any, Sequence

from traitlets import validate

from ..errors import BitprismError
from ..formats import FORMATS, Format, get_format
from ..numerics.options import CastOptions, check_option
from .case_codecs import MAX_FORMATS, check_storable_format
from .refusal import LastGoodView, check_seed

__all__ = ["CastSettings", "check_formats", "formats_argument"]


def formats_argument(formats: Any) -> list[Any] | None:
    """A widget constructor's ``formats`` as a list (None: the default formats)."""
    if formats is None:
        return None
    if isinstance(formats, (str, Format)) or not hasattr(formats, "__iter__"):
        raise BitprismError(f"formats must be a list of format names or Formats; got {formats!r}")
    return list(formats)


def check_formats(specs: Any, owner: str) -> list[Any]:
    """The ``formats`` trait's value for ``specs``: built-in formats by canonical name, formats
    of one's own as ``Format`` objects; repeats dropped. Refuses an empty list, more than
    ``MAX_FORMATS``, two formats with one name and a format a case file could not hold."""
    if isinstance(specs, (str, Format)) or not isinstance(specs, Sequence):
        raise BitprismError(f"formats must be a list of format names or Formats; got {specs!r}")
    out: list[Any] = []
    seen: dict[str, Format] = {}
    for i, spec in enumerate(specs):
        f = get_format(spec)
        if seen.get(f.name) == f:
            continue
        if f.name in seen:
            raise BitprismError(
                f"formats[{i}]: two different formats are named {f.name!r}; rename one")
        check_storable_format(f, f"formats[{i}]")
        seen[f.name] = f
        out.append(f.name if FORMATS.get(f.name) == f else f)
    if not out:
        raise BitprismError(f"a {owner} needs at least one format; got {specs!r}")
    if len(out) > MAX_FORMATS:
        raise BitprismError(f"a {owner} shows at most {MAX_FORMATS} formats; got {len(out)}")
    return out


class CastSettings(LastGoodView):
    """Mixin for widgets with ``formats``, ``rounding``, ``overflow``, ``subnormals`` and
    ``seed`` traits (refusals and the last good view from ``LastGoodView``)."""

    formats: Any
    rounding: Any
    overflow: Any
    subnormals: Any
    seed: Any

    @property
    def format_objects(self) -> list[Format]:
        """The formats shown, as ``Format`` objects."""
        return [get_format(f) for f in self.formats]

    def shown_format(self, spec: Any) -> Format:
        """``spec`` as a format: a shown format's name (custom ones included) first, then any
        name, alias, dtype or ``Format`` bitprism knows."""
        if isinstance(spec, str):
            for f in self.format_objects:
                if f.name == spec:
                    return f
        return get_format(spec)

    @property
    def options(self) -> CastOptions:
        """The cast options the traits hold."""
        return CastOptions(self.rounding, self.overflow, self.subnormals, self.seed)

    @validate("rounding", "overflow", "subnormals")
    def _valid_option(self, proposal: Any) -> str:
        try:
            return check_option(proposal["trait"].name, proposal["value"])
        except Exception as exc:
            self._refuse_value(exc)

    @validate("seed")
    def _valid_seed(self, proposal: Any) -> int | None:
        try:
            return check_seed(proposal["value"])
        except Exception as exc:
            self._refuse_value(exc)
