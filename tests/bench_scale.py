"""Benchmark of the scale sweep against one histogram-quantile scan (a script, not a test).

    PYTHONPATH=widgets python tests/bench_scale.py [--n 16777216] [--repeat 5] [--write]

The sweep judges every candidate power-of-two scale of a tensor (overflow, underflow,
subnormal, NaN/Inf made, relative-error p99, SQNR) from one pass over the data: a joint
histogram by binary exponent, significand bits and sign (``tensors/scaling/joint.py``), then
per-candidate arithmetic on the bins. Target: at most 2x one ``scan(x, [fmt],
quantiles="histogram")`` of the same data, which casts the data once.

Data: 16M float32 elements spread over a wide exponent range (standard normal times 2^U(-40,
40)) with NaN, Inf and zeros, as ``bench_scan.py`` makes it. Timings are interleaved (scan,
sweep, in turn, ``--repeat`` rounds) and each ratio is the median of the per-round ratios, so
load that comes and goes hits both sides alike; the best times are printed too. float8_e4m3fn
is the target; the other formats are printed for information (a 16-bit format keeps more
significand bits in its bins). With ``--write`` the printed lines also go to
docs/benchmarks.md (``bench_report``).
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "widgets"))

from bitprism.formats import get_format  # noqa: E402
from bitprism.numerics.options import CastOptions  # noqa: E402
from bitprism.tensors.scan import scan  # noqa: E402
from bitprism.tensors.scaling.joint import joint_histogram  # noqa: E402
from bitprism.tensors.scaling.outcomes import sign_symmetric  # noqa: E402
from bitprism.tensors.scaling.rules import amax_exponent  # noqa: E402
from bitprism.tensors.scaling.sweep import candidate_range, sweep_histogram  # noqa: E402
from bench_report import DEFAULT_PATH, Lines, write_section  # noqa: E402
from bench_scan import make_data  # noqa: E402

TARGET = "float8_e4m3fn"
OTHERS = ("float8_e5m2", "float4_e2m1fn", "bfloat16", "float16")


def full_sweep(x: np.ndarray, name: str):
    """What suggest_scale does before its scans: the pass, the candidates, every figure."""
    fmt = get_format(name)
    options = CastOptions()
    h = joint_histogram(x, fmt.significand_bits, signs=not sign_symmetric(fmt, options))
    ks = candidate_range(h, fmt, amax_exponent(fmt, h.amax)[0])
    return sweep_histogram(h, fmt, options, ks)


def timed(fn) -> float:
    t = time.perf_counter()
    fn()
    return time.perf_counter() - t


def measure(x: np.ndarray, name: str, repeat: int) -> tuple[float, float, float, int]:
    """(median ratio, best scan, best sweep, candidates)."""
    full_sweep(x, name)  # the outcome tables are built once per format and cast options
    scan(x, [name], progress=False, quantiles="histogram")  # and the scan's kernels compiled
    scans, sweeps = [], []
    for _ in range(repeat):
        scans.append(timed(lambda: scan(x, [name], progress=False, quantiles="histogram")))
        sweeps.append(timed(lambda: full_sweep(x, name)))
    ratio = float(np.median([b / a for a, b in zip(scans, sweeps)]))
    return ratio, min(scans), min(sweeps), len(full_sweep(x, name))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=1 << 24)
    ap.add_argument("--repeat", type=int, default=5)
    ap.add_argument("--write", nargs="?", const=DEFAULT_PATH, default=None, metavar="PATH",
                    help="also write what is printed to docs/benchmarks.md (or PATH), "
                    "section bench_scale.py")
    args = ap.parse_args()
    report = Lines()
    x = make_data(args.n)
    report.print(f"{x.size:,} float32 elements ({x.nbytes / 2**20:.0f} MiB): the full sweep "
                 "(one pass, every candidate) against one histogram-quantile scan")
    for name in (TARGET,) + OTHERS:
        ratio, best_scan, best_sweep, k = measure(x, name, args.repeat)
        goal = "  (target <= 2x)" if name == TARGET else ""
        report.print(f"  {name:15s} {k:4d} candidates  scan {best_scan:6.3f} s  sweep "
                     f"{best_sweep:6.3f} s  sweep / scan {ratio:4.2f}x{goal}")
    if args.write is not None:
        write_section("bench_scale.py", report, args.write)


if __name__ == "__main__":
    main()
