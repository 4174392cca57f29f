"""The trace timeline: each operation's largest finite magnitude, against each format's largest
finite value, with the first events marked; with a shadow, a second panel of each output's
relative error against the float64 shadow.

x is the operation's index; y is ``log2`` of the output's largest finite magnitude (an
operation with none, e.g. all NaN, is left out). Each format's largest finite value is a dashed
line in the overflow colour of ``render.vocabulary``; a vertical line marks each first event,
labelled with its words. matplotlib is imported when a figure is drawn.
"""

from __future__ import annotations

import math
from typing import Any

from ..render.vocabulary import FIELDS, OUTCOMES

__all__ = ["trace_timeline"]

_EVENT_COLOUR = {"nan": "nan", "inf": "inf", "overflow": "overflow", "underflow": "underflow"}
_WORDS = {"nan": "NaN born", "inf": "Inf born", "overflow": "overflow",
          "underflow": "underflow"}
_POINT = FIELDS["sign"].colour.fill  # ink-violet, as the range chart's bars
_SHADOW = FIELDS["significand"].colour.fill


def trace_timeline(t: Any, *, width: float = 9.0, height: float = 3.4) -> Any:
    """Draw the timeline of a ``Trace``; returns the matplotlib ``Figure``."""
    from matplotlib.figure import Figure

    panels = 2 if t.shadow else 1
    fig = Figure(figsize=(width, height * (1.55 if panels == 2 else 1.0)), layout="constrained")
    axes = fig.subplots(panels, 1, sharex=True, squeeze=False)[:, 0]
    ax = axes[0]
    xs = [r.index for r in t.ops if r.amax > 0 and math.isfinite(r.amax)]
    ys = [math.log2(r.amax) for r in t.ops if r.amax > 0 and math.isfinite(r.amax)]
    ax.plot(xs, ys, marker="o", ms=3, lw=1, color=_POINT, label="largest finite |output|")
    for f in t.formats:
        top = math.log2(float(f.max_finite))
        if not ys or top > max(ys) + 40:
            continue  # far above the data: it would only squash the axis
        ax.axhline(top, ls="--", lw=0.9, color=OUTCOMES["overflow"].light.fill, alpha=0.8)
        ax.text(1.0, top, f" {f.name} largest", transform=ax.get_yaxis_transform(),
                fontsize=7, va="center", ha="left", clip_on=False)
    marks: dict[int, list[tuple[str, str | None, Any]]] = {}
    for event, fmt, rec in t.first_events():
        marks.setdefault(rec.index, []).append((event, fmt, rec))
    last = len(t.ops) - 1
    for index, found in marks.items():
        colour = OUTCOMES[_EVENT_COLOUR[found[0][0]]].light.fill
        for a in axes:
            a.axvline(index, color=colour, lw=1.2, alpha=0.85)
        rec = found[0][2]
        words = ", ".join(f"{_WORDS[e]}{' ' + f if f else ''}" for e, f, _ in found)
        ax.text(index, 0.98, f" {words}: {rec.name} ({rec.location}) ",
                transform=ax.get_xaxis_transform(), rotation=90, fontsize=7, va="top",
                ha="right" if index == last and index > 0 else "left", color=colour)
    from matplotlib.ticker import MaxNLocator

    ax.xaxis.set_major_locator(MaxNLocator(integer=True))
    ax.set_ylabel("log2 largest |x|", fontsize=8)
    ax.tick_params(labelsize=7)
    if t.shadow:
        for attr, style, words in (("shadow_max_rel", "-", "largest"),
                                   ("shadow_mean_rel", "--", "mean")):
            pts = [(r.index, getattr(r, attr)) for r in t.ops if getattr(r, attr)]
            finite = [(x, y) for x, y in pts if math.isfinite(y)]
            if finite:
                axes[1].semilogy([p[0] for p in finite], [p[1] for p in finite], marker="o",
                                 ms=3, lw=1, ls=style, color=_SHADOW, label=words)
        lost = [r.index for r in t.ops if r.shadow_max_rel is not None and
                not math.isfinite(r.shadow_max_rel)]
        for x in lost:  # an output that is not finite where the shadow is
            axes[1].axvline(x, color=OUTCOMES["inf"].light.fill, lw=0.8, ls=":")
        axes[1].set_ylabel("relative error\nagainst the float64 shadow", fontsize=8)
        axes[1].tick_params(labelsize=7)
        if axes[1].get_legend_handles_labels()[0]:
            axes[1].legend(fontsize=7, loc="best")
    if 0 < len(t.ops) <= 30:  # few enough to name each operation under its tick
        axes[-1].set_xticks([r.index for r in t.ops],
                            [f"{r.index} {r.name}" for r in t.ops], rotation=45, ha="right")
    axes[-1].set_xlabel("operation", fontsize=8)
    what = f"emulated in {t.emulate.name}" if t.emulate is not None else "as written"
    fig.suptitle(f"trace of {t.function} ({t.backend}, {what}): {len(t.ops)} operations",
                 fontsize=9)
    return fig
