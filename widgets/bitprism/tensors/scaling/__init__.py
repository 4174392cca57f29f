"""Scale choice: which power-of-two scale (per tensor, per channel, per block) to cast with.

* ``joint``: one pass over the data, a histogram by binary exponent, significand bits and sign,
  from which every power-of-two scale can be judged without casting again;
* ``outcomes``: what the cast does to each bin at each exponent (the real encoder, once per
  bin); ``quantile``: the relative-error p99 from the fine bins;
* ``sweep``: every candidate scale's overflow, underflow, subnormal, p99 and SQNR;
* ``rules``: the amax rule and MX v1.0's shared exponent, exactly;
* ``advice``: ``suggest_scale`` and ``ScaleAdvice``; ``groups``: per-channel and per-block
  scales; ``compare``: ``compare_scaling``; ``replay``: ``replay_scaling`` (delayed scaling).
"""

from __future__ import annotations

from .advice import GRANULARITIES, ScaleAdvice, suggest_scale
from .compare import ScalingComparison, ScalingRow, compare_scaling
from .replay import ScalingReplay, replay_scaling
from .sweep import OBJECTIVES, ScaleSweep

__all__ = [
    "GRANULARITIES",
    "OBJECTIVES",
    "ScaleAdvice",
    "ScaleSweep",
    "ScalingComparison",
    "ScalingReplay",
    "ScalingRow",
    "compare_scaling",
    "replay_scaling",
    "suggest_scale",
]
