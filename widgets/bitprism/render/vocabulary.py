"""One vocabulary and one palette for every screen: outcome names, field names, units, colours.

Everything a person reads about what a cast did to a value comes from this table: the Prism's
verdicts, TensorPrism's cells and legend, the scan tables, the range chart, the exported page
and the command line. One outcome has one name, one short mark and one colour everywhere.

Outcomes (what a cast does to one value): exact, rounded, subnormal, underflow to zero,
overflow, NaN, Inf, and invalid (a negative value into an unsigned format).

Colours are chosen by the WCAG 2.1 formulas (§1.4.3 text contrast, §1.4.11 non-text
contrast), separately for JupyterLab's light page (#ffffff) and dark page (#111111), in three
tiers of luminance:

* tier 0: no fill, the page itself (rounded, the ordinary outcome of a cast);
* tier 1: fills at least 3:1 from the page (exact, subnormal);
* tier 2: fills at least 3:1 from the page and from every tier-1 fill (underflow to zero,
  overflow, NaN, Inf, invalid).

So any two outcomes of different tiers sit at least 3:1 apart in both themes. Outcomes of one
tier differ in hue and always in their mark and words: colour is never the only carrier. Text on
every fill contrasts at least 4.5:1. ``tests/test_palette.py`` computes every one of these
ratios. A static page cannot know the theme: the light colours are the inline defaults and
``theme_css()`` switches them for JupyterLab's dark theme where a ``<style>`` element is kept.
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = [
    "DARK_PAGE",
    "FIELDS",
    "LIGHT_PAGE",
    "OUTCOMES",
    "OUTCOME_ORDER",
    "SCALES",
    "UNITS",
    "WORDS",
    "Colour",
    "Field",
    "Outcome",
    "Scale",
]

LIGHT_PAGE = "#ffffff"  # JupyterLab light theme, --jp-layout-color0
DARK_PAGE = "#111111"  # JupyterLab dark theme, --jp-layout-color0


@dataclass(frozen=True)
class Colour:
    """A fill and the text colour on it (``fill`` None: no fill, the page's own colours)."""

    fill: str | None
    text: str | None


@dataclass(frozen=True)
class Outcome:
    """What a cast did to one value.

    Attributes:
        key: the stable key (also the CSS class suffix and the JSON word).
        name: the words shown to a person ("underflow to zero").
        mark: a short mark shown with the colour in cells and badges ("→0").
        tier: 0 (no fill), 1 or 2 (see the module docstring).
        light, dark: the colours in JupyterLab's light and dark themes.
        meaning: one sentence a legend or tooltip gives.
    """

    key: str
    name: str
    mark: str
    tier: int
    light: Colour
    dark: Colour
    meaning: str


_PLAIN = Colour(None, None)

OUTCOMES: dict[str, Outcome] = {
    o.key: o
    for o in (
        Outcome("exact", "exact", "=", 1, Colour("#5f9c6f", "#000000"), Colour("#3c6b4a", "#ffffff"),
                "the format holds the value exactly"),
        Outcome("rounded", "rounded", "≈", 0, _PLAIN, _PLAIN,
                "rounded to a neighbouring value of the format"),
        Outcome("subnormal", "subnormal", "sub", 1, Colour("#a087cf", "#000000"),
                Colour("#6a52a6", "#ffffff"),
                "lands among the subnormal numbers, with fewer significant bits"),
        Outcome("underflow", "underflow to zero", "→0", 2, Colour("#353c49", "#ffffff"),
                Colour("#b7c2d6", "#000000"), "a nonzero value became zero"),
        Outcome("overflow", "overflow", "↑", 2, Colour("#682800", "#ffffff"),
                Colour("#ffaf70", "#000000"),
                "beyond the largest finite value: Inf, NaN or the largest finite value"),
        Outcome("nan", "NaN", "NaN", 2, Colour("#7a1057", "#ffffff"), Colour("#f4a2dc", "#000000"),
                "not a number"),
        Outcome("inf", "Inf", "∞", 2, Colour("#7d1212", "#ffffff"), Colour("#ff9a9a", "#000000"),
                "infinity"),
        Outcome("invalid", "invalid", "✕", 2, Colour("#2f2f2f", "#ffffff"),
                Colour("#cfcfcf", "#000000"), "a negative value sent to an unsigned format"),
    )
}
OUTCOME_ORDER: tuple[str, ...] = tuple(OUTCOMES)


@dataclass(frozen=True)
class Field:
    """One field of an encoding: its words, its one-letter tag and its tile colour (one colour
    for both themes: it stands 3:1 from either page)."""

    key: str
    name: str
    tag: str
    colour: Colour


FIELDS: dict[str, Field] = {
    f.key: f
    for f in (
        Field("sign", "sign", "s", Colour("#6f51b4", "#ffffff")),  # ink-violet
        Field("exponent", "biased exponent", "e", Colour("#8f5d00", "#ffffff")),  # amber
        Field("significand", "trailing significand", "t", Colour("#00707a", "#ffffff")),  # teal
        Field("implicit", "implicit leading bit", "i", _PLAIN),  # dashed outline
        Field("dropped", "bits the cast drops", "d", Colour("#6b6b6b", "#ffffff")),  # struck
    )
}

# Units and the other words every screen uses (one spelling each).
UNITS: dict[str, str] = {"ulp": "ULP", "relative": "relative"}
WORDS: dict[str, str] = {
    "largest": "largest finite",
    "normal": "smallest normal",
    "subnormal": "smallest subnormal",
    "up": "next up",
    "down": "next down",
    "remove": "remove",
    "quiet": "quiet NaN",
    "signaling": "signaling NaN",
    "payload": "payload",
}


@dataclass(frozen=True)
class Scale:
    """Two steps of one hue, for the views that colour cells by a number (TensorPrism's value,
    error and compare views; its class view's zero cells take the grey scale's first step).

    Step 0 is the page itself (no fill). In each theme step 1 stands at least 3:1 from the
    page and step 2 at least 3:1 from step 1 (WCAG 2.1 §1.4.11), and text on either contrasts
    at least 4.5:1 (§1.4.3): two steps are as many as fit between a page and the far end of
    the luminance range with 3:1 between neighbours. The hues are the field colours' (the grey
    is neutral); ``tests/test_tensor_prism.py`` computes the ratios.

    Attributes:
        key: the hue ("violet", "teal", "amber", "grey"), also the CSS variable suffix.
        light, dark: (step 1, step 2) colours in JupyterLab's light and dark themes.
    """

    key: str
    light: tuple[Colour, Colour]
    dark: tuple[Colour, Colour]


SCALES: dict[str, Scale] = {
    s.key: s
    for s in (
        Scale("violet", (Colour("#917ac5", "#000000"), Colour("#402d6a", "#ffffff")),
              (Colour("#785cb9", "#ffffff"), Colour("#cec4e5", "#000000"))),
        Scale("teal", (Colour("#0094a2", "#000000"), Colour("#003f45", "#ffffff")),
              (Colour("#007882", "#ffffff"), Colour("#7fd6de", "#000000"))),
        Scale("amber", (Colour("#b97900", "#000000"), Colour("#4e3300", "#ffffff")),
              (Colour("#956100", "#ffffff"), Colour("#ffbd41", "#000000"))),
        Scale("grey", (Colour("#878787", "#000000"), Colour("#383838", "#ffffff")),
              (Colour("#6d6d6d", "#ffffff"), Colour("#c9c9c9", "#000000"))),
    )
}
