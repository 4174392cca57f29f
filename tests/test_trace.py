"""``trace()``: planted faults found at their lines, counts held to the scan, outputs unchanged,
bad input refused, captures bounded, numpy and torch records agreeing, reprs, plots and cases.

References: IEEE 754-2019 §7 for what makes NaN and Inf (exp overflow §7.4, Inf - Inf and log
of a negative §7.2, division by zero §7.3); ``bitprism.scan(..., quantiles=False)`` for the
per-format counts; plain numpy (float64) for the shadow; the untraced function for outputs.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import numpy as np
import pytest

import bitprism as bp
from bitprism.errors import BitprismError, UnsupportedInputError
from bitprism.numerics.options import CastOptions
from bitprism.probes.stats import Counter, check_formats

HERE = Path(__file__)


def _line(tag: str) -> int:
    """The line of this file marked ``# plant: <tag>``."""
    for i, text in enumerate(HERE.read_text(encoding="utf-8").splitlines(), start=1):
        if text.rstrip().endswith(f"# plant: {tag}"):
            return i
    raise AssertionError(tag)


# ----- planted faults ----------------------------------------------------------------------------
def exp_overflow(x: np.ndarray) -> np.ndarray:
    y = x * 2.0
    e = np.exp(y)  # plant: exp
    return e / e.sum()


def inf_minus_inf(x: np.ndarray) -> np.ndarray:
    big = x * 1e30
    huge = big * 1e30  # plant: huge
    return huge - huge  # plant: inf-inf


def log_negative(x: np.ndarray) -> np.ndarray:
    shifted = x - 1.0
    return np.log(shifted)  # plant: log


def divide_by_underflow(x: np.ndarray) -> np.ndarray:
    tiny = x * 1e-30  # plant: tiny
    half = tiny.astype(np.float16)  # plant: cast16
    return 1.0 / half  # plant: divide


def float16_only(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    c = a + b
    return c * a  # plant: product


def test_exp_overflow_is_found_on_its_line() -> None:
    x = np.array([1.0, 20.0, 50.0, 3.0], np.float32)
    t = bp.trace(exp_overflow, x)
    rec = t.first("inf")
    assert rec is not None and rec.name == "exp" and rec.lineno == _line("exp")
    assert rec.function == "exp_overflow" and rec.filename == str(HERE)
    assert rec.created_inf == 1 and rec.inf == 1  # exp(100) > float32's largest (§7.4)
    assert t.first("nonfinite") is rec
    nan = t.first("nan")  # Inf / Inf in the division (§7.2)
    assert nan is not None and nan.name == "divide" and nan.index > rec.index


def test_inf_minus_inf_is_found_on_its_line() -> None:
    t = bp.trace(inf_minus_inf, np.array([1e5, 1e-30], np.float32))
    inf = t.first("inf")
    assert inf is not None and inf.name == "multiply" and inf.lineno == _line("huge")
    nan = t.first("nan")
    assert nan is not None and nan.name == "subtract" and nan.lineno == _line("inf-inf")
    assert nan.created_nan == 1 and nan.created_inf == 0


def test_log_of_a_negative_is_found_on_its_line() -> None:
    t = bp.trace(log_negative, np.array([2.0, 0.5, 3.0]))
    rec = t.first("nan")
    assert rec is not None and rec.name == "log" and rec.lineno == _line("log")
    assert rec.created_nan == 1


def test_division_by_an_underflowed_zero() -> None:
    t = bp.trace(divide_by_underflow, np.array([1.0, 2.0], np.float32),
                 formats=["float16", "bfloat16"])
    under = t.first("underflow", "float16")  # 1e-30 is below float16's range, not bfloat16's
    assert under is not None and under.name == "multiply" and under.lineno == _line("tiny")
    assert t.first("underflow", "bfloat16") is None
    inf = t.first("inf")
    assert inf is not None and inf.name == "divide" and inf.lineno == _line("divide")
    assert inf.created_inf == 2


def test_an_overflow_only_in_float16() -> None:
    a = np.full(4, 300.0, np.float32)
    b = np.full(4, 100.0, np.float32)
    t = bp.trace(float16_only, a, b, formats=["float16", "float32", "bfloat16"])
    rec = t.first("overflow", "float16")  # 400 * 300 = 120000 > 65504, float16's largest
    assert rec is not None and rec.name == "multiply" and rec.lineno == _line("product")
    assert rec.count("float16").overflow == 4 and rec.count("float16").overflow_born
    assert t.first("overflow", "float32") is None and t.first("overflow", "bfloat16") is None
    assert t.first("overflow").index == rec.index and t.first("inf") is None


# ----- outputs unchanged -------------------------------------------------------------------------
def _everything(x: np.ndarray, y: np.ndarray, idx: np.ndarray) -> tuple[Any, ...]:
    z = np.empty_like(x)
    np.multiply(x, y, out=z)
    w = x.copy()
    w += y
    w[0, 0] = 7.5
    w[w > 3] = 0.0
    m = np.maximum(w, 0.25).T @ x
    s = np.concatenate([x, y], axis=0).reshape(-1, 2)
    q = np.where(x > 0, x, 0.1 * x)
    r = (x ** 2).mean(axis=0, keepdims=True) + x.std()
    u = np.einsum("ij,ij->i", x, y) + x.sum(axis=1) - np.dot(x, y.T)[0]
    v = np.clip(x[idx], -0.5, 0.5).astype(np.float16)
    k = np.argmax(x, axis=1) + idx[0]
    return z, w, m, s, q, r, u, v, k, float(x.max()), x.shape


def test_outputs_equal_the_untraced_ones() -> None:
    rng = np.random.default_rng(0)
    x = rng.standard_normal((4, 4)).astype(np.float32)
    y = rng.standard_normal((4, 4)).astype(np.float32)
    idx = np.array([2, 0, 3])
    want = _everything(x.copy(), y.copy(), idx)
    t = bp.trace(_everything, x, y, idx)
    assert len(t.result) == len(want)
    for got, expect in zip(t.result, want):
        if isinstance(expect, np.ndarray):
            assert type(got) is np.ndarray and got.dtype == expect.dtype
            assert np.array_equal(got, expect, equal_nan=True)
        else:
            assert got == expect
    names = [r.name for r in t.ops]
    for name in ("multiply", "add", "matmul", "concatenate", "where", "einsum", "mean", "std",
                 "clip", "astype", "argmax", "sum", "dot", "square", "maximum"):
        assert name in names, name
    assert [r.in_place for r in t.ops if r.name == "multiply"][0]
    assert any(r.in_place and r.name == "add" for r in t.ops)


def test_in_place_operations_know_what_they_create() -> None:
    def fn(x: np.ndarray, y: np.ndarray) -> np.ndarray:
        x -= y  # Inf - Inf at index 0 only: the Inf at index 2 came in
        return x

    x = np.array([np.inf, 1.0, np.inf])
    y = np.array([np.inf, 1.0, 0.0])
    t = bp.trace(fn, x, y)
    (rec,) = t.ops
    assert rec.in_place and rec.name == "subtract"
    assert rec.created_nan == 1 and rec.nan == 1 and rec.inf == 1 and rec.created_inf == 0
    assert t.input_arrays(rec)[0][0] == np.inf  # the input as it was before the subtraction


@pytest.mark.parametrize("data", ["wide", "few-small", "relu", "float64", "float16"])
def test_counts_equal_the_counts_only_scan(data: str) -> None:
    # 300000 elements: more than one counting block; "wide" has many values below the
    # formats' normal ranges (each threshold counts the block), "few-small" a handful (they are
    # picked out and counted again)
    rng = np.random.default_rng(5)
    n = 300_000
    if data in ("few-small", "relu"):  # relu: half zeros, counted apart
        x = (rng.standard_normal(n) * 100).astype(np.float32)
        x[::5000] = rng.standard_normal(60) * 1e-7
        if data == "relu":
            x = np.maximum(x, 0)
    else:
        x = (rng.standard_normal(n) * np.exp2(rng.uniform(-40, 40, n))).astype(np.float32)
    x[:6] = [np.nan, np.inf, -np.inf, 0.0, -0.0, 1e-45]
    x[n - 3:] = [np.nan, -np.inf, 7e-39]  # specials in the second block too
    with np.errstate(over="ignore"):  # float16 data: the large values become Inf
        x = x.astype({"float64": np.float64, "float16": np.float16}.get(data, np.float32))
    fmts = ["bfloat16", "float16", "float8_e4m3fn", "float8_e5m2", "float6_e3m2fn"]
    for rounding in ("roundTiesToEven", "roundTowardPositive", "roundTowardZero"):
        t = bp.trace(lambda v: v * 1.0, x, formats=fmts, rounding=rounding)
        (rec,) = t.ops
        ref = bp.scan(x, fmts, quantiles=False, progress=False, rounding=rounding)
        for f in ref.formats:
            c = rec.count(f.name)
            assert (c.overflow, c.underflow, c.subnormal) == (f.overflow, f.underflow,
                                                              f.subnormal), (rounding, f.name)
        assert rec.nan == ref.formats[0].nan and rec.inf == ref.formats[0].inf
        finite = np.abs(x[np.isfinite(x)])
        assert rec.amax == float(finite.max())
        assert rec.nan == int(np.isnan(x).sum()) and rec.inf == int(np.isinf(x).sum())
        # what a record asks of its inputs, found without counting them all, agrees
        counter = Counter(check_formats(fmts), CastOptions(rounding))  # type: ignore[arg-type]
        parts = {"whole": x, "head": x[1000:2000], "tail": x[-5:]}
        for part in parts.values():
            s = counter.stats(part)
            assert counter.holds(part, "nan") == bool(s.nan)
            assert counter.holds(part, "inf") == bool(s.inf)
            for i in range(len(fmts)):
                assert counter.holds(part, "overflow", i) == bool(s.overflow[i])
                assert counter.holds(part, "underflow", i) == bool(s.underflow[i])


# ----- bad input ---------------------------------------------------------------------------------
def test_non_array_arguments_pass_through_untouched() -> None:
    marker = object()
    config = {"n": 3, "name": "x", "tag": marker}
    seen: dict[str, Any] = {}

    def fn(x: np.ndarray, cfg: dict[str, Any], label: str, scale: float, items: list[float]) -> Any:
        seen.update(cfg=cfg, label=label, scale=scale, items=items)
        return x * scale

    items = [1.0, 2.0]
    bp.trace(fn, np.ones(2), config, "text", 2.5, items)
    assert seen["cfg"] == config and seen["cfg"]["tag"] is marker
    assert seen["label"] == "text" and seen["scale"] == 2.5 and seen["items"] == items


def test_integer_and_boolean_operations_are_recorded_not_emulated() -> None:
    def fn(i: np.ndarray, b: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        return i * 3 + 70000, b & ~b

    i = np.array([1, 2, 30000], np.int64)
    b = np.array([True, False])
    t = bp.trace(fn, i, b, emulate="float8_e4m3fn", formats=["float16"])
    ints, bools = t.result
    assert ints.tolist() == [70003, 70006, 160000] and bools.tolist() == [False, False]
    assert [r.name for r in t.ops] == ["multiply", "add", "invert", "bitwise_and"]
    assert not any(r.emulated for r in t.ops)
    assert t.ops[1].count("float16").overflow == 3  # integers are counted as the values they are


@pytest.mark.parametrize("bad,word", [
    (np.array([1 + 2j]), "complex"), (np.array(["a", "b"]), "text"),
    (np.array([object()], dtype=object), "object")])
def test_unreadable_arrays_are_refused_naming_the_argument(bad: np.ndarray, word: str) -> None:
    with pytest.raises(UnsupportedInputError, match=rf"argument 'w' \(args\[1\]\).*{word}"):
        bp.trace(lambda x, w: x, np.ones(2), bad)
    with pytest.raises(UnsupportedInputError, match=rf"kwargs\['w'\]\[0\].*{word}"):
        bp.trace(lambda x, w: x, np.ones(2), kwargs={"w": [bad]})


@pytest.mark.parametrize("kwargs,word", [
    ({"chunk": 0}, "chunk"), ({"shadow": "float32"}, "shadow"), ({"accumulate": "float16"},
                                                                 "accumulate"),
    ({"capture_mib": -1}, "capture_mib"), ({"formats": ["float8_e8m0fnu"]}, "unsigned"),
    ({"emulate": "float99"}, "emulate"), ({"rounding": "sideways"}, "rounding")])
def test_bad_settings_are_refused(kwargs: dict[str, Any], word: str) -> None:
    with pytest.raises(BitprismError, match=word):
        bp.trace(lambda x: x + 1, np.ones(2), **kwargs)


def test_first_refuses_unknown_events_and_formats() -> None:
    t = bp.trace(lambda x: x + 1, np.ones(2), formats=["float16"])
    with pytest.raises(BitprismError, match="event must be one of"):
        t.first("overfloww")
    with pytest.raises(BitprismError, match="fmt must be one of"):
        t.first("overflow", "bfloat16")
    with pytest.raises(BitprismError, match="leave fmt=None"):
        t.first("nan", "float16")
    with pytest.raises(BitprismError, match="callable"):
        bp.trace(3, np.ones(2))


# ----- captures, shadow, session end -------------------------------------------------------------
def test_captures_never_exceed_capture_mib() -> None:
    def fn(x: np.ndarray) -> np.ndarray:
        a = np.exp(x * 100.0)  # Inf, overflow: the first events, 80 KB in and out
        b = np.log(-x)  # NaN
        return a + b

    x = np.linspace(0.5, 1.0, 10000, dtype=np.float32)  # exp(100) > float32's largest
    t = bp.trace(fn, x, capture_mib=0.05)  # 52428 bytes: one record's 80 KB does not fit
    assert t.captures.used <= 0.05 * 2**20
    with pytest.raises(BitprismError, match="capture_mib"):
        t.output(t.first("inf"))
    big = bp.trace(fn, x, capture_mib=1)
    assert big.captures.used <= 2**20
    with np.errstate(over="ignore"):
        assert np.array_equal(big.output(big.first("inf")), np.exp(x * 100.0))
    assert np.array_equal(big.input_arrays(big.first("nan"))[0], -x)
    with pytest.raises(BitprismError, match="not kept"):
        big.output(0)  # x * 100 creates nothing


def test_the_shadow_equals_plain_float64_numpy() -> None:
    rng = np.random.default_rng(2)
    x = rng.standard_normal((8, 5)).astype(np.float32)
    w = rng.standard_normal((5, 3)).astype(np.float32)

    def fn(x: np.ndarray, w: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        h = np.tanh(x @ w) * 3.0
        p = np.exp(h - h.max(axis=1, keepdims=True))
        return p / p.sum(axis=1, keepdims=True), h[1:, :2].T

    t = bp.trace(fn, x, w, emulate="bfloat16", shadow="float64")
    want = fn(x.astype(np.float64), w.astype(np.float64))
    for got, ref in zip(t.shadow_result, want):
        assert got.dtype == np.float64 and np.array_equal(got, ref)
    assert all(r.shadow_max_rel is not None for r in t.ops)
    assert max(r.shadow_max_rel for r in t.ops) > 1e-3  # bfloat16 keeps 8 bits
    t64 = bp.trace(fn, x.astype(np.float64), w.astype(np.float64), shadow="float64")
    assert all(r.shadow_max_rel == 0.0 for r in t64.ops)


def test_arrays_kept_after_the_trace_are_plain_again() -> None:
    kept: list[Any] = []

    def fn(x: np.ndarray) -> np.ndarray:
        kept.append(x)
        return x + 1

    t = bp.trace(fn, np.ones(3))
    n = len(t.ops)
    leaked = kept[0] * 2 + 1
    assert type(leaked) is np.ndarray and len(t.ops) == n


# ----- views -------------------------------------------------------------------------------------
def test_text_html_and_plot() -> None:
    pytest.importorskip("matplotlib")
    import matplotlib

    matplotlib.use("Agg")
    from matplotlib.figure import Figure

    t = bp.trace(exp_overflow, np.array([1.0, 60.0], np.float32), formats=["float16"],
                 shadow="float64")
    text = str(t)
    rec = t.first("inf")
    assert f"first Inf born: #{rec.index} exp at test_trace.py:{_line('exp')} in exp_overflow" in text
    html = t.to_html()
    assert html.startswith('<div class="bitprism bitprism-trace"') and "first Inf born" in html
    assert isinstance(t.plot(), Figure)


def test_long_timelines_keep_the_rows_around_first_events() -> None:
    def fn(x: np.ndarray) -> np.ndarray:
        for _ in range(60):
            x = x + 1.0
        y = np.log(x - 100.0)
        for _ in range(30):
            y = y * 1.0
        return y

    text = str(bp.trace(fn, np.zeros(3)))
    assert "operations left out" in text and "first NaN born" in text
    assert len(text.splitlines()) < 40


def test_open_and_inputs_give_tensor_prisms() -> None:
    t = bp.trace(exp_overflow, np.array([1.0, 60.0, 2.0], np.float32), formats=["float16"])
    rec = t.first("inf")
    tp = t.open(rec)
    assert type(tp).__name__ == "TensorPrism"
    with np.errstate(over="ignore"):
        assert np.array_equal(tp.data, np.exp(np.array([2.0, 120.0, 4.0], np.float32)))
    assert tp.selected == (1,)  # the element where the Inf is born
    (inp,) = t.inputs(rec.index)
    assert type(inp).__name__ == "TensorPrism"
    with pytest.raises(BitprismError, match="record must be"):
        t.open(99)


# ----- case files --------------------------------------------------------------------------------
def test_case_files_round_trip_and_refuse_tampering(tmp_path: Path) -> None:
    from bitprism.probes.cases import CASE_SCHEMA
    from bitprism.ui.case_envelope import CASE_SCHEMA as ENVELOPE_SCHEMA

    assert CASE_SCHEMA == ENVELOPE_SCHEMA
    x = np.arange(40, dtype=np.float32).reshape(4, 10) * 1.25  # exp(2 * 48.75) > float32's max
    t = bp.trace(exp_overflow, x, formats=["float16"])
    path = t.save_case(tmp_path / "case.json", note="exp of the logits")
    case = bp.open_case(path)
    assert case.event == "inf" and case.format is None  # Inf before overflow at one record
    assert case.note == "exp of the logits" and case.operation == "exp"
    assert case.location == f"test_trace.py:{_line('exp')} in exp_overflow"
    out = case.windows[0]
    assert out.label == "output" and out.mark is not None
    cap = t.output(t.first("inf"))
    r, c = out.row + out.mark[0], out.col + out.mark[1]
    assert out.values()[out.mark] == cap.reshape(-1, cap.shape[-1])[r, c]
    page = t.export_html(tmp_path / "case.html", event="overflow", fmt="float16")
    again = bp.open_case(page)
    assert again.event == "overflow" and again.format == "float16"
    assert again.windows == bp.open_case(
        t.save_case(tmp_path / "f16.json", event="overflow", fmt="float16")).windows
    assert again.windows[0].mark != out.mark  # overflow in float16 starts before the Inf
    data = json.loads(path.read_text())
    data["state"]["windows"][0]["codes"][0][0] = "0x1ffffffff"
    (tmp_path / "bad.json").write_text(json.dumps(data))
    with pytest.raises(BitprismError, match=r"state\.windows\[0\]\.codes\[0\]\[0\]"):
        bp.open_case(tmp_path / "bad.json")
    data["state"]["windows"][0]["exec"] = "print()"
    (tmp_path / "bad2.json").write_text(json.dumps(data))
    with pytest.raises(BitprismError, match="unknown field 'exec'"):
        bp.open_case(tmp_path / "bad2.json")
    clean = bp.trace(lambda v: v + 1, x, formats=["float16"])
    with pytest.raises(BitprismError, match="nothing to save"):
        clean.save_case(tmp_path / "none.json")


# ----- torch -------------------------------------------------------------------------------------
def _softmax_block(x: Any, w: Any, exp: Any) -> Any:
    s = x @ w
    e = exp(s - 3.0)
    z = e.sum(-1, keepdims=True) if isinstance(e, np.ndarray) else e.sum(-1, keepdim=True)
    return e / z


def test_torch_records_match_the_numpy_ones() -> None:
    torch = pytest.importorskip("torch")
    x = np.array([[1.0, 2.0, 3.0], [0.5, -1.0, 2.0]], np.float32)
    w = np.array([[10.0, 0.0, 0.0], [0.0, 20.0, 0.0], [0.0, 0.0, 40.0]], np.float32)
    fmts = ["float16", "bfloat16", "float8_e4m3fn"]
    tn = bp.trace(_softmax_block, x, w, np.exp, formats=fmts)
    tt = bp.trace(_softmax_block, torch.from_numpy(x), torch.from_numpy(w), torch.exp,
                  formats=fmts)
    assert tt.backend == "torch" and tn.backend == "numpy"
    assert [r.name for r in tt.ops] == [r.name for r in tn.ops] == [
        "matmul", "subtract", "exp", "sum", "divide"]
    for a, b in zip(tt.ops, tn.ops):
        assert (a.output_shapes, a.lineno, a.nan, a.inf, a.created_nan, a.created_inf,
                a.counts) == (b.output_shapes, b.lineno, b.nan, b.inf, b.created_nan,
                              b.created_inf, b.counts)
        assert a.amax == pytest.approx(b.amax, rel=1e-6)
    assert tt.first("inf").name == "exp"
    te = bp.trace(_softmax_block, torch.from_numpy(x), torch.from_numpy(w), torch.exp,
                  emulate="bfloat16", shadow="float64")
    ne = bp.trace(_softmax_block, x, w, np.exp, emulate="bfloat16", shadow="float64")
    assert np.array_equal(te.result.numpy(), ne.result, equal_nan=True)
    assert np.array_equal(te.shadow_result.numpy(), ne.shadow_result, equal_nan=True)


def test_torch_bfloat16_tensors_are_read_bit_exactly() -> None:
    torch = pytest.importorskip("torch")
    import ml_dtypes

    values = np.array([1.0, 3.0e38, -2.0**-130, 70000.0], np.float32)
    t16 = torch.from_numpy(values).to(torch.bfloat16)
    t = bp.trace(lambda v: v * 1.0, t16, formats=["float16", "bfloat16"])
    n = bp.trace(lambda v: v * 1.0, values.astype(ml_dtypes.bfloat16),
                 formats=["float16", "bfloat16"])
    assert t.ops[0].output_dtypes == ("bfloat16",)
    assert t.ops[0].counts == n.ops[0].counts and t.ops[0].amax == n.ops[0].amax


def test_the_torch_mode_is_gone_after_the_call_and_after_an_exception() -> None:
    torch = pytest.importorskip("torch")
    from torch.overrides import _get_current_function_mode_stack

    def boom(x: Any) -> Any:
        y = x * 2
        raise RuntimeError("user code failed")

    with pytest.raises(RuntimeError, match="user code failed"):
        bp.trace(boom, torch.ones(2))
    assert _get_current_function_mode_stack() == []
    t = bp.trace(lambda x: x + 1, torch.ones(2))
    assert _get_current_function_mode_stack() == [] and len(t.ops) == 1


def test_torch_trace_with_a_module_and_emulation() -> None:
    torch = pytest.importorskip("torch")
    torch.manual_seed(0)
    lin = torch.nn.Linear(6, 4)
    x = torch.randn(5, 6)
    t = bp.trace(lambda m, v: torch.relu(m(v)), lin, x, emulate="bfloat16", shadow="float64")
    assert [r.name for r in t.ops] == ["linear", "relu"]
    assert t.result.dtype == torch.float64 and all(r.emulated for r in t.ops)
    # the module's weight and bias are constants, rounded on entry; the bias joins the
    # bfloat16 accumulator, which is what rounding the product and then the sum gives here
    w, b = lin.weight.detach().numpy(), lin.bias.detach().numpy()
    ref = bp.trace(lambda a, wt, bias: np.maximum(a @ wt.T + bias, 0.0), x.numpy(), w, b,
                   emulate="bfloat16").result
    assert np.array_equal(t.result.numpy(), ref)
    # the shadow is torch's float64 linear: the same sums in another order than numpy's
    assert np.allclose(t.shadow_result.numpy(), np.maximum(
        x.numpy().astype(np.float64) @ w.T.astype(np.float64) + b, 0.0), rtol=1e-13, atol=0)
    with pytest.raises(UnsupportedInputError, match="numpy array beside them"):
        bp.trace(lambda a, b: a, torch.ones(1), np.ones(1))
