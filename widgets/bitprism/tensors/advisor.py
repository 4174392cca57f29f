"""Scale advice: ``suggest_scale`` and ``ScaleAdvice`` (they live in ``tensors.scaling``).

Kept as the name the rest of the package and earlier code import them by.
"""

from __future__ import annotations

from .scaling.advice import ScaleAdvice, suggest_scale

__all__ = ["ScaleAdvice", "suggest_scale"]
