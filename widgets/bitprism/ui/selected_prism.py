"""The ``Prism`` a ``TensorPrism`` embeds for its selected cell: compact (bands only: the grid's
own controls set its formats and options), captioned with the cell's tensor index and the
tensor's dtype, and with the tensor's own format as its first band, set bit for bit from the
cell's raw code (a NaN's payload and sign, a signed zero), the other formats following from it.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from ..formats import FORMATS, Format, get_format
from .guarded import message_for

__all__ = ["selected_caption", "selected_formats", "show_selected"]


def selected_formats(own: Format | None, formats: list[Any], objects: list[Format]) -> list[Any]:
    """The embedded Prism's formats: the tensor's own first (when it has one), then the
    grid's formats in their order (the own one not twice)."""
    if own is None:
        return list(formats)
    first: Any = own.name if FORMATS.get(own.name) == own else own
    return [first] + [f for f, o in zip(formats, objects) if o != own]


def selected_caption(index: tuple[int, ...], dtype: np.dtype, shape: tuple[int, ...],
                     code: int | None) -> str:
    """``cell [10, 10] of float32 [48, 80] · bits 0xffc00000``."""
    text = f"cell {list(index)} of {dtype} {list(shape)}"
    if code is not None:
        text += f" · bits 0x{code:0{dtype.itemsize * 2}x}"
    return text


def show_selected(tp: Any) -> bool:
    """Show ``tp``'s selected cell in ``tp.prism`` (made on first use, in ``tp.prism_box``).
    Returns False (and sets ``tp.message``) when the Prism refused it, so that the caller
    tries again next time."""
    from .prism import Prism

    opts = tp.options
    raw = np.asarray(tp.data[tp._to_data(tp.selected)])
    own = None if raw.dtype.kind in "iub" else get_format(raw.dtype)
    fmts = selected_formats(own, list(tp.formats), tp.format_objects)
    code = None
    if own is not None:
        code = int(raw.reshape(1).view(np.dtype(f"uint{raw.dtype.itemsize * 8}"))[0])
    caption = selected_caption(tuple(tp.selected), raw.dtype, tp._full_shape, code)
    try:
        if tp.prism is None:
            tp.prism = Prism("0", formats=fmts, compact=True)
            tp.prism_box.children = [tp.prism]
        p = tp.prism
        with p._bulk():
            if list(p.formats) != fmts:
                p.formats = fmts
            p.rounding, p.overflow, p.subnormals, p.seed = (
                opts.rounding, opts.overflow, opts.subnormals, opts.seed)
            p.caption = caption
            if own is not None and code is not None:
                p.set_source(own, code)  # bit for bit: NaN payloads, signed zeros
            else:
                p.source_format = ""
                p.source_code = None
                p.value = int(raw)  # an integer cell: its exact value
    except Exception as exc:
        tp.message = message_for(exc)
        return False
    return True
