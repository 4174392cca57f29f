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
    before = _band(p, "bfloat16").detail.value
    p.value_input.value = "1/3"  # Enter in the text box (continuous_update=False)
    # bfloat16 0x3EAB = 171/512 = roundTiesToEven(1/3) (from library: ml_dtypes 0.7 bfloat16)
    assert p.value == "1/3" and p.comparison.row("bfloat16").code == 0x3EAB
    assert _band(p, "bfloat16").detail.value != before
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
    """One toolbar acts on the selected band (a click on the band's name selects it)."""
    p = Prism("1", formats=FMTS)
    assert p.selected_row().format.name == "float32"  # the first band until one is chosen
    _band(p, "bfloat16").name.click()
    assert p.selected == "bfloat16" and p.bits_format.value == "bfloat16"
    assert "bitprism-selected" in _band(p, "bfloat16").box._dom_classes
    assert "bitprism-selected" not in _band(p, "float32").box._dom_classes
    p.toolbar.up.click()
    assert p.comparison.row("bfloat16").stored.value == 1 + Fraction(1, 128)
    p.toolbar.down.click()
    p.toolbar.down.click()
    assert p.comparison.row("bfloat16").stored.value == 1 - Fraction(1, 256)
    _band(p, "float16").name.click()
    p.toolbar.largest.click()
    assert p.comparison.row("float16").stored.value == 65504  # binary16 max (IEEE 754 §3.6)
    p.toolbar.subnormal.click()
    assert p.comparison.row("float16").stored.value == Fraction(1, 2**24)
    _band(p, "float8_e4m3fn").name.click()
    p.toolbar.normal.click()
    assert p.comparison.row("float8_e4m3fn").stored.value == Fraction(1, 64)
    assert [b.description for b in p.toolbar.buttons.values()] == [
        "next down", "next up", "largest finite", "smallest normal", "smallest subnormal",
        "remove"]


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
    assert [label for label, _ in p.path_menu.options] == ["one rounding",
                                                           "through float32 first"]
    p.path_menu.value = "float32"
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
    _band(p, "e3m3").name.click()
    p.toolbar.remove.click()
    assert len(p._bands) == 2 and p.selected_row().format.name == "float16"


def test_expression_row_shows_absorption() -> None:
    p = Prism("0.1", formats=["float32", "float16"])
    p.expression_input.value = "2048 + 1"
    html = p.evaluation_html.value
    # evaluate()'s own words for the cause: 2048 + 1 = 2049 -> 2048 in float16 (11 bits)
    assert "absorbed addend" in html and "2049" in html and "2048" in html
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
    p.seed_input.value = "3"
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


# ----- issue 16: bad input gets a BitprismError, a view that cannot be built is not committed --
BAD_CONSTRUCTOR_ARGUMENTS = [
    ({"value": "abc"}, r"value 'abc' is not a number"),
    ({"value": None}, r"expected a real number"),
    ({"value": [1]}, r"expected a real number"),
    ({"formats": ["fp17"]}, r"unknown format 'fp17'"),
    ({"formats": []}, r"needs at least one format"),
    ({"formats": "float16"}, r"formats must be a list"),
    ({"formats": 16}, r"formats must be a list"),
    ({"formats": [Format("float16", 5, 2)]}, r"'float16' is a built-in format"),
    ({"formats": [Format("e3m3", 3, 3, specials="fn"), Format("e3m3", 3, 2, specials="fn")]},
     r"two different formats are named 'e3m3'"),
    ({"rounding": "roundHalfUp"}, r"rounding must be one of"),
    ({"rounding": 3}, r"expected a unicode string"),
    ({"seed": -1}, r"seed must be in 0\.\.9223372036854775807"),
    ({"seed": 2**63}, r"seed must be in 0\.\.9223372036854775807"),
    ({"seed": True}, r"seed must be None or an integer"),
    ({"aligned": "yes"}, r"expected a boolean"),
    ({"via": "fp17"}, r"unknown format 'fp17'"),
    ({"colour": "red"}, r"Prism has no option 'colour'"),
    ({"layout": 5}, r"expected a Layout"),
]


@pytest.mark.parametrize(("kwargs", "message"), BAD_CONSTRUCTOR_ARGUMENTS,
                         ids=[repr(k)[:40] for k, _ in BAD_CONSTRUCTOR_ARGUMENTS])
def test_constructor_raises_bitprism_error(kwargs: dict, message: str) -> None:
    """Issue 16 item 15 (reproducer ``bp.Prism(value="abc")``): what the example notebooks
    catch with ``except bp.BitprismError`` is what the constructor raises."""
    from bitprism.errors import BitprismError

    with pytest.raises(BitprismError, match=message):
        Prism(**kwargs)


def test_setters_from_code_raise_bitprism_error_and_keep_the_view() -> None:
    """Issue 16 item 15: a bad value set from code raises a BitprismError (also a TraitError,
    so traitlets rolls back a batch holding it); nothing of it stays."""
    from bitprism.errors import BitprismError
    from bitprism.ui.refusal import WidgetValueError

    assert issubclass(WidgetValueError, BitprismError) and issubclass(WidgetValueError, TraitError)
    p = Prism("0.1", formats=FMTS)
    kept = p.comparison
    for name, bad in [("value", "abc"), ("value", None), ("formats", ["fp17"]),
                      ("rounding", "sideways"), ("seed", -1), ("seed", 1.5), ("via", "x"),
                      ("source_format", "float64x"), ("expression", "1 +"),
                      ("aligned", None), ("formats", [Format("x" * 65, 3, 3)])]:
        before = getattr(p, name)
        with pytest.raises(BitprismError):
            setattr(p, name, bad)
        assert getattr(p, name) == before and p.comparison is kept, name
    with pytest.raises(BitprismError), p.hold_trait_notifications():
        p.rounding = "roundTowardZero"
        p.overflow = "wrap"  # refused when the batch ends: the whole batch is rolled back
    assert p.rounding == "roundTiesToEven" and p.comparison is kept


def test_view_that_cannot_be_built_keeps_last_view_and_value(
    monkeypatch: pytest.MonkeyPatch, tmp_path
) -> None:
    """Issue 16 item 7 (reproducer: ``Prism(value="1e400", formats=["float4_e2m1fn"])`` raised
    OverflowError while rendering, after the value was already set): a value is committed only
    when its whole view could be built; otherwise the last good view and its value stay, the
    message says why, and what the widget accepted saves, exports and reopens."""
    import bitprism.ui.prism as prism_module
    from bitprism.errors import BitprismError
    from bitprism.ui.case_file import open_case

    real = prism_module.band_detail_html

    def fails_for_1e400(c, row, ruler, neighbours=False):  # a renderer failing as item 7's did
        if c.text == "1e400":
            raise OverflowError("integer division result too large for a float")
        return real(c, row, ruler, neighbours)

    monkeypatch.setattr(prism_module, "band_detail_html", fails_for_1e400)
    p = Prism("1", formats=["float32", "float4_e2m1fn"])
    kept = p.comparison
    with pytest.raises(BitprismError, match="could not be built"):
        p.value = "1e400"
    assert p.value == "1" and p.comparison is kept and "OverflowError" in p.message
    assert p.value_input.value == "1"
    p.value_input.value = "1e400"  # typed: the message says why, nothing is raised
    assert p.value == "1" and p.comparison is kept and "OverflowError" in p.message
    with pytest.raises(BitprismError, match="could not be built"):
        Prism("1e400", formats=["float4_e2m1fn"])
    for path in (p.save_case(tmp_path / "case.json"), p.export_html(tmp_path / "case.html")):
        q = open_case(path)
        assert q.value == "1" and [r.code for r in q.comparison.rows] == [r.code for r in kept.rows]


@pytest.mark.parametrize(("value", "fmt", "beyond"), [
    ("1e400", "float4_e2m1fn", np.finfo(np.float64).max),
    ("1e-400", "float8_e8m0fnu", np.finfo(np.float64).smallest_subnormal),
], ids=["1e400-float4_e2m1fn", "1e-400-float8_e8m0fnu"])
def test_errors_beyond_float64_range_show_save_and_export(tmp_path, value, fmt, beyond) -> None:
    """Issue 16 item 7: values whose errors lie beyond float64's range are shown, saved,
    exported and reopened. The code is ml_dtypes' cast of the float64 nearest the value on the
    same side of the format's range (from library: ml_dtypes, computed here)."""
    import ml_dtypes

    from bitprism.ui.case_file import open_case

    p = Prism(value, formats=[fmt])
    assert p.message == "" and p.value == value
    with np.errstate(over="ignore", under="ignore"):
        want = int(np.array([beyond]).astype(getattr(ml_dtypes, fmt)).view(np.uint8)[0])
    assert p.comparison.row(fmt).code == want
    assert str(p.comparison) and p.to_html()
    for path in (p.save_case(tmp_path / "case.json"), p.export_html(tmp_path / "case.html")):
        q = open_case(path)
        assert q.value == value and q.comparison.row(fmt).code == want and q.message == ""


def test_custom_format_band_takes_typed_bits() -> None:
    """Issue 16 item 12: a format of one's own works where a built-in one does, here the bits
    box of its band (the widget looked formats up by name: "unknown format 'e3m3'")."""
    custom = Format("e3m3", 3, 3, specials="finite")
    p = Prism("1", formats=["float16", custom])
    p.bits_format.value = "e3m3"
    p.bits_input.value = "0x1c"  # 0 011 100
    assert p.message == "" and p.source_format == "e3m3" and p.source_code == 0x1C
    # exponent field 0b011, significand 1.100b: (1 + 4/8) * 2**(3 - bias)
    assert p.comparison.row(custom).stored.value == Fraction(8 + 0b100, 8) * Fraction(2) ** (
        0b011 - custom.bias)
    p.set_source("e3m3", 0x1D)
    assert p.comparison.row(custom).code == 0x1D
    _band(p, "e3m3").bits[-1].click()
    assert p.comparison.row(custom).code == 0x1C and p.message == ""


def test_seed_box_and_trait_refuse_what_a_case_cannot_hold() -> None:
    """Issue 16 item 11: seeds outside 0 .. 2**63 - 1 (-1 from the seed box, 2**63) were taken
    and saved, and open_case then refused the widget's own file (case seeds are JSON integers
    within int64)."""
    from bitprism.errors import BitprismError

    p = Prism("0.1", formats=["bfloat16"], rounding="stochastic", seed=7)
    for typed in ("-1", str(2**63)):
        p.seed_input.value = typed
        assert p.seed == 7 and p.seed_input.value == "7" and "seed must be in 0.." in p.message
    p.seed_input.value = "x"
    assert p.seed == 7 and p.seed_input.value == "7" and "seed must be none or" in p.message
    for bad in (-1, 2**63, True, 2.5, "7"):
        with pytest.raises(BitprismError):
            p.seed = bad
        assert p.seed == 7
    p.seed = 2**63 - 1
    p.seed = np.int64(5)  # numpy integers are integers
    assert p.seed == 5 and type(p.seed) is int and p.message == ""


@pytest.mark.parametrize("bits", [0xFFC00123, 0x7F800001])
def test_numpy_nan_value_keeps_its_bits(bits: int) -> None:
    """A numpy NaN given as the value keeps its own bits in its own format (a copy: IEEE
    754-2019 §5.5.1 keeps a signaling NaN signaling) and carries its payload into the other
    formats exactly as the array path does (compared with bp.encode of the same value as an
    array)."""
    import bitprism as bp

    v = np.uint32(bits).view(np.float32)
    p = Prism(value=v, formats=["float32", "float16", "bfloat16"])
    codes = {r.format.name: r.code for r in p.comparison.rows}
    assert codes["float32"] == bits
    for name in ("float16", "bfloat16"):
        assert codes[name] == int(bp.encode(np.array([v]), name)[0]), name


def test_compact_and_caption() -> None:
    """Issue 17/18: ``compact`` leaves the bands (verdicts, raw bits) and drops the input
    rows, option controls and add-format menu; ``caption`` is a line above the bands."""
    p = Prism("0.1", formats=["float32", "float16"], compact=True, caption="x[3, 4] float32")
    shown = set(p.children)
    assert p.bands_box in shown and p.caption_html in shown
    for control in (p.value_input, p.add_format_menu, p.rounding_menu, p.overflow_menu,
                    p.expression_input):
        assert all(control not in getattr(c, "children", ()) and control is not c
                   for c in p.children)
    assert "x[3, 4] float32" in p.caption_html.value
    p.caption = "<b>"  # plain text: escaped
    assert "&lt;b&gt;" in p.caption_html.value
    p.compact = False
    assert any(p.value_input in getattr(c, "children", ()) for c in p.children)
    p.compact = True
    assert p.bands_box in p.children and p.comparison.row("float16").code == 0x2E66
    p.caption = ""
    assert p.caption_html.value == ""


# ----- issue 17: the ruler view, verdicts, one toolbar, closed widgets ---------------------------
def _live_widgets() -> int:
    import warnings

    import ipywidgets

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DeprecationWarning)  # the registry the issue counts
        return len(ipywidgets.Widget.widgets)


def test_add_remove_cycles_leave_no_widgets_behind() -> None:
    """Replaced band widgets are closed: the live-widget count after 20 add/remove cycles
    equals the count after one (it grew by a band's worth, ~359 widgets, per cycle before)."""
    p = Prism("0.1", formats=["float32", "float16"])

    def cycle() -> None:
        p.add_format_menu.value = "float64"
        assert len(p._bands) == 3 and len(p._bands[-1].bits) == 64
        p.select("float64")
        p.toolbar.remove.click()
        assert len(p._bands) == 2

    cycle()
    after_one = _live_widgets()
    for _ in range(19):
        cycle()
    assert _live_widgets() == after_one
    p.value = "1/3"  # an ordinary update makes no widgets either
    assert _live_widgets() == after_one


def test_bands_show_verdict_ruler_and_raw_bits() -> None:
    p = Prism("65504*2", formats=["float32", "bfloat16", "float16", "float8_e4m3fn"])
    f16 = _band(p, "float16")
    assert "131008 → +Inf (overflow; largest finite 65504)" in f16.verdict.value
    assert "bitprism-overflow" in f16.verdict.value  # the outcome's class and colour
    assert "bitprism-ruler-band" in f16.detail.value and "0x7c00" in f16.fields.value
    assert "no Inf in this format" in _band(p, "float8_e4m3fn").verdict.value
    assert "131072, rounded up by 64 (+0.0625 ULP)" in _band(p, "bfloat16").verdict.value
    assert "bitprism-ruler-scale" in p.header_html.value and "131008 exactly" in p.header_html.value
    p.aligned_box.value = False  # the ruler can be switched off; verdicts and bits stay
    assert "bitprism-ruler-band" not in f16.detail.value and "+Inf" in f16.verdict.value


def test_negative_zero_in_the_prism() -> None:
    p = Prism("-0", formats=["float32", "float16"])
    band = _band(p, "float16")
    assert "-0, exact" in band.verdict.value and "<b>-0</b>" in band.detail.value
    assert "".join(b.description for b in band.bits) == "1" + "0" * 15  # sign bit set
    assert "-0" in p.to_html() and "-0, exact" in str(p.comparison)


def test_nan_source_carries_its_payload_into_the_other_bands() -> None:
    """Typing the float16 signaling NaN 0x7d01 into the bits box: float32 gets what bp.encode
    of the same float16 value gives (0x7fe02000: quieted, payload kept), and says so."""
    import bitprism as bp

    p = Prism("1", formats=["float16", "float32", "bfloat16", "float8_e4m3fn"])
    p.select("float16")
    p.bits_input.value = "0x7d01"
    src = np.array([0x7D01], dtype=np.uint16).view(np.float16)
    assert p.comparison.row("float32").code == int(bp.encode(src, "float32")[0])
    assert p.comparison.row("bfloat16").code == int(bp.encode(src, "bfloat16")[0])
    assert "signaling NaN, payload 0x101" in _band(p, "float16").verdict.value
    assert "(quieted, payload kept)" in _band(p, "float32").verdict.value
    assert "payload cut to its top 6 bits" in _band(p, "bfloat16").verdict.value
    assert "payload lost" in _band(p, "float8_e4m3fn").verdict.value


def test_bits_of_follows_the_selected_band_and_is_never_empty() -> None:
    """Typing bits with nothing chosen in "bits of" gave "format must be a name... got None";
    it now defaults to the selected band (the first band until one is chosen)."""
    p = Prism("1", formats=["float16", "bfloat16"])
    assert p.bits_format.value == "float16"
    p.bits_input.value = "0x3c01"
    assert p.message == "" and p.comparison.row("float16").code == 0x3C01
    _band(p, "bfloat16").name.click()
    assert p.bits_format.value == "bfloat16"
    p.bits_format.value = "float16"  # choosing "bits of" selects that band too
    assert p.selected == "float16"


def test_seed_box_reads_none() -> None:
    p = Prism("0.1", formats=["bfloat16"])
    assert p.seed is None and p.seed_input.value == "none"
    p.seed = 5
    assert p.seed_input.value == "5"
    p.seed_input.value = "none"
    assert p.seed is None and p.message == ""


def test_compute_box_names_causes_per_format_and_step() -> None:
    """The compute box says why each step was not exact, in evaluate()'s words: 2048 + 1 is
    absorbed in float16 (11-bit significand) and 65504*2 overflows there (numpy float16)."""
    from bitprism.numerics.evaluate import evaluate

    with np.errstate(over="ignore"):
        assert np.float16(2048) + np.float16(1) == 2048 and np.isinf(np.float16(65504) * 2)
    p = Prism("1", formats=["float32", "float16"])
    p.expression_input.value = "2048 + 1 + 65504*2"
    html = p.evaluation_html.value
    assert "2048 + 1 = 2049 -&gt; 2048: absorbed addend" in html
    assert "65504*2 = 131008 -&gt; inf: overflow" in html
    text = evaluate("2048 + 1 + 65504*2", "float16").to_text()
    assert "absorbed addend" in text and "overflow" in text


def test_old_case_files_open_and_new_fields_round_trip(tmp_path) -> None:
    from bitprism.ui.case_file import open_case

    p = Prism("0.1", formats=["float32", "float16"], caption="x[1, 2]")
    p.select("float16")
    q = open_case(p.save_case(tmp_path / "c.json"))
    assert q.selected == "float16" and q.caption == "x[1, 2]" and not q.compact
    state = p._case_state()
    for key in ("selected", "compact", "caption"):  # a file written before these existed
        state.pop(key)
    old = Prism._from_case_state(state)
    assert old.selected_row().format.name == "float32" and old.caption == ""
