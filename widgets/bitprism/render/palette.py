"""Inline styles built from the vocabulary's colours: field tiles, outcome fills and badges,
and the style block that switches them for JupyterLab's dark theme.

Field tiles: sign ink-violet, biased exponent amber, trailing significand teal; the implicit
leading bit is a dashed outline in the page's own text colour; bits a cast drops are grey and
struck through. Outcome colours and their tiers are in ``render.vocabulary``.

Outcome fills are written as ``var(--bp-<outcome>-fill, <light colour>)``: with no style block
(a sanitized notebook, an offline page) the light colours apply; ``theme_css()`` is a
``<style>`` element that sets the variables to the dark colours under JupyterLab's dark theme
(``body[data-jp-theme-light="false"]``). Every element that uses them sits inside an element
of class ``bitprism``.
"""

from __future__ import annotations

from dataclasses import dataclass
from html import escape

from .vocabulary import DARK_PAGE, FIELDS, LIGHT_PAGE, OUTCOMES

__all__ = [
    "BADGES",
    "DARK_PAGE",
    "LIGHT_PAGE",
    "SWATCHES",
    "Swatch",
    "TABLE_BOX",
    "TABLE_TD",
    "TABLE_TH",
    "TILES",
    "badge_style",
    "button_colors",
    "outcome_badge",
    "outcome_style",
    "theme_css",
    "tile_style",
]


# the box and cells of every result table (scan, scale sweep, granularity comparison, replay)
TABLE_BOX = (
    "font-family:ui-monospace,SFMono-Regular,Menlo,Consolas,monospace;font-size:12px;"
    "color:var(--jp-ui-font-color0,#1f2328);background:var(--jp-layout-color0,#ffffff);"
    "border:1px solid var(--jp-border-color1,#d0d7de);border-radius:6px;"
    "padding:8px 10px;display:inline-block;max-width:100%;overflow-x:auto;line-height:1.4"
)
TABLE_TH = ("text-align:right;padding:2px 8px;border-bottom:1px solid var(--jp-border-color1,#d0d7de);"
            "font-weight:600")
TABLE_TD = "text-align:right;padding:2px 8px;white-space:nowrap"


@dataclass(frozen=True)
class Swatch:
    """One coloured element: its role, fill and text colour.

    Attributes:
        role: what it marks ('sign', 'exponent', ..., 'nan', 'inf', ...).
        label: the words shown or put in the tooltip for it.
        background: fill colour (hex, light theme).
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
    key: Swatch(key, f.name, f.colour.fill, f.colour.text or "#ffffff", True)
    for key, f in FIELDS.items()
    if f.colour.fill is not None
}

# Badges: the outcomes with a fill, and the classes of an input value (zero and normal are
# neutral: a class, not something a cast did).
BADGES: dict[str, Swatch] = {
    key: Swatch(key, o.name, o.light.fill, o.light.text or "#000000")
    for key, o in OUTCOMES.items()
    if o.light.fill is not None
}
BADGES["zero"] = Swatch("zero", "zero", "#5f6368", "#ffffff")
BADGES["normal"] = Swatch("normal", "normal", "#e6e6e6", "#1f1f1f")
BADGES["flag"] = Swatch("flag", "event", "#fff1c7", "#4a3500")

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


def outcome_style(key: str) -> str:
    """Inline CSS colours of an outcome (empty for 'rounded', which has no fill), switched by
    ``theme_css`` under the dark theme."""
    o = OUTCOMES[key]
    if o.light.fill is None:
        return ""
    return (
        f"background:var(--bp-{key}-fill,{o.light.fill});"
        f"color:var(--bp-{key}-text,{o.light.text})"
    )


_PILL = "padding:0 5px;border-radius:8px;font-size:85%;white-space:nowrap"


def badge_style(role: str) -> str:
    """Inline CSS for a badge: an outcome ('overflow', 'nan', ...; theme-switched) or an input
    class ('zero', 'normal', 'flag')."""
    if role in OUTCOMES:
        colours = outcome_style(role) or "border:1px solid currentColor"
        return f"{colours};{_PILL}"
    s = BADGES[role]
    return f"background:{s.background};color:{s.text};{_PILL}"


def outcome_badge(key: str, text: str | None = None) -> str:
    """A badge naming an outcome: its mark and words (or ``text``), escaped."""
    o = OUTCOMES[key]
    words = text if text is not None else f"{o.mark} {o.name}" if o.mark != o.name else o.name
    return f'<span class="bitprism-{key}" title="{escape(o.meaning)}" style="{badge_style(key)}">{escape(words)}</span>'


def button_colors(role: str) -> tuple[str, str]:
    """(fill, text) for a per-bit toggle button of a field, for the widget layer."""
    s = TILES[role]
    return s.background, s.text


def theme_css() -> str:
    """A ``<style>`` element setting the outcome colours for JupyterLab's dark theme."""
    dark = ";".join(
        f"--bp-{key}-fill:{o.dark.fill};--bp-{key}-text:{o.dark.text}"
        for key, o in OUTCOMES.items()
        if o.dark.fill is not None
    )
    return f'<style>body[data-jp-theme-light="false"] .bitprism{{{dark}}}</style>'

