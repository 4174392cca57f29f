"""Figures of the scale choice: the sweep (with the choice marked) and the delayed-scaling replay.

* ``sweep_plot``: three panels over the candidate exponents, sharing the axis: the SQNR over the
  values whose result is finite (candidates that make a finite value NaN or Inf drawn hollow:
  no objective may choose them), the relative-error p99, and the share of the tensor that
  overflows, underflows to zero, lands subnormal or is made NaN/Inf, in the outcome colours of
  ``render.vocabulary``. Vertical lines mark the choice (solid), the amax rule (dashed) and no
  scaling (dotted), each named in the legend, so colour is never the only cue.
* ``advice_plot``: the sweep of a ``ScaleAdvice`` with its marks and its one-line reason, or
  (``kind="range"``) its range chart with the bands shifted by the scale.
* ``replay_plot``: per step, ``log2`` of the step's amax against the largest magnitude the
  step's scale lets through (``max_finite / scale``): a spike above the line overflows; below,
  the overflow and underflow counts.

matplotlib is imported when a figure is drawn, never at module import.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from ..errors import BitprismError
from ..render.vocabulary import FIELDS, OUTCOMES
from .range_chart import advice_range_chart

__all__ = ["advice_plot", "replay_plot", "sweep_plot"]

_LINE = FIELDS["sign"].colour.fill  # ink-violet, as the range chart's bars
_P99 = FIELDS["significand"].colour.fill  # teal
_KINDS = (
    ("overflow", OUTCOMES["overflow"].light.fill, "overflow"),
    ("underflow", OUTCOMES["underflow"].light.fill, "underflow to zero"),
    ("subnormal", OUTCOMES["subnormal"].light.fill, "subnormal"),
    ("nonfinite", OUTCOMES["nan"].light.fill, "made NaN/Inf"),
)


def sweep_plot(
    sweep: Any,
    *,
    chosen: int | None = None,
    rule: int | None = None,
    title: str | None = None,
    width: float = 8.0,
    height: float = 6.0,
) -> Any:
    """Draw a ``ScaleSweep``; returns the matplotlib ``Figure``.

    Args:
        chosen, rule: candidate exponents to mark as the choice and the amax rule.
        title: the figure's title (default: the format and the candidate range).
    """
    from matplotlib.figure import Figure

    ks = np.asarray(sweep.exponents)
    relative = sweep.relative_to != "none"
    fig = Figure(figsize=(width, height), layout="constrained")
    ax_s, ax_p, ax_f = fig.subplots(3, 1, sharex=True, gridspec_kw={"height_ratios": [3, 2, 2]})
    ok = sweep.nonfinite == 0
    finite = np.isfinite(sweep.sqnr_db)
    ax_s.plot(ks[ok & finite], sweep.sqnr_db[ok & finite], "o-", color=_LINE, ms=3, lw=1,
              label="SQNR (no value made NaN/Inf)")
    bad = ~ok & finite
    if bad.any():
        ax_s.plot(ks[bad], sweep.sqnr_db[bad], "o", mfc="none", color=_LINE, ms=4, lw=0,
                  label="SQNR of the rest (some made NaN/Inf)")
    ax_s.set_ylabel("SQNR dB", fontsize=8)
    p99 = sweep.rel_error_p99
    has = np.isfinite(p99) & (p99 > 0)
    ax_p.plot(ks[has], p99[has], "s-", color=_P99, ms=2.5, lw=1, label="relative error p99")
    if has.any():
        ax_p.set_yscale("log")
    ax_p.set_ylabel("rel p99", fontsize=8)
    for kind, colour, label in _KINDS:
        share = getattr(sweep, kind) / max(1, sweep.size) * 100
        shown = share > 0
        if shown.any():  # NaN/Inf made often equals overflow: dashed, with larger marks
            style: dict[str, Any] = (
                {"ls": "--", "marker": "x", "ms": 4} if kind == "nonfinite" else {"marker": ".", "ms": 3})
            ax_f.plot(ks[shown], share[shown], color=colour, lw=1, label=label, **style)
    ax_f.set_yscale("log")
    ax_f.set_ylabel("% of tensor", fontsize=8)
    ax_f.set_xlabel("offset k from each group's base scale" if relative else "scale 2^k: k", fontsize=8)
    marks = [(chosen, "-", "choice"), (rule, "--", "amax rule"),
             (None if relative else 0, ":", "no scaling")]
    for ax in (ax_s, ax_p, ax_f):
        for k, dash, label in marks:
            if k is not None and ks.size and ks[0] <= k <= ks[-1]:
                ax.axvline(k, color="#1f2328", ls=dash, lw=0.9, label=label if ax is ax_s else None)
        ax.tick_params(labelsize=7)
        ax.grid(alpha=0.25, lw=0.5)
    ax_s.legend(fontsize=7, loc="upper left", bbox_to_anchor=(1.01, 1.0))
    if ax_f.get_legend_handles_labels()[0]:
        ax_f.legend(fontsize=7, loc="upper left", bbox_to_anchor=(1.01, 1.0))
    fig.suptitle(title or f"scale sweep: {sweep.format.name}, {len(sweep)} candidates", fontsize=9)
    return fig


def advice_plot(advice: Any, kind: str = "sweep", **options: Any) -> Any:
    """A ``ScaleAdvice``'s figure: ``kind="sweep"`` (default) the sweep with its choice and the
    amax rule marked; ``kind="range"`` the range chart with each format's bands unscaled and
    shifted by the advised scale (``range_chart.advice_range_chart``)."""
    if kind == "range":
        return advice_range_chart(advice, **options)
    if kind != "sweep":
        raise BitprismError(f'kind must be "sweep" or "range", got {kind!r}')
    if advice.sweep is None:
        raise BitprismError(f"this advice has no sweep to draw ({advice.message})")
    if advice.scale is None:  # per-group scales: the sweep's 0 is every group's base rule
        options.setdefault("rule", 0 if advice.objective == "amax" else None)
    else:
        options.setdefault("chosen", advice.exponent)
        options.setdefault("rule", advice.amax_exponent)
    options.setdefault("title", f"{advice.format.name} per {advice.granularity}: {advice.message}")
    return sweep_plot(advice.sweep, **options)


def replay_plot(replay: Any, *, width: float = 8.0, height: float = 4.5) -> Any:
    """Draw a ``ScalingReplay``; returns the matplotlib ``Figure``."""
    from matplotlib.figure import Figure

    steps = np.arange(replay.steps)
    fig = Figure(figsize=(width, height), layout="constrained")
    ax_a, ax_c = fig.subplots(2, 1, sharex=True, gridspec_kw={"height_ratios": [3, 2]})
    top = float(replay.format.max_finite)
    with np.errstate(divide="ignore"):
        amax = np.log2(np.where(replay.amax > 0, replay.amax, np.nan))
    limit = np.log2(top) - replay.exponents
    ax_a.step(steps, limit, where="mid", color="#1f2328", lw=1, label="largest |x| the scale lets through")
    over = replay.overflow > 0
    ax_a.plot(steps[~over], amax[~over], "o", color=_LINE, ms=3, label="step amax")
    if over.any():
        ax_a.plot(steps[over], amax[over], "^", color=OUTCOMES["overflow"].light.fill, ms=6,
                  label="step amax, overflows")
    if replay.first_overflow is not None:
        ax_a.axvline(replay.first_overflow, color="#1f2328", ls="--", lw=0.8,
                     label=f"first overflow (step {replay.first_overflow})")
    ax_a.set_ylabel("log2 |x|", fontsize=8)
    ax_a.legend(fontsize=7, loc="upper left", bbox_to_anchor=(1.01, 1.0))
    ax_c.bar(steps - 0.2, replay.overflow, width=0.4, color=OUTCOMES["overflow"].light.fill, label="overflow")
    ax_c.bar(steps + 0.2, replay.underflow, width=0.4, color=OUTCOMES["underflow"].light.fill,
             label="underflow to zero")
    ax_c.set_ylabel("values", fontsize=8)
    ax_c.set_xlabel("step", fontsize=8)
    ax_c.legend(fontsize=7, loc="upper left", bbox_to_anchor=(1.01, 1.0))
    for ax in (ax_a, ax_c):
        ax.tick_params(labelsize=7)
        ax.grid(alpha=0.25, lw=0.5)
    fig.suptitle(
        f"delayed scaling in {replay.format.name}: history {replay.history}, margin {replay.margin}",
        fontsize=9,
    )
    return fig
