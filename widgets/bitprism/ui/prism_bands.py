"""The widgets of a Prism's bands and of its one toolbar (standard ipywidgets only).

A band is: its format's name (a button: click to select the band), the verdict, the band's
row on the ruler with the stored value and errors (markup from ``render.compare_html``), and
the raw encoding as one small button per bit (click to flip), coloured by field. Bands are
built once per format and reused while the format stays shown; a removed band is closed with
everything under it (``widget_tree.close_tree``). Layouts and button styles are shared by all
bands of a Prism, so a band costs its own widgets only.
"""

from __future__ import annotations

import functools
from typing import Any, Callable

import ipywidgets as W
from ipywidgets.widgets.widget_string import HTMLStyle

from ..formats import Format
from ..render.palette import button_colors
from ..render.vocabulary import FIELDS, WORDS
from .widget_tree import close_tree

__all__ = ["ACTIONS", "Band", "SharedLooks", "Toolbar"]

# toolbar actions: (key, words, tooltip)
ACTIONS: tuple[tuple[str, str, str], ...] = (
    ("down", WORDS["down"], "the value below, in the selected format"),
    ("up", WORDS["up"], "the value above, in the selected format"),
    ("largest", WORDS["largest"], "the largest finite value of the selected format"),
    ("normal", WORDS["normal"], "the smallest normal value of the selected format"),
    ("subnormal", WORDS["subnormal"], "the smallest subnormal value of the selected format"),
    ("remove", WORDS["remove"], "remove the selected format from this Prism"),
)
_ROLES = ("sign", "exponent", "significand")


class SharedLooks:
    """Layouts and styles every band of one Prism uses (made once, never closed with a band)."""

    def __init__(self) -> None:
        # 11 px + 1 px apart: float64's 64 bits fit one line of an 848-px output column
        self.bit = W.Layout(width="11px", height="18px", padding="0", margin="0 1px 0 0")
        self.field_start = W.Layout(width="11px", height="18px", padding="0",
                                    margin="0 1px 0 5px")
        self.bit_styles = {}
        for role in _ROLES:
            fill, text = button_colors(role)
            self.bit_styles[role] = W.ButtonStyle(button_color=fill, text_color=text,
                                                  font_size="10px")
        self.name = W.Layout(width="auto", height="22px", padding="0 6px", margin="0 6px 0 0")
        self.name_style = W.ButtonStyle(font_weight="bold")
        self.html = W.Layout(margin="0")
        self.verdict = W.Layout(margin="0", flex="1 1 220px", min_width="0")
        self.fields = W.Layout(margin="0 0 0 6px", flex="1 1 200px", min_width="0")
        self.html_style = HTMLStyle()
        self.row = W.Layout(flex_flow="row wrap", align_items="center", margin="0")
        self.band = W.Layout(margin="2px 0 6px 0", padding="0 0 0 6px",
                             border_left="3px solid transparent")
        self.band_selected = W.Layout(margin="2px 0 6px 0", padding="0 0 0 6px",
                                      border_left="3px solid #6f51b4")

    def widgets(self) -> list[W.Widget]:
        return [self.bit, self.field_start, *self.bit_styles.values(), self.name,
                self.name_style, self.html, self.verdict, self.fields, self.html_style,
                self.row, self.band, self.band_selected]

    def html_widget(self, layout: W.Layout | None = None) -> W.HTML:
        return W.HTML(layout=layout or self.html, style=self.html_style)


class Band:
    """The widgets of one format's band (kept while the format is shown)."""

    def __init__(self, looks: SharedLooks, fmt: Format,
                 on_select: Callable[..., Any], on_bit: Callable[..., Any]) -> None:
        self.format = fmt
        self.looks = looks
        self.name = W.Button(description=fmt.name, layout=looks.name, style=looks.name_style,
                             tooltip=f"select {fmt.name}: the toolbar and the bits box act on it")
        self.name.add_class("bitprism-band-name")
        self.name.on_click(functools.partial(on_select, fmt))
        self.verdict = looks.html_widget(looks.verdict)
        self.verdict.add_class("bitprism-verdict-line")
        self.detail = looks.html_widget()
        self.fields = looks.html_widget(looks.fields)
        self.bits: list[W.Button] = []
        s, w, t = fmt.sign_bits, fmt.exponent_bits, fmt.significand_bits
        roles = ["sign"] * s + ["exponent"] * w + ["significand"] * t
        starts = {0, s, s + w}
        for pos, role in enumerate(roles):
            bit_number = fmt.bits - 1 - pos  # weight of this bit in the code
            b = W.Button(
                description="0",
                tooltip=f"{fmt.name} bit {bit_number}: {FIELDS[role].name} (click to flip)",
                layout=looks.field_start if pos in starts and pos else looks.bit,
                style=looks.bit_styles[role],
            )
            b.add_class("bitprism-bit")
            b.add_class(f"bitprism-{role}")
            b.on_click(functools.partial(on_bit, fmt, bit_number))
            self.bits.append(b)
        self.head = W.HBox([self.name, self.verdict], layout=looks.row)
        self.raw = W.HBox([*self.bits, self.fields], layout=looks.row)
        self.raw.add_class("bitprism-raw-line")
        self.box = W.VBox([self.head, self.detail, self.raw], layout=looks.band)
        self.box.add_class("bitprism-band")
        self.selected = False

    def show(self, verdict: str, detail: str, fields: str, bits: str) -> None:
        if self.verdict.value != verdict:
            self.verdict.value = verdict
        if self.detail.value != detail:
            self.detail.value = detail
        if self.fields.value != fields:
            self.fields.value = fields
        for b, ch in zip(self.bits, bits):
            if b.description != ch:  # skip the trait machinery for unchanged bits
                b.description = ch

    def select(self, on: bool) -> None:
        if on == self.selected:
            return
        self.selected = on
        self.box.layout = self.looks.band_selected if on else self.looks.band
        if on:
            self.box.add_class("bitprism-selected")
        else:
            self.box.remove_class("bitprism-selected")

    def close(self) -> None:
        close_tree(self.box, self.looks.widgets())


class Toolbar:
    """One row of buttons acting on the selected band."""

    def __init__(self, on_action: Callable[..., Any]) -> None:
        self.label = W.HTML()
        self.label.add_class("bitprism-toolbar-label")
        layout = W.Layout(width="auto", height="26px", margin="1px 2px")
        self.buttons: dict[str, W.Button] = {}
        for key, words, tip in ACTIONS:
            b = W.Button(description=words, tooltip=tip, layout=layout)
            b.add_class(f"bitprism-{key}")
            b.on_click(functools.partial(on_action, key))
            self.buttons[key] = b
        self.box = W.HBox([self.label, *self.buttons.values()],
                          layout=W.Layout(flex_flow="row wrap", align_items="center"))
        self.box.add_class("bitprism-toolbar")

    def __getattr__(self, name: str) -> W.Button:
        buttons = self.__dict__.get("buttons", {})
        if name in buttons:
            return buttons[name]  # type: ignore[no-any-return]
        raise AttributeError(name)

    def show(self, label: str, tips: dict[str, str]) -> None:
        if self.label.value != label:
            self.label.value = label
        for key, tip in tips.items():
            b = self.buttons[key]
            if b.tooltip != tip:
                b.tooltip = tip
