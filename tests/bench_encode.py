"""Benchmark: bitprism.encode against the libraries' own casts, measured in the same run.

Run: ``python tests/bench_encode.py [--n 16777216] [--repeat 3] [--write]``. Prints, per format, the median
time of ``encode`` over the median time of the library cast (ml_dtypes ``astype``; numpy's
cast for float16) as a ratio, plus the peak extra memory of ``encode`` beyond its output.
This is a script, not a test: the machines are shared, so wall-clock targets are read from
ratios measured side by side, never asserted in the unit tests.
With ``--write`` the printed lines also go to docs/benchmarks.md (``bench_report``).

Targets (float32 input, roundTiesToEven): <= 1.0x for float16 and the 8/6/4-bit formats,
<= 3x for bfloat16; float64 input and custom layouts <= 4x; directed modes <= 1.2x the RNE time;
stochastic <= 2x; peak extra memory independent of the input size.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
import tracemalloc
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "widgets"))

import bitprism  # noqa: E402
from bench_report import DEFAULT_PATH, Lines, write_section  # noqa: E402

FORMATS = [
    "bfloat16",
    "float16",
    "float8_e4m3fn",
    "float8_e5m2",
    "float8_e4m3fnuz",
    "float6_e3m2fn",
    "float6_e2m3fn",
    "float4_e2m1fn",
]


def make_data(n: int, seed: int = 0) -> np.ndarray:
    """Invented benchmark data: float32 values whose binary exponents spread over [-40, 40),
    random signs, and a few NaN, Inf and zeros (about 0.1% each)."""
    rng = np.random.default_rng(seed)
    x = rng.uniform(1.0, 2.0, n).astype(np.float32)
    x *= np.exp2(rng.integers(-40, 40, n)).astype(np.float32)
    x *= rng.choice(np.array([-1, 1], np.float32), n)
    for special in (np.nan, np.inf, -np.inf, 0.0):
        x[rng.integers(0, n, n // 1000)] = special
    return x


def timed(fn, repeat: int) -> float:
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def peak_extra(fn) -> int:
    tracemalloc.start()
    tracemalloc.reset_peak()
    out = fn()
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    return peak - out.nbytes


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=1 << 24)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--write", nargs="?", const=DEFAULT_PATH, default=None, metavar="PATH",
                    help="also write what is printed to docs/benchmarks.md (or PATH), "
                    "section bench_encode.py")
    args = ap.parse_args()
    report = Lines()
    x32 = make_data(args.n)
    x64 = x32.astype(np.float64)
    report.print(f"{args.n} float32 elements, exponents spread over [-40, 40), median of {args.repeat}")
    report.print(f"{'format':18} {'library ms':>10} {'encode ms':>10} {'ratio':>7}  target")
    ratios = {}
    for name in FORMATS:
        fmt = bitprism.get_format(name)
        lib = timed(lambda: x32.astype(fmt.dtype), args.repeat)
        ours = timed(lambda: bitprism.encode(x32, fmt), args.repeat)
        ratios[name] = ours / lib
        target = 3.0 if name == "bfloat16" else 1.0
        report.print(f"{name:18} {lib * 1e3:10.1f} {ours * 1e3:10.1f} {ours / lib:6.2f}x  <= {target}x")
    report.print(f"sum over formats: {sum(ratios.values()) / len(ratios):.2f}x mean ratio")

    report.print("\nGeneric paths (target <= 4x the library cast of the same float32 data):")
    fp8 = bitprism.get_format("float8_e4m3fn")
    lib8 = timed(lambda: x32.astype(fp8.dtype), args.repeat)
    f64 = timed(lambda: bitprism.encode(x64, fp8), args.repeat)
    report.print(f"  float64 input -> float8_e4m3fn: {f64 / lib8:5.2f}x")
    custom = bitprism.Format("e3m3 (custom)", 3, 3)
    cus = timed(lambda: bitprism.encode(x32, custom), args.repeat)
    report.print(f"  float32 -> custom 1-3-3:        {cus / lib8:5.2f}x")

    report.print("\nRounding modes on float32 -> float16 (relative to roundTiesToEven):")
    fp16 = bitprism.get_format("float16")
    rne = timed(lambda: bitprism.encode(x32, fp16), args.repeat)
    for mode in bitprism.ROUNDING_MODES[1:]:
        t = timed(lambda: bitprism.encode(x32, fp16, mode, seed=1), args.repeat)
        target = 2.0 if mode == "stochastic" else 1.2
        report.print(f"  {mode:20} {t / rne:5.2f}x  (target <= {target}x)")

    report.print("\nPeak extra memory of encode beyond its output (tracemalloc):")
    for n in (args.n // 16, args.n):
        xs = x32[:n]
        extra = peak_extra(lambda: bitprism.encode(xs, fp8))
        report.print(f"  {n:>10} elements: {extra / 2**20:7.2f} MiB extra")
    if args.write:
        write_section("bench_encode.py", report, args.write)


if __name__ == "__main__":
    main()
