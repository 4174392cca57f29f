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
