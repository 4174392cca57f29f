"""``Prism``: one value refracted into several formats side by side, live.

State lives in traits; every reaction goes through one ``_refresh()``; all computing is done
by ``numerics.compare`` and all markup by ``render.compare_html`` (the widget has no renderer of
its own: its bands are ``HTML`` widgets holding that markup, plus standard buttons per bit).
Standard ipywidgets only, no custom JavaScript. Errors in callbacks are shown in the message
area, never raised into the notebook.
"""

from __future__ import annotations

import functools
from functools import cached_property
from dataclasses import dataclass
from typing import Any

import ipywidgets as W
from traitlets import Any as AnyTrait
from traitlets import TraitError, observe, validate

from .guarded import BatchedRefresh, guarded, message_for
from ..errors import BitprismError, ParseError
from ..formats import FORMATS, Format, get_format
from ..numerics.codes import native_code
from ..numerics.compare import DEFAULT_FORMATS, Comparison, FormatRow, compare_exact
from ..numerics.decimal_text import exact_text
from ..numerics.exact import ExactValue, as_exact
from ..numerics.options import OVERFLOW_MODES, ROUNDING_MODES, SUBNORMAL_MODES
from ..numerics.parse import parse, parse_bits
from ..numerics.scalar import decode_exact
from ..render.compare_html import (
    aligned_html,
    band_html,
    evaluations_html,
    header_html,
)
from ..render.palette import button_colors
from ..render.widget_html import message_html
from . import prism_case
from .case_file import CaseFileMixin
from .cast_settings import CastSettings, check_formats, formats_argument
from .refusal import (
    BoolTrait,
    IntTrait,
    ListTrait,
    TextTrait,
    ValueTrait,
    WidgetValueError,
    refusal,
)

__all__ = ["Prism"]

_VIA_CHOICES = (("direct", ""), ("through float32", "float32"))
_FIELD_ROLES = ("sign", "exponent", "significand")


@dataclass(frozen=True)
class _View:
    """Everything a Prism shows for one state of its traits, built before any of it is shown:
    a state whose view cannot be built is refused, so the widget never shows one it could not.
    The text and static HTML for display and export are built from the same comparison when
    first asked (the render layer handles every value an ExactValue can hold; tests drive
    hostile values through both)."""

    comparison: Comparison
    formats: tuple[Format, ...]
    header: str
    bands: tuple[str, ...]
    bits: tuple[str, ...]
    aligned: str
    evaluation: str

    @cached_property
    def text(self) -> str:
        return self.comparison.to_text()

    @cached_property
    def html(self) -> str:
        return self.comparison.to_html()


class _Band:
    """The widgets of one format's band (rebuilt only when the format list changes)."""

    def __init__(self, prism: "Prism", fmt: Format, index: int) -> None:
        self.format = fmt
        self.html = W.HTML()
        self.bits: list[W.Button] = []
        bit_layout = prism._bit_layout
        children: list[W.Widget] = []
        s, w, t = fmt.sign_bits, fmt.exponent_bits, fmt.significand_bits
        roles = ["sign"] * s + ["exponent"] * w + ["significand"] * t
        self.implicit = self._implicit(prism)
        for pos, role in enumerate(roles):
            if pos == s + w:
                children.append(self.implicit)  # between exponent and trailing significand
            bit_number = fmt.bits - 1 - pos  # weight of this bit in the code
            b = W.Button(
                description="0",
                tooltip=f"{fmt.name} bit {bit_number}: {role} (click to flip)",
                layout=bit_layout,
                style=prism._bit_styles[role],
            )
            b.add_class("bitprism-bit")
            b.add_class(f"bitprism-{role}")
            b.on_click(functools.partial(prism._on_bit_click, index, bit_number))
            self.bits.append(b)
            children.append(b)
        if t == 0:
            children.append(self.implicit)
        self.bit_row = W.HBox(children, layout=W.Layout(flex_flow="row wrap"))
        self.down = self._button("next down", "the value below, in this format", prism, index, "down")
        self.up = self._button("next up", "the value above, in this format", prism, index, "up")
        self.largest = self._button("largest", "largest finite value", prism, index, "largest")
        self.normal = self._button("min normal", "smallest normal value", prism, index, "normal")
        self.subnormal = self._button(
            "min subnormal", "smallest subnormal value", prism, index, "subnormal"
        )
        self.remove = self._button("remove", f"remove {fmt.name}", prism, index, "remove")
        nav = W.HBox([self.down, self.up, self.largest, self.normal, self.subnormal, self.remove])
        self.box = W.VBox([self.html, self.bit_row, nav])
        self.box.add_class("bitprism-band")

    @staticmethod
    def _implicit(prism: "Prism") -> W.Button:
        b = W.Button(
            description="1",
            tooltip="implicit leading bit (not stored)",
            disabled=True,
            layout=prism._implicit_layout,
        )
        b.add_class("bitprism-implicit")
        return b

    @staticmethod
    def _button(label: str, tip: str, prism: "Prism", index: int, action: str) -> W.Button:
        b = W.Button(description=label, tooltip=tip, layout=prism._nav_layout)
        b.add_class(f"bitprism-{action}")
        b.on_click(functools.partial(prism._on_nav_click, index, action))
        return b

    def show(self, html: str, bits: str, row: FormatRow) -> None:
        self.html.value = html
        for b, ch in zip(self.bits, bits):
            if b.description != ch:  # skip the trait machinery for unchanged bits
                b.description = ch
        kind = row.fields.kind
        self.implicit.description = "0" if kind in (0, 1) else ("1" if kind == 2 else "·")


class Prism(BatchedRefresh, CastSettings, CaseFileMixin, W.VBox):
    """One value refracted into several formats: bit tiles, fields, stored value, errors.

    ``Prism(value="0.1", formats=["float32", "bfloat16"])``; ``prism.value = np.float32(x)``
    (numbers are kept as exact text); ``prism.comparison`` is the current ``Comparison``.
    A value or option the Prism cannot show raises ``WidgetValueError`` (a ``BitprismError``)
    when set from code, and is shown as a message when typed; the last good view stays.
    """

    value = ValueTrait(
        "0.1", help="the value or expression shown, as exact text (numbers are converted exactly)"
    )
    formats = ListTrait(
        AnyTrait(),
        default_value=list[Any](DEFAULT_FORMATS),
        help="formats shown, by name, or Format objects for custom layouts",
    )
    rounding = TextTrait("roundTiesToEven", help="IEEE 754 rounding direction or 'stochastic'")
    overflow = TextTrait(
        "standard", help="'standard' (Inf/NaN as the format defines) or 'saturate'")
    subnormals = TextTrait("keep", help="'keep' subnormal results or 'flush' them to zero")
    seed = IntTrait(None, allow_none=True,
                    help="seed of stochastic rounding, 0..2**63-1 (None: fresh draws)")
    via = TextTrait("", help="format the input is rounded to first ('' = direct), e.g. 'float32'")
    aligned = BoolTrait(True, help="show the weight-aligned view under the bands")
    source_format = TextTrait(
        "", help="the band whose bit pattern is the source ('' = the typed value is)"
    )
    source_code = IntTrait(None, allow_none=True, help="bit pattern of the source band, if any")
    expression = TextTrait("", help="expression computed with per-format arithmetic")
    message = TextTrait("", help="the last error or note shown to the person")
    comparison = AnyTrait(None, read_only=True, help="the current Comparison (read-only)")

    _view_traits = ("value", "formats", "rounding", "overflow", "subnormals", "seed", "via",
                    "aligned", "source_format", "source_code", "expression")

    def __init__(self, value: Any = "0.1", formats: Any = None, **kwargs: Any) -> None:
        unknown = [k for k in kwargs if k not in self.class_trait_names() or k == "comparison"]
        if unknown:
            raise BitprismError(f"Prism has no option {unknown[0]!r}; options: value, formats, "
                                f"{', '.join(self._view_traits[2:])}")
        format_list = formats_argument(formats)
        self._suspend = 0
        self._view: _View | None = None  # what is shown: the last view that could be built
        self._exact: tuple[str, ExactValue] | None = None  # the value trait's text, parsed
        # the number the value came from, when it was one (a numpy scalar keeps its own bits
        # in its own format: a signaling NaN stays signaling there), under the same text
        self._number: tuple[str, Any] | None = None
        self._bands: list[_Band] = []
        self._band_formats: list[Format] = []
        self._bit_layout = W.Layout(width="22px", height="22px", padding="0", margin="0 1px")
        self._implicit_layout = W.Layout(
            width="22px", height="22px", padding="0", margin="0 1px", border="1px dashed"
        )
        self._nav_layout = W.Layout(width="auto", height="24px")
        self._bit_styles = {}
        for role in _FIELD_ROLES:
            fill, text = button_colors(role)
            self._bit_styles[role] = W.ButtonStyle(button_color=fill, text_color=text)
        self._build_controls()
        self._suspend = 1  # one refresh after every initial trait is in place
        try:
            super().__init__(**kwargs)
            self._suspend = 0
            self.add_class("bitprism-prism")
            with self._bulk():
                self.value = value
                if format_list is not None:
                    self.formats = format_list
        except TraitError as exc:  # an ipywidgets trait (layout=...) refused its value
            raise refusal(exc) from None

    # ----- controls --------------------------------------------------------------------------
    def _build_controls(self) -> None:
        self.value_input = W.Text(
            value="", placeholder="value or expression, e.g. 0.1, 0x1.8p-3, 1/3, 2**-24",
            description="value", continuous_update=False, layout=W.Layout(width="420px"),
        )
        self.value_input.add_class("bitprism-value-input")
        self.value_input.observe(self._on_value_text, "value")
        self.bits_format = W.Dropdown(options=[], description="bits of", layout=W.Layout(width="240px"))
        self.bits_input = W.Text(
            value="", placeholder="0x3c00 or 0b0_01111_0000000000",
            continuous_update=False, layout=W.Layout(width="300px"),
        )
        self.bits_input.add_class("bitprism-bits-input")
        self.bits_input.observe(self._on_bits_text, "value")
        self.rounding_menu = W.Dropdown(options=list(ROUNDING_MODES), description="rounding")
        self.seed_input = W.IntText(value=0, description="seed", layout=W.Layout(width="160px"))
        self.overflow_menu = W.Dropdown(options=list(OVERFLOW_MODES), description="overflow")
        self.subnormals_menu = W.Dropdown(options=list(SUBNORMAL_MODES), description="subnormals")
        self.via_menu = W.Dropdown(options=list(_VIA_CHOICES), description="via")
        self.aligned_box = W.Checkbox(value=True, description="weight-aligned view", indent=False)
        for widget, name in (
            (self.rounding_menu, "rounding"),
            (self.overflow_menu, "overflow"),
            (self.subnormals_menu, "subnormals"),
            (self.via_menu, "via"),
            (self.aligned_box, "aligned"),
        ):
            widget.observe(functools.partial(self._on_control, name), "value")
        self.seed_input.observe(self._on_seed, "value")
        self.add_format_menu = W.Dropdown(
            options=[("add format…", "")] + [(n, n) for n in FORMATS], layout=W.Layout(width="220px")
        )
        self.add_format_menu.observe(self._on_add_format, "value")
        self.expression_input = W.Text(
            value="", placeholder="e.g. 2048 + 1", description="compute",
            continuous_update=False, layout=W.Layout(width="420px"),
        )
        self.expression_input.add_class("bitprism-expression-input")
        self.expression_input.observe(self._on_expression_text, "value")
        self.message_html = W.HTML()
        self.message_html.add_class("bitprism-message")
        self.header_html = W.HTML()
        self.aligned_html = W.HTML()
        self.evaluation_html = W.HTML()
        self.bands_box = W.VBox()

    def _layout_children(self) -> None:
        self.children = [
            W.HBox([self.value_input, self.add_format_menu]),
            W.HBox([self.bits_format, self.bits_input]),
            W.HBox([self.rounding_menu, self.seed_input]),
            W.HBox([self.overflow_menu, self.subnormals_menu, self.via_menu, self.aligned_box]),
            self.message_html,
            self.header_html,
            self.bands_box,
            self.aligned_html,
            self.expression_input,
            self.evaluation_html,
        ]

    # ----- validation ------------------------------------------------------------------------
    def _read(self, text: str) -> ExactValue:
        """The exact value of ``text``, parsed once and then kept beside it: Enter, the
        validation and the refresh that follow all read the same text."""
        key = text.strip()
        if self._exact is None or self._exact[0] != key:
            self._exact = (key, parse(text))
        return self._exact[1]

    def _keep_exact(self, x: ExactValue) -> str:
        """Remember ``x`` under its exact text (what the value trait then holds), once that
        text is known to read back: it is what a case file stores."""
        text = exact_text(x)
        try:
            parse(text)
        except ParseError as exc:
            raise BitprismError(
                f"value: its exact text has {len(text)} characters and does not read back "
                f"({exc.reason}); a Prism keeps values whose exact text does") from None
        self._exact = (text, x)
        return text

    @validate("value")
    def _valid_value(self, proposal: Any) -> str:
        v = proposal["value"]
        try:
            if isinstance(v, str):
                try:
                    self._read(v)
                except ParseError as exc:
                    raise BitprismError(
                        f"value {v!r} is not a number: {message_for(exc)}") from exc
                return v.strip()
            text = self._keep_exact(as_exact(v))
            self._number = (text, v)
            return text
        except Exception as exc:
            self._refuse_value(exc)

    @validate("formats")
    def _valid_formats(self, proposal: Any) -> list[Any]:
        try:
            return check_formats(proposal["value"], "Prism")
        except Exception as exc:
            self._refuse_value(exc)

    @validate("via", "source_format")
    def _valid_format_name(self, proposal: Any) -> str:
        v = proposal["value"]
        if not v:
            return ""
        try:
            if proposal["trait"].name == "source_format":
                return self.shown_format(v).name
            return get_format(v).name
        except Exception as exc:
            self._refuse_value(exc)

    # ----- reactions -------------------------------------------------------------------------
    @observe(
        "value", "formats", "rounding", "overflow", "subnormals", "seed", "via", "aligned",
        "source_format", "source_code", "expression",
    )
    def _on_trait(self, change: Any) -> None:
        self._refresh()

    def _refresh(self) -> None:
        """The one path from traits to what is shown. A state whose view cannot be built is
        refused: the traits go back to the last good view's, which stays, and the message (and,
        for code, ``WidgetValueError``) says why."""
        if self._suspend:
            return
        try:
            view = self._build_view()
        except Exception as exc:
            self._refuse_view(exc)
        self._view = view
        self.set_trait("comparison", view.comparison)
        self.message = ""
        fmts = list(view.formats)
        if fmts != self._band_formats:
            self._rebuild_bands(fmts)
        self._show(view)
        self._remember_good_view()
        self._snapshot_changed()

    def _build_view(self) -> _View:
        """Compute and render everything shown for the current traits (nothing shown yet)."""
        fmts = self.format_objects
        options = self.options
        pinned = None
        if self.source_format and self.source_code is not None:
            pin_fmt = next((f for f in fmts if f.name == self.source_format), None)
            if pin_fmt is not None:
                pin_fmt.classify(self.source_code)  # the pattern fits the format
                pinned = (pin_fmt, self.source_code)
        own = None
        if self._number is not None and self._number[0] == self.value:
            number = self._number[1]
            own = {f: code for f in fmts if (code := native_code(number, f)) is not None}
        c = compare_exact(
            self._read(self.value),
            self.value,
            fmts,
            options,
            get_format(self.via) if self.via else None,
            pinned,
            own_codes=own,
        )
        evaluation = ""
        if self.expression.strip():
            from ..numerics.evaluate import evaluate

            evaluation = evaluations_html(
                [evaluate(self.expression, f, options=options) for f in fmts])
        return _View(
            comparison=c,
            formats=tuple(fmts),
            header=header_html(c),
            bands=tuple(band_html(c, row, tiles=False) for row in c.rows),
            bits=tuple(row.bits() for row in c.rows),
            aligned=aligned_html(c) if self.aligned else "",
            evaluation=evaluation,
        )

    def _rebuild_bands(self, fmts: list[Format]) -> None:
        self._bands = [_Band(self, f, i) for i, f in enumerate(fmts)]
        self._band_formats = list(fmts)
        self.bands_box.children = [b.box for b in self._bands]
        current = self.bits_format.value
        self.bits_format.options = [f.name for f in fmts]
        if current in self.bits_format.options:
            self.bits_format.value = current
        if not self.children:
            self._layout_children()

    def _show(self, view: _View) -> None:
        self.header_html.value = view.header
        for band, row, html, bits in zip(self._bands, view.comparison.rows, view.bands, view.bits):
            band.show(html, bits, row)
            band.box.layout.border = (
                "2px solid #6f51b4" if row.format.name == self.source_format else ""
            )
        self.aligned_html.value = view.aligned
        self._sync_controls()
        self.evaluation_html.value = view.evaluation

    def _sync_controls(self) -> None:
        self._suspend += 1
        try:
            self.value_input.value = self.value
            self.rounding_menu.value = self.rounding
            self.overflow_menu.value = self.overflow
            self.subnormals_menu.value = self.subnormals
            self.via_menu.value = self.via if self.via in ("", "float32") else ""
            self.aligned_box.value = self.aligned
            if self.seed is not None:
                self.seed_input.value = self.seed
        finally:
            self._suspend -= 1

    @observe("message")
    def _on_message(self, change: Any) -> None:
        self.message_html.value = message_html(change["new"])

    # ----- callbacks -------------------------------------------------------------------------
    @guarded
    def _on_value_text(self, change: Any) -> None:
        if self._suspend:
            return
        self.submit_value(change["new"])

    def submit_value(self, text: str) -> None:
        """What Enter in the value box does: parse (once), and on error keep the last view
        (the message says why)."""
        try:
            self._read(text)
        except ParseError as exc:
            self.message = message_for(exc)
            return
        try:
            with self._bulk():
                self.source_format = ""
                self.source_code = None
                self.value = text
        except WidgetValueError as exc:
            self.message = exc.shown

    @guarded
    def _on_bits_text(self, change: Any) -> None:
        if self._suspend or not change["new"].strip():
            return
        self.submit_bits(change["new"], self.bits_format.value)

    def submit_bits(self, text: str, fmt: Any) -> None:
        """Set one band's raw bit pattern; the others follow from its exact value. On error
        the last view stays and the message says why."""
        f = self.shown_format(fmt)
        try:
            code = parse_bits(text, f)
        except ParseError as exc:
            self.message = message_for(exc)
            return
        try:
            self.set_source(f, code)
        except WidgetValueError as exc:
            self.message = exc.shown

    def set_source(self, fmt: Any, code: int) -> None:
        """Make ``fmt``'s band the source at bit pattern ``code`` and recompute all others
        (``fmt``: a shown format, by name or ``Format``; custom ones included)."""
        f = self.shown_format(fmt)
        f.classify(code)
        if f not in self.format_objects:
            raise BitprismError(f"format {f.name!r} is not shown in this Prism")
        x: ExactValue = decode_exact(code, f)
        with self._bulk():
            self.value = self._keep_exact(x)
            self.source_format = f.name
            self.source_code = code

    @guarded
    def _on_bit_click(self, index: int, bit: int, button: Any = None) -> None:
        row = self.comparison.rows[index]
        self.set_source(row.format, row.code ^ (1 << bit))

    @guarded
    def _on_nav_click(self, index: int, action: str, button: Any = None) -> None:
        row: FormatRow = self.comparison.rows[index]
        f = row.format
        if action == "remove":
            if len(self.formats) == 1:
                self.message = "the last format cannot be removed"
                return
            with self._bulk():
                if self.source_format == f.name:
                    self.source_format = ""
                    self.source_code = None
                self.formats = [g for g in self.formats if get_format(g) != f]
            return
        if action in ("down", "up"):
            n = row.next_down if action == "down" else row.next_up
            if n is None:
                self.message = f"{f.name}: no value {'below' if action == 'down' else 'above'} {row.shortest}"
                return
            code = n.code
        elif action == "largest":
            code = f.max_code
        elif action == "normal":
            code = (1 << f.significand_bits) if f.has_zero else 0
        else:
            code = 1 if f.has_subnormals else ((1 << f.significand_bits) if f.has_zero else 0)
        self.set_source(f, code)

    @guarded
    def _on_control(self, name: str, change: Any) -> None:
        if self._suspend:
            return
        try:
            setattr(self, name, change["new"])
        except BitprismError:
            self._sync_controls()  # the control shows the setting in effect again
            raise

    @guarded
    def _on_seed(self, change: Any) -> None:
        if self._suspend:
            return
        try:
            self.seed = change["new"]
        except BitprismError:  # e.g. -1 or 2**63: not a seed a case file can hold
            self._suspend += 1
            try:
                self.seed_input.value = 0 if self.seed is None else self.seed
            finally:
                self._suspend -= 1
            raise

    @guarded
    def _on_add_format(self, change: Any) -> None:
        name = change["new"]
        if not name:
            return
        try:
            self.formats = list(self.formats) + [name]
        finally:
            self._suspend += 1
            try:
                self.add_format_menu.value = ""
            finally:
                self._suspend -= 1

    @guarded
    def _on_expression_text(self, change: Any) -> None:
        if self._suspend:
            return
        self.expression = change["new"]

    # ----- headless output ---------------------------------------------------------------------
    def _repr_mimebundle_(self, **kwargs: Any) -> dict[str, Any]:
        bundle = super()._repr_mimebundle_(**kwargs) or {}
        view = self._view
        if view is not None:  # the comparison's own text and HTML, rendered with the view
            bundle = dict(bundle)
            bundle.update({"text/plain": view.text, "text/html": view.html})
        return bundle

    def to_html(self) -> str:
        """A static HTML snapshot of the current view (same markup as the bands)."""
        view = self._view
        if view is None:
            return ""
        return view.html if self.aligned else view.comparison.to_html(aligned=False)

    # ----- case files (ui/case_file.py) ----------------------------------------------------------
    _case_kind = "prism"

    def _case_state(self) -> dict[str, Any]:
        return prism_case.prism_case_state(self)

    @classmethod
    def _from_case_state(cls, state: dict[str, Any]) -> "Prism":
        return prism_case.prism_from_case_state(cls, state)  # type: ignore[no-any-return]

    def _static_html(self) -> str:
        return prism_case.prism_static_html(self)
