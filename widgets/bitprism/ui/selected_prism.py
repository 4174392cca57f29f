"""The ``Prism`` a ``TensorPrism`` embeds for its selected cell: the cell's exact value in the
same formats and options, bit for bit when the cell's own format is among them."""

from __future__ import annotations

from typing import Any

import numpy as np

from ..formats import get_format
from .guarded import message_for

__all__ = ["show_selected"]


def show_selected(tp: Any) -> bool:
    """Show ``tp``'s selected cell in ``tp.prism`` (made on first use, in ``tp.prism_box``).
    Returns False (and sets ``tp.message``) when the Prism refused it, so that the caller
    tries again next time."""
    from .prism import Prism

    opts = tp.options
    raw = np.asarray(tp.data[tp.selected])
    fmts = list(tp.formats)
    try:
        if tp.prism is None:
            tp.prism = Prism("0", formats=fmts)
            tp.prism_box.children = [tp.prism]
        p = tp.prism
        in_fmt = None if raw.dtype.kind in "iub" else get_format(raw.dtype)
        with p._bulk():
            p.formats = fmts
            p.rounding, p.overflow, p.subnormals, p.seed = (
                opts.rounding, opts.overflow, opts.subnormals, opts.seed)
            p.via = ""
            if in_fmt is not None and in_fmt in p.format_objects:
                bits = int(raw.reshape(1).view(np.dtype(f"uint{raw.dtype.itemsize * 8}"))[0])
                p.set_source(in_fmt, bits)  # bit for bit: NaN payloads, signed zeros
            else:
                p.source_format = ""
                p.source_code = None
                # the numpy scalar itself: converted exactly (no float() on the way)
                p.value = int(raw) if in_fmt is None else raw[()]
    except Exception as exc:
        tp.message = message_for(exc)
        return False
    return True
