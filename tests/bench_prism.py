"""Benchmark (a script, not a test): python tests/bench_prism.py [--write]

Median Python-side time for a Prism to recompute and re-render every band after an input
change (8 formats including float64), and the bytes one update sends to the front-end: the
JSON of every widget state message emitted during the update (the changed widgets' changed
traits), summed. Targets: < 15 ms and < 64 KB per update on 2 cores. With ``--write`` the
printed lines also go to docs/benchmarks.md (``bench_report``).
"""

from __future__ import annotations

import argparse
import json
import statistics
import time
from typing import Any

from ipywidgets import Widget

from bench_report import DEFAULT_PATH, Lines, write_section
from bitprism.ui.prism import Prism

FORMATS = ["float64", "float32", "tf32", "bfloat16", "float16", "float8_e4m3fn", "float8_e5m2",
           "float4_e2m1fn"]
VALUES = ["0.1", "1/3", "3.14159", "-65504.5", "1e-6", "2**-24", "123456.789", "0.7", "1e10",
          "-2.5e-3"]

_sent: list[int] = []
_original_send = Widget._send


def _recording_send(self: Widget, msg: Any, buffers: Any = None) -> None:
    _sent.append(len(json.dumps(msg, separators=(",", ":"))) + sum(len(b) for b in buffers or ()))
    _original_send(self, msg, buffers)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--write", nargs="?", const=DEFAULT_PATH, default=None, metavar="PATH",
                    help="also write what is printed to docs/benchmarks.md (or PATH), "
                    "section bench_prism.py")
    args = ap.parse_args()
    report = Lines()
    Widget._send = _recording_send  # type: ignore[method-assign]
    p = Prism("1", formats=FORMATS)
    for v in VALUES[:3]:  # warm caches and imports
        p.submit_value(v)
    times, sizes, html_sizes = [], [], []
    for round_ in range(5):
        for k, v in enumerate(VALUES):
            text = f"{v} + {round_}*2**-40" if round_ else v  # a fresh exact value each time
            _sent.clear()
            t0 = time.perf_counter()
            p.submit_value(text)
            times.append(time.perf_counter() - t0)
            sizes.append(sum(_sent))
            html_sizes.append(len(p.to_html().encode()))
    report.print(f"formats: {', '.join(FORMATS)}")
    report.print(f"updates timed: {len(times)}")
    report.print(f"median recompute + re-render: {statistics.median(times) * 1e3:.2f} ms "
                 f"(p90 {sorted(times)[int(0.9 * len(times))] * 1e3:.2f} ms; target < 15 ms)")
    report.print(f"bytes sent per update: median {statistics.median(sizes) / 1024:.1f} KB, "
                 f"max {max(sizes) / 1024:.1f} KB (target < 64 KB)")
    report.print(f"static HTML snapshot: max {max(html_sizes) / 1024:.1f} KB")
    Widget._send = _original_send  # type: ignore[method-assign]
    if args.write:
        write_section("bench_prism.py", report, args.write)


if __name__ == "__main__":
    main()
