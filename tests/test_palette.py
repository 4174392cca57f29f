"""Contrast of bitprism's colours, computed here from the WCAG 2.x formulas.

Source: WCAG 2.1 §1.4.3 contrast (minimum), relative luminance definition (sRGB channel
linearisation with the 0.04045 threshold, luminance 0.2126 R + 0.7152 G + 0.0722 B, ratio
(L1 + 0.05) / (L2 + 0.05)); WCAG 2.1 §1.4.11 non-text contrast (3:1) for the filled tiles.
"""

from __future__ import annotations

import pytest

from bitprism.render.palette import BADGES, DARK_PAGE, LIGHT_PAGE, SWATCHES, TILES, tile_style


def _channel(c8: int) -> float:
    c = c8 / 255
    return c / 12.92 if c <= 0.04045 else ((c + 0.055) / 1.055) ** 2.4


def luminance(hex_colour: str) -> float:
    h = hex_colour.lstrip("#")
    r, g, b = (int(h[i : i + 2], 16) for i in (0, 2, 4))
    return 0.2126 * _channel(r) + 0.7152 * _channel(g) + 0.0722 * _channel(b)


def contrast(a: str, b: str) -> float:
    hi, lo = sorted((luminance(a), luminance(b)), reverse=True)
    return (hi + 0.05) / (lo + 0.05)


def test_formula_on_known_pairs() -> None:
    assert contrast("#000000", "#ffffff") == pytest.approx(21.0)
    assert contrast("#777777", "#ffffff") == pytest.approx(4.48, abs=0.01)  # just below AA


@pytest.mark.parametrize("swatch", SWATCHES, ids=lambda s: s.role)
def test_text_on_every_tile_and_badge(swatch) -> None:
    # the element sets its own text colour on its own fill: the same in light and dark themes
    assert contrast(swatch.text, swatch.background) >= 4.5


@pytest.mark.parametrize("page", [LIGHT_PAGE, DARK_PAGE], ids=["light", "dark"])
@pytest.mark.parametrize("role", sorted(TILES))
def test_filled_tiles_stand_out_in_both_themes(role: str, page: str) -> None:
    assert TILES[role].filled_tile
    assert contrast(TILES[role].background, page) >= 3.0


def test_fields_distinct_without_colour() -> None:
    # colour is not the only cue: dropped bits are struck through, the implicit bit dashed
    assert "line-through" in tile_style("dropped")
    assert "dashed" in tile_style("implicit")
    assert len({s.background for s in TILES.values()}) == len(TILES)
    assert {"nan", "inf", "subnormal", "zero"} <= set(BADGES)


# ----- the outcome vocabulary (render/vocabulary.py) -----------------------------------------

from bitprism.render.palette import outcome_badge, outcome_style, theme_css  # noqa: E402
from bitprism.render.vocabulary import OUTCOMES  # noqa: E402

THEMES = {"light": LIGHT_PAGE, "dark": DARK_PAGE}


def _fill(key: str, theme: str) -> str:
    colour = getattr(OUTCOMES[key], theme)
    return colour.fill or THEMES[theme]  # no fill: the page itself


@pytest.mark.parametrize("theme", sorted(THEMES))
@pytest.mark.parametrize("key", sorted(OUTCOMES))
def test_outcome_fills_stand_out_and_carry_readable_text(key: str, theme: str) -> None:
    # WCAG 2.1 §1.4.11: a fill that carries meaning 3:1 from the page; §1.4.3: text 4.5:1
    colour = getattr(OUTCOMES[key], theme)
    if OUTCOMES[key].tier == 0:
        assert colour.fill is None
        return
    assert contrast(colour.fill, THEMES[theme]) >= 3.0
    assert contrast(colour.fill, colour.text) >= 4.5


@pytest.mark.parametrize("theme", sorted(THEMES))
def test_outcomes_of_different_tiers_sit_3_to_1_apart(theme: str) -> None:
    # any two cells of a grid can be neighbours: fills of different tiers 3:1 apart
    for a in OUTCOMES:
        for b in OUTCOMES:
            if OUTCOMES[a].tier < OUTCOMES[b].tier:
                assert contrast(_fill(a, theme), _fill(b, theme)) >= 3.0, (a, b)


def test_outcomes_of_one_tier_differ_by_words_and_marks() -> None:
    # colour is never the only carrier (WCAG 2.1 §1.4.1): every outcome has its own mark
    assert len({o.mark for o in OUTCOMES.values()}) == len(OUTCOMES)
    assert len({o.name for o in OUTCOMES.values()}) == len(OUTCOMES)
    assert OUTCOMES["underflow"].name == "underflow to zero"


def test_dark_theme_switch_sets_every_filled_outcome() -> None:
    css = theme_css()
    for key, o in OUTCOMES.items():
        if o.dark.fill is not None:
            assert f"--bp-{key}-fill:{o.dark.fill}" in css
            assert f"var(--bp-{key}-fill,{o.light.fill})" in outcome_style(key)
    assert outcome_style("rounded") == ""
    assert "&lt;" not in outcome_badge("overflow") and "↑ overflow" in outcome_badge("overflow")
