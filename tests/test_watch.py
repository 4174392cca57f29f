"""``watch()``: per-module records of a torch model, the module where an event is born, hooks
gone after the block (also when it raises), the heat map, views and case files.

References: IEEE 754-2019 §7 for the planted NaN (log of a negative) and Inf (division by
zero); ``bitprism.scan(..., quantiles=False)`` for the counts of each tensor.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
import pytest

import bitprism as bp
from bitprism.errors import BitprismError

torch = pytest.importorskip("torch")
nn = torch.nn


class Log(nn.Module):
    def forward(self, x: Any) -> Any:
        return torch.log(x)  # NaN for negative inputs


class Scale(nn.Module):
    def __init__(self, factor: float) -> None:
        super().__init__()
        self.factor = factor

    def forward(self, x: Any) -> Any:
        return x * self.factor


class Net(nn.Module):
    def __init__(self) -> None:
        super().__init__()
        self.fc1 = nn.Linear(8, 8)
        self.big = Scale(1e5)  # leaves float16's range (largest 65504), not bfloat16's
        self.block = nn.Sequential(nn.ReLU(), nn.Linear(8, 8), Log())

    def forward(self, x: Any) -> Any:
        return self.block(self.big(self.fc1(x)))


def _net() -> Any:
    torch.manual_seed(0)
    net = Net()
    with torch.no_grad():
        net.fc1.weight.fill_(0.1)
        net.fc1.bias.zero_()
        net.block[1].weight.copy_(-torch.eye(8))  # negative outputs: their log is NaN
        net.block[1].bias.zero_()
    return net


def _hooks(model: Any) -> int:
    return sum(len(m._forward_hooks) + len(m._backward_hooks) for m in model.modules())


def test_records_name_modules_calls_and_kinds() -> None:
    net = _net()
    x = torch.ones(4, 8)
    with bp.watch(net, formats=["float16", "bfloat16"]) as w:
        assert w.active and _hooks(net) == len(list(net.modules()))
        net(x)
        net(x)
    assert not w.active and _hooks(net) == 0
    names = dict(net.named_modules())
    weights = [r for r in w.records if r.kind == "weight"]
    assert [r.module for r in weights] == [n for n, _ in net.named_parameters()]  # scanned once
    outputs = [r for r in w.records if r.kind == "output"]
    assert {r.module for r in outputs} == set(names)
    assert [r.call for r in outputs if r.module == "fc1"] == [0, 1]
    assert [r.module for r in outputs[:6]] == ["fc1", "big", "block.0", "block.1", "block.2",
                                               "block"]
    assert {r.module_type for r in outputs if r.module == "block.2"} == {"Log"}


def test_the_first_module_where_an_event_is_born() -> None:
    net = _net()
    with bp.watch(net, formats=["float16", "bfloat16"]) as w:
        net(torch.ones(4, 8))
    over = w.first("overflow", "float16")
    assert over is not None and over.module == "big" and over.kind == "output"
    assert w.first("overflow", "bfloat16") is None
    nan = w.first("nan")
    assert nan is not None and nan.module == "block.2" and nan.module_type == "Log"
    assert nan.created_nan == nan.nan > 0
    later = [r for r in w.records if r.module == "block" and r.kind == "output"]
    # the Sequential holding it is born too (its input held no NaN), but its hook runs after
    # its children's, so the child is the first record where the NaN is born
    assert later[0].nan == nan.nan and later[0].born("nan") and later[0].index > nan.index


def test_counts_equal_the_scan_of_each_output() -> None:
    net = _net()
    seen: dict[str, Any] = {}
    handles = [m.register_forward_hook(lambda mod, a, out, name=name: seen.__setitem__(
        name, out.detach().clone())) for name, m in net.named_modules() if name]
    fmts = ["float16", "bfloat16", "float8_e4m3fn"]
    with bp.watch(net, formats=fmts, weights=False) as w:
        net(torch.randn(16, 8) * 3)
    for h in handles:
        h.remove()
    for r in w.records:
        if not r.module:
            continue
        ref = bp.scan(seen[r.module].numpy(), fmts, quantiles=False, progress=False)
        for f in ref.formats:
            c = r.count(f.name)
            assert (c.overflow, c.underflow, c.subnormal) == (f.overflow, f.underflow,
                                                              f.subnormal), (r.module, f.name)


def test_weights_and_gradients() -> None:
    net = _net()
    with torch.no_grad():
        net.fc1.weight[0, 0] = 70000.0  # a weight beyond float16's largest
    x = torch.ones(2, 8, requires_grad=True)
    with bp.watch(net, formats=["float16"], grads=True) as w:
        y = net(x * 1e-3 + 1.0)
        y.nan_to_num(0.0).sum().backward()
    wrec = w.first("overflow", "float16", kind="weight")
    assert wrec is not None and wrec.module == "fc1.weight" and wrec.module_type == "Linear"
    grads = [r for r in w.records if r.kind == "grad"]
    assert {r.module for r in grads} >= {"block.2", "fc1"}
    assert _hooks(net) == 0


def test_hooks_are_removed_when_the_code_raises() -> None:
    net = _net()
    with pytest.raises(RuntimeError, match="shape"):
        with bp.watch(net, grads=True):
            net(torch.ones(3, 5))  # wrong width: torch raises inside the forward
    assert _hooks(net) == 0


def test_table_views_and_plot(tmp_path: Path) -> None:
    import matplotlib

    matplotlib.use("Agg")
    from matplotlib.figure import Figure

    net = _net()
    with bp.watch(net, formats=["float16", "bfloat16"]) as w:
        net(torch.ones(4, 8))
    rows = w.table()
    big = next(r for r in rows if r.module == "big")
    assert big.calls == 1 and big.fraction("overflow", 0) == 1.0
    text = str(w)
    assert "first NaN born: block.2 (Log), output, call 0" in text
    assert "first overflow in float16: big (Scale), output, call 0" in text
    assert w.to_html().startswith('<div class="bitprism bitprism-watch"')
    fig = w.plot()
    assert isinstance(fig, Figure) and len(fig.get_axes()) == 2
    tp = w.open("block.2")
    assert type(tp).__name__ == "TensorPrism" and np.isnan(tp.data).any()
    assert np.array_equal(w.output("fc1.weight"), net.fc1.weight.detach().numpy())
    with pytest.raises(BitprismError, match="no record of 'nope'"):
        w.open("nope")
    path = w.save_case(tmp_path / "watch.json", note="log of a negative")
    case = bp.open_case(path)
    assert case.source == "watch" and case.event == "overflow" and case.format == "float16"
    assert case.operation == "big (Scale)" and case.note == "log of a negative"
    assert case.windows[0].label == "output" and case.windows[1].label == "input 0"


def test_bad_arguments() -> None:
    with pytest.raises(BitprismError, match="torch.nn.Module"):
        bp.watch(np.ones(3))
    with pytest.raises(BitprismError, match="grads"):
        bp.watch(_net(), grads="yes")  # type: ignore[arg-type]
    w = bp.watch(_net())
    with w:
        with pytest.raises(BitprismError, match="already on"):
            w.__enter__()
