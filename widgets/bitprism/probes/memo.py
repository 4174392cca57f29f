"""Values attached to objects by identity for the life of a probe, dropped when the object
dies. A torch tensor's ``==`` compares elements, so tensors cannot be dict keys themselves;
this keys by ``id`` and checks a weak reference on every read."""

from __future__ import annotations

import weakref
from typing import Any

__all__ = ["Memo"]


class Memo:
    """``get(obj)`` / ``set(obj, value)`` by identity (see the module docstring)."""

    def __init__(self) -> None:
        self.items: dict[int, tuple[Any, Any]] = {}

    def get(self, obj: Any) -> Any:
        entry = self.items.get(id(obj))
        return entry[1] if entry is not None and entry[0]() is obj else None

    def set(self, obj: Any, value: Any) -> None:
        key = id(obj)
        items = self.items

        def forget(_ref: Any, key: int = key) -> None:
            items.pop(key, None)

        items[key] = (weakref.ref(obj, forget), value)
