"""Static views of a widget in notebook outputs: the snapshot slot, and pins.

A widget is displayed as three outputs of its cell, each a slot under its own display id but
the second:

1. the *snapshot*: a widget view of no model plus the static snapshot as ``text/html``. Where
   a widget manager renders (JupyterLab, Notebook 7) a view of no model hides itself, so
   nothing is shown twice; nbconvert and static viewers, which have no widget state for it,
   show the snapshot. Later changes republish it, at most once per ``SNAPSHOT_INTERVAL``
   seconds, with a final update when the interval passes or the cell ends (IPython's
   ``post_execute`` event). Republishing never touches the live view: updating an output that
   holds a real widget view makes the widget manager build a new view of the whole widget each
   time and keep the old one listening (ipywidgets 8.1's ``WidgetRenderer.renderModel``),
   which is how a long session used to slow to a halt.
2. the live widget view (``text/plain`` says what it is; an empty ``text/html`` keeps a saved
   page from printing the widget's repr).
3. the *pins*: hidden like the snapshot until a view is pinned into it.

*Pinning* writes the current view as static HTML that every front end shows, with or without a
kernel: ``pin_here`` displays it as an output of the running cell (the widgets' ``pin()``), and
``pin_to_slot`` fills the pins slot under the widget (a pin button: a button press runs outside
any cell, so only an output made at display time can receive it). Once a view is pinned, the
snapshot slot is emptied: the pins are what a reader of the saved notebook sees.

The widget provides ``_repr_mimebundle_()``, ``_static_html()`` and ``_pinned_html()``.
"""

from __future__ import annotations

import functools
import threading
import time
import uuid
from typing import Any

from ..errors import BitprismError
from ..render.widget_html import pins_html, snapshot_error_html

__all__ = [
    "MAX_PINS",
    "SNAPSHOT_INTERVAL",
    "WIDGET_VIEW",
    "display_with_snapshot",
    "pin_here",
    "pin_to_slot",
    "publish_snapshot",
    "snapshot_changed",
]

SNAPSHOT_INTERVAL = 0.5  # seconds between two republished snapshots of a view on screen
MAX_PINS = 8  # views a slot keeps pinned (the oldest goes first)
WIDGET_VIEW = "application/vnd.jupyter.widget-view+json"
_NO_MODEL = {"model_id": "", "version_major": 2, "version_minor": 0}


class _SnapshotState:
    """Displays of one widget, the views pinned into them, and the snapshot throttle."""

    def __init__(self) -> None:
        self.display_ids: list[tuple[str, str]] = []  # (snapshot slot, pins slot) per display
        self.pins: list[str] = []
        self.last = 0.0
        self.pending = False
        self.timer: threading.Timer | None = None
        self.lock = threading.Lock()


_PENDING: "set[Any]" = set()  # widgets with a snapshot waiting for the end of the cell
_HOOKED = False
_STATE_KEY = "_bitprism_snapshots"  # where a widget's _SnapshotState lives in its __dict__


def _flush_pending() -> None:
    for widget in list(_PENDING):
        publish_snapshot(widget)


def _hook_post_execute() -> None:
    """Flush waiting snapshots when a cell finishes (in its own output context)."""
    global _HOOKED
    if _HOOKED:
        return
    try:
        from IPython import get_ipython
    except ImportError:  # pragma: no cover - IPython comes with ipywidgets
        return
    ip = get_ipython()
    if ip is not None:
        ip.events.register("post_execute", _flush_pending)
        _HOOKED = True


def _snapshots(widget: Any) -> _SnapshotState:
    state = widget.__dict__.get(_STATE_KEY)
    if state is None:
        state = _SnapshotState()
        widget.__dict__[_STATE_KEY] = state
    return state  # type: ignore[no-any-return]


def _static(widget: Any) -> str:
    try:
        return str(widget._static_html())
    except Exception as exc:  # a snapshot must never break displaying the widget
        return snapshot_error_html(exc)


def _name(widget: Any) -> str:
    return type(widget).__name__


def _snapshot_bundle(widget: Any, pins: list[str]) -> dict[str, Any]:
    return {WIDGET_VIEW: dict(_NO_MODEL), "text/html": "" if pins else _static(widget),
            "text/plain": f"static view of a {_name(widget)}"}


def _pins_bundle(widget: Any, pins: list[str]) -> dict[str, Any]:
    if not pins:
        return {WIDGET_VIEW: dict(_NO_MODEL), "text/html": "", "text/plain": ""}
    return {"text/html": pins_html(pins),
            "text/plain": f"{len(pins)} pinned view(s) of a {_name(widget)}"}


def _live_bundle(widget: Any) -> dict[str, Any]:
    bundle = dict(widget._repr_mimebundle_() or {})
    bundle["text/plain"] = (f"{_name(widget)}: a live widget (it needs its kernel); its "
                            "static view is saved in the output above")
    bundle["text/html"] = ""
    return bundle


def display_with_snapshot(widget: Any) -> None:
    """Display the snapshot slot, then the live widget view (see the module notes)."""
    from IPython.display import display

    snaps = _snapshots(widget)
    ids = (uuid.uuid4().hex, uuid.uuid4().hex)
    with snaps.lock:
        snaps.display_ids.append(ids)
        snaps.last = time.monotonic()
        pins = list(snaps.pins)
    display(_snapshot_bundle(widget, pins), raw=True, display_id=ids[0])
    display(_live_bundle(widget), raw=True)
    display(_pins_bundle(widget, pins), raw=True, display_id=ids[1])
    _hook_post_execute()


def snapshot_changed(widget: Any) -> None:
    """The view changed: republish the snapshot, at most every ``SNAPSHOT_INTERVAL`` seconds,
    with a final update when a cell ends or the interval passes. Nothing when not displayed,
    or once a view is pinned."""
    snaps = widget.__dict__.get(_STATE_KEY)
    if snaps is None or not snaps.display_ids or snaps.pins:
        return
    with snaps.lock:
        wait = snaps.last + SNAPSHOT_INTERVAL - time.monotonic()
        if wait > 0:
            snaps.pending = True
            _PENDING.add(widget)
            if snaps.timer is None:
                snaps.timer = threading.Timer(wait, functools.partial(publish_snapshot, widget))
                snaps.timer.daemon = True
                snaps.timer.start()
            return
    publish_snapshot(widget)


def publish_snapshot(widget: Any) -> None:
    """Update every snapshot slot of ``widget`` with its current snapshot now."""
    from IPython.display import update_display

    snaps = _snapshots(widget)
    with snaps.lock:
        if snaps.timer is not None:
            snaps.timer.cancel()
            snaps.timer = None
        snaps.pending = False
        _PENDING.discard(widget)
        snaps.last = time.monotonic()
        ids = list(snaps.display_ids)
        pins = list(snaps.pins)
    bundle = _snapshot_bundle(widget, pins)
    for snapshot_id, _ in ids:
        update_display(bundle, raw=True, display_id=snapshot_id)


def pin_here(widget: Any) -> str:
    """Display the current view, pinned, as an output of the running cell; returns its HTML."""
    from IPython.display import display

    html = str(widget._pinned_html())
    display({"text/html": html, "text/plain": f"pinned view of a {_name(widget)}"}, raw=True)
    return html


def pin_to_slot(widget: Any) -> str:
    """Pin the current view into the slot of the widget's display (kept: the latest
    ``MAX_PINS``); returns its HTML. Refused when the widget was not displayed in a cell."""
    snaps = widget.__dict__.get(_STATE_KEY)
    if snaps is None or not snaps.display_ids:
        raise BitprismError(
            f"this {_name(widget)} was not displayed by a notebook cell, so there is no "
            "output to pin into; call pin() in a cell instead")
    from IPython.display import update_display

    html = str(widget._pinned_html())
    with snaps.lock:
        snaps.pins = (snaps.pins + [html])[-MAX_PINS:]
        pins = list(snaps.pins)
        ids = list(snaps.display_ids)
    bundle = _pins_bundle(widget, pins)
    for _, pins_id in ids:
        update_display(bundle, raw=True, display_id=pins_id)
    if len(pins) == 1:  # the first pin: the snapshot above the widget steps aside
        publish_snapshot(widget)
    return html
