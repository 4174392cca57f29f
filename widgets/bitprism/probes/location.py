"""Where in the person's code an intercepted operation was called: the first frame outside
numpy, torch and bitprism."""

from __future__ import annotations

import os
import sys

import numpy as np

__all__ = ["caller", "skip_library"]

_SKIP: list[str] = [
    os.path.dirname(os.path.dirname(os.path.abspath(__file__))) + os.sep,  # bitprism
    os.path.dirname(os.path.abspath(np.__file__)) + os.sep,
]
_SKIP_NAMES = ("<__array_function__", "<frozen ")


def skip_library(module_file: str) -> None:
    """Leave the frames of one more library's package out (torch, when a torch trace runs)."""
    folder = os.path.dirname(os.path.abspath(module_file)) + os.sep
    if folder not in _SKIP:
        _SKIP.append(folder)


def caller() -> tuple[str, int, str]:
    """(filename, line, function) of the first frame outside the skipped libraries."""
    skip = tuple(_SKIP)
    frame = sys._getframe(1)
    while frame is not None:
        name = frame.f_code.co_filename
        if not name.startswith(skip) and not name.startswith(_SKIP_NAMES):
            return name, frame.f_lineno, frame.f_code.co_name
        frame = frame.f_back  # type: ignore[assignment]
    return "<unknown>", 0, "<unknown>"
