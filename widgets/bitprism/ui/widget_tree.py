"""Closing widgets that are taken off the screen, so that none is left behind.

ipywidgets keeps every widget it has made in ``Widget.widgets`` (and the front end keeps its
view) until ``close()`` is called; closing a box does not close its children, nor a widget its
own ``layout`` and ``style``. A view rebuilt without closing what it replaced grows the kernel's
and the browser's memory and slows every later message. ``close_tree`` closes a widget, its
children, and their own layouts and styles, leaving alone the ones shared with others.
"""

from __future__ import annotations

from typing import Any, Iterable

import ipywidgets as W

__all__ = ["close_tree"]


def close_tree(widget: W.Widget, shared: Iterable[W.Widget] = ()) -> None:
    """Close ``widget``, every widget below it (``children``) and their ``layout`` and
    ``style`` widgets, except those in ``shared`` (layouts and styles several widgets use)."""
    keep = {id(w) for w in shared}
    stack: list[Any] = [widget]
    seen: set[int] = set()
    while stack:
        w = stack.pop()
        if id(w) in seen or id(w) in keep or not isinstance(w, W.Widget):
            continue
        seen.add(id(w))
        stack.extend(getattr(w, "children", ()) or ())
        for name in ("layout", "style"):
            part = getattr(w, name, None) if name in w.trait_names() else None
            if isinstance(part, W.Widget):
                stack.append(part)
        w.close()
