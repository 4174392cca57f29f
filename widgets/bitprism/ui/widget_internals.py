"""The few places where bitprism relies on ipywidgets internals, kept in one module.

Checked with ipywidgets 8.1.9. ``pyproject.toml`` accepts ``ipywidgets>=8.1,<9``, and
``tests/test_widget_internals.py`` pins that range, checks that the installed ipywidgets is in
it, and checks that each internal used here still behaves as assumed.

Why it exists: a ``TensorPrism`` repaints up to 1024 cell buttons on every pan. Through the
public path (``hold_sync`` and one ``setattr`` per trait) the trait machinery alone costs
several times the whole refresh budget, and ipywidgets' default 32-hex-digit model ids make up
about a third of each cell's update message. What is relied on:

* ``Widget._trait_values`` (traitlets' storage of trait values) and ``Widget._send`` (send one
  message on the widget's comm): ``push_state`` stores new values directly and sends one
  ``update`` message, falling back to the public path when either is missing;
* the ``model_id`` keyword of ``Widget.__init__``, used as the comm id (``short_model_id``);
* the ``"IPY_MODEL_<id>"`` form of a widget reference in synced state (``model_ref``), as
  ``widget_serialization`` writes it;
* the front-end (``@jupyter-widgets/base``) and ``Widget._handle_msg`` reading an ``update``
  message without ``buffer_paths`` as having none;
* ``DOMWidget._dom_classes``, the synced list of CSS classes (``has_class``; ipywidgets has
  ``add_class`` and ``remove_class`` but no public test).

And one traitlets internal (traitlets 5): ``HasTraits._trait_values`` and
``HasTraits._notify_trait``, which ``IdentityTrait.set`` uses as ``TraitType.set`` does.
"""

from __future__ import annotations

import itertools
import uuid
from typing import Any

import ipywidgets as W
from traitlets import Any as AnyTrait

__all__ = ["IdentityTrait", "has_class", "model_ref", "push_state", "short_model_id"]

# Model ids of shared styles: a random prefix per process, then a counter.
_ID_PREFIX = uuid.uuid4().hex[:10]
_ids = itertools.count()


def short_model_id() -> str:
    """A short model id for a shared cell style (passed as ipywidgets' ``model_id``).

    Every cell whose colour changes is sent ``"IPY_MODEL_<id>"``: with ipywidgets' default
    32-hex-digit ids that reference was about a third of a cell's update. The counter keeps
    these ids unique in this kernel; the 40 random bits keep them apart from other kernels' ids
    (widget state saved in a notebook); ordinary widgets' 32-digit ids cannot equal them.
    """
    return f"{_ID_PREFIX}{next(_ids):x}"


def model_ref(w: W.Widget) -> str:
    """How synced state refers to another widget (``"IPY_MODEL_<model id>"``)."""
    return f"IPY_MODEL_{w.model_id}"


def has_class(widget: W.DOMWidget, name: str) -> bool:
    """Whether ``widget`` carries the CSS class ``name`` (added by ``add_class``)."""
    return name in widget._dom_classes


def push_state(widget: W.Widget, changes: dict[str, Any]) -> None:
    """Set traits of a grid widget (cell, header) with one state message.

    A 32 x 32 window has 1024 cells; the public path (``hold_sync`` and one ``setattr`` per
    trait) costs several times the whole refresh budget in trait machinery. Cells have no
    observers of their own, so their new values are stored directly and one update message is
    sent. The message leaves out ``buffer_paths`` (``send_state`` always adds an empty one, 20
    bytes a cell): these values are text and model references, never binary, and both the
    front-end (``@jupyter-widgets/base``) and ipywidgets read a missing ``buffer_paths`` as
    empty. Falls back to the public path if ipywidgets' internals ever differ.
    """
    values = getattr(widget, "_trait_values", None)
    send = getattr(widget, "_send", None)
    if values is None or send is None:  # pragma: no cover - other ipywidgets versions
        with widget.hold_sync():
            for k, v in changes.items():
                setattr(widget, k, v)
        return
    state: dict[str, Any] = {}
    for k, v in changes.items():
        values[k] = v
        state[k] = model_ref(v) if isinstance(v, W.Widget) else v
    send({"method": "update", "state": state})


class IdentityTrait(AnyTrait):
    """An ``Any`` trait whose change test is identity, for a tensor of any size.

    ``TraitType.set`` tells a change from ``bool(old == new)``: for numpy arrays that compares
    element by element, reading the whole tensor (all of a memmap's file) and allocating a
    boolean array of its size before the comparison fails. Here a new object is a change and
    the same object is not; validation and notification are traitlets' own. None is not a
    tensor: it goes to the validator like any other value.
    """

    allow_none = False

    def set(self, obj: Any, value: Any) -> None:
        new_value = self._validate(obj, value)
        values = obj._trait_values
        old_value = values.get(self.name, self.default_value)
        values[self.name] = new_value
        if old_value is not new_value:
            obj._notify_trait(self.name, old_value, new_value)
