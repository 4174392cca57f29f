"""Benchmark of ``trace()`` and ``watch()`` against the plain runs (a script, not a test).

    PYTHONPATH=widgets python tests/bench_trace.py [--repeat 7] [--write]

Prints, in one run, on invented data (normal weights scaled by 1/sqrt(width)):

* numpy MLP forward (batch 256, width 1024, three layers of matmul, bias, ReLU):
  - ``trace`` without emulation / plain forward                         (target <= 1.5x)
  - ``trace`` with ``emulate="bfloat16", accumulate="float64"``: every result rounded once,
    no chunked accumulator (elementwise emulation) / plain forward      (target <= 3x);
    for information, the plain forward in float64, which emulation computes in
* one matmul (256 x 1024 @ 1024 x 1024): ``trace`` with ``emulate="bfloat16"`` (bfloat16
  accumulator rounded every 32 terms) / plain matmul                     (target <= 10x)
* torch 4-layer MLP on the CPU (batch 256, width 1024): forward under ``watch`` / plain
  forward (target <= 1.5x); and a torch ``trace`` of it, for information.
* for information: the counts of one 256 x 1024 float32 output, as a trace takes them
  (``probes.stats.Counter``) and by ``scan(..., quantiles=False)``.

Timings are interleaved (each variant and its baseline in turn, ``--repeat`` rounds); each
ratio is the median of the per-round ratios, so load that comes and goes hits both sides alike.
With ``--write`` the printed lines also go to docs/benchmarks.md (``bench_report``).
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from pathlib import Path
from typing import Any, Callable

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "widgets"))

import bitprism as bp  # noqa: E402
from bitprism.probes import compiled_rounding  # noqa: E402
from bitprism.probes.stats import Counter, check_formats  # noqa: E402
from bitprism.numerics.options import CastOptions  # noqa: E402
from bench_report import DEFAULT_PATH, Lines, write_section  # noqa: E402

BATCH, WIDTH = 256, 1024


def _time(fn: Callable[[], Any]) -> float:
    start = time.perf_counter()
    fn()
    return time.perf_counter() - start


def _ratio(variant: Callable[[], Any], base: Callable[[], Any], repeat: int) -> tuple[float, float, float]:
    """(median ratio, best variant seconds, best base seconds), interleaved."""
    variant()
    base()
    ratios, vs, bs = [], [], []
    for _ in range(repeat):
        b = _time(base)
        v = _time(variant)
        ratios.append(v / b)
        vs.append(v)
        bs.append(b)
    return statistics.median(ratios), min(vs), min(bs)


def mlp(x: np.ndarray, layers: list[tuple[np.ndarray, np.ndarray]]) -> np.ndarray:
    h = x
    for w, b in layers:
        h = np.maximum(h @ w + b, 0.0)
    return h


def numpy_case(rng: np.random.Generator) -> tuple[np.ndarray, list[tuple[np.ndarray, np.ndarray]]]:
    x = rng.standard_normal((BATCH, WIDTH)).astype(np.float32)
    layers = [((rng.standard_normal((WIDTH, WIDTH)) / np.sqrt(WIDTH)).astype(np.float32),
               (rng.standard_normal(WIDTH) * 0.1).astype(np.float32)) for _ in range(3)]
    return x, layers


def line(out: Lines, label: str, r: tuple[float, float, float], target: float | None) -> None:
    ratio, v, b = r
    goal = f"  target <= {target:g}x: {'met' if ratio <= target else 'NOT met'}" if target else ""
    out.print(f"{label}\n    median ratio {ratio:5.2f}x; best {v * 1e3:6.1f} ms vs "
              f"{b * 1e3:6.1f} ms ({v / b:5.2f}x);{goal}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=7, help="interleaved rounds (default 7)")
    ap.add_argument("--write", nargs="?", const=DEFAULT_PATH, default=None, metavar="PATH",
                    help="also write what is printed to docs/benchmarks.md (or PATH)")
    args = ap.parse_args()
    out = Lines()
    rng = np.random.default_rng(0)
    x, layers = numpy_case(rng)
    out.print(f"numpy MLP forward, batch {BATCH}, width {WIDTH}, 3 layers (invented data); "
              f"{args.repeat} interleaved rounds, median ratios, best times")
    out.print("emulated rounding: " + ("one compiled pass (numba)" if compiled_rounding.usable(
        compiled_rounding.MIN_SIZE) else "numpy passes (numba not installed or turned off)"))
    plain = lambda: mlp(x, layers)  # noqa: E731
    line(out, "trace, no emulation / plain forward",
         _ratio(lambda: bp.trace(mlp, x, layers), plain, args.repeat), 1.5)
    line(out, "trace, emulate bfloat16, float64 accumulator / plain forward",
         _ratio(lambda: bp.trace(mlp, x, layers, emulate="bfloat16", accumulate="float64"),
                plain, args.repeat), 3.0)
    x64 = x.astype(np.float64)
    layers64 = [(w.astype(np.float64), b.astype(np.float64)) for w, b in layers]
    line(out, "the same forward in float64 / plain forward (information: emulation "
              "computes in float64)",
         _ratio(lambda: mlp(x64, layers64), plain, args.repeat), None)
    w = layers[0][0]
    line(out, "trace matmul, emulate bfloat16 (accumulate every 32) / matmul",
         _ratio(lambda: bp.trace(np.matmul, x, w, emulate="bfloat16"), lambda: x @ w,
                args.repeat), 10.0)
    counter = Counter(check_formats(("bfloat16", "float16", "float8_e4m3fn", "float8_e5m2")),
                      CastOptions())
    y = x @ w
    line(out, "counts of one output: Counter.stats / scan(quantiles=False)",
         _ratio(lambda: counter.stats(y), lambda: bp.scan(y, quantiles=False, progress=False),
                args.repeat), None)
    try:
        import torch
    except ImportError:
        out.print("torch is not installed: the watch figures are left out")
    else:
        torch.manual_seed(0)
        torch.set_grad_enabled(False)
        model = torch.nn.Sequential(*[m for _ in range(4) for m in
                                      (torch.nn.Linear(WIDTH, WIDTH), torch.nn.ReLU())])
        tx = torch.from_numpy(x)
        out.print(f"torch {torch.__version__} CPU MLP, batch {BATCH}, width {WIDTH}, 4 layers")
        base = lambda: model(tx)  # noqa: E731

        def watched() -> None:
            with bp.watch(model, formats=("bfloat16", "float16", "float8_e4m3fn",
                                          "float8_e5m2"), weights=False):
                model(tx)

        line(out, "forward under watch / plain forward", _ratio(watched, base, args.repeat), 1.5)
        line(out, "trace of the forward, no emulation / plain forward (information)",
             _ratio(lambda: bp.trace(model, tx), base, args.repeat), None)
    if args.write:
        write_section("bench_trace.py", out, args.write)


if __name__ == "__main__":
    main()
