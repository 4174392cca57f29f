"""The range chart: drawn headless (Agg), saved as a PNG, one row per format."""

from __future__ import annotations

import subprocess
import sys

import matplotlib

matplotlib.use("Agg")  # headless backend before pyplot or any figure is made

import numpy as np  # noqa: E402
import pytest  # noqa: E402

from bitprism.plots import range_chart  # noqa: E402
from bitprism.tensors.scan import scan  # noqa: E402


def _data() -> np.ndarray:
    rng = np.random.default_rng(0)
    x = (rng.standard_normal(5000) * np.exp2(rng.uniform(-30, 30, 5000))).astype(np.float32)
    x[:5] = [np.nan, np.inf, 0.0, -0.0, 2.0**-140]
    return x


def test_plot_returns_a_figure_with_one_row_per_format(tmp_path) -> None:
    from matplotlib.figure import Figure

    fmts = ("bfloat16", "float16", "float8_e4m3fn", "float4_e2m1fn")
    res = scan(_data(), fmts, progress=False)
    fig = res.plot()
    assert isinstance(fig, Figure)
    axes = fig.get_axes()
    assert len(axes) == len(fmts)
    assert [ax.get_ylabel() for ax in axes] == list(fmts)
    # the share written on the float16 overflow band is the scan's own fraction
    texts = [t.get_text() for t in axes[1].texts]
    share = 100 * res["float16"].overflow / res.size
    assert any(t.startswith("overflow ") and f"{share:.3g}%" in t for t in texts), texts
    # the bars are the exponent histogram (same total in every row)
    heights = sum(p.get_height() for p in axes[0].patches if p.get_width() == pytest.approx(0.9))
    assert heights == sum(res.histogram.counts)
    out = tmp_path / "range.png"
    fig.savefig(out, dpi=60)
    assert out.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_plot_handles_block_formats_and_empty_input(tmp_path) -> None:
    class Halve:
        name = "halve"

        def dequantize_block(self, x: np.ndarray) -> np.ndarray:
            return np.round(x * 2) / 2

    fig = range_chart(scan(np.zeros(0, np.float32), ["float16", Halve()], progress=False))
    fig.savefig(tmp_path / "empty.png", dpi=40)
    assert len(fig.get_axes()) == 2


def test_importing_scan_does_not_import_matplotlib() -> None:
    code = "import sys, bitprism.tensors.scan; sys.exit('matplotlib' in sys.modules)"
    assert subprocess.run([sys.executable, "-c", code]).returncode == 0


def test_view_follows_the_data_not_the_widest_format() -> None:
    # invented data: exponents about -26 .. 26; bfloat16's edges (-134, 128) are far away
    res = scan(_data(), ("bfloat16", "float16", "float8_e4m3fn"), progress=False)
    fig = res.plot()
    lo, hi = fig.get_axes()[0].get_xlim()
    exps = res.histogram.exponents
    assert lo <= exps[0] - 2 and hi >= exps[-1] + 3  # every bar with a margin
    assert lo > -60 and hi < 60  # bfloat16's far band edges stay out of view
    # float8_e4m3fn's edges near the data are in view: overflow from 464 (OCP 8-bit spec:
    # max 448, ties at 464 round to it), underflow below 2^-10
    assert lo < np.log2(res["float8_e4m3fn"].underflow_below) and hi > np.log2(464)
    for ax in fig.get_axes():  # every band label sits inside the visible range
        for t in ax.texts:
            assert lo <= t.get_position()[0] <= hi, t.get_text()


def test_mx_formats_get_the_bands_of_the_block_holding_the_largest_value() -> None:
    """Issue 18 item 8: an MX row showed no bands (and no block-NaN mark) while the table
    reported its underflow. The bands are the element format's, shifted by the shared
    exponent of the block holding the largest |x|: floor(log2 |x|max) - emax_elem (OCP MX
    v1.0 §6.3; emax of float4_e2m1fn is 2, its largest 6 = 1.5 * 2^2)."""
    import math

    from matplotlib.colors import to_hex

    from bitprism.numerics.options import CastOptions
    from bitprism.numerics.thresholds import cast_thresholds
    from bitprism.render.vocabulary import OUTCOMES
    from bitprism.tensors.mx import MX_FORMATS

    x = _data()[:4096].copy()
    x[~np.isfinite(x)] = 1.0
    x[7] = np.nan  # one NaN: its block's 31 finite values are lost (block NaN)
    res = scan(x, ["float16", "mxfp4"], progress=False)
    fig = res.plot()
    ax = fig.get_axes()[1]
    mx = MX_FORMATS["mxfp4"]
    s = math.floor(math.log2(res.absmax)) - mx.element.emax
    th = cast_thresholds(mx.element, CastOptions(overflow="saturate"))
    spans = [p for p in ax.patches if p.get_width() != pytest.approx(0.9)]
    fills = {to_hex(p.get_facecolor()[:3]): p for p in spans}
    under = fills[OUTCOMES["underflow"].light.fill.lower()]
    assert under.get_x() + under.get_width() == pytest.approx(math.log2(th.nonzero_from) + s)
    sub = fills[OUTCOMES["subnormal"].light.fill.lower()]
    assert sub.get_x() + sub.get_width() == pytest.approx(math.log2(th.normal_from) + s)
    texts = [t.get_text() for t in ax.texts]
    share = 100 * res["mxfp4"].underflow / res.size
    assert any(t.startswith("underflow ") and f"{share:.3g}%" in t for t in texts), texts
    assert any(f"shared scale 2^{s}" in t and "float4_e2m1fn" in t for t in texts), texts
    nan = [t for t in ax.texts if t.get_text().startswith("block NaN")]
    assert len(nan) == 1 and f"{res['mxfp4'].block_nan:,} finite" in nan[0].get_text()
    assert to_hex(nan[0].get_bbox_patch().get_facecolor()[:3]) == OUTCOMES["nan"].light.fill.lower()
