"""TensorPrism driven headless: set traits, click cells and buttons, read what it shows.

Cast classes are checked against ml_dtypes' own cast computed in the test (the reference for
the formats it has); planted NaNs sit at known indices."""

from __future__ import annotations

import json
import subprocess
import sys
from fractions import Fraction

import ml_dtypes
import numpy as np
import pytest

from bitprism.errors import BitprismError
from bitprism.formats import get_format
from bitprism.numerics.parse import parse
from bitprism.render.vocabulary import OUTCOMES
from bitprism.tensors.scan import scan
from bitprism.ui.tensor_prism import DEFAULT_COLS, DEFAULT_ROWS, TensorPrism

FMTS = ["bfloat16", "float8_e4m3fn"]


def _tensor() -> np.ndarray:
    # invented data: smooth values, plus planted specials at known places
    i, j = np.meshgrid(np.arange(40), np.arange(50), indexing="ij")
    a = (np.sin(i * 0.3) * 10 + j * 0.01).astype(np.float32)
    a[2, 3] = np.nan
    a[30, 45] = np.nan
    a[30, 1] = np.nan
    a[5, 5] = 1e6  # overflows float8_e4m3fn (largest finite 448, OCP OFP8 Table 1)
    a[6, 6] = 1e-8  # underflows to zero in float8_e4m3fn (smallest subnormal 2^-9)
    return a


def _cell(tp: TensorPrism, i: int, j: int):
    return tp._cell_grid.cell(i, j)


def _all_cells(tp: TensorPrism) -> list:
    return [c for row in tp._cell_grid.cells for c in row]


def test_builds_grid_and_css_classes() -> None:
    tp = TensorPrism(_tensor(), formats=FMTS)
    assert "bitprism-tensorprism" in tp._dom_classes
    assert "bitprism-grid" in tp.grid._dom_classes
    assert "bitprism-summary" in tp.summary_html._dom_classes
    assert "bitprism-message" in tp.message_html._dom_classes
    assert "bitprism-goto" in tp.goto_input._dom_classes
    for kind in ("nan", "inf", "overflow", "underflow", "largest-error"):
        assert f"bitprism-next-{kind}" in tp.nav_buttons[f"next-{kind.replace('-', '_')}"]._dom_classes
        assert f"bitprism-prev-{kind}" in tp.nav_buttons[f"prev-{kind.replace('-', '_')}"]._dom_classes
    cells = _all_cells(tp)  # the default window: 16 rows, 12 columns (fits 468 px)
    assert len(cells) == DEFAULT_ROWS * DEFAULT_COLS == 16 * 12
    assert all("bitprism-cell" in c._dom_classes for c in cells)
    assert "bitprism-scan" in tp.summary_html.value  # the scan's HTML
    # every cell carries its exact value and bit pattern as text
    value, bits = _cell(tp, 0, 1).tooltip.split(" = ")
    assert float.fromhex(value) == float(_tensor()[0, 1])  # exact: hex float
    assert int(bits, 16) == int(_tensor()[0, 1:2].view(np.uint32)[0])


def test_cast_view_marks_cells_like_ml_dtypes() -> None:
    a = _tensor()
    tp = TensorPrism(a, formats=FMTS, format_a="float8_e4m3fn", rows=8, cols=8)
    with np.errstate(over="ignore", invalid="ignore"):
        q = a[:8, :8].astype(ml_dtypes.float8_e4m3fn).astype(np.float64)
    x = a[:8, :8].astype(np.float64)
    tiny = float(ml_dtypes.finfo(ml_dtypes.float8_e4m3fn).smallest_normal)
    for i in range(8):
        for j in range(8):
            label = _cell(tp, i, j).description
            if np.isnan(x[i, j]):
                want = "nan"
            elif not np.isfinite(q[i, j]):
                want = "overflow"
            elif x[i, j] != 0 and q[i, j] == 0:
                want = "underflow"
            elif 0 < abs(q[i, j]) < tiny:
                want = "subnormal"
            elif q[i, j] == x[i, j]:
                want = "exact"
            else:
                want = "rounded"
            # the cell shows the outcome's mark from the one vocabulary (render/vocabulary.py)
            assert label == OUTCOMES[want].mark, (i, j, x[i, j], q[i, j], label)
            assert _cell(tp, i, j).style is tp._cell_grid.styles[want]
    assert _cell(tp, 5, 5).description == "↑" and _cell(tp, 6, 6).description == "→0"
    assert _cell(tp, 5, 5).style is tp._cell_grid.styles["overflow"]
    assert "overflow" in tp.legend_html.value and "underflow to zero" in tp.legend_html.value


def test_next_nan_row_major_wraps_and_counts() -> None:
    tp = TensorPrism(_tensor(), formats=FMTS)
    assert tp.nav_counts["nan"].value == "NaN: 3 cells"
    tp.nav_buttons["next-nan"].click()
    assert tp.selected == (2, 3)
    tp.nav_buttons["next-nan"].click()
    assert tp.selected == (30, 1)  # row-major: (30, 1) before (30, 45)
    assert tp.window.cell_of((30, 1)) is not None  # the window moved there
    tp.nav_buttons["next-nan"].click()
    assert tp.selected == (30, 45) and tp.window.cell_of((30, 45)) is not None
    tp.nav_buttons["next-nan"].click()
    assert tp.selected == (2, 3) and "wrapped" in tp.info and tp.message == ""
    assert "bitprism-info" in tp.message_html.value  # a note, not styled as an error
    assert "bitprism-error" not in tp.message_html.value
    tp.nav_buttons["prev-nan"].click()
    assert tp.selected == (30, 45)
    sel = tp.window.cell_of((30, 45))
    assert "bitprism-cell-selected" in _cell(tp, *sel)._dom_classes
    assert tp.nav_counts["overflow"].value == "overflow in bfloat16: 0 cells"
    assert tp.nav_buttons["next-overflow"].disabled and tp.nav_buttons["prev-overflow"].disabled
    tp.format_a = "float8_e4m3fn"
    assert tp.nav_counts["overflow"].value == "overflow in float8_e4m3fn: 1 cell"
    assert not tp.nav_buttons["next-overflow"].disabled
    tp.nav_buttons["next-overflow"].click()
    assert tp.selected == (5, 5)
    assert tp.nav_counts["underflow"].value == "underflow in float8_e4m3fn: 1 cell"
    tp.nav_buttons["next-underflow"].click()
    assert tp.selected == (6, 6)
    tp.format_a = "bfloat16"
    tp.nav_buttons["next-overflow"].click()
    assert "no overflow cell in bfloat16" in tp.info
    tp.nav_buttons["next-largest_error"].click()
    assert tp.nav_counts["largest_error"].value.endswith((" cells", " 1 cell"))


def test_selection_shows_exact_value_in_prism() -> None:
    a = _tensor()
    tp = TensorPrism(a, formats=FMTS)
    seen = []
    tp.observe(lambda ch: seen.append(ch["new"]), "selected")
    _cell(tp, 3, 7).click()
    assert tp.selected == (3, 7) and seen == [(3, 7)]
    assert parse(tp.prism.value).magnitude == Fraction(float(a[3, 7])).__abs__()
    # the tensor's own format first, then the grid's; compact, with a caption naming the cell
    assert [f.name for f in tp.prism.format_objects] == ["float32", *FMTS]
    assert tp.prism.compact and tp.prism.caption.startswith("cell [3, 7] of float32 [40, 50]")
    tp.goto("[12, 40]")
    assert tp.selected == (12, 40)
    assert Fraction(tp.prism.value) == Fraction(float(a[12, 40]))
    tp.rounding = "roundTowardZero"
    assert tp.prism.rounding == "roundTowardZero"
    # with the input's own format in the list, the cell's bit pattern is the Prism's source
    tp.formats = ["float32", *FMTS]
    tp.goto("2, 3")
    assert tp.prism.source_format == "float32"
    assert tp.prism.comparison.row("float32").code == int(a[2:3, 3].view(np.uint32)[0])


def test_nd_axis_choice_and_sliders() -> None:
    a = np.arange(3 * 4 * 50, dtype=np.float32).reshape(3, 4, 50)
    tp = TensorPrism(a, formats=FMTS, view="value")
    assert (tp.row_axis, tp.col_axis) == (1, 2) and len(tp.sliders_box.children) == 1
    tp.sliders_box.children[0].value = 2  # axis 0 fixed at 2
    assert np.array_equal(tp.window.raw, a[2, :, :12])
    assert (tp.rows, tp.cols) == (4, 12)  # never more rows than the tensor has
    tp.row_axis_menu.value = 0  # rows: axis 0, columns: axis 2, axis 1 fixed
    assert (tp.row_axis, tp.col_axis) == (0, 2) and (tp.rows, tp.cols) == (3, 12)
    tp.fixed = (0, 3, 0)
    assert np.array_equal(tp.window.raw, a[:, 3, :12])
    tp.col_axis_menu.value = 0  # choosing the row axis for columns swaps the two
    assert (tp.row_axis, tp.col_axis) == (2, 0) and (tp.rows, tp.cols) == (16, 3)
    assert np.array_equal(tp.window.raw, a[:, 3, :16].T)
    tp.goto("1, 2, 33")
    assert tp.fixed[1] == 2 and tp.window.cell_of((1, 2, 33)) is not None
    assert _cell(tp, *tp.window.cell_of((1, 2, 33))).description == "333"  # 1*200 + 2*50 + 33


def test_pan_buttons_and_offsets() -> None:
    tp = TensorPrism(_tensor(), formats=FMTS, rows=8, cols=8, view="value")
    tp.pan_buttons["page-right"].click()
    assert tp.col_offset == 8
    tp.pan_buttons["right"].click()
    tp.pan_buttons["page-down"].click()
    assert (tp.row_offset, tp.col_offset) == (8, 9)
    assert _cell(tp, 0, 0).tooltip.startswith(float.hex(float(_tensor()[8, 9]))[:6])
    for _ in range(10):
        tp.pan_buttons["page-right"].click()
    assert tp.col_offset == 50 - 8  # clamped at the last full page
    tp.col_input.value = 3
    assert tp.col_offset == 3
    state = _cell(tp, 1, 1).get_state()  # what the front-end would be sent
    assert state["description"] == _cell(tp, 1, 1).description
    assert state["tooltip"].startswith(float.hex(float(_tensor()[9, 4]))[:5])


def test_bad_input_keeps_last_view() -> None:
    """Typed text shows a message; the same values set from code raise BitprismError (issue
    16, item 15) and show the same message; either way the last good view and traits stay."""
    tp = TensorPrism(_tensor(), formats=FMTS)
    kept = tp.window
    tp.goto("99, 1")
    assert "out of range for axis 0 with size 40" in tp.message and tp.window is kept
    tp.goto("1, 2x")
    assert "column" in tp.message
    data = tp.data
    with pytest.raises(BitprismError, match="complex"):
        tp.data = np.zeros(3, np.complex64)
    assert "complex" in tp.message and tp.window is kept and tp.data is data
    with pytest.raises(BitprismError, match="0-d"):
        tp.data = np.zeros(())
    assert "0-d" in tp.message
    with pytest.raises(BitprismError, match="empty"):
        tp.data = np.zeros((0, 4), np.float32)
    assert "empty" in tp.message and tp.window is kept
    with pytest.raises(BitprismError, match=r"1\.\.32"):
        tp.rows = 99
    assert "1..32" in tp.message and tp.rows == 16
    with pytest.raises(BitprismError, match="not among the formats"):
        tp.format_a = "float16"
    assert "not among the formats" in tp.message and tp.format_a == ""
    with pytest.raises(BitprismError, match="rounding must be one of"):
        tp.rounding = "sideways"
    assert "rounding must be one of" in tp.message and tp.rounding == "roundTiesToEven"
    with pytest.raises(BitprismError, match="one index per axis"):
        tp.selected = (1, 2, 3)
    assert "one index per axis" in tp.message and tp.selected == ()
    assert tp.window is kept
    tp.view = "class"  # a good change clears the message
    assert tp.message == "" and tp.window is not kept


@pytest.mark.parametrize("bad", [np.zeros(()), np.zeros((0, 3)), np.zeros(4, complex), "x"])
def test_constructor_refuses_bad_data(bad: object) -> None:
    with pytest.raises(BitprismError):
        TensorPrism(bad, formats=FMTS)


def test_views_value_error_compare() -> None:
    a = _tensor()
    tp = TensorPrism(a, formats=FMTS, rows=8, cols=8, view="value")
    assert _cell(tp, 0, 1).description == "1e-2" and _cell(tp, 1, 0).description == "2.955"  # sin(0.3) * 10
    tp.value_scale = "log"
    assert "log scale" in tp.legend_html.value
    tp.view = "error"
    assert "ULP" in tp.legend_html.value and _cell(tp, 2, 3).description == "NaN"
    tp.error_unit = "relative"
    assert "relative" in tp.legend_html.value
    tp.view = "compare"
    # bfloat16 (t = 7) lands at least as close as float8_e4m3fn (t = 3) on in-range values
    labels = {_cell(tp, i, j).description[:1] for i in range(8) for j in range(8)}
    assert "B" not in labels and "A" in labels
    tp.view = "class"
    assert _cell(tp, 2, 3).description == "NaN" and _cell(tp, 0, 0).description == "0"


def test_cell_updates_are_small_and_complete(monkeypatch: pytest.MonkeyPatch) -> None:
    """A page pan of a 32 x 32 window sends one short update per changed cell: under the
    128 KB target in every view (JSON as jupyter_client packs it: default separators,
    ensure_ascii=False), no empty buffer_paths, colours as references to the shared styles;
    and the messages carry each cell's state exactly."""
    from ipywidgets import Widget

    sent: list[tuple[Widget, dict]] = []
    monkeypatch.setattr(Widget, "_send", lambda self, msg, buffers=None: sent.append((self, msg)))
    a = (np.random.default_rng(0).standard_normal((64, 96)) * 100).astype(np.float32)  # invented
    tp = TensorPrism(a, formats=["bfloat16", "float16", "float8_e4m3fn"], rows=32, cols=32)
    other = TensorPrism(a[:4, :4], formats=FMTS)
    ids = [s.model_id for t in (tp, other) for s in t._cell_grid.styles.values()]
    assert len(set(ids)) == len(ids) and all(len(i) < 32 for i in ids)
    refs = {f"IPY_MODEL_{s.model_id}": s for s in tp._cell_grid.styles.values()}
    cells = {id(c): c for c in _all_cells(tp)}
    for view in ("value", "class", "cast", "error", "compare"):
        tp.view = view
        tp.col_offset = 0
        sent.clear()
        tp.pan("page-right")
        size = sum(len(json.dumps(m, ensure_ascii=False).encode("utf-8")) for _, m in sent)
        assert size < 128 * 1024, (view, size)
        changed = [(w, m) for w, m in sent if id(w) in cells]
        assert len(changed) == len({id(w) for w, _ in changed}) > 0  # one message per cell
        for w, m in changed:
            assert m["method"] == "update" and "buffer_paths" not in m
            st = m["state"]
            assert set(st) <= {"description", "tooltip", "style"}
            if "style" in st:
                assert refs[st["style"]] is w.style
            for k in ("description", "tooltip"):
                if k in st:
                    assert st[k] == getattr(w, k)


def test_torch_bfloat16_input() -> None:
    torch = pytest.importorskip("torch")
    t = torch.linspace(-3, 3, 600).reshape(20, 30).to(torch.bfloat16)
    t[4, 7] = float("nan")
    tp = TensorPrism(t, formats=["float8_e4m3fn", "float16"], view="class")
    assert tp.window.raw.dtype == np.dtype(ml_dtypes.bfloat16)
    tp.find_next("nan")
    assert tp.selected == (4, 7)
    tp.goto("1, 2")
    assert Fraction(tp.prism.value) == Fraction(float(t[1, 2].float()))


def _anon_kb() -> int | None:
    try:
        with open("/proc/self/status") as fh:
            for line in fh:
                if line.startswith("RssAnon:"):
                    return int(line.split()[1])
    except OSError:
        return None
    return None


def test_memmap_reads_window_and_chunks_only(tmp_path) -> None:
    path = tmp_path / "big.f32"
    shape = (4096, 4096)  # 64 MiB on disk (sparse), invented zeros with planted NaNs
    mm = np.memmap(path, dtype=np.float32, mode="w+", shape=shape)
    mm[100, 200] = np.nan
    mm[4000, 17] = np.nan
    mm.flush()
    del mm
    data = np.memmap(path, dtype=np.float32, mode="r", shape=shape)
    # load (and compile, where numba is installed) the counting code first: its memory is the
    # library's, not the tensor's
    scan(np.zeros(1 << 16, np.float32), FMTS, quantiles=False, progress=False)
    before = _anon_kb()
    tp = TensorPrism(data, formats=FMTS, rows=32, cols=32)
    tp.find_next("nan")
    tp.find_next("nan")
    tp.pan("page-down")
    after = _anon_kb()
    assert tp.selected == (4000, 17)
    assert isinstance(tp.data, np.memmap)  # never copied into memory
    assert tp.nav_counts["nan"].value == "NaN: 2 cells"
    if before is not None and after is not None:
        assert after - before < 48 * 1024, (before, after)  # well below the tensor's 64 MiB


def test_range_chart_into_output() -> None:
    pytest.importorskip("matplotlib")
    tp = TensorPrism(_tensor(), formats=FMTS)
    tp.chart_button.click()
    assert tp.message == ""
    (out,) = tp.chart_output.outputs
    assert out["data"]["image/png"][:4] == "iVBO"  # base64 of the PNG signature


def test_summary_scope_slice() -> None:
    a = np.ones((3, 8, 9), np.float32)
    a[1, 2, 3] = np.nan
    tp = TensorPrism(a, formats=FMTS)
    assert tp.summary.size == 3 * 8 * 9 and tp.summary.histogram.nan == 1
    tp.summary_scope = "slice"
    assert tp.summary.size == 8 * 9 and tp.summary.histogram.nan == 0
    tp.fixed = (1, 0, 0)
    assert tp.summary.histogram.nan == 1


def test_case_state_round_trip_and_static_html(tmp_path) -> None:
    a = _tensor()
    tp = TensorPrism(a, formats=FMTS, view="error", rows=6, cols=5)
    tp.goto("2, 3")
    state = tp._case_state()
    json.dumps(state, allow_nan=False)
    assert state["data"]["dtype"] == "float32" and len(state["data"]["bits"]) == 30
    back = TensorPrism._from_case_state(state)
    assert np.array_equal(back.window.bits, tp.window.bits)  # NaN payloads included
    assert back.view == "error" and back.selected == (2, 3)  # the tensor's own index
    html = tp._static_html()
    assert "bitprism-grid" in html and "bitprism-scan" in html and "<script" not in html
    page = tp.export_html(tmp_path / "case.html", note="planted NaN")
    from bitprism.ui.case_file import open_case

    again = open_case(page)
    assert np.array_equal(again.window.bits, tp.window.bits)
    bad = dict(state, data=dict(state["data"], dtype="object"))
    with pytest.raises(BitprismError, match="state.data.dtype"):
        TensorPrism._from_case_state(bad)


# ----- issue 16 --------------------------------------------------------------------------------
BAD_TENSOR_ARGUMENTS = [
    ({"formats": ["fp17"]}, r"unknown format 'fp17'"),
    ({"formats": "bfloat16"}, r"formats must be a list"),
    ({"formats": []}, r"needs at least one format"),
    ({"rows": "x"}, r"expected an int"),
    ({"rows": 99}, r"rows must be in 1\.\.32"),
    ({"seed": 2**64}, r"seed must be in 0\.\.9223372036854775807"),
    ({"seed": -1}, r"seed must be in 0\.\.9223372036854775807"),
    ({"view": 5}, r"expected a unicode string"),
    ({"view": "heat"}, r"view must be one of"),
    ({"format_a": "float16"}, r"not among the formats"),
    ({"format_a": 3}, r"format_a must be a format name or Format"),
    ({"fixed": (1.5, 0)}, r"fixed holds integer indices"),
    ({"selected": (0, 99)}, r"out of range"),
    ({"row_axis": None}, r"row_axis must be an axis"),
    ({"colour": "red"}, r"TensorPrism has no option 'colour'"),
    ({"window": 1}, r"TensorPrism has no option 'window'"),
]


@pytest.mark.parametrize(("kwargs", "message"), BAD_TENSOR_ARGUMENTS,
                         ids=[repr(k)[:40] for k, _ in BAD_TENSOR_ARGUMENTS])
def test_constructor_raises_bitprism_error(kwargs: dict, message: str) -> None:
    """Issue 16 item 15: bad constructor arguments raise BitprismError (``rows="x"`` raised
    traitlets' TraitError; seeds of 2**63 and more were taken)."""
    with pytest.raises(BitprismError, match=message):
        TensorPrism(np.ones((4, 5), np.float32), formats=kwargs.pop("formats", FMTS), **kwargs)


def test_nan_and_inf_cells_raise_no_warning_in_any_view() -> None:
    """Issue 16 item 9: "invalid value encountered in subtract/equal" RuntimeWarnings from
    the compare view and the whole-tensor passes on NaN and Inf data (warnings are errors in
    this test suite, and shown as the widget's message)."""
    a = np.array([[np.nan, np.inf, -np.inf, 1.0], [0.0, -1e6, 1e-8, -np.nan]], np.float32)
    tp = TensorPrism(a, formats=FMTS, format_b="float8_e4m3fn")
    for view in ("value", "class", "cast", "error", "compare"):
        for log_scale in (False, True):
            tp.view, tp.value_scale = view, "log" if log_scale else "auto"
            assert tp.message == "", (view, tp.message)
    for kind in ("nan", "inf", "overflow", "underflow", "largest_error"):
        for unit in ("ulp", "relative"):
            tp.error_unit = unit
            tp.find_next(kind)
            assert "Warning" not in tp.message, (kind, tp.message)
    tp.select((0, 0))
    assert tp.message == "" and tp.prism.comparison.input.is_nan


def test_custom_formats_everywhere_a_builtin_goes(tmp_path) -> None:
    """Issue 16 item 12: ``TensorPrism(x, formats=[<custom Format>])``; format A and B given as
    a Format, by name or from the menus; saved and reopened with its case."""
    from bitprism.formats import Format
    from bitprism.ui.case_file import open_case

    e3m3 = Format("e3m3", 3, 3, specials="finite")
    a = _tensor()
    tp = TensorPrism(a, formats=[e3m3], rows=6, cols=6)
    assert tp.message == "" and tp.window.casts[0].format is e3m3
    tp.formats = ["bfloat16", e3m3]
    tp.a_menu.value = "e3m3"  # chosen in the menu, by name
    assert tp.format_a == "e3m3" and tp._fmt("a") is e3m3 and tp._fmt("b").name == "bfloat16"
    tp.format_a = get_format("bfloat16")  # Format objects, as in formats
    tp.format_b = e3m3
    tp.view = "compare"
    assert tp.message == "" and (tp.format_a, tp.format_b) == ("bfloat16", "e3m3")
    assert tp._fmt("b") is e3m3 and tp.b_menu.value == "e3m3"
    tp.goto("2, 4")
    assert [f.name for f in tp.prism.format_objects] == ["float32", "bfloat16", "e3m3"]
    for path in (tp.save_case(tmp_path / "t.json"), tp.export_html(tmp_path / "t.html")):
        back = open_case(path)
        assert back.format_objects == [get_format("bfloat16"), e3m3]
        assert (back.format_a, back.format_b) == ("bfloat16", "e3m3") and back.message == ""
        assert np.array_equal(back.window.casts[1].codes, tp.window.casts[1].codes)
    with pytest.raises(BitprismError, match="'float16' is a built-in format"):
        tp.formats = [Format("float16", 5, 2)]


def test_data_trait_never_compares_tensors_element_by_element() -> None:
    """Issue 16 item 13: traitlets told a new value from ``old == new``, which for arrays
    compares every element (reading all of a memmap) and allocates a boolean array of the
    tensor's size. The data trait tells a new tensor by identity."""

    compared: list[str] = []

    class Watched(np.ndarray):  # traitlets swallows errors raised here: record instead
        def __eq__(self, other):  # type: ignore[override]
            compared.append("==")
            return np.ndarray.__eq__(self, other)

        def __ne__(self, other):  # type: ignore[override]
            compared.append("!=")
            return np.ndarray.__ne__(self, other)

    a = np.arange(12, dtype=np.float32).reshape(3, 4).view(Watched)
    tp = TensorPrism(a, formats=FMTS)
    token = tp._token
    tp.data = tp.data  # the same tensor: no change
    assert tp._token == token
    tp.data = (a + 1).view(Watched)
    assert tp._token == token + 1 and tp.window.raw[0, 0] == 1
    assert compared == []


_MEMMAP_PROBE = r"""
import json, sys, time, tracemalloc
import numpy as np
from bitprism.ui.tensor_prism import TensorPrism

path, shape = sys.argv[1], tuple(json.loads(sys.argv[2]))
TensorPrism(np.zeros((2, 4, 4), np.float32), summary_scope="slice")  # imports and compiles

def peak_rss_mib():
    with open("/proc/self/status") as fh:
        return next(int(l.split()[1]) for l in fh if l.startswith("VmHWM:")) / 1024

with open("/proc/self/clear_refs", "w") as fh:  # reset the peak (Linux 4.0+)
    fh.write("5")
rss = peak_rss_mib()
data = np.memmap(path, dtype=np.float32, mode="r", shape=shape)
tracemalloc.start()
t = time.perf_counter()
tp = TensorPrism(data, summary_scope="slice")
seconds = time.perf_counter() - t
allocated = tracemalloc.get_traced_memory()[1] / 2**20
print(json.dumps({"seconds": seconds, "allocated_mib": allocated,
                  "rss_mib": peak_rss_mib() - rss, "counts": tp.nav_counts["nan"].value}))
"""


@pytest.mark.skipif(sys.platform != "linux", reason="reads /proc/self for the peak RSS")
def test_memmap_construction_costs_the_window_not_the_tensor(tmp_path) -> None:
    """Issue 16 item 13 (reproducer: a TensorPrism on a 1e9-float32 memmap took 27-43 s and
    allocated +941 MiB): building one on 2**28 float32 (1 GiB, a sparse file that costs no
    disk) reads its window and one 2-D slice for the summary, not the tensor. Measured in a
    subprocess: allocations (tracemalloc) and the peak RSS (mapped pages read count there)."""
    shape = (256, 1024, 1024)  # 2**28 float32, invented zeros
    path = tmp_path / "big.f32"
    with open(path, "wb") as fh:
        fh.truncate(4 * 2**28)
    out = subprocess.run([sys.executable, "-c", _MEMMAP_PROBE, str(path), json.dumps(shape)],
                         capture_output=True, text=True, timeout=600, check=True)
    got = json.loads(out.stdout)
    assert got["allocated_mib"] < 64, got  # a boolean array of the tensor was 256 MiB
    assert got["rss_mib"] < 128, got  # reading the whole file maps 1 GiB
    assert got["counts"] == "NaN: press ◀ ▶ to find", got  # no whole pass before asked


def test_counts_of_a_large_tensor_wait_for_a_press() -> None:
    """Issue 16 item 13: the counts beside the find buttons are a whole pass over the tensor;
    above the size the summary would scan with a progress bar, and when the summary scans a
    slice only, they are made when asked for."""
    a = np.zeros((5, 1024, 1024), np.float32)  # 5 Mi elements, invented zeros
    a[3, 7, 9] = np.nan
    tp = TensorPrism(a, formats=FMTS, summary_scope="slice")
    assert tp.nav_counts["nan"].value == "NaN: press ◀ ▶ to find"
    tp.nav_buttons["next-nan"].click()
    assert tp.selected == (3, 7, 9) and tp.nav_counts["nan"].value == "NaN: 1 cell"
    small = TensorPrism(a[:2, :64, :64], formats=FMTS, summary_scope="slice")
    assert small.nav_counts["nan"].value == "NaN: 0 cells"  # cheap: counted at once


# ----- issue 18: a TensorPrism and case files that hold up through a whole session -------------
import re  # noqa: E402
import warnings  # noqa: E402

import ipywidgets  # noqa: E402

from bitprism.render.grid_html import PAINTS, grid_css  # noqa: E402
from bitprism.render.vocabulary import DARK_PAGE, LIGHT_PAGE, SCALES  # noqa: E402


def _live_widgets() -> int:
    with warnings.catch_warnings():  # the registry of live widgets (deprecated name, same dict)
        warnings.simplefilter("ignore", DeprecationWarning)
        return len(ipywidgets.Widget.widgets)


def _activations() -> np.ndarray:
    """Invented 48 x 80 activations with NaN, Inf and outliers (the issue's scenario)."""
    a = (np.random.default_rng(18).standard_normal((48, 80)) * 3).astype(np.float32)
    a[10, 10] = np.uint32(0xFFC00000).view(np.float32)  # a negative quiet NaN
    a[30, 77] = np.nan
    a[47, 0] = np.nan
    a[2, 79] = np.inf
    a[20, 40] = 7.0e4  # past float16's largest finite, 65504
    a[21, 41] = -3.0e-9  # below float16's smallest subnormal: underflows to zero
    return a


def test_live_widget_count_is_constant_over_50_reshapes() -> None:
    """Item 1: the grid's widgets are made once for the largest window and reused; anything
    replaced (the sliders of an axis choice) is closed. Reshapes: rows and columns changed,
    axes swapped, jumps to cells near the edges (the window keeps its shape there), new data
    of another shape."""
    a = np.arange(3 * 40 * 50, dtype=np.float32).reshape(3, 40, 50) / 7  # invented
    a[2, 39, 49] = np.nan
    tp = TensorPrism(a, formats=FMTS)
    steps = [
        lambda k: setattr(tp, "rows", 1 + (7 * k) % 16),
        lambda k: setattr(tp, "cols", 1 + (5 * k) % 12),
        lambda k: setattr(tp, "row_axis", (0, 1)[k % 2]),
        lambda k: tp.goto(f"{k % 3}, {39 - k % 2}, {49 - k % 3}"),
        lambda k: tp.find_next("nan", backward=bool(k % 2)),
        lambda k: tp.pan("page-right" if k % 2 else "page-left"),
        lambda k: setattr(tp, "view", ("value", "class", "cast", "error", "compare")[k % 5]),
    ]
    for k in range(len(steps)):  # once each: the largest window and every control made
        steps[k](k)
    children = tp.grid.children
    before = _live_widgets()
    shapes = set()
    for k in range(50):
        steps[k % len(steps)](k)
        shapes.add((tp.window.rows, tp.window.cols))
        assert tp.message == "", tp.message
    assert len(shapes) > 10  # the window really changed shape
    assert _live_widgets() == before
    assert tp.grid.children is children  # the grid box itself was never rebuilt
    grid = tp._cell_grid
    for i, row in enumerate(grid.cells):  # cells outside the window are hidden, not removed
        for j, cell in enumerate(row):
            shown = i < tp.window.rows and j < tp.window.cols
            assert cell.layout is (grid.cell_layout if shown else grid.hidden_layout)


def test_jumps_near_the_edge_keep_the_window_whole() -> None:
    tp = TensorPrism(_activations(), formats=["float16", "bfloat16"])
    assert (tp.window.rows, tp.window.cols) == (16, 12)
    for index in ("47, 0", "0, 79", "47, 79", "2, 79"):
        tp.goto(index)
        assert (tp.window.rows, tp.window.cols) == (16, 12), index
        assert tp.window.cell_of(tp.selected) is not None


def test_default_window_comes_from_the_tensor() -> None:
    """Item 2: rows/cols said 16 for a 6 x 8 tensor."""
    small = TensorPrism(np.ones((6, 8), np.float32), formats=FMTS)
    assert (small.rows, small.cols) == (6, 8) and small.window.raw.shape == (6, 8)
    wide = TensorPrism(_activations(), formats=FMTS)
    assert (wide.rows, wide.cols) == (DEFAULT_ROWS, DEFAULT_COLS)
    asked = TensorPrism(np.ones((6, 8), np.float32), formats=FMTS, rows=20, cols=30)
    assert (asked.rows, asked.cols) == (6, 8)
    row = TensorPrism(np.arange(5, dtype=np.float32), formats=FMTS)
    assert (row.rows, row.cols) == (1, 5)
    assert small.rows_input.value == 6 and small.cols_input.value == 8


def test_controls_wrap_and_rare_ones_fold_into_options() -> None:
    """Item 2: every row of controls wraps (nothing is clipped in a 468-px column); the
    rarely used controls sit in a folded options section; descriptions are never cut."""
    tp = TensorPrism(_activations(), formats=FMTS)
    section = tp.options_section
    assert isinstance(section, ipywidgets.Accordion) and section.selected_index is None
    assert section.titles == ("options",)

    def inside(box):
        for child in box.children:
            yield child
            if isinstance(child, ipywidgets.Box) and child is not tp.prism:
                yield from inside(child)

    folded = set(map(id, inside(section)))
    for rare in (tp.rounding_menu, tp.overflow_menu, tp.subnormals_menu, tp.seed_input,
                 tp.row_axis_menu, tp.col_axis_menu, tp.rows_input, tp.cols_input,
                 tp.scope_menu, tp.chart_button):
        assert id(rare) in folded
    for main in (tp.view_menu, tp.a_menu, tp.goto_input, tp.pin_button, tp.note_input):
        assert id(main) not in folded
    for box in inside(tp):
        if isinstance(box, ipywidgets.HBox) and box is not tp.grid:
            assert box.layout.flex_flow == "row wrap", box
        if isinstance(box, ipywidgets.Dropdown):
            assert box.style.description_width == "initial"  # "columns: axis", never cut


def test_embedded_prism_is_compact_captioned_and_keeps_the_original_bits() -> None:
    """Item 3: the value view names the cell and the dtype, shows the tensor's own format
    first, bit for bit (the NaN 0xffc00000 was only in a tooltip), and takes its options from
    the grid (no controls of its own)."""
    a = _activations()
    tp = TensorPrism(a, formats=["float16", "bfloat16"])
    tp.goto("10, 10")
    p = tp.prism
    assert p.compact
    assert p.caption == "cell [10, 10] of float32 [48, 80] · bits 0xffc00000"
    assert [f.name for f in p.format_objects] == ["float32", "float16", "bfloat16"]
    assert (p.source_format, p.source_code) == ("float32", 0xFFC00000)
    assert p.comparison.row("float32").code == 0xFFC00000
    tp.rounding, tp.subnormals = "roundTowardZero", "flush"
    assert (p.rounding, p.subnormals) == ("roundTowardZero", "flush")
    tp.rounding = "roundTiesToEven"
    tp.goto("20, 40")  # 7e4: float16 overflows to Inf; numpy's own cast agrees
    with np.errstate(over="ignore"):
        assert np.isinf(np.float16(a[20, 40]))
    assert p.comparison.row("float16").code == int(np.float16(np.inf).view(np.uint16))


def _contrast(a: str, b: str) -> float:
    def lum(h: str) -> float:  # WCAG 2.1 relative luminance
        def ch(c: int) -> float:
            x = c / 255
            return x / 12.92 if x <= 0.04045 else ((x + 0.055) / 1.055) ** 2.4
        r, g, b_ = (int(h[i:i + 2], 16) for i in (1, 3, 5))
        return 0.2126 * ch(r) + 0.7152 * ch(g) + 0.0722 * ch(b_)
    hi, lo = sorted((lum(a), lum(b)), reverse=True)
    return (hi + 0.05) / (lo + 0.05)


@pytest.mark.parametrize("theme", ["light", "dark"])
@pytest.mark.parametrize("hue", sorted(SCALES))
def test_scale_steps_stand_3_to_1_apart(hue: str, theme: str) -> None:
    """Item 4: the value view's step-1 fills were 1.02:1 apart, "exact" and "rounded" 1.05:1.
    Each scale's steps now stand 3:1 from the page and from each other (WCAG 2.1 §1.4.11),
    with text 4.5:1 on them (§1.4.3), in both themes; the ratios are computed here."""
    page = LIGHT_PAGE if theme == "light" else DARK_PAGE
    one, two = getattr(SCALES[hue], theme)
    assert _contrast(one.fill, page) >= 3.0
    assert _contrast(two.fill, one.fill) >= 3.0
    assert _contrast(one.fill, one.text) >= 4.5 and _contrast(two.fill, two.text) >= 4.5
    css = grid_css()
    assert f"--bp-{hue}-1-fill:{SCALES[hue].dark[0].fill}" in css  # the dark theme's own


def test_every_fill_comes_from_the_vocabulary() -> None:
    from bitprism.render.vocabulary import OUTCOMES

    for key, p in PAINTS.items():
        m = re.fullmatch(r"var\(--([a-z0-9-]+),(#[0-9a-f]{6})\)", p.fill)
        assert m, (key, p.fill)
        name, light = m.groups()
        if name.startswith("jp-"):
            continue  # the page itself (no fill): JupyterLab's own colour
        if name.startswith("bp-") and name.endswith("-fill") and name[3:-5] in OUTCOMES:
            assert light == OUTCOMES[name[3:-5]].light.fill
        else:
            hue, step = re.fullmatch(r"bp-([a-z]+)-([12])-fill", name).groups()
            assert light == SCALES[hue].light[int(step) - 1].fill
    tp = TensorPrism(_activations(), formats=FMTS)
    assert "bitprism" in tp._dom_classes  # the dark theme's variables apply inside it
    assert "--jp-ui-font-color0" in grid_css()  # the selected cell's outline: the text colour


def test_value_view_is_robust_to_an_outlier() -> None:
    """Item 4: one outlier collapsed the linear scale to one step; 'auto' takes the quantile
    scale when the window's magnitudes span more than 16x, and the legend gives the break."""
    a = _activations()
    tp = TensorPrism(a, formats=FMTS, view="value", rows=12, cols=12, row_offset=15,
                     col_offset=35)
    keys = {tp._paint.keys[i][j] for i in range(12) for j in range(12)}
    assert {"v-1", "v-2", "v+1", "v+2"} <= keys
    finite = np.abs(tp.window.values[np.isfinite(tp.window.values) & (tp.window.values != 0)])
    median = float(np.median(finite))
    assert f"steps break at {median:.3g}" in tp.legend_html.value and "quantile" in tp.legend_html.value
    tp.value_scale = "linear"  # half the largest: the outlier alone is step 2
    big = [(i, j) for i in range(12) for j in range(12) if tp._paint.keys[i][j].endswith("2")]
    assert big == [tp.window.cell_of((20, 40))]


def test_compare_labels_have_one_form_and_the_legend_gives_the_steps() -> None:
    a = _activations()
    tp = TensorPrism(a, formats=["float16", "bfloat16"], view="compare")
    labels = {_cell(tp, i, j).description for i in range(tp.window.rows)
              for j in range(tp.window.cols)}
    form = re.compile(r"[AB]×(\d\.\d|\d{2,3}|\de\d+|∞)")
    marks = {o.mark for o in OUTCOMES.values()}
    assert all(form.fullmatch(t) or t == "tie" or t in marks for t in labels), labels
    # float16 (11 significant bits) lands closer than bfloat16 (8) on values in range:
    # their errors differ by about 2^3 (IEEE 754-2019 §3.6 precisions)
    assert any(t.startswith("A×") for t in labels) and "×16" in tp.legend_html.value
    tie = TensorPrism(np.array([[1.0, 0.5]], np.float32), formats=FMTS, view="compare")
    assert {_cell(tie, 0, j).description for j in range(2)} == {"tie"}  # exact in both


def test_counts_say_cell_or_cells_and_empty_kinds_disable_their_buttons() -> None:
    tp = TensorPrism(_activations(), formats=["float16", "bfloat16"])
    assert tp.nav_counts["inf"].value == "Inf: 1 cell"
    assert tp.nav_counts["nan"].value == "NaN: 3 cells"
    assert tp.nav_counts["overflow"].value == "overflow in float16: 1 cell"
    tp.format_a = "bfloat16"
    assert tp.nav_counts["overflow"].value == "overflow in bfloat16: 0 cells"
    assert tp.nav_buttons["next-overflow"].disabled and tp.nav_buttons["prev-overflow"].disabled
    assert not tp.nav_buttons["next-nan"].disabled


def _author_case(tmp_path, **kwargs):
    a = _activations()
    tp = TensorPrism(a, formats=["float16", "bfloat16"], **kwargs)
    tp.find_next("nan")  # the first NaN in row-major order: [10, 10]
    tp.find_next("overflow")  # counted: the count shows
    assert tp.selected == (20, 40)
    tp.goto("10, 10")
    tp.note = "float16 cannot hold the 7e4 at [20, 40]; the NaN at [10, 10] is 0xffc00000"
    return a, tp, tp.save_case(tmp_path / "author.json")


def test_case_round_trip_keeps_indices_shape_summary_counts_and_note(tmp_path) -> None:
    """Item 5 (reproducer: a reopened case renumbered indices from 0, reported the saved
    window's shape, recomputed NaN: 0 where the author saw 3, showed no note, and lost the
    note on a save without note=)."""
    from bitprism.ui.case_file import open_case

    a, tp, path = _author_case(tmp_path)
    back = open_case(path)
    assert back.selected == (10, 10) and back.window.shape == (48, 80)
    assert back.window.index_of(0, 0) == tp.window.index_of(0, 0)
    assert "float32 [48, 80]" in back.position_html.value
    assert "selected [10, 10]" in back.position_html.value
    assert [back._cell_grid.col_heads[j].value for j in range(3)] == [
        tp._cell_grid.col_heads[j].value for j in range(3)]
    # the whole-tensor summary the author saw, recorded (numpy counts the NaNs here)
    assert back.summary.size == a.size and back.summary.histogram.nan == int(np.isnan(a).sum())
    assert back.summary.formats == tp.summary.formats
    assert "recorded when the case was saved" in back.summary_html.value
    assert back.nav_counts["nan"].value == tp.nav_counts["nan"].value == "NaN: 3 cells"
    assert back.nav_counts["overflow"].value == "overflow in float16: 1 cell"
    # the note: shown in an editable field, kept by a save without note=
    assert back.note_input.value == tp.note and back.note == tp.note
    again = open_case(back.save_case(tmp_path / "again.json"))
    assert again.note == tp.note and again.summary.histogram.nan == 3
    back.note_input.value = "edited"
    assert open_case(back.save_case(tmp_path / "edited.json")).note == "edited"
    # the exported page shows the selected cell's bit breakdown
    page = back.export_html(tmp_path / "case.html").read_text(encoding="utf-8")
    assert "cell [10, 10] of float32 [48, 80] · bits 0xffc00000" in page
    assert "bitprism-detail" in page and "float16" in page
    # a reader's own settings: figures of the saved window, and it says so
    back.format_a = "bfloat16"
    assert back.nav_counts["overflow"].value == "overflow in bfloat16 (saved window): 0 cells"
    back.goto("0, 0")
    assert "outside" in back.message and back.selected == (10, 10)


def test_reopened_stochastic_window_draws_as_the_authors(tmp_path) -> None:
    """Item 5: stochastic rounding draws from the window's place in the tensor, which the case
    now keeps, so a reopened case shows the author's cells."""
    from bitprism.ui.case_file import open_case

    a, tp, path = _author_case(tmp_path, rounding="stochastic", seed=11)
    back = open_case(path)
    for c, d in zip(back.window.casts, tp.window.casts):
        assert np.array_equal(c.codes, d.codes)
    moved = TensorPrism(a, formats=["float16", "bfloat16"], rounding="stochastic", seed=11,
                        row_offset=tp.row_offset + 1, col_offset=tp.col_offset)
    assert not np.array_equal(moved.window.casts[0].codes[:-1], tp.window.casts[0].codes[1:])


def test_schema_1_tensor_case_still_opens(tmp_path) -> None:
    """Item 5: a case as bitprism wrote it before (schema 1: log_scale, no recorded summary)
    opens through the migration, at its place in the tensor."""
    from bitprism.ui.case_file import open_case

    old = {
        "bitprism_case": 1, "kind": "tensor_prism", "created": "2025-06-01T10:00:00Z",
        "versions": {"bitprism": "0.1.0"}, "note": "old case",
        "state": {
            "formats": ["bfloat16"], "options": {"rounding": "roundTiesToEven"},
            "view": "value", "log_scale": True, "error_unit": "ulp", "summary_scope": "tensor",
            "shape": [4, 40], "axes": [0, 1], "fixed": [0, 0],
            "window": {"row": 1, "col": 30, "rows": 2, "cols": 2}, "origin": [1, 30],
            "selected": [2, 31],
            "data": {"dtype": "float32", "rows": 2, "cols": 2,
                     "bits": ["0x3f800000", "0x7fc00001", "0xbf000000", "0x00000000"]},
        },
    }
    path = tmp_path / "old.json"
    path.write_text(json.dumps(old), encoding="utf-8")
    back = open_case(path)
    assert back.value_scale == "log" and back.note == "old case"
    assert back.selected == (2, 31) and back.window.shape == (4, 40)
    assert back.window.bits.tolist() == [[0x3F800000, 0x7FC00001], [0xBF000000, 0]]
    assert back.nav_counts["nan"].value == "NaN (saved window): 1 cell"
