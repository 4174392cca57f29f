"""Case files: save -> open gives the same view; exported pages are self-contained; every bad
file is refused with a message naming the field; older schemas migrate."""

from __future__ import annotations

import copy
import json
import re
from html.parser import HTMLParser
from pathlib import Path
from typing import Any

import pytest

from bitprism.errors import BitprismError
from bitprism.formats import Format
from bitprism.ui import case_codecs, case_envelope
from bitprism.ui.case_codecs import check_window_size, code_to_hex
from bitprism.ui.case_envelope import CASE_SCHEMA, MAX_CASE_BYTES
from bitprism.ui.case_file import open_case
from bitprism.ui.prism import Prism

E3M3 = Format("e3m3", 3, 3, specials="fn")  # a 7-bit layout of our own


def _codes(p: Prism) -> list[tuple[str, int]]:
    return [(r.format.name, r.code) for r in p.comparison.rows]


def _same_view(a: Prism, b: Prism) -> None:
    assert _codes(a) == _codes(b)
    assert a.format_objects == b.format_objects
    for name in ("value", "rounding", "overflow", "subnormals", "seed", "via", "aligned",
                 "source_format", "source_code", "expression"):
        assert getattr(a, name) == getattr(b, name), name
    assert a._static_html() == b._static_html()


def _save(p: Prism, tmp_path: Path, note: str = "") -> dict[str, Any]:
    path = tmp_path / "case.json"
    p.save_case(path, note=note)
    return json.loads(path.read_text(encoding="utf-8"))


def _write(tmp_path: Path, case: Any, name: str = "case.json") -> Path:
    path = tmp_path / name
    path.write_text(json.dumps(case), encoding="utf-8")
    return path


# ----- round trips -------------------------------------------------------------------------------
def test_round_trip_same_comparison_codes_and_options(tmp_path: Path) -> None:
    p = Prism("1/3", formats=["float32", "bfloat16", "float16", "float8_e4m3fn"])
    p.rounding = "roundTowardZero"
    p.overflow = "saturate"
    p.subnormals = "flush"
    p.via = "float32"
    p.aligned = False
    p.expression = "2048 + 1"
    case = _save(p, tmp_path, note="1/3 through float32 first")
    assert case["bitprism_case"] == CASE_SCHEMA and case["kind"] == "prism"
    assert case["note"] == "1/3 through float32 first"
    assert set(case["versions"]) == {"bitprism", "numpy", "ml_dtypes", "python"}
    assert re.fullmatch(r"\d{4}-\d\d-\d\dT\d\d:\d\d:\d\dZ", case["created"])
    # codes are hex bit patterns with the format's width, never decimals
    assert case["state"]["codes"] == [code_to_hex(r.code, r.format) for r in p.comparison.rows]
    assert case["state"]["codes"][2] == "0x3555"  # 1/3 toward zero in binary16, from ml_dtypes
    q = open_case(tmp_path / "case.json")
    assert isinstance(q, Prism) and q.message == ""
    _same_view(p, q)


def test_stochastic_rounding_with_seed_round_trips(tmp_path: Path) -> None:
    p = Prism("0.1", formats=["bfloat16", "float8_e5m2"])
    p.rounding = "stochastic"
    p.seed = 1234
    _save(p, tmp_path)
    _same_view(p, open_case(tmp_path / "case.json"))


def test_custom_format_round_trips_by_params(tmp_path: Path) -> None:
    p = Prism("0.3", formats=["float16", E3M3])
    case = _save(p, tmp_path)
    assert case["state"]["formats"][0] == "float16"
    assert case["state"]["formats"][1] == E3M3.to_params()
    q = open_case(tmp_path / "case.json")
    assert q.format_objects[1] == E3M3
    _same_view(p, q)


@pytest.mark.parametrize(
    ("fmt", "code"),
    [
        ("float32", 0x7FA00001),  # signaling NaN with a payload (IEEE 754-2008 §6.2.1)
        ("float32", 0xFFC12345),  # negative quiet NaN, payload 0x12345
        ("float16", 0x8000),  # -0
        ("float8_e4m3fn", 0xFF),  # negative NaN of E4M3FN (OCP OFP8 rev 1.0, Table 1)
    ],
    ids=["snan-payload", "neg-qnan-payload", "neg-zero", "e4m3fn-neg-nan"],
)
def test_source_bit_patterns_kept_exactly(tmp_path: Path, fmt: str, code: int) -> None:
    p = Prism("1", formats=["float32", "bfloat16", "float16", "float8_e4m3fn"])
    p.set_source(fmt, code)
    case = _save(p, tmp_path)
    assert case["state"]["source"] == {"format": fmt, "code": code_to_hex(code, fmt)}
    q = open_case(tmp_path / "case.json")
    assert q.source_format == fmt and q.source_code == code
    assert q.comparison.row(fmt).code == code
    _same_view(p, q)


def test_negative_zero_typed_round_trips(tmp_path: Path) -> None:
    p = Prism("-0", formats=["float32", "float16"])
    _save(p, tmp_path)
    q = open_case(tmp_path / "case.json")
    assert _codes(q) == [("float32", 0x80000000), ("float16", 0x8000)]  # IEEE 754 §3.4 sign bit


def test_drift_is_reported_not_hidden(tmp_path: Path) -> None:
    p = Prism("0.1", formats=["float32", "float16"])
    case = _save(p, tmp_path)
    case["state"]["codes"][1] = "0x2e67"  # as if an older bitprism had rounded differently
    q = open_case(_write(tmp_path, case))
    assert "float16: saved 0x2e67, now 0x2e66" in q.message


# ----- exported page ------------------------------------------------------------------------------
class _PageAudit(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.refs: list[tuple[str, str, str]] = []
        self.scripts: list[dict[str, str | None]] = []
        self.tags: set[str] = set()

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        self.tags.add(tag)
        for name, value in attrs:
            if name in ("src", "href", "srcset", "action", "poster", "data"):
                self.refs.append((tag, name, value or ""))
        if tag == "script":
            self.scripts.append(dict(attrs))


def test_export_html_is_self_contained_and_reopens(tmp_path: Path) -> None:
    p = Prism("65504 * 2", formats=["float32", "float16", E3M3])
    p.overflow = "saturate"
    note = 'overflow in <b>fp16</b> & "e3m3" </script><script>alert(1)</script>'
    path = p.export_html(tmp_path / "page.html", note=note)
    page = path.read_text(encoding="utf-8")
    audit = _PageAudit()
    audit.feed(page)
    assert audit.refs == []  # no src=, href= ... to anything, external or not
    assert audit.scripts == [{"type": "application/json", "id": "bitprism-case"}]
    assert "link" not in audit.tags and "img" not in audit.tags and "iframe" not in audit.tags
    assert "@import" not in page and "url(" not in page and "http://" not in page
    assert "https://" not in page
    # the note is escaped in the page and cannot close the data block
    assert "&lt;b&gt;fp16&lt;/b&gt;" in page and "<b>fp16</b>" not in page
    block = page.split('id="bitprism-case">', 1)[1].split("</script>", 1)[0]
    assert "</" not in block and "<" not in block
    assert p._static_html() in page  # what the widget showed
    assert "saturate" in page and "e3m3" in page and "bitprism" in page
    q = open_case(path)
    assert q._case_note == note
    _same_view(p, q)


def test_open_case_refuses_page_without_case(tmp_path: Path) -> None:
    path = tmp_path / "other.html"
    path.write_text("<html><body>hello</body></html>", encoding="utf-8")
    with pytest.raises(BitprismError, match=r"other\.html: page: no bitprism case block"):
        open_case(path)


# ----- corrupted, truncated and hand-edited files ----------------------------------------------
@pytest.fixture()
def good_case(tmp_path: Path) -> dict[str, Any]:
    p = Prism("0.1", formats=["float32", "bfloat16", "float16"])
    p.set_source("float16", 0x2E66)
    return _save(p, tmp_path)


def _edit(case: dict[str, Any], dotted: str, value: Any) -> dict[str, Any]:
    out = copy.deepcopy(case)
    node: Any = out
    keys = [int(k) if k.isdigit() else k for k in dotted.split(".")]
    for k in keys[:-1]:
        node = node[k]
    node[keys[-1]] = value
    return out


BAD = [
    ("state.formats.2", "fp17", r"state\.formats\[2\]: unknown format 'fp17'"),
    ("state.formats.1", 16, r"state\.formats\[1\]: expected a string or an object, got 16"),
    ("state.formats", "float16", r"state\.formats: expected a list"),
    ("state.formats", [], r"state\.formats: a Prism needs at least one format"),
    ("state.formats.0", "float16", r"state\.formats\[2\]: format 'float16' is listed twice"),
    ("state.options.rounding", "roundHalfUp", r"state\.options\.rounding: must be one of"),
    ("state.options.overflow", "wrap", r"state\.options\.overflow: must be one of"),
    ("state.options.seed", -1, r"state\.options\.seed: must be in 0\.\."),
    ("state.options.seed", 1.5, r"state\.options\.seed: expected an integer, got 1\.5"),
    ("state.aligned", "yes", r"state\.aligned: expected true/false"),
    ("state.via", "float17", r"state\.via: must be one of"),
    ("state.value", "0.1 +", r"state\.value: not a number"),
    ("state.value", 0.1, r"state\.value: expected a string, got 0\.1"),
    ("state.source.code", "0x12345", r"state\.source\.code: bit pattern 0x12345 does not fit "
                                     r"float16 \(16 bits"),
    ("state.source.code", "12345", r"state\.source\.code: bit pattern must be lower-case hex"),
    ("state.source.format", "float64", r"state\.source\.format: must be one of"),
    ("state.codes.0", "0x1ffffffff", r"state\.codes\[0\]: bit pattern 0x1ffffffff does not fit"),
    ("state.codes", ["0x0"], r"state\.codes: one bit pattern per format expected \(3\), got 1"),
    ("state.colour", "red", r"state\.colour: unknown field"),
    ("note", ["x"], r"note: expected a string"),
    ("note", "x" * (case_codecs.MAX_NOTE_CHARS + 1), r"note: text longer than"),
    ("kind", "spectrum", r"kind: must be one of 'prism', 'tensor_prism'"),
    ("versions", {"bitprism": 1}, r"versions\.bitprism: expected a string"),
    ("state", [], r"state: expected an object"),
    ("bitprism_case", "1", r"bitprism_case: expected an integer"),
    ("bitprism_case", True, r"bitprism_case: expected an integer, got true"),
    ("bitprism_case", 7, r"bitprism_case: written by a newer bitprism \(schema 7\); this "
                         r"version reads up to 2; upgrade bitprism"),
]


@pytest.mark.parametrize(("field", "value", "message"), BAD, ids=[f"{b[0]}={b[1]!r}"[:40] for b in BAD])
def test_bad_field_is_named(
    tmp_path: Path, good_case: dict[str, Any], field: str, value: Any, message: str
) -> None:
    path = _write(tmp_path, _edit(good_case, field, value), "bad.json")
    with pytest.raises(BitprismError, match=r"^bad\.json: " + message):
        open_case(path)


@pytest.mark.parametrize(
    ("params", "message"),
    [
        ({"exponent_bits": 12}, r"state\.formats\[1\]\.exponent_bits: must be in 1\.\.11"),
        ({"specials": "weird"}, r"state\.formats\[1\]\.specials: must be one of"),
        ({"bias": 5000}, r"state\.formats\[1\]\.bias: must be in"),
        ({"name": "float16"}, r"state\.formats\[1\]\.name: 'float16' is a built-in format"),
        ({"rounding": "x"}, r"state\.formats\[1\]\.rounding: unknown field"),
        ({"significand_bits": 0, "specials": "ieee"}, r"state\.formats\[1\]: Format 'e3m3'"),
    ],
    ids=["wide-exponent", "specials", "bias", "builtin-name", "extra-key", "format-rules"],
)
def test_bad_custom_format_is_named(tmp_path: Path, params: dict[str, Any], message: str) -> None:
    case = _save(Prism("0.3", formats=["float16", E3M3]), tmp_path)
    case["state"]["formats"][1].update(params)
    with pytest.raises(BitprismError, match=message):
        open_case(_write(tmp_path, case, "bad.json"))


def test_truncated_json(tmp_path: Path, good_case: dict[str, Any]) -> None:
    text = json.dumps(good_case)
    path = tmp_path / "cut.json"
    path.write_text(text[: len(text) // 2], encoding="utf-8")
    with pytest.raises(BitprismError, match=r"^cut\.json: case: not valid JSON .* truncated"):
        open_case(path)


def test_truncated_page(tmp_path: Path) -> None:
    page = Prism("0.1").export_html(tmp_path / "p.html").read_text(encoding="utf-8")
    cut = tmp_path / "cut.html"
    cut.write_text(page[: len(page) - 200], encoding="utf-8")  # loses the end of the block
    with pytest.raises(BitprismError, match=r"^cut\.html: page: no bitprism case block"):
        open_case(cut)


def test_not_a_case_and_not_json(tmp_path: Path) -> None:
    with pytest.raises(BitprismError, match=r"bitprism_case: missing"):
        open_case(_write(tmp_path, {"hello": 1}))
    path = tmp_path / "bin.json"
    path.write_bytes(b"\xff\xfe\x00binary")
    with pytest.raises(BitprismError, match=r"not UTF-8 text"):
        open_case(path)
    path.write_text('{"bitprism_case": NaN}', encoding="utf-8")
    with pytest.raises(BitprismError, match=r"NaN is not allowed"):
        open_case(path)
    with pytest.raises(BitprismError, match=r"cannot read the case file"):
        open_case(tmp_path / "missing.json")


def test_oversized_file_refused_before_reading(tmp_path: Path) -> None:
    path = tmp_path / "big.json"
    path.write_text('{"note": "' + "x" * MAX_CASE_BYTES + '"}', encoding="utf-8")
    with pytest.raises(BitprismError, match=rf"big\.json: .* at most {MAX_CASE_BYTES} bytes"):
        open_case(path)


def test_deep_json_refused(tmp_path: Path) -> None:
    path = tmp_path / "deep.json"
    path.write_text("[" * 10_000 + "]" * 10_000, encoding="utf-8")
    with pytest.raises(BitprismError, match=r"deep\.json: case: JSON nested deeper than"):
        open_case(path)


def test_oversized_tensor_window_is_refused() -> None:
    check_window_size(32, 32)
    check_window_size(1, 32)
    with pytest.raises(BitprismError, match=r"state\.window: a case stores at most 32 x 32 cells"):
        check_window_size(33, 2)
    with pytest.raises(BitprismError, match=r"this window is 64 x 64"):
        check_window_size(64, 64)


def test_nothing_is_built_before_everything_validated(
    tmp_path: Path, good_case: dict[str, Any], monkeypatch: pytest.MonkeyPatch
) -> None:
    built: list[Any] = []
    original = Prism.__init__

    def spy(self: Prism, *args: Any, **kwargs: Any) -> None:
        built.append(self)
        original(self, *args, **kwargs)

    monkeypatch.setattr(Prism, "__init__", spy)
    bad = _edit(good_case, "state.codes.2", "0x10000")  # the last field checked is wrong
    with pytest.raises(BitprismError, match=r"state\.codes\[2\]"):
        open_case(_write(tmp_path, bad))
    assert built == []


# ----- schema versions -----------------------------------------------------------------------------
def test_migration_from_schema_0(tmp_path: Path) -> None:
    # A case as the pre-release draft wrote it (schema 0), written by hand.
    old = {
        "bitprism_case": 0,
        "kind": "prism",
        "created": "2024-11-05T09:30:00Z",
        "bitprism_version": "0.0.1",
        "comment": "bf16 rounds 0.1 up",
        "state": {
            "value": "0.1",
            "formats": ["float32", "bfloat16"],
            "rounding_mode": "roundTowardPositive",
            "overflow": "saturate",
        },
    }
    q = open_case(_write(tmp_path, old, "old.json"))
    assert q.rounding == "roundTowardPositive" and q.overflow == "saturate"
    assert q._case_note == "bf16 rounds 0.1 up"
    assert q.comparison.row("bfloat16").code == 0x3DCD  # 0.1 rounded up in bfloat16, ml_dtypes
    migrated = case_envelope.read_case(tmp_path / "old.json")
    assert migrated["bitprism_case"] == 2 and migrated["versions"] == {"bitprism": "0.0.1"}


def test_migration_then_validation_names_field(tmp_path: Path) -> None:
    old = {"bitprism_case": 0, "kind": "prism",
           "state": {"value": "1", "formats": ["float16"], "rounding_mode": "upward"}}
    with pytest.raises(BitprismError, match=r"old\.json: state\.options\.rounding: must be one of"):
        open_case(_write(tmp_path, old, "old.json"))


def test_every_older_schema_has_a_migration() -> None:
    assert sorted(case_envelope._MIGRATIONS) == list(range(CASE_SCHEMA))


def test_save_refuses_bad_note(tmp_path: Path) -> None:
    with pytest.raises(BitprismError, match="note must be text"):
        Prism("1").save_case(tmp_path / "c.json", note=3)  # type: ignore[arg-type]


def test_huge_integer_is_refused_with_a_message(tmp_path: Path) -> None:
    path = tmp_path / "huge.json"
    path.write_text('{"bitprism_case": ' + "9" * 5000 + "}", encoding="utf-8")
    with pytest.raises(BitprismError, match=r"huge\.json: case: not readable as a case"):
        open_case(path)


# ----- issue 16 item 11: a tensor case's every field is checked; the widget never writes a file
# ----- it cannot read back --------------------------------------------------------------------
@pytest.fixture()
def tensor_case(tmp_path: Path) -> dict[str, Any]:
    import numpy as np

    from bitprism.ui.tensor_prism import TensorPrism

    a = np.arange(3 * 40 * 50, dtype=np.float32).reshape(3, 40, 50) / 7  # invented values
    tp = TensorPrism(a, formats=["bfloat16", E3M3], rows=4, cols=5, format_a="e3m3")
    tp.goto("1, 10, 20")
    path = tmp_path / "tensor.json"
    tp.save_case(path)
    case = json.loads(path.read_text(encoding="utf-8"))
    assert case["state"]["axes"] == [1, 2] and case["state"]["shape"] == [3, 40, 50]
    return case


TENSOR_BAD = [
    ("state.axes", True, r"state\.axes: expected a list, got true"),
    ("state.axes", [0], r"state\.axes: \[row axis, column axis\] expected, got 1 entries"),
    ("state.axes", {"a": 1}, r"state\.axes: expected a list, got an object"),
    ("state.axes", [2**64, 1], r"state\.axes\[0\]: must be in 0\.\.2"),
    ("state.axes", [1, 1], r"state\.axes: row and column axes must differ"),
    ("state.axes", [None, 2], r"state\.axes\[0\]: a 3-D tensor needs a row axis"),
    ("state.axes", ["1", 2], r"state\.axes\[0\]: expected an integer"),
    ("state.shape", [3, 0, 50], r"state\.shape\[1\]: must be in 1\.\."),
    ("state.shape", "3x40x50", r"state\.shape: expected a list"),
    ("state.shape", [], r"state\.shape: a tensor has at least one axis"),
    ("state.shape", [3, 40], r"state\.axes\[1\]: must be in 0\.\.1"),
    ("state.fixed", [1, 0], r"state\.fixed: one index per axis of \[3, 40, 50\] expected"),
    ("state.fixed", [3, 0, 0], r"state\.fixed\[0\]: must be in 0\.\.2, got 3"),
    ("state.fixed", [1.0, 0, 0], r"state\.fixed\[0\]: expected an integer"),
    ("state.window", None, r"state\.window: expected an object"),
    ("state.window.rows", 5, r"state\.window\.rows: 5 differs from state\.data\.rows \(4\)"),
    ("state.window.col", 48, r"state\.window\.col: 48 \+ 5 cells pass the end of axis 2"),
    ("state.window.row", -1, r"state\.window\.row: must be in 0\.\."),
    ("state.window.depth", 1, r"state\.window\.depth: unknown field"),
    ("state.origin", [1, 8, 0], r"state\.origin: \[1, 8, 0\] is not where state\.fixed and"),
    ("state.origin", [1, 8, 99], r"state\.origin\[2\]: must be in 0\.\.49"),
    ("state.selected", [1, 10], r"state\.selected: one index per axis of \[3, 40, 50\]"),
    ("state.selected", [1, 10, -2], r"state\.selected\[2\]: must be in 0\.\.49"),
    ("state.formats.1", "bfloat16", r"state\.formats\[1\]: format 'bfloat16' is listed twice"),
    ("state.format_a", "float16", r"state\.format_a: must be one of 'bfloat16', 'e3m3'"),
    ("state.options.seed", 2**63, r"state\.options\.seed: must be in 0\.\.9223372036854775807"),
    ("state.view", "heat", r"state\.view: must be one of"),
    ("state.data.bits.0", "0x3f80", r"state\.data\.bits\[0\]: expected 8 lower-case hex"),
    ("note", "\ud800", r"note: text holds '\\ud800' at position 0, a lone surrogate"),
]


@pytest.mark.parametrize(("field", "value", "message"), TENSOR_BAD,
                         ids=[f"{b[0]}={b[1]!r}"[:40] for b in TENSOR_BAD])
def test_bad_tensor_field_is_named(
    tmp_path: Path, tensor_case: dict[str, Any], field: str, value: Any, message: str
) -> None:
    """Issue 16 item 11 (reproducers: state.axes true, [0], {"a":1} and [2**64, 1] raised
    TypeError/IndexError/KeyError; shape, fixed and window were taken unchecked; duplicate
    formats were not reported): every field is checked, the message names it."""
    path = _write(tmp_path, _edit(tensor_case, field, value), "bad.json")
    with pytest.raises(BitprismError, match=r"^bad\.json: " + message):
        open_case(path)


def test_tensor_case_selection_maps_into_the_saved_window(
    tmp_path: Path, tensor_case: dict[str, Any]
) -> None:
    """Issue 18 item 5: a reopened case keeps the tensor's own indices and shape (it used to
    renumber the saved window from 0: selection [2, 2] for the author's [1, 10, 20])."""
    back = open_case(_write(tmp_path, tensor_case))
    assert back.selected == (1, 10, 20) and back.window.index_of(0, 0) == (1, 8, 18)
    assert back.window.shape == (3, 40, 50) and back.window.cell_of((1, 10, 20)) == (2, 2)
    assert back.format_a == "e3m3" and back.format_objects[1] == E3M3
    elsewhere = _edit(tensor_case, "state.selected", [2, 10, 20])  # another slice of axis 0
    assert open_case(_write(tmp_path, elsewhere)).selected == ()


def test_saving_refuses_text_utf8_cannot_encode(tmp_path: Path) -> None:
    """A lone surrogate cannot be written as UTF-8: refused when saving, never half-written."""
    with pytest.raises(BitprismError, match=r"note: text holds '\\ud800'"):
        Prism("1").save_case(tmp_path / "c.json", note="\ud800")
    assert not (tmp_path / "c.json").exists()
    with pytest.raises(BitprismError, match=r"formats\[0\]\.name: text holds"):
        Prism("1", formats=[Format("e3m3\udfff", 3, 3, specials="fn")])


def test_prism_keeps_only_values_a_case_reads_back(tmp_path: Path) -> None:
    """A number whose exact text the parser cannot read back (a case stores the text) is
    refused when set, not when the case is reopened."""
    from fractions import Fraction

    p = Prism("1", formats=["float16"])
    with pytest.raises(BitprismError, match="exact text has .* characters and does not read"):
        p.value = Fraction(1, 3**2000)
    assert p.value == "1"
    p.value = Fraction(1, 3**100)
    q = open_case(p.save_case(tmp_path / "c.json"))
    assert Fraction(q.value) == Fraction(1, 3**100)
