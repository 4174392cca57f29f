"""The Prism widget driven headless: set traits, click buttons, submit text, read what it shows."""

from __future__ import annotations

from fractions import Fraction

import numpy as np
import pytest
from traitlets import TraitError

from bitprism.formats import Format
from bitprism.ui.prism import Prism

FMTS = ["float32", "bfloat16", "float16", "float8_e4m3fn"]


def _band(p: Prism, name: str):
    i = [f.name for f in p.format_objects].index(name)
    return p._bands[i]


def test_builds_bands_and_css_classes() -> None:
    p = Prism("0.1", formats=FMTS)
    assert "bitprism-prism" in p._dom_classes
    assert "bitprism-value-input" in p.value_input._dom_classes
    assert "bitprism-message" in p.message_html._dom_classes
    assert len(p._bands) == 4 and all("bitprism-band" in b.box._dom_classes for b in p._bands)
    assert all("bitprism-bit" in b._dom_classes for b in _band(p, "float16").bits)
    assert len(_band(p, "float16").bits) == 16
    # binary16 0x2E66 = 819/8192 = roundTiesToEven(1/10) (IEEE 754-2008 Table 3.5 layout,
    # §4.3.1; from library: numpy float16(0.1))
    assert p.comparison.row("float16").code == 0x2E66
    bits = "".join(b.description for b in _band(p, "float16").bits)
    assert bits == format(0x2E66, "016b")
    assert "bitprism-band" in p._repr_mimebundle_()["text/html"]


def test_new_value_changes_bands() -> None:
    p = Prism("0.1", formats=FMTS)
    before = _band(p, "bfloat16").html.value
    p.value_input.value = "1/3"  # Enter in the text box (continuous_update=False)
    # bfloat16 0x3EAB = 171/512 = roundTiesToEven(1/3) (from library: ml_dtypes 0.7 bfloat16)
    assert p.value == "1/3" and p.comparison.row("bfloat16").code == 0x3EAB
    assert _band(p, "bfloat16").html.value != before
    p.value = np.float32(0.1)  # numbers are stored as exact text
    assert p.value == "0.100000001490116119384765625"
    assert p.comparison.row("float32").code == 0x3DCCCCCD


def test_bad_input_shows_column_and_keeps_view() -> None:
    p = Prism("0.1", formats=FMTS)
    kept = p.comparison
    p.submit_value("1 + * 2")
    assert "(column 5)" in p.message  # the '*' where a number was expected
    assert "column 5" in p.message_html.value
    assert p.comparison is kept and p.value == "0.1"
    p.submit_value("2")
    assert p.message == "" and p.comparison.row("float16").stored.value == 2
    with pytest.raises(TraitError):
        p.value = "1 +"


def test_bit_flip_makes_band_the_source() -> None:
    p = Prism("1", formats=FMTS)
    band = _band(p, "float16")
    band.bits[-1].click()  # lowest trailing significand bit: 1 -> 1 + 2^-10
    assert p.source_format == "float16"
    assert p.comparison.row("float16").code == 0x3C01
    assert Fraction(p.value) == 1 + Fraction(1, 1024)
    assert p.comparison.row("float32").stored.value == 1 + Fraction(1, 1024)
    band.bits[0].click()  # sign bit
    assert p.comparison.row("float16").code == 0xBC01


def test_neighbour_and_jump_buttons() -> None:
    p = Prism("1", formats=FMTS)
    _band(p, "bfloat16").up.click()
    assert p.comparison.row("bfloat16").stored.value == 1 + Fraction(1, 128)
    _band(p, "bfloat16").down.click()
    _band(p, "bfloat16").down.click()
    assert p.comparison.row("bfloat16").stored.value == 1 - Fraction(1, 256)
    _band(p, "float16").largest.click()
    assert p.comparison.row("float16").shortest == "65500.0"
    _band(p, "float16").subnormal.click()
    assert p.comparison.row("float16").stored.value == Fraction(1, 2**24)
    _band(p, "float8_e4m3fn").normal.click()
    assert p.comparison.row("float8_e4m3fn").stored.value == Fraction(1, 64)


def test_option_dropdowns_change_codes() -> None:
    p = Prism("0.1", formats=FMTS)
    assert p.comparison.row("bfloat16").code == 0x3DCD
    p.rounding_menu.value = "roundTowardZero"
    assert p.rounding == "roundTowardZero" and p.comparison.row("bfloat16").code == 0x3DCC
    p.value = "1e6"
    p.overflow_menu.value = "saturate"
    assert p.comparison.row("float16").code == 0x7BFF
    p.value = "1 + 2**-8 + 2**-30"
    p.rounding = "roundTiesToEven"
    # double rounding (from library: ml_dtypes 0.7): 1 + 2^-8 + 2^-30 -> bfloat16 directly
    # 1.0078125, through float32 first 1.0
    p.via_menu.value = "float32"
    assert p.via == "float32" and p.comparison.row("bfloat16").stored.value == 1
    p.subnormals_menu.value = "flush"
    p.value = "2**-20"
    assert p.comparison.row("float16").stored.is_zero


def test_formats_add_remove_and_custom() -> None:
    p = Prism("0.1", formats=["float16"])
    p.add_format_menu.value = "float8_e5m2"
    assert [f.name for f in p.format_objects] == ["float16", "float8_e5m2"]
    custom = Format("e3m3", 3, 3, specials="finite")
    p.formats = [*p.formats, custom]
    assert p.comparison.row(custom).format is custom and len(p._bands) == 3
    _band(p, "e3m3").remove.click()
    assert len(p._bands) == 2


def test_expression_row_shows_absorption() -> None:
    p = Prism("0.1", formats=["float32", "float16"])
    p.expression_input.value = "2048 + 1"
    html = p.evaluation_html.value
    assert "absorbed" in html and "2049.0" in html and "2048.0" in html
    p.expression_input.value = "2048 +"
    assert "column" in p.message


def test_callback_errors_reach_message_area() -> None:
    p = Prism("0.1", formats=["float16"])
    p.bits_format.value = "float16"
    p.bits_input.value = "0x3c00"
    assert p.comparison.row("float16").stored.value == 1
    p.bits_input.value = "0xZZ"
    assert "column" in p.message
    p.rounding_menu.value = "stochastic"
    p.seed_input.value = 3
    assert p.seed == 3 and p.message == ""


def test_one_parse_per_enter(monkeypatch: pytest.MonkeyPatch) -> None:
    """Enter in the value box parses the text once; the validation and the refresh that
    follow use the kept exact value (they parsed it again, three times in all, before)."""
    import bitprism.numerics.parse as parse_module

    p = Prism("0.1", formats=["float32", "bfloat16", "float16"])
    calls: list[str] = []
    real = parse_module.parse_tree
    monkeypatch.setattr(parse_module, "parse_tree", lambda text: calls.append(text) or real(text))
    p.submit_value(" 65504*2 ")
    assert len(calls) == 1 and p.comparison.text == "65504*2"
    assert p.comparison.row("float16").overflowed
    p.rounding = "roundTowardZero"  # a new rounding: the same value, not parsed again
    assert len(calls) == 1 and p.comparison.row("float16").code == 0x7BFF  # saturates to max
