"""Benchmark of ``scan()`` against the loop an engineer would write by hand (a script, not a test).

    PYTHONPATH=widgets python tests/bench_scan.py [--n 16777216] [--memmap] [--write]

Prints, for 16M float32 elements spread over a wide exponent range (with NaN, Inf and zeros)
and six formats in one run:

* exact-quantile scan / baseline           (target <= 0.5x)
* histogram-quantile scan / baseline       (target <= 0.25x)
* counts-only scan / one streaming x.max() (target <= 3x), on the default threads; also, for
  information, on one thread, with the exponent histogram, and without numba (general path);
  with numba and two cores, both halves of the data at once on two threads against one half
  alone (how far the cores run side by side, which decides what the second thread gains)
* peak extra memory of the scan / input size (target <= 1.5x), by tracemalloc
* with --memmap: a 2 GiB .npy memmapped from a temporary folder, counts-only and histogram
  scans, their time, the peak extra memory they allocate (a second scan of each, traced) and
  the growth of the peak resident set of a fresh process scanning it (target < 512 MiB). It
  writes 2 GiB, so it is optional.

The baseline, per format: ``y = x.astype(ml_dtypes.X).astype(np.float32)``, NaN / Inf /
overflow / underflow counts, and ``np.quantile`` of the relative error of the finite results.
Timings are interleaved (baseline, exact, histogram, counts, x.max() in turn, ``--repeat``
rounds) and each ratio is the median of the per-round ratios, so load that comes and goes hits
both sides of a ratio alike; the best times are printed too.
With ``--write`` the printed lines also go to docs/benchmarks.md (``bench_report``).
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import threading
import time
import tracemalloc
from pathlib import Path

import ml_dtypes
import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "widgets"))

from bitprism.tensors.scan import ScanTuning, scan  # noqa: E402
from bitprism.tensors.scan.compiled.jit import available as compiled_available  # noqa: E402
from bench_report import DEFAULT_PATH, Lines, write_section  # noqa: E402

FORMATS = (
    "bfloat16",
    "float16",
    "float8_e4m3fn",
    "float8_e5m2",
    "float6_e3m2fn",
    "float4_e2m1fn",
)


def make_data(n: int, seed: int = 0) -> np.ndarray:
    rng = np.random.default_rng(seed)
    x = np.empty(n, np.float32)
    step = 1 << 20
    for s in range(0, n, step):  # in pieces, so making the data stays small in memory
        k = min(step, n - s)
        x[s : s + k] = rng.standard_normal(k) * np.exp2(rng.uniform(-40, 40, k))
    x[::997] = np.nan
    x[1::1009] = np.inf
    x[2::1013] = -np.inf
    x[3::101] = 0.0
    return x


def baseline(x: np.ndarray) -> dict[str, tuple[int, ...]]:
    out = {}
    finite_in = np.isfinite(x)
    for name in FORMATS:
        dt = np.float16 if name == "float16" else getattr(ml_dtypes, name)
        with np.errstate(all="ignore"):
            y = x.astype(dt).astype(np.float32)
        nan = int(np.isnan(y).sum())
        inf = int(np.isinf(y).sum())
        finite_out = np.isfinite(y)
        overflow = int((finite_in & ~finite_out).sum())
        underflow = int(((x != 0) & finite_in & (y == 0)).sum())
        both = finite_in & finite_out
        xf = x[both].astype(np.float64)
        with np.errstate(all="ignore"):
            rel = np.abs(y[both] - xf) / np.abs(xf)
        rel[xf == 0] = 0.0
        q = np.quantile(rel, [0.5, 0.99])
        out[name] = (nan, inf, overflow, underflow, float(q[0]), float(q[1]))
    return out


def peak_rss_growth(path: str, mode) -> float:
    """Growth of the peak resident set (MiB, VmHWM of proc(5)) of a fresh process that
    memory-maps ``path`` and scans it: mapped pages count there, allocations or not."""
    code = (
        "import sys, numpy as np\n"
        "from bitprism.tensors.scan import scan\n"
        "def hwm():\n"
        "    with open('/proc/self/status') as f:\n"
        "        return next(int(l.split()[1]) for l in f if l.startswith('VmHWM'))\n"
        f"formats = {list(FORMATS)!r}\n"
        f"q = {mode!r}\n"
        "scan(np.ones(1 << 16, np.float32), formats, progress=False, quantiles=q)  # compile\n"
        "before = hwm()\n"
        "scan(np.load(sys.argv[1], mmap_mode='r'), formats, progress=False, quantiles=q)\n"
        "print((hwm() - before) / 1024)\n"
    )
    env = dict(os.environ, PYTHONPATH=str(Path(__file__).resolve().parents[1] / "widgets"))
    out = subprocess.run([sys.executable, "-c", code, path], capture_output=True, text=True,
                         check=True, env=env)
    return float(out.stdout.split()[-1])


def timed(fn) -> float:
    t = time.perf_counter()
    fn()
    return time.perf_counter() - t


def peak_extra(fn) -> int:
    tracemalloc.start()
    tracemalloc.reset_peak()
    base = tracemalloc.get_traced_memory()[0]
    fn()
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    return peak - base


VARIANTS = {
    "counts": ScanTuning(),
    "one thread": ScanTuning(threads=1),
    "exponents": ScanTuning(),
    "numpy": ScanTuning(compiled=False),  # as without numba installed
}


def counts_variant(run, variant: str) -> float:
    """Best of three counts-only scans in one configuration."""
    exps = variant == "exponents"
    tuning = VARIANTS[variant]
    return min(timed(lambda: run(quantiles=False, exponents=exps, tuning=tuning)) for _ in range(3))


def halves_side_by_side(x: np.ndarray) -> tuple[float, float]:
    """(one half of ``x`` scanned counts-only on one thread, both halves at once on two
    threads): how far the machine's cores run side by side for this vector-bound work, which
    decides what a second thread gains (on some virtual machines two cores share vector units
    at times)."""
    halves = (x[: x.size // 2], x[x.size // 2 :])
    one = lambda part: scan(part, FORMATS, progress=False, quantiles=False,  # noqa: E731
                            tuning=ScanTuning(threads=1))

    def pair() -> None:
        worker = threading.Thread(target=one, args=(halves[1],))
        worker.start()
        one(halves[0])
        worker.join()

    return min(timed(lambda: one(halves[0])) for _ in range(3)), min(timed(pair) for _ in range(3))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=1 << 24)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--memmap", action="store_true", help="also scan a 2 GiB memmapped .npy")
    ap.add_argument("--write", nargs="?", const=DEFAULT_PATH, default=None, metavar="PATH",
                    help="also write what is printed to docs/benchmarks.md (or PATH), "
                    "section bench_scan.py")
    args = ap.parse_args()
    report = Lines()

    x = make_data(args.n)
    report.print(f"{x.size:,} float32 elements ({x.nbytes / 2**20:.0f} MiB), formats: {', '.join(FORMATS)}")
    run = lambda **kw: scan(x, FORMATS, progress=False, **kw)  # noqa: E731

    variants = ("counts", "one thread", "exponents", "numpy")
    runs: dict[str, list[float]] = {k: [] for k in ("base", "exact", "hist", "max", "half", "pair") + variants}
    threads = ScanTuning().worker_threads()
    sides = compiled_available() and threads >= 2
    run(quantiles=False)  # compile the counting kernel (numba caches it on disk) before timing
    for _ in range(args.repeat):  # interleaved rounds: each ratio is taken within one round
        runs["base"].append(timed(lambda: baseline(x)))
        runs["exact"].append(timed(lambda: run(quantiles="exact")))
        runs["hist"].append(timed(lambda: run(quantiles="histogram")))
        for v in variants:
            runs[v].append(counts_variant(run, v))
        runs["max"].append(min(timed(lambda: x.max()) for _ in range(5)))
        if sides:
            half, pair = halves_side_by_side(x)
            runs["half"].append(half)
            runs["pair"].append(pair)

    def ratio(a: str, b: str) -> float:
        return float(np.median([p / q for p, q in zip(runs[a], runs[b])]))

    report.print(f"timings over {args.repeat} interleaved rounds (best time; ratio = median of per-round ratios)")
    report.print(f"  baseline (ml_dtypes astype + counts + np.quantile): {min(runs['base']):8.3f} s")
    report.print(f"  one streaming pass x.max():                        {min(runs['max']):8.4f} s")
    report.print(f"  counting kernel: {'numba' if compiled_available() else 'numpy (numba not installed)'}, "
                 f"{threads} thread(s)")
    rows = (
        ("scan, exact quantiles", "exact", "base", 0.5),
        ("scan, histogram quantiles", "hist", "base", 0.25),
        ("scan, counts only", "counts", "max", 3.0),
        ("  same, one thread", "one thread", "max", None),
        ("  same, with exponents", "exponents", "max", None),
        ("  same, without numba", "numpy", "max", None),
    )
    for label, a, b, target in rows:
        r = ratio(a, b)
        versus = "baseline" if b == "base" else "x.max()"
        if target is None:
            verdict = "for information"
        else:
            verdict = f"target <= {target:g}: {'meets' if r <= target else 'misses'}"
        report.print(f"  {label:27s} {min(runs[a]):8.4f} s  = {r:6.2f}x {versus:8s} ({verdict})")
    if sides:
        report.print(f"  both halves at once on two threads took {ratio('pair', 'half'):.2f}x one half alone "
                     "(1.00: the cores ran side by side; 2.00: they shared their vector units)")

    # agreement with the baseline (counts and exact quantiles)
    report.print("agreement with the baseline (exact quantiles must be equal, not close):")
    ref = baseline(x)
    res = run(quantiles="exact")
    for name in FORMATS:
        r = res[name]
        _, _, ov, uf, p50, p99 = ref[name]
        if name.startswith(("float6", "float4")):
            ov = r.overflow  # no Inf/NaN: these saturate, which the baseline does not count
        ok = (r.overflow, r.underflow, r.rel_error_p50, r.rel_error_p99) == (ov, uf, p50, p99)
        report.print(f"  {name:15s} overflow {r.overflow:>10,} underflow {r.underflow:>10,} "
                     f"p50 {r.rel_error_p50:.6g} p99 {r.rel_error_p99:.6g}  {'= baseline' if ok else 'DIFFERS'}")

    for mode in ("exact", "histogram", False):
        extra = peak_extra(lambda: run(quantiles=mode))
        report.print(f"peak extra memory, quantiles={mode!r:11s}: {extra / 2**20:7.1f} MiB = "
                     f"{extra / x.nbytes:4.2f}x input (target <= 1.5)")
    del x, res

    if args.memmap:
        n_big = (2 << 30) // 4
        with tempfile.TemporaryDirectory() as tmp:
            path = os.path.join(tmp, "big.npy")
            mm = np.lib.format.open_memmap(path, mode="w+", dtype=np.float32, shape=(n_big,))
            step = 1 << 24
            for s in range(0, n_big, step):
                mm[s : s + step] = make_data(min(step, n_big - s), seed=s)
            mm.flush()
            del mm
            big = np.load(path, mmap_mode="r")
            for mode in (False, "histogram"):
                # timed on its own: under tracemalloc the histogram scan takes about 4x longer
                t = time.perf_counter()
                scan(big, FORMATS, progress=False, quantiles=mode)
                took = time.perf_counter() - t
                extra = peak_extra(lambda: scan(big, FORMATS, progress=False, quantiles=mode))
                rss = peak_rss_growth(path, mode)
                report.print(f"2 GiB memmap, quantiles={mode!r:11s}: {took:7.1f} s, "
                             f"peak extra {extra / 2**20:6.1f} MiB allocated (a second scan, traced), "
                             f"peak RSS +{rss:.0f} MiB (a fresh process; target < 512)")
            del big

    if args.write:
        write_section("bench_scan.py", report, args.write)


if __name__ == "__main__":
    main()
