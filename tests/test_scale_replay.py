"""replay_scaling: the amax-history (delayed scaling) recipe, checked against a plain loop on
invented spike data."""

from __future__ import annotations

import math

import numpy as np
import pytest

import bitprism as bp
from bitprism.tensors.scaling import replay_scaling


def spiky_steps(n: int = 60, seed: int = 0) -> list[np.ndarray]:
    """Invented activations: slowly drifting scale, and spikes at steps 20 and 41."""
    rng = np.random.default_rng(seed)
    steps = []
    for i in range(n):
        x = rng.standard_normal(2000) * 2.0 ** (0.05 * i)
        if i in (20, 41):
            x[:50] *= 300.0  # a spike
        steps.append(x.astype(np.float32))
    return steps


def plain_loop(steps, fmt: str, history: int, margin: int, **opts):
    """The recipe written out: scale from the max amax of the steps before, then cast."""
    f = bp.get_format(fmt)
    top = float(f.max_finite)
    wide = bp.Format("wide", 11, f.significand_bits)  # rounding with an unbounded exponent
    amaxes, k, rows = [], 0, []
    for x in steps:
        x = x.astype(np.float64)
        past = amaxes[-history:]
        if past and max(past) > 0:
            k = math.floor(math.log2(top / 2**margin / max(past)))
            while max(past) * 2.0**k > top / 2**margin:  # make sure of the floor
                k -= 1
        y = x * 2.0**k
        with np.errstate(all="ignore"):
            q = bp.cast(y, f, **opts)
            qw = bp.cast(y, wide, rounding=opts.get("rounding"))
        over = int(np.sum(np.abs(qw) > top))
        under = int(np.sum((y != 0) & (q == 0)))
        made = int(np.sum(np.isfinite(y) & ~np.isfinite(q)))
        rows.append((k, over, under, made))
        amaxes.append(float(np.max(np.abs(x))))
    return rows, amaxes


@pytest.mark.parametrize("fmt", ["float8_e4m3fn", "float8_e5m2"])
@pytest.mark.parametrize("history, margin", [(16, 0), (4, 1), (1, 0)])
@pytest.mark.parametrize("opts", [{}, {"overflow": "saturate"}, {"rounding": "roundTowardZero"}],
                         ids=["rne", "saturate", "rtz"])
def test_replay_equals_a_plain_loop(fmt: str, history: int, margin: int, opts: dict) -> None:
    steps = spiky_steps()
    r = replay_scaling(steps, fmt, history=history, margin=margin, **opts)
    rows, amaxes = plain_loop(steps, fmt, history, margin, **opts)
    assert r.exponents.tolist() == [row[0] for row in rows]
    assert r.overflow.tolist() == [row[1] for row in rows]
    assert r.underflow.tolist() == [row[2] for row in rows]
    assert r.nonfinite.tolist() == [row[3] for row in rows]
    assert r.amax.tolist() == amaxes
    first = next((i for i, row in enumerate(rows) if row[1]), None)
    assert r.first_overflow == first


def test_a_spike_overflows_at_its_step() -> None:
    steps = spiky_steps()
    r = replay_scaling(steps, "float8_e4m3fn", history=16, margin=2)
    assert r.first_overflow == 20 and r.overflow[20] > 0  # the margin covers the drift
    assert r.exponents[21] < r.exponents[20]  # the spike enters the history: a smaller scale
    assert r.exponents[0] == 0  # no history yet: scale 1
    assert "first overflow at step 20" in repr(r) and "first overflow at step 20" in str(r)


def test_history_of_zeros_keeps_the_scale() -> None:
    steps = [np.full(10, 3.0), np.zeros(10), np.zeros(10), np.full(10, 1.0)]
    r = replay_scaling(steps, "float8_e4m3fn", history=1)
    assert r.exponents.tolist() == [0, 7, 7, 7]  # 3 * 2^7 = 384 <= 448


@pytest.mark.parametrize("kwargs, words", [
    (dict(tensors=[]), "at least one step"),
    (dict(tensors="steps.npy"), "sequence of tensors"),
    (dict(history=0), "history must be a positive integer"),
    (dict(margin=0.5), "margin must be an integer"),
    (dict(rounding="stochastic"), "deterministic rounding"),
])
def test_bad_input(kwargs: dict, words: str) -> None:
    tensors = kwargs.pop("tensors", spiky_steps(3))
    with pytest.raises(bp.BitprismError, match=words):
        replay_scaling(tensors, "e4m3", **kwargs)
