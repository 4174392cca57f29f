"""Case files under generated states and mutations (issue 16, items 7 and 11 and the campaign's
"mutated case files" class).

* A widget never writes a file it cannot read back: for a wide range of widget states
  (hypothesis), save -> open and export -> open give the same view.
* A mutated case (fields dropped, replaced or retyped, huge numbers, deep nesting, wrong schema
  numbers, bad UTF-8, cut short) opens as a widget or is refused with a ``BitprismError``:
  never another exception, and within the 2 s a hang is called at (hypothesis deadline).
"""

from __future__ import annotations

import copy
import json
import re
from fractions import Fraction
from pathlib import Path
from typing import Any

import ml_dtypes
import numpy as np
import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from bitprism.errors import BitprismError
from bitprism.formats import FORMATS, Format
from bitprism.numerics.options import OVERFLOW_MODES, ROUNDING_MODES, SUBNORMAL_MODES
from bitprism.ui.case_file import open_case
from bitprism.ui.prism import Prism
from bitprism.ui.tensor_prism import TensorPrism

CUSTOM = [Format("e3m3", 3, 3, specials="fn"), Format("u4e2", 2, 2, specials="finite",
                                                      signed=False)]  # layouts of our own
FORMAT_CHOICES = [*FORMATS, *CUSTOM]
SLOW = settings(max_examples=40, deadline=None,
                suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
CAMPAIGN = settings(max_examples=150, deadline=2000,  # a per-example bound of 2 s
                    suppress_health_check=[HealthCheck.function_scoped_fixture,
                                           HealthCheck.too_slow])

options = st.fixed_dictionaries({
    "rounding": st.sampled_from(ROUNDING_MODES),
    "overflow": st.sampled_from(OVERFLOW_MODES),
    "subnormals": st.sampled_from(SUBNORMAL_MODES),
    "seed": st.integers(0, 2**63 - 1),  # seeded: stochastic views reopen the same
})
format_lists = st.lists(st.sampled_from(FORMAT_CHOICES), min_size=1, max_size=5,
                        unique_by=lambda f: getattr(f, "name", f))
values = st.one_of(
    st.sampled_from(["0.1", "1/3", "-0", "nan", "-inf", "1e400", "1e-400", "2**-1074",
                     "65504 * 2", "0x1.8p-3", "-(2**-149)", "448", "1 + 2**-8 + 2**-30"]),
    st.floats(allow_nan=False, allow_infinity=True),  # numbers are kept as exact text
    st.integers(-(2**80), 2**80),
    st.fractions(max_denominator=10**12),
)


# ----- save -> open round trips ------------------------------------------------------------------
def _prism_state(p: Prism) -> tuple[Any, ...]:
    traits = tuple(getattr(p, n) for n in ("value", "rounding", "overflow", "subnormals", "seed",
                                           "via", "aligned", "source_format", "source_code",
                                           "expression"))
    return traits, p.format_objects, [r.code for r in p.comparison.rows], p._static_html()


@SLOW
@given(value=values, fmts=format_lists, opts=options, via=st.sampled_from(["", "float32"]),
       aligned=st.booleans(), expression=st.sampled_from(["", "2048 + 1", "0.1 * 3", "1/3"]),
       source=st.none() | st.tuples(st.integers(0, 4), st.integers(0, 2**64 - 1)),
       note=st.text(max_size=30))
def test_prism_states_round_trip(tmp_path: Path, value: Any, fmts: list[Any], opts: dict,
                                 via: str, aligned: bool, expression: str,
                                 source: tuple[int, int] | None, note: str) -> None:
    try:
        p = Prism(value, formats=fmts, via=via, aligned=aligned, expression=expression, **opts)
        if source is not None:
            f = p.format_objects[source[0] % len(fmts)]
            p.set_source(f, source[1] % (1 << f.bits))
    except BitprismError:
        assume(False)  # a state the widget refuses is never saved
    assert p.message == ""
    for path in (p.save_case(tmp_path / "p.json", note=note),
                 p.export_html(tmp_path / "p.html", note=note)):
        q = open_case(path)
        assert _prism_state(q) == _prism_state(p) and q._case_note == note


DTYPES = [np.float32, np.float16, np.float64, ml_dtypes.bfloat16, ml_dtypes.float8_e4m3fn,
          ml_dtypes.float4_e2m1fn, np.int8, np.uint16, np.bool_]


@st.composite
def tensors(draw: Any) -> np.ndarray:
    shape = draw(st.lists(st.integers(1, 9), min_size=1, max_size=3))
    dtype = draw(st.sampled_from(DTYPES))
    n = int(np.prod(shape))
    raw = draw(st.lists(st.floats(width=32), min_size=n, max_size=n))  # NaN and Inf included
    with np.errstate(all="ignore"):
        return np.array(raw, np.float64).astype(dtype).reshape(shape)


@SLOW
@given(data=tensors(), fmts=format_lists, opts=options,
       view=st.sampled_from(["value", "class", "cast", "error", "compare"]),
       scale=st.sampled_from(["auto", "linear", "log", "quantile"]),
       unit=st.sampled_from(["ulp", "relative"]),
       size=st.tuples(st.integers(1, 32), st.integers(1, 32)), pick=st.randoms(use_true_random=False))
def test_tensor_prism_states_round_trip(tmp_path: Path, data: np.ndarray, fmts: list[Any],
                                        opts: dict, view: str, scale: str, unit: str,
                                        size: tuple[int, int], pick: Any) -> None:
    try:
        tp = TensorPrism(data, formats=fmts, view=view, value_scale=scale, error_unit=unit,
                         rows=size[0], cols=size[1], **opts)
    except BitprismError:
        assume(False)  # a state the widget refuses is never saved
    names = [f.name for f in tp.format_objects]
    tp.format_a, tp.format_b = pick.choice(names), pick.choice(names)
    if data.ndim >= 2 and pick.random() < 0.5:
        tp.row_axis, tp.col_axis = pick.sample(range(data.ndim), 2)
    tp.select(tuple(pick.randrange(n) for n in data.shape))
    if pick.random() < 0.3:
        tp.pan(pick.choice(["page-right", "left", "down", "page-up"]))
    assert tp.message == ""
    w = tp.window
    for path in (tp.save_case(tmp_path / "t.json"), tp.export_html(tmp_path / "t.html")):
        back = open_case(path)
        assert back.message == ""
        assert np.array_equal(back.window.bits, w.bits)  # NaN payloads included
        assert back.window.raw.dtype == w.raw.dtype
        assert back.format_objects == tp.format_objects
        for name in ("rounding", "overflow", "subnormals", "seed", "view", "value_scale",
                     "error_unit", "summary_scope", "row_axis", "col_axis"):
            assert getattr(back, name) == getattr(tp, name), name
        shown = (tp.row_axis, tp.col_axis)  # fixed: the indices of the axes not shown
        assert [v for ax, v in enumerate(back.fixed) if ax not in shown] == [
            v for ax, v in enumerate(tp.fixed) if ax not in shown]
        assert (back._fmt("a"), back._fmt("b")) == (tp._fmt("a"), tp._fmt("b"))
        # the tensor's own indices and shape (issue 18 item 5)
        assert back.window.shape == w.shape and back.window.index_of(0, 0) == w.index_of(0, 0)
        assert back.selected == (tp.selected if w.cell_of(tp.selected) else ())
        # stochastic draws too: they derive from where the window sits in the tensor
        for i, (c, d) in enumerate(zip(back.window.casts, w.casts)):
            if tp.seed is not None or tp.rounding != "stochastic":
                assert np.array_equal(c.codes, d.codes), i


# ----- mutated cases --------------------------------------------------------------------------------
def _valid_cases(tmp_path: Path) -> dict[str, tuple[dict[str, Any], str]]:
    """Saved cases (JSON) and exported pages of both widgets: (case, page text)."""
    p = Prism("1/3", formats=["float32", "bfloat16", CUSTOM[0]], expression="2048 + 1")
    p.set_source("bfloat16", 0x7FC1)  # a NaN with a payload
    a = (np.arange(2 * 20 * 30, dtype=np.float32).reshape(2, 20, 30) - 300) / 7
    a[1, 3, 4] = np.nan
    tp = TensorPrism(a, formats=["bfloat16", CUSTOM[0]], rows=5, cols=6, view="compare",
                     rounding="stochastic", seed=3)
    tp.goto("1, 3, 4")
    out = {}
    for name, widget in (("prism", p), ("tensor", tp)):
        widget.save_case(tmp_path / f"{name}.json", note="a note")
        widget.export_html(tmp_path / f"{name}.html", note="a note")
        case = json.loads((tmp_path / f"{name}.json").read_text(encoding="utf-8"))
        out[name] = (case, (tmp_path / f"{name}.html").read_text(encoding="utf-8"))
    return out


_CASES: dict[str, tuple[dict[str, Any], str]] = {}


@pytest.fixture()
def valid_cases(tmp_path_factory: pytest.TempPathFactory) -> dict[str, tuple[dict, str]]:
    if not _CASES:
        _CASES.update(_valid_cases(tmp_path_factory.mktemp("valid")))
    return _CASES


def _paths(node: Any, prefix: tuple[Any, ...] = ()) -> list[tuple[Any, ...]]:
    out = [prefix]
    if isinstance(node, dict):
        for k, v in node.items():
            out += _paths(v, prefix + (k,))
    elif isinstance(node, list):
        for i, v in enumerate(node):
            out += _paths(v, prefix + (i,))
    return out


HUGE = "@@huge@@"  # replaced by an integer of 5,000 digits in the JSON text
json_values = st.recursive(
    st.one_of(st.none(), st.booleans(), st.integers(-(2**70), 2**70),
              st.sampled_from([2**63, 2**64, -1, 0, 10**30, HUGE]),
              st.floats(allow_nan=False), st.sampled_from([1e308, -0.0, 1e-320]),
              st.text(max_size=20),
              st.sampled_from(["", "\ud800", "0x", "0x" + "f" * 17, "float16", "nan", "x" * 5000,
                               "</script>", "tensor_prism", "prism", "1e5000", "2**2**2**2"])),
    lambda children: st.lists(children, max_size=3) | st.dictionaries(
        st.sampled_from(["row", "col", "rows", "cols", "name", "a", "code", "format"]),
        children, max_size=3),
    max_leaves=8,
)


@st.composite
def mutations(draw: Any, case: dict[str, Any]) -> dict[str, Any]:
    out = copy.deepcopy(case)
    for _ in range(draw(st.integers(1, 3))):
        paths = _paths(out)
        path = draw(st.sampled_from(paths))
        if not path:
            continue
        parent: Any = out
        for k in path[:-1]:
            parent = parent[k]
        key = path[-1]
        action = draw(st.sampled_from(["drop", "replace", "retype", "nest", "schema"]))
        if action == "schema":
            out["bitprism_case"] = draw(st.sampled_from([0, -1, 2, 2**70, "1", 1.0, None]))
        elif action == "drop":
            if isinstance(parent, dict):
                del parent[key]
            else:
                parent.pop(key)
        elif action == "replace":
            parent[key] = draw(json_values)
        elif action == "retype":
            old = parent[key]
            parent[key] = draw(st.sampled_from([str(old)[:50], [old], {"value": old}, None]))
        else:  # deep nesting
            node: Any = parent[key]
            for _ in range(draw(st.integers(20, 40))):
                node = [node]
            parent[key] = node
    return out


def _case_text(case: dict[str, Any]) -> str:
    text = json.dumps(case, ensure_ascii=True, allow_nan=True)
    return text.replace(f'"{HUGE}"', "9" * 5000)


def _page_with(page: str, text: str) -> str:
    block = text.replace("<", "\\u003c").replace(">", "\\u003e").replace("&", "\\u0026")
    return re.sub(r'(id="bitprism-case">\n).*?(\n</script>)',
                  lambda m: m.group(1) + block + m.group(2), page, flags=re.DOTALL)


def _opens_or_refuses(path: Path) -> None:
    try:
        widget = open_case(path)
    except BitprismError as exc:
        assert str(exc).startswith(path.name), exc
        return
    assert isinstance(widget, (Prism, TensorPrism))


@CAMPAIGN
@given(data=st.data(), kind=st.sampled_from(["prism", "tensor"]), as_page=st.booleans())
def test_mutated_case_opens_or_is_refused(tmp_path: Path, valid_cases: dict, data: Any,
                                          kind: str, as_page: bool) -> None:
    case, page = valid_cases[kind]
    text = _case_text(data.draw(mutations(case)))
    path = tmp_path / ("m.html" if as_page else "m.json")
    path.write_text(_page_with(page, text) if as_page else text, encoding="utf-8")
    _opens_or_refuses(path)


@CAMPAIGN
@given(data=st.data(), kind=st.sampled_from(["prism", "tensor"]), as_page=st.booleans())
def test_damaged_bytes_open_or_are_refused(tmp_path: Path, valid_cases: dict, data: Any,
                                           kind: str, as_page: bool) -> None:
    """Bytes flipped (bad UTF-8 included), inserted or cut: a widget or a BitprismError."""
    case, page = valid_cases[kind]
    raw = bytearray((page if as_page else json.dumps(case, indent=1)).encode("utf-8"))
    for _ in range(data.draw(st.integers(1, 4))):
        i = data.draw(st.integers(0, len(raw) - 1))
        action = data.draw(st.sampled_from(["flip", "insert", "cut"]))
        if action == "flip":
            raw[i] = data.draw(st.integers(0, 255))
        elif action == "insert":
            raw[i:i] = data.draw(st.sampled_from([b"\xff", b"\xc3", b"[", b"{", b'"', b"\\u",
                                                  b"NaN", b"</script>", b"\x00"]))
        else:
            del raw[i:]
            break
    path = tmp_path / ("d.html" if as_page else "d.json")
    path.write_bytes(bytes(raw))
    _opens_or_refuses(path)


def test_schema_0_migration_of_a_mutated_state_is_refused_cleanly(tmp_path: Path) -> None:
    for state in ([], "x", {"value": "1", "formats": ["float16"], "rounding_mode": [1]},
                  {"value": "1", "formats": ["float16"], "seed": 2**63}):
        path = tmp_path / "old.json"
        path.write_text(json.dumps({"bitprism_case": 0, "kind": "prism", "state": state}),
                        encoding="utf-8")
        with pytest.raises(BitprismError, match=r"^old\.json: "):
            open_case(path)


def test_value_of_many_digits_in_a_case_is_refused_cleanly(tmp_path: Path) -> None:
    p = Prism("0.1", formats=["float16"])
    case = json.loads(p.save_case(tmp_path / "c.json").read_text(encoding="utf-8"))
    case["state"]["value"] = "1" * 1001
    (tmp_path / "c.json").write_text(json.dumps(case), encoding="utf-8")
    with pytest.raises(BitprismError, match=r"state\.value: not a number"):
        open_case(tmp_path / "c.json")
    assert Fraction(open_case(p.save_case(tmp_path / "d.json")).value) == Fraction(1, 10)
