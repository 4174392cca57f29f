"""How a probe opens a captured array in a ``TensorPrism`` without importing the widgets.

The widgets live in ``ui``, above this layer, so a probe may not import them. The package root
(which may import every layer) installs one function here when it is imported
(``install_opener``); ``open_view`` calls it. The same pattern as ``display.install_loader``.
"""

from __future__ import annotations

from typing import Any, Callable, Sequence

import numpy as np

from ..errors import BitprismError
from ..formats import Format

__all__ = ["Opener", "install_opener", "open_view"]

Opener = Callable[[np.ndarray, Sequence[Format], "tuple[int, ...] | None"], Any]
_opener: Opener | None = None


def install_opener(opener: Opener) -> None:
    """``opener(array, formats, selected)`` returns a widget showing ``array`` (the package
    root installs one that builds a ``TensorPrism``)."""
    global _opener
    _opener = opener


def open_view(array: np.ndarray, formats: Sequence[Format], selected: tuple[int, ...] | None) -> Any:
    """A ``TensorPrism`` of ``array`` with ``formats``, the cell ``selected`` chosen."""
    if _opener is None:
        raise BitprismError(
            "opening a TensorPrism needs the widgets, which the package root installs: "
            "import bitprism first"
        )
    return _opener(array, formats, selected)
