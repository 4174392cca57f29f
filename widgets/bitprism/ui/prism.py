"""``Prism``: one value refracted into several formats, drawn on one power-of-two ruler.

Every format is a band on a shared ruler (columns are weights 2^k): its verdict first, in
words, then its bits under their weights, the stored value (shortest and exact decimal), the
errors, and the raw encoding as one small button per bit (click to flip). One toolbar acts on
the selected band (click a band's name to select it). State lives in traits; every reaction
goes through one ``_refresh()``; all computing is done by ``numerics.compare`` and all markup by
``render`` (``compare_html``, ``ruler_html``, ``verdicts``). Standard ipywidgets only, no custom
JavaScript. Errors in callbacks are shown in the message area, never raised into the notebook.
Bands are built once per format and closed when their format goes (``prism_bands``).
"""

from __future__ import annotations

import functools
from dataclasses import dataclass
from functools import cached_property
from typing import Any

import ipywidgets as W
from traitlets import Any as AnyTrait
from traitlets import TraitError, observe, validate

from ..errors import BitprismError, ParseError
from .guarded import BatchedRefresh, guarded, message_for
from ..formats import FORMATS, Format, get_format
from ..numerics.codes import native_code
from ..numerics.compare import DEFAULT_FORMATS, Comparison, FormatRow, compare_exact
from ..numerics.decimal_text import exact_text
from ..numerics.exact import ExactValue, as_exact
from ..numerics.options import OVERFLOW_MODES, ROUNDING_MODES, SUBNORMAL_MODES
from ..numerics.parse import parse, parse_bits
from ..numerics.scalar import decode_exact
from ..render.compare_html import (
    band_detail_html,
    caption_html,
    evaluations_html,
    header_html,
    prism_css,
    raw_fields_html,
    verdict_html,
)
from ..render.palette import theme_css
from ..render.ruler_html import make_ruler
from ..render.verdicts import neighbour_text
from ..render.vocabulary import WORDS
from ..render.widget_html import message_html
from . import prism_case
from .case_file import CaseFileMixin
from .cast_settings import CastSettings, check_formats, formats_argument
from .prism_bands import Band, SharedLooks, Toolbar
from .refusal import (
    BoolTrait,
    IntTrait,
    ListTrait,
    TextTrait,
    ValueTrait,
    WidgetValueError,
    check_seed,
    refusal,
)

__all__ = ["Prism"]

# The rounding path: one correct rounding from the exact value, or through float32 first
# (double rounding made visible). Other formats set from code get an entry of their own.
_PATHS = (("one rounding", ""), ("through float32 first", "float32"))


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
    verdicts: tuple[str, ...]
    details: tuple[str, ...]
    fields: tuple[str, ...]
    bits: tuple[str, ...]
    evaluation: str

    @cached_property
    def text(self) -> str:
        return self.comparison.to_text()

    @cached_property
    def html(self) -> str:
        return self.comparison.to_html()


class Prism(BatchedRefresh, CastSettings, CaseFileMixin, W.VBox):
    """One value refracted into several formats on one power-of-two ruler: a verdict per
    format, its bits under their weights, stored value, errors and raw bits.

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
    via = TextTrait("", help="the rounding path: '' rounds once from the exact value; a format "
                    "name (e.g. 'float32') rounds to it first (double rounding)")
    aligned = BoolTrait(True, help="draw every band on the power-of-two ruler")
    source_format = TextTrait(
        "", help="the band whose bit pattern is the source ('' = the typed value is)"
    )
    source_code = IntTrait(None, allow_none=True, help="bit pattern of the source band, if any")
    expression = TextTrait("", help="expression computed with per-format arithmetic")
    selected = TextTrait("", help="the band the toolbar and the bits box act on ('' = the first)")
    message = TextTrait("", help="the last error or note shown to the person")
    compact = BoolTrait(
        False, help="bands only: no input rows, option controls or add-format menu (the bands, "
        "their verdicts and raw bits stay), e.g. the value view embedded in a TensorPrism")
    caption = TextTrait("", help="a line shown above the bands (plain text), e.g. the cell shown")
    comparison = AnyTrait(None, read_only=True, help="the current Comparison (read-only)")

    _view_traits = ("value", "formats", "rounding", "overflow", "subnormals", "seed", "via",
                    "aligned", "source_format", "source_code", "expression")

    def __init__(self, value: Any = "0.1", formats: Any = None, **kwargs: Any) -> None:
        unknown = [k for k in kwargs if k not in self.class_trait_names() or k == "comparison"]
        if unknown:
            raise BitprismError(f"Prism has no option {unknown[0]!r}; options: value, formats, "
                                f"{', '.join(self._view_traits[2:])}, selected, compact, caption")
        format_list = formats_argument(formats)
        self._suspend = 0
        self._view: _View | None = None  # what is shown: the last view that could be built
        self._exact: tuple[str, ExactValue] | None = None  # the value trait's text, parsed
        # the number the value came from, when it was one (a numpy scalar keeps its own bits
        # in its own format: a signaling NaN stays signaling there), under the same text
        self._number: tuple[str, Any] | None = None
        self._bands: list[Band] = []
        self._looks = SharedLooks()
        self._build_controls()
        self._suspend = 1  # one refresh after every initial trait is in place
        try:
            super().__init__(**kwargs)
            self._suspend = 0
            self.add_class("bitprism-prism")
            self.add_class("bitprism")  # the outcome colours' theme switch applies inside
            with self._bulk():
                self.value = value
                if format_list is not None:
                    self.formats = format_list
        except TraitError as exc:  # an ipywidgets trait (layout=...) refused its value
            raise refusal(exc) from None

    # ----- controls --------------------------------------------------------------------------
    def _build_controls(self) -> None:
        wide = {"description_width": "initial"}
        self.value_input = W.Text(
            value="", placeholder="value or expression, e.g. 0.1, 0x1.8p-3, 1/3, 2**-24",
            description="value", continuous_update=False, style=wide,
            layout=W.Layout(width="auto", flex="1 1 260px", min_width="200px"),
        )
        self.value_input.add_class("bitprism-value-input")
        self.value_input.observe(self._on_value_text, "value")
        self.bits_format = W.Dropdown(options=[], description="bits of", style=wide,
                                      layout=W.Layout(width="auto", max_width="220px"))
        self.bits_format.observe(self._on_bits_format, "value")
        self.bits_input = W.Text(
            value="", placeholder="0x3c00 or 0b0_01111_0000000000", continuous_update=False,
            layout=W.Layout(width="auto", flex="1 1 180px", min_width="160px"),
        )
        self.bits_input.add_class("bitprism-bits-input")
        self.bits_input.observe(self._on_bits_text, "value")
        small = W.Layout(width="auto", max_width="230px")
        self.rounding_menu = W.Dropdown(options=list(ROUNDING_MODES), description="rounding",
                                        style=wide, layout=small)
        self.seed_input = W.Text(value="none", description="seed", continuous_update=False,
                                 style=wide, layout=W.Layout(width="150px"),
                                 placeholder="none or 0..2**63-1")
        self.seed_input.add_class("bitprism-seed")
        self.overflow_menu = W.Dropdown(options=list(OVERFLOW_MODES), description="overflow",
                                        style=wide, layout=small)
        self.subnormals_menu = W.Dropdown(options=list(SUBNORMAL_MODES),
                                          description="subnormals", style=wide, layout=small)
        self.path_menu = W.Dropdown(options=list(_PATHS), description="rounding path",
                                    style=wide, layout=W.Layout(width="310px"))
        self.aligned_box = W.Checkbox(value=True, description="ruler", indent=False,
                                      layout=W.Layout(width="auto"))
        for widget, name in (
            (self.rounding_menu, "rounding"),
            (self.overflow_menu, "overflow"),
            (self.subnormals_menu, "subnormals"),
            (self.path_menu, "via"),
            (self.aligned_box, "aligned"),
        ):
            widget.observe(functools.partial(self._on_control, name), "value")
        self.seed_input.observe(self._on_seed, "value")
        self.add_format_menu = W.Dropdown(
            options=[("add format…", "")] + [(n, n) for n in FORMATS],
            layout=W.Layout(width="auto", max_width="200px"),
        )
        self.add_format_menu.observe(self._on_add_format, "value")
        self.expression_input = W.Text(
            value="", placeholder="e.g. 2048 + 1", description="compute",
            continuous_update=False, style=wide,
            layout=W.Layout(width="auto", flex="1 1 260px", min_width="200px"),
        )
        self.expression_input.add_class("bitprism-expression-input")
        self.expression_input.observe(self._on_expression_text, "value")
        self.message_html = W.HTML()
        self.message_html.add_class("bitprism-message")
        self.caption_html = W.HTML()
        self.caption_html.add_class("bitprism-caption")
        self.header_html = W.HTML()
        self.header_html.add_class("bitprism-header-view")
        self.evaluation_html = W.HTML()
        self.bands_box = W.VBox()
        # the header's ruler rows sit in a box inset like a band's, so their columns line up
        self._header_box = W.VBox([self.header_html], layout=W.Layout(
            margin="2px 0 2px 0", padding="0 0 0 6px", border_left="3px solid transparent"))
        self.toolbar = Toolbar(self._on_action)
        wrap = W.Layout(flex_flow="row wrap", align_items="center")
        self._rows = [
            W.HBox([self.value_input, self.add_format_menu], layout=wrap),
            W.HBox([self.bits_format, self.bits_input], layout=wrap),
            W.HBox([self.rounding_menu, self.seed_input, self.overflow_menu,
                    self.subnormals_menu, self.path_menu, self.aligned_box],
                   layout=W.Layout(flex_flow="row wrap", align_items="center")),
        ]
        self._compute_row = W.HBox([self.expression_input], layout=W.Layout(flex_flow="row wrap"))

    def _layout_children(self) -> None:
        if self.compact:
            self.children = [self.message_html, self.caption_html, self._header_box,
                             self.bands_box]
            return
        self.children = [
            *self._rows,
            self.message_html,
            self.caption_html,
            self._header_box,
            self.toolbar.box,
            self.bands_box,
            self._compute_row,
            self.evaluation_html,
        ]

    @observe("compact")
    def _on_compact(self, change: Any) -> None:
        if self.children:
            self._layout_children()

    @observe("caption")
    def _on_caption(self, change: Any) -> None:
        self.caption_html.value = caption_html(change["new"])

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

    @observe("selected")
    def _on_selected(self, change: Any) -> None:
        if self._view is not None and not self._suspend:
            self._show_selection(self._view)

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
        if [b.format for b in self._bands] != list(view.formats):
            self._rebuild_bands(list(view.formats))
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
        ruler = make_ruler(c) if self.aligned else None
        return _View(
            comparison=c,
            formats=tuple(fmts),
            header=theme_css() + prism_css() + header_html(c, ruler),
            verdicts=tuple(verdict_html(c, row, name=False) for row in c.rows),
            details=tuple(band_detail_html(c, row, ruler) for row in c.rows),
            fields=tuple(raw_fields_html(row) for row in c.rows),
            bits=tuple(row.bits() for row in c.rows),
            evaluation=evaluation,
        )

    def _rebuild_bands(self, fmts: list[Format]) -> None:
        """Bands for added formats are built, bands of removed ones closed (with every widget
        under them), the others kept as they are."""
        old = {b.format: b for b in self._bands}
        bands = []
        for f in fmts:
            band = old.pop(f, None)
            bands.append(band if band is not None else
                         Band(self._looks, f, self._on_select, self._on_bit_click))
        self._bands = bands
        self.bands_box.children = [b.box for b in bands]
        for gone in old.values():
            gone.close()
        self._suspend += 1
        try:
            self.bits_format.options = [f.name for f in fmts]
        finally:
            self._suspend -= 1
        if not self.children:
            self._layout_children()

    def _show(self, view: _View) -> None:
        self.header_html.value = view.header
        for band, verdict, detail, fields, bits in zip(
                self._bands, view.verdicts, view.details, view.fields, view.bits):
            band.show(verdict, detail, fields, bits)
        self._show_selection(view)
        self._sync_controls()
        self.evaluation_html.value = view.evaluation

    def selected_row(self) -> FormatRow:
        """The row of the selected band (the first band when none is selected)."""
        c = self.comparison
        for row in c.rows:
            if row.format.name == self.selected:
                return row  # type: ignore[no-any-return]
        return c.rows[0]  # type: ignore[no-any-return]

    def _show_selection(self, view: _View) -> None:
        row = self.selected_row()
        for band in self._bands:
            band.select(band.format == row.format)
        self.toolbar.show(
            f'<span style="font-size:12px">selected <b>{row.format.name}</b>:</span>',
            {"down": f"{WORDS['down']}: {neighbour_text(row, 'down')}",
             "up": f"{WORDS['up']}: {neighbour_text(row, 'up')}",
             "remove": f"remove {row.format.name} from this Prism"})
        self._suspend += 1
        try:
            if self.bits_format.value != row.format.name:
                self.bits_format.value = row.format.name
        finally:
            self._suspend -= 1

    def _sync_controls(self) -> None:
        self._suspend += 1
        try:
            self.value_input.value = self.value
            self.rounding_menu.value = self.rounding
            self.overflow_menu.value = self.overflow
            self.subnormals_menu.value = self.subnormals
            paths = list(_PATHS)
            if self.via and self.via not in [v for _, v in paths]:
                paths.append((f"through {self.via} first", self.via))
            if list(self.path_menu.options) != paths:
                self.path_menu.options = paths
            self.path_menu.value = self.via
            self.aligned_box.value = self.aligned
            self.seed_input.value = "none" if self.seed is None else str(self.seed)
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
        self.submit_bits(change["new"], self.bits_format.value or self.selected_row().format)

    @guarded
    def _on_bits_format(self, change: Any) -> None:
        if self._suspend or not change["new"]:
            return
        self.selected = change["new"]  # "bits of" and the toolbar act on one band

    def submit_bits(self, text: str, fmt: Any = None) -> None:
        """Set one band's raw bit pattern (``fmt``: a shown format; None: the selected band);
        the others follow from its exact value. On error the last view stays and the message
        says why."""
        f = self.selected_row().format if fmt is None else self.shown_format(fmt)
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

    def select(self, fmt: Any) -> None:
        """Select a shown format's band (by name or ``Format``): the toolbar and the bits box
        act on it."""
        f = self.shown_format(fmt)
        if f not in self.format_objects:
            raise BitprismError(f"format {f.name!r} is not shown in this Prism")
        self.selected = f.name

    @guarded
    def _on_select(self, fmt: Format, button: Any = None) -> None:
        self.select(fmt)

    @guarded
    def _on_bit_click(self, fmt: Format, bit: int, button: Any = None) -> None:
        row = self.comparison.row(fmt)
        self.set_source(fmt, row.code ^ (1 << bit))

    @guarded
    def _on_action(self, action: str, button: Any = None) -> None:
        self.act(action)

    def act(self, action: str) -> None:
        """What a toolbar button does to the selected band: 'down', 'up' (its neighbours),
        'largest', 'normal', 'subnormal' (largest finite, smallest normal and smallest
        subnormal of its format) or 'remove'."""
        row = self.selected_row()
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
                self.selected = ""
            return
        if action in ("down", "up"):
            n = row.next_down if action == "down" else row.next_up
            if n is None:
                where = "below" if action == "down" else "above"
                self.message = f"{f.name}: no value {where} {row.shortest}"
                return
            code = n.code
        elif action == "largest":
            code = f.max_code
        elif action == "normal":
            code = (1 << f.significand_bits) if f.has_zero else 0
        elif action == "subnormal":
            code = 1 if f.has_subnormals else ((1 << f.significand_bits) if f.has_zero else 0)
        else:
            raise BitprismError(f"action must be one of down, up, largest, normal, subnormal, "
                                f"remove; got {action!r}")
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
        text = str(change["new"]).strip()
        try:
            if text.lower() in ("", "none"):
                seed = None
            else:
                try:
                    seed = int(text.replace("_", ""), 0)
                except ValueError:
                    raise BitprismError(
                        f"seed must be none or an integer in 0..2**63-1; got {text!r}") from None
            self.seed = check_seed(seed)
        except BitprismError:  # e.g. -1 or 2**63: not a seed a case file can hold
            self._suspend += 1
            try:
                self.seed_input.value = "none" if self.seed is None else str(self.seed)
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
