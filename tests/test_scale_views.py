"""The scale-choice results as text, HTML and figures, and the ``bitprism scale`` command."""

from __future__ import annotations

import json

import matplotlib

matplotlib.use("Agg")  # headless backend before any figure is made

import numpy as np  # noqa: E402
import pytest  # noqa: E402

import bitprism as bp  # noqa: E402
from bitprism.cli import main  # noqa: E402


def act(seed: int = 0) -> np.ndarray:
    rng = np.random.default_rng(seed)
    return (rng.standard_t(3, size=(32, 64)) * np.where(rng.random(64) < 0.05, 300.0, 1.0)).astype(np.float32)


def run(capsys, *argv: str) -> tuple[int, str, str]:
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def test_advice_text_and_html() -> None:
    advice = bp.suggest_scale(act(), "float8_e4m3fn")
    text = str(advice)
    assert advice.message in text and "objective" in text and "sweep of float8_e4m3fn" in text
    assert "chosen" in text and "no scaling" in text
    assert "without scaling" in text and f"multiplied by {advice.scale!r}" in text
    html = advice._repr_html_()
    assert 'class="bitprism bitprism-sweep"' in html and "without scaling" in html
    assert "<script" not in html
    assert advice._repr_mimebundle_()["text/plain"] == text


def test_channel_advice_text_names_the_units() -> None:
    advice = bp.suggest_scale(act(1), "float8_e4m3fn", "channel")
    text = str(advice)
    assert "64 per-channel scales" in text and "scales divided out" in text
    assert "base" in text  # the sweep is over offsets from each channel's rule


def test_sweep_text_escapes_nothing_and_html_escapes() -> None:
    sw = bp.suggest_scale(act(2), "e4m3", formats=[]).sweep
    assert str(sw).splitlines()[0].startswith("sweep of float8_e4m3fn:")
    fmt = bp.Format("e4m3<&>", 4, 3, specials="fn")
    sw2 = bp.suggest_scale(act(2), fmt, formats=[]).sweep
    assert "e4m3&lt;&amp;&gt;" in sw2._repr_html_() and "e4m3<&>" not in sw2._repr_html_()


def test_comparison_and_replay_views() -> None:
    c = bp.compare_scaling(act(3), "float8_e4m3fn")
    text = str(c)
    assert text.splitlines()[0].startswith("scaling compared in float8_e4m3fn")
    for word in ("none", "tensor", "channel", "block (MX)", "bits/element", "SQNR dB", "rel p99"):
        assert word in text
    assert "bitprism-scaling" in c._repr_html_()
    steps = [np.random.default_rng(i).standard_normal(100) * (40 if i == 5 else 1) for i in range(12)]
    r = bp.replay_scaling(steps, "float8_e4m3fn", history=3)
    assert "delayed scaling replayed" in str(r) and "bitprism-replay" in r._repr_html_()


def test_plots() -> None:
    from matplotlib.figure import Figure

    advice = bp.suggest_scale(act(4), "float8_e4m3fn", formats=[])
    fig = advice.plot()
    assert isinstance(fig, Figure) and len(fig.get_axes()) == 3
    labels = [t.get_text() for t in fig.get_axes()[0].get_legend().get_texts()]
    assert "choice" in labels and "amax rule" in labels
    assert isinstance(advice.sweep.plot(), Figure)
    assert isinstance(bp.suggest_scale(act(4), "e4m3", "block", formats=[]).plot(), Figure)
    r = bp.replay_scaling([act(i) for i in range(6)], "e4m3", history=2)
    assert len(r.plot().get_axes()) == 2
    empty = bp.suggest_scale(np.zeros(5), "e4m3", formats=[])
    with pytest.raises(bp.BitprismError, match="no sweep"):
        empty.plot()



def test_range_chart_shifts_the_bands_by_the_scale() -> None:
    from bitprism.plots.range_chart import scaled_rows

    rng = np.random.default_rng(6)  # invented data over 2^-30 .. 2^22: past float16 on both sides
    x = (rng.standard_normal(20000) * np.exp2(rng.uniform(-30, 20, 20000))).astype(np.float32)
    advice = bp.suggest_scale(x, "float16")
    k = advice.exponent
    assert k is not None and k != 0
    before, after = scaled_rows(advice)
    assert (after.under, after.normal, after.over) == (before.under - k, before.normal - k, before.over - k)
    # independent of the scan: the drawn edges split the unscaled data exactly as numpy's cast
    # of x * 2^k to float16 does (numpy: IEEE 754 binary16, round to nearest even, Inf above)
    mag = np.abs(x.astype(np.float64))
    for row, shift in ((before, 0), (after, k)):
        with np.errstate(over="ignore"):
            y = (x.astype(np.float64) * 2.0**shift).astype(np.float16)
        assert np.count_nonzero(mag >= 2.0**row.over) == np.count_nonzero(np.isinf(y))
        assert np.count_nonzero((mag > 0) & (mag < 2.0**row.under)) == np.count_nonzero((y == 0) & (x != 0))
        assert row.scan.overflow == np.count_nonzero(np.isinf(y))
    fig = advice.plot(kind="range")
    axes = fig.get_axes()
    assert [a.get_ylabel() for a in axes] == ["float16", f"float16 x 2^{k}"]
    assert advice.message in fig._suptitle.get_text()
    share = 100 * before.scan.overflow / x.size
    assert any(t.get_text() == f"overflow {share:.3g}%" for t in axes[0].texts)
    assert not any(t.get_text().startswith("overflow") for t in axes[1].texts)  # none after


def test_range_chart_of_advice_refuses_what_it_cannot_draw() -> None:
    with pytest.raises(bp.BitprismError, match="no scans to chart"):
        bp.suggest_scale(act(7), "e4m3", formats=[]).plot(kind="range")
    with pytest.raises(bp.BitprismError, match="per-channel scale moves each group"):
        bp.suggest_scale(act(7), "e4m3", "channel").plot(kind="range")
    with pytest.raises(bp.BitprismError, match='kind must be "sweep" or "range"'):
        bp.suggest_scale(act(7), "e4m3").plot(kind="ranges")

@pytest.fixture
def npz(tmp_path):
    path = tmp_path / "acts.npz"
    np.savez(path, act=act(5), w=np.random.default_rng(1).normal(0, 0.02, (16, 32)).astype(np.float32))
    return path


def test_cli_scale_table(capsys, npz) -> None:
    code, out, err = run(capsys, "scale", str(npz), "--formats", "e4m3,e5m2")
    assert code == 0 and err == ""
    assert out.count("scaling compared in float8_e4m3fn") == 2  # one per tensor
    assert "== act (32x64, float32) ==" in out and "block (MX)" in out
    code, out, _ = run(capsys, "scale", str(npz), "--tensor", "w", "--formats", "e4m3",
                       "--granularity", "channel", "--objective", "amax")
    assert code == 0 and "channel" in out and "block (MX)" not in out


def test_cli_scale_json_equals_compare_scaling(capsys, npz) -> None:
    code, out, _ = run(capsys, "scale", str(npz), "--tensor", "act", "--formats", "e4m3", "--json")
    assert code == 0
    payload = json.loads(out)
    rows = payload["tensors"][0]["formats"]["float8_e4m3fn"]
    want = bp.compare_scaling(act(5), "e4m3")
    assert [r["granularity"] for r in rows] == [r.granularity for r in want.rows]
    for got, row in zip(rows, want.rows):
        assert got["overflow"] == row.overflow and got["underflow"] == row.underflow
        assert float(got["sqnr_db"]) == pytest.approx(row.sqnr_db, abs=1e-9)


@pytest.mark.parametrize(
    "argv, words",
    [
        (["--granularity", "rows"], "--granularity"),
        (["--axis", "4"], "axis must be"),
        (["--block-size", "0"], "block_size must be a positive integer"),
        (["--tensor", "nope"], "no such tensor"),
        (["--formats", "mxfp4"], "name its element format"),
        (["--formats", "float32"], "at most 10"),
        (["--formats", "e4m4"], "e4m4"),
        (["--objective", "mse"], "invalid choice"),
    ],
)
def test_cli_scale_bad_input_exits_2_with_one_line(capsys, npz, argv, words) -> None:
    code, out, err = run(capsys, "scale", str(npz), *argv)
    assert code == 2 and out == ""
    assert words in err and "Traceback" not in err
    assert len(err.strip().splitlines()) == 1


def test_cli_scale_missing_file(capsys, tmp_path) -> None:
    code, out, err = run(capsys, "scale", str(tmp_path / "none.npy"))
    assert code == 2 and out == "" and len(err.strip().splitlines()) == 1
