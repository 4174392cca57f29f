"""The watch heat map: modules by formats, the share of each module's outputs that overflows
(left) and underflows to zero (right) in each format.

One row per module that produced outputs (gradients too, as their own rows, when the watch
recorded them), one column per format; a cell's colour grows with the share, from the page's
white to the outcome colour of ``render.vocabulary``, and holds the share as text, so the
colour is never the only cue. matplotlib is imported when a figure is drawn.
"""

from __future__ import annotations

from typing import Any

from ..render.vocabulary import OUTCOMES

__all__ = ["watch_heatmap"]


def _share(v: float) -> str:
    if v == 0:
        return "0"
    pct = 100 * v
    return f"{pct:.2g}%" if pct >= 0.01 else "<0.01%"


def watch_heatmap(w: Any, *, width: float = 9.0, row_height: float = 0.32) -> Any:
    """Draw the heat map of a ``Watch``; returns the matplotlib ``Figure``."""
    from matplotlib.colors import LinearSegmentedColormap
    from matplotlib.figure import Figure

    rows = [m for m in w.table() if m.kind != "weight"]
    names = [(m.module or "(watched module)") + (" grad" if m.kind == "grad" else "")
             for m in rows]
    fmts = [f.name for f in w.formats]
    fig = Figure(figsize=(width, 1.4 + row_height * max(1, len(rows))), layout="constrained")
    axes = fig.subplots(1, 2, sharey=True, squeeze=False)[0]
    for ax, kind in zip(axes, ("overflow", "underflow")):
        data = [[m.fraction(kind, i) for i in range(len(fmts))] for m in rows] or [[0.0] * len(fmts)]
        cmap = LinearSegmentedColormap.from_list(
            kind, ["#ffffff", str(OUTCOMES[kind].light.fill)])
        ax.imshow(data, cmap=cmap, vmin=0.0, vmax=max(1e-12, max(max(r) for r in data)),
                  aspect="auto")
        peak = max(max(r) for r in data)
        for i, row in enumerate(data):
            for j, v in enumerate(row):
                ax.text(j, i, _share(v), ha="center", va="center", fontsize=7,
                        color="#ffffff" if peak and v > 0.6 * peak else "#1f2328")
        ax.set_xticks(range(len(fmts)), fmts, rotation=30, ha="right", fontsize=7)
        ax.set_title(OUTCOMES[kind].name, fontsize=9)
    axes[0].set_yticks(range(len(names)), names, fontsize=7)
    fig.suptitle(f"watch of {type(w.module).__name__}: share of each module's outputs",
                 fontsize=9)
    return fig
