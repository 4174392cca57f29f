"""bitprism's visual identity: field tiles, class badges, and the inline styles built from them.

Field tiles: sign ink-violet, biased exponent amber, trailing significand teal; the implicit
leading bit is a dashed outline in the page's own text colour; bits a cast drops are grey and
struck through. Class badges: NaN magenta, Inf deep red, subnormal lilac, zero grey.

Every tile and badge sets its own text colour on its own background, so the text contrast does
not depend on the JupyterLab theme; it is at least 4.5:1 (WCAG 2.1 §1.4.3). Filled tiles also
stand out from both theme backgrounds by at least 3:1 (WCAG 2.1 §1.4.11 non-text contrast), and
colour is never the only cue: every field carries its name in a ``title`` tooltip and a caption
row names the fields in words (``tests/test_palette.py`` computes the ratios).
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = [
    "BADGES",
    "DARK_PAGE",
    "LIGHT_PAGE",
    "SWATCHES",
    "TILES",
    "Swatch",
    "badge_style",
    "button_colors",
    "tile_style",
]

# Page backgrounds of JupyterLab's light and dark themes (--jp-layout-color0).
LIGHT_PAGE = "#ffffff"
DARK_PAGE = "#111111"


@dataclass(frozen=True)
class Swatch:
    """One coloured element: its role, fill and text colour.

    Attributes:
        role: what it marks ('sign', 'exponent', ..., 'nan', 'inf', ...).
        label: the words shown or put in the tooltip for it.
        background: fill colour (hex).
        text: text colour on that fill (hex).
        filled_tile: True for bit tiles that must stand out from the page (3:1 against both
            theme backgrounds); badges hold words, so only their text contrast applies.
    """

    role: str
    label: str
    background: str
    text: str
    filled_tile: bool = False


TILES: dict[str, Swatch] = {
    "sign": Swatch("sign", "sign", "#6f51b4", "#ffffff", True),  # ink-violet
    "exponent": Swatch("exponent", "biased exponent", "#8f5d00", "#ffffff", True),  # amber
    "significand": Swatch(
        "significand", "trailing significand", "#00707a", "#ffffff", True
    ),  # teal
    "dropped": Swatch(
        "dropped", "bit the cast drops", "#6b6b6b", "#ffffff", True
    ),  # grey, struck through
}

BADGES: dict[str, Swatch] = {
    "nan": Swatch("nan", "NaN", "#b51c80", "#ffffff"),  # magenta
    "inf": Swatch("inf", "Inf", "#8b1a1a", "#ffffff"),  # deep red
    "overflow": Swatch("overflow", "overflow", "#b54708", "#ffffff"),  # burnt orange
    "subnormal": Swatch("subnormal", "subnormal", "#dccbf2", "#3a2160"),  # lilac
    "zero": Swatch("zero", "zero", "#5f6368", "#ffffff"),  # grey
    "normal": Swatch("normal", "normal", "#e6e6e6", "#1f1f1f"),  # neutral
    "flag": Swatch("flag", "event", "#fff1c7", "#4a3500"),  # overflow / underflow notes
}

SWATCHES: tuple[Swatch, ...] = tuple(TILES.values()) + tuple(BADGES.values())

_TILE_BASE = "padding:1px 2px;border-radius:2px;letter-spacing:0.25em"


def tile_style(role: str, aligned: bool = False) -> str:
    """Inline CSS for a run of bit tiles of one field ('sign', 'exponent', 'significand',
    'dropped') or the implicit bit ('implicit': dashed outline in the page's text colour).

    ``aligned``: no padding or letter spacing, so one character stays one column of the
    weight-aligned view in every row.
    """
    base = "" if aligned else _TILE_BASE
    if role == "implicit":
        # outline, not border: it takes no width, so weight-aligned columns stay aligned
        pad = "" if aligned else ";padding:1px 2px"
        return f"outline:1px dashed currentColor;outline-offset:-1px{pad}"
    s = TILES[role]
    extra = ";text-decoration:line-through" if role == "dropped" else ""
    return f"background:{s.background};color:{s.text}" + (f";{base}" if base else "") + extra


def badge_style(role: str) -> str:
    """Inline CSS for a class or event badge ('nan', 'inf', 'subnormal', 'zero', 'normal',
    'flag')."""
    s = BADGES[role]
    return (
        f"background:{s.background};color:{s.text};padding:0 5px;border-radius:8px;"
        "font-size:85%;white-space:nowrap"
    )


def button_colors(role: str) -> tuple[str, str]:
    """(fill, text) for a per-bit toggle button of a field, for the widget layer."""
    s = TILES[role]
    return s.background, s.text
