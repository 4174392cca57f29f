"""What the cast traits every bitprism widget shares mean: formats and cast options.

Both widgets hold ``formats``, ``rounding``, ``overflow``, ``subnormals`` and ``seed`` as
traits (strings and ints, so they save, sync and display as they are); this mixin turns them
into the objects the core takes, in one place.
"""

from __future__ import annotations

from typing import Any

from ..formats import Format, get_format
from ..numerics.options import CastOptions

__all__ = ["CastSettings"]


class CastSettings:
    """Mixin for widgets with ``formats``, ``rounding``, ``overflow``, ``subnormals`` and
    ``seed`` traits."""

    formats: Any
    rounding: Any
    overflow: Any
    subnormals: Any
    seed: Any

    @property
    def format_objects(self) -> list[Format]:
        """The formats shown, as ``Format`` objects."""
        return [get_format(f) for f in self.formats]

    @property
    def options(self) -> CastOptions:
        """The cast options the traits hold."""
        return CastOptions(self.rounding, self.overflow, self.subnormals, self.seed)
