"""Benchmark (a script, not a test): python tests/bench_tensor_prism.py [--write]

Python-side time of a pan and of a format switch for a 32 x 32 window over a 4096 x 4096
float32 tensor (invented data: standard normal values times 100, seed 0), and the bytes one
update sends to the front-end: the JSON (as jupyter_client packs it) of every widget state
message emitted during the update, summed. Targets on 2 shared cores: median < 40 ms per
update and < 128 KB per update. With ``--write`` the printed lines also go to
docs/benchmarks.md (``bench_report``).
"""

from __future__ import annotations

import argparse
import json
import statistics
import time
from typing import Any

import numpy as np
from ipywidgets import Widget

from bench_report import DEFAULT_PATH, Lines, write_section
from bitprism.ui.tensor_prism import TensorPrism

FORMATS = ["bfloat16", "float16", "float8_e4m3fn", "float8_e5m2"]

_sent: list[int] = []
report = Lines()  # what this script prints, for --write
_original_send = Widget._send


def _packed_size(msg: Any) -> int:
    # jupyter_client's json_packer: default separators, ensure_ascii=False, UTF-8
    return len(json.dumps(msg, ensure_ascii=False).encode("utf-8"))


def _recording_send(self: Widget, msg: Any, buffers: Any = None) -> None:
    _sent.append(_packed_size(msg) + sum(len(b) for b in buffers or ()))
    _original_send(self, msg, buffers)


def _measure(tp: TensorPrism, step: Any, n: int) -> tuple[list[float], list[int]]:
    times, sizes = [], []
    for k in range(n):
        _sent.clear()
        t0 = time.perf_counter()
        step(k)
        times.append(time.perf_counter() - t0)
        sizes.append(sum(_sent))
    return times, sizes


def _report(what: str, times: list[float], sizes: list[int]) -> None:
    report.print(f"{what}: median {statistics.median(times) * 1e3:.1f} ms "
                 f"(p90 {sorted(times)[int(0.9 * len(times))] * 1e3:.1f} ms; target < 40 ms); "
                 f"bytes sent median {statistics.median(sizes) / 1024:.1f} KB, "
                 f"max {max(sizes) / 1024:.1f} KB (target < 128 KB)")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--write", nargs="?", const=DEFAULT_PATH, default=None, metavar="PATH",
                    help="also write what is printed to docs/benchmarks.md (or PATH), "
                    "section bench_tensor_prism.py")
    args = ap.parse_args()
    data = (np.random.default_rng(0).standard_normal((4096, 4096), dtype=np.float32) * 100)
    Widget._send = _recording_send  # type: ignore[method-assign]
    t0 = time.perf_counter()
    tp = TensorPrism(data, formats=FORMATS, rows=32, cols=32)
    report.print(f"construction (incl. whole-tensor summary scan, counts only): "
                 f"{time.perf_counter() - t0:.2f} s")
    for view in ("cast", "value", "error", "class", "compare"):
        tp.view = view
        tp.row_offset = tp.col_offset = 0
        for k in range(3):  # warm up
            tp.pan("page-right")

        def pan(k: int) -> None:
            tp.pan("page-down" if k % 2 else "page-right")

        _report(f"pan by a page, {view} view", *_measure(tp, pan, 30))

        def pan1(k: int) -> None:
            tp.pan("right")

        _report(f"pan by one column, {view} view", *_measure(tp, pan1, 30))
    tp.view = "cast"
    t0 = time.perf_counter()
    for f in FORMATS:  # first visit of each format computes its navigation counts
        tp.format_a = f
    report.print(f"first visit of {len(FORMATS)} formats: {(time.perf_counter() - t0) * 1e3:.0f} ms "
                 "(counts of each format come from the summary scan)")

    def switch(k: int) -> None:
        tp.format_a = FORMATS[k % len(FORMATS)]

    _report("format A switch, cast view", *_measure(tp, switch, 40))
    tp.view = "compare"
    _report("format A switch, compare view", *_measure(tp, switch, 40))
    Widget._send = _original_send  # type: ignore[method-assign]
    if args.write:
        write_section("bench_tensor_prism.py", report, args.write)


if __name__ == "__main__":
    main()
