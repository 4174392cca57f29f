"""The ``bitprism`` terminal command: output, --json, exit codes and one-line errors."""

from __future__ import annotations

import json
import os
import struct
import subprocess
import sys
from fractions import Fraction
from pathlib import Path

import ml_dtypes
import numpy as np
import pytest

from bitprism.cli import main

WIDGETS = str(Path(__file__).resolve().parents[1] / "widgets")


def run(capsys, *argv: str) -> tuple[int, str, str]:
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


# ----- show -----------------------------------------------------------------------------------
def test_show_text_table(capsys):
    code, out, err = run(capsys, "show", "2**-24", "--formats", "fp32,bf16,fp16,e4m3")
    assert code == 0 and err == ""
    for name in ("float32", "bfloat16", "float16", "float8_e4m3fn"):
        assert name in out
    lines = {line.split()[0]: line for line in out.splitlines() if line.strip()}
    # 2^-24 is float16's smallest subnormal, code 0x0001 (IEEE 754 binary16, common practice)
    assert "0 00000 0000000001" in lines["float16"] and "subnormal" in lines["float16"]
    # float32: biased exponent 127 - 24 = 103 = 0b01100111, trailing significand 0
    assert "0 01100111 " + "0" * 23 in lines["float32"]
    assert "zero" in lines["float8_e4m3fn"]  # below half of E4M3's 2^-9: rounds to zero


@pytest.mark.parametrize(
    "text, value",
    [("2**-24", Fraction(1, 2**24)), ("0x1p-3", Fraction(1, 8)), ("1/3", Fraction(1, 3)),
     ("0.1", Fraction(1, 10)), ("-2**-24", -Fraction(1, 2**24))],
)
def test_show_json_reads_value_exactly(capsys, text, value):
    code, out, _ = run(capsys, "show", text, "--formats", "fp32,fp16,e5m2", "--json")
    assert code == 0
    data = json.loads(out)
    assert Fraction(data["exact"]) == value  # exact text, never through a binary float
    rows = {r["format"]: r for r in data["formats"]}
    assert list(rows) == ["float32", "float16", "float8_e5m2"]
    # float32 against the standard library (struct rounds to nearest even from a double; every
    # value here is exact in float64 except 1/3 and 0.1, whose double is within 2^-53 rel. and
    # far from a float32 tie)
    f32 = struct.unpack(">I", struct.pack(">f", float(value)))[0]
    assert int(rows["float32"]["code"], 16) == f32
    f16 = int(np.array(float(value), np.float64).astype(np.float16).view(np.uint16))
    assert int(rows["float16"]["code"], 16) == f16
    e5m2 = int(np.array(float(value)).astype(ml_dtypes.float8_e5m2).view(np.uint8))
    assert int(rows["float8_e5m2"]["code"], 16) == e5m2
    for r in data["formats"]:  # value and error are exact strings: value - input == error
        stored = Fraction(r["value"])
        assert Fraction(r["error"]) == stored - value
        assert r["exact"] == (stored == value)


def test_show_options_change_the_result(capsys):
    # 1e6 overflows E4M3 (max 448, OCP OFP8 rev 1.0): NaN, or 448 saturated (SAT / NONSAT
    # conversion tables of the ONNX float8 page; OFP8 "Table 3" from memory)
    _, out, _ = run(capsys, "show", "1e6", "--formats", "e4m3", "--json")
    assert json.loads(out)["formats"][0]["code"] == "0x7f"
    _, out, _ = run(capsys, "show", "1e6", "--formats", "e4m3", "--overflow", "saturate", "--json")
    row = json.loads(out)["formats"][0]
    assert row["code"] == "0x7e" and Fraction(row["value"]) == 448
    _, out, _ = run(capsys, "show", "1/3", "--formats", "bf16", "--rounding", "rtz", "--json")
    assert json.loads(out)["formats"][0]["code"] == "0x3eaa"  # truncated 0x3eaaaaab


@pytest.mark.parametrize(
    "argv, words",
    [
        (["show", "1/", "--formats", "fp16"], "column 3"),
        (["show", "1", "--formats", "fp17"], "unknown format 'fp17'"),
        (["show", "1", "--rounding", "sideways"], "rounding must be one of"),
        (["show"], "VALUE"),
        (["frobnicate"], "invalid choice"),
        (["scan", "x.npy", "--fail-on", "nan,typo"], "--fail-on"),
        ([], "usage"),
    ],
)
def test_bad_arguments_exit_2_with_one_line(capsys, argv, words):
    code, out, err = run(capsys, *argv)
    assert code == 2 and out == ""
    assert words in err and "Traceback" not in err
    if argv:
        assert len(err.strip().splitlines()) == 1


def test_formats_listing(capsys):
    code, out, _ = run(capsys, "formats")
    assert code == 0
    line = next(l for l in out.splitlines() if l.startswith("float8_e4m3fn "))
    assert "1-4-3" in line and " 7 " in line and "448" in line  # OFP8 rev 1.0: bias 7, max 448
    assert "mxfp4" in out and "float4_e2m1fn" in out
    code, out, _ = run(capsys, "formats", "--json")
    data = json.loads(out)
    by_name = {f["name"]: f for f in data["formats"]}
    assert Fraction(by_name["float16"]["max"]) == Fraction(65504)  # IEEE 754 binary16
    assert by_name["bfloat16"]["bias"] == 127
    for name, f in by_name.items():  # cross-check with ml_dtypes/numpy where a dtype exists
        dt = getattr(ml_dtypes, name, None) if not hasattr(np, name) else getattr(np, name)
        if dt is not None and name not in ("float64",):
            assert Fraction(f["max"]) == Fraction(float(ml_dtypes.finfo(dt).max)), name
    assert {b["name"] for b in data["block_formats"]} >= {"mxfp4", "mxint8", "mxfp8_e4m3"}


# ----- scan -----------------------------------------------------------------------------------
@pytest.mark.parametrize("suffix", [".npy", ".npz", ".safetensors"])
def test_corrupt_or_missing_file_exit_2_names_file(capsys, tmp_path, suffix):
    bad = tmp_path / f"broken{suffix}"
    bad.write_bytes(b"this is not a tensor file at all")
    code, out, err = run(capsys, "scan", str(bad), "--no-progress")
    assert code == 2 and out == ""
    assert "broken" + suffix in err and "Traceback" not in err
    assert len(err.strip().splitlines()) == 1
    missing = tmp_path / f"absent{suffix}"
    code, _, err = run(capsys, "scan", str(missing), "--no-progress")
    assert code == 2 and "absent" + suffix in err


def checkpoint(tmp_path: Path) -> dict[str, Path]:
    ok = np.linspace(-2, 2, 64, dtype=np.float32).reshape(8, 8)
    big = np.array([1.0, 7e4, -3.0], dtype=np.float32)  # 7e4 > 65504: float16 overflows
    holes = np.array([1.0, np.nan, 2.0], dtype=np.float32)
    paths = {"ok": tmp_path / "ok.npy", "npz": tmp_path / "ckpt.npz"}
    np.save(paths["ok"], ok)
    np.savez(paths["npz"], ok=ok, big=big, holes=holes)
    return paths


def test_scan_clean_file_exits_0(capsys, tmp_path):
    paths = checkpoint(tmp_path)
    code, out, err = run(
        capsys, "scan", str(paths["ok"]), "--formats", "fp16,bf16", "--fail-on",
        "nan,inf,overflow", "--no-progress",
    )
    assert code == 0, err
    assert "ok" in out and "float16" in out and "pass" in out


@pytest.mark.parametrize(
    "condition, tensor, expected",
    [("overflow", "big", 1), ("nan", "holes", 1), ("inf", "ok", 0), ("overflow", "ok", 0),
     ("underflow", "ok", 0)],
)
def test_scan_fail_on(capsys, tmp_path, condition, tensor, expected):
    paths = checkpoint(tmp_path)
    argv = ["scan", str(paths["npz"]), "--tensor", tensor, "--formats", "fp16",
            "--fail-on", condition, "--no-progress"]
    code, out, err = run(capsys, *argv)
    assert code == expected, (out, err)
    code, out, err = run(capsys, *argv, "--json")  # counted from the full summary there
    assert code == expected, (out, err)
    assert json.loads(out)["failed"] == ([condition] if expected else [])


def test_scan_json(capsys, tmp_path):
    paths = checkpoint(tmp_path)
    code, out, _ = run(
        capsys, "scan", str(paths["npz"]), "--formats", "fp16,e4m3", "--fail-on", "overflow",
        "--json", "--no-progress",
    )
    data = json.loads(out)
    assert code == 1 and data["failed"] == ["overflow"]
    tensors = {t["name"]: t for t in data["tensors"]}
    assert set(tensors) == {"ok", "big", "holes"}
    assert tensors["big"]["shape"] == [3] and tensors["big"]["failed"] == ["overflow"]
    assert tensors["big"]["formats"]["float16"]["overflow"] == 1
    assert tensors["ok"]["formats"]["float16"]["overflow"] == 0


def test_scan_counts_only_gives_the_same_counts(capsys, tmp_path):
    paths = checkpoint(tmp_path)
    reports = []
    for q in ("exact", "none"):
        code, out, _ = run(
            capsys, "scan", str(paths["npz"]), "--formats", "fp16,e4m3", "--fail-on", "overflow",
            "--json", "--no-progress", "--quantiles", q,
        )
        assert code == 1
        reports.append({t["name"]: t["formats"] for t in json.loads(out)["tensors"]})
    exact, counts = reports
    for name, fmts in exact.items():
        for fmt, row in fmts.items():
            got = counts[name][fmt]
            for k in ("nan", "inf", "overflow", "underflow", "subnormal"):
                assert got[k] == row[k], (name, fmt, k)
            assert got["rel_error_p50"] is None and got["quantiles"] == "none"
    code, _, err = run(capsys, "scan", str(paths["npz"]), "--quantiles", "none",
                       "--rounding", "stochastic", "--no-progress")
    assert code == 2 and "deterministic" in err


def test_scan_unknown_tensor_exit_2(capsys, tmp_path):
    paths = checkpoint(tmp_path)
    code, _, err = run(capsys, "scan", str(paths["npz"]), "--tensor", "nope", "--no-progress")
    assert code == 2 and "nope" in err and "ckpt.npz" in err


def test_scan_safetensors(capsys, tmp_path):
    # a minimal safetensors file (8-byte little-endian header length, JSON header, data)
    arr = np.array([[1.0, 2.0], [np.inf, 4.0]], dtype=np.float32)
    header = json.dumps({"w": {"dtype": "F32", "shape": [2, 2], "data_offsets": [0, 16]}})
    path = tmp_path / "m.safetensors"
    path.write_bytes(struct.pack("<Q", len(header)) + header.encode() + arr.tobytes())
    code, out, _ = run(capsys, "scan", str(path), "--formats", "bf16", "--fail-on", "inf",
                       "--no-progress")
    assert code == 1 and "w" in out


def test_module_entry_point_in_subprocess(tmp_path):
    env = dict(os.environ, PYTHONPATH=WIDGETS)
    done = subprocess.run(
        [sys.executable, "-m", "bitprism.cli", "show", "0x1p-3", "--formats", "fp16", "--json"],
        capture_output=True, text=True, env=env, timeout=120, cwd=tmp_path,
    )
    assert done.returncode == 0, done.stderr
    row = json.loads(done.stdout)["formats"][0]
    assert row["code"] == "0x3000"  # 0.125 in binary16: biased exponent 12 -> 0b0_01100_0...
    bad = subprocess.run(
        [sys.executable, "-m", "bitprism.cli", "scan", str(tmp_path / "none.npz")],
        capture_output=True, text=True, env=env, timeout=120, cwd=tmp_path,
    )
    assert bad.returncode == 2 and "none.npz" in bad.stderr and "Traceback" not in bad.stderr


def test_cli_does_not_import_ui_libraries(tmp_path):
    env = dict(os.environ, PYTHONPATH=WIDGETS)
    code = (
        "import sys\nfrom bitprism.cli import main\nmain(['formats'])\n"
        "bad = [m for m in ('ipywidgets', 'IPython', 'matplotlib') if m in sys.modules]\n"
        "raise SystemExit(1 if bad else 0)\n"
    )
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, env=env,
                          timeout=120, cwd=tmp_path)
    assert done.returncode == 0


def test_scan_with_mx_column(capsys, tmp_path):
    path = tmp_path / "w.npy"
    np.save(path, np.array([1.0, 7e4, -3.0] + [0.0] * 29, dtype=np.float32))
    code, out, _ = run(capsys, "scan", str(path), "--formats", "mxfp4,fp16", "--json",
                       "--fail-on", "underflow", "--no-progress")
    data = json.loads(out)
    mx = data["tensors"][0]["formats"]["mxfp4"]
    # one block, amax 7e4 -> shared exponent 16 - 2 = 14: 1 and -3 flush to 0 (MX v1.0 §6.3)
    assert mx["underflow"] == 2 and code == 1
    assert data["tensors"][0]["formats"]["float16"]["overflow"] == 1


# ----- issue 16: --fail-on classes, the result's NaN and Inf -----------------------------------

def test_readme_ci_example_catches_an_inf_that_e4m3_makes_nan(capsys, tmp_path):
    # README: `bitprism scan model.safetensors --formats bf16,fp16,e4m3 --fail-on nan,overflow`.
    # float8_e4m3fn has no Inf: ml_dtypes casts +Inf to NaN (computed here), so the e4m3 result
    # holds a NaN and the check must fail although the input holds none.
    assert np.isnan(np.float32(np.inf).astype(ml_dtypes.float8_e4m3fn))
    arr = np.array([1.0, np.inf, 2.0], dtype=np.float32)
    header = json.dumps({"w": {"dtype": "F32", "shape": [3], "data_offsets": [0, 12]}})
    path = tmp_path / "model.safetensors"
    path.write_bytes(struct.pack("<Q", len(header)) + header.encode() + arr.tobytes())
    for quantiles in ("exact", "none"):
        code, out, err = run(capsys, "scan", str(path), "--formats", "bf16,fp16,e4m3", "--fail-on",
                             "nan,overflow", "--no-progress", "--quantiles", quantiles)
        assert code == 1 and err == "", err
        assert "fails: nan" in out and "float8_e4m3fn 1 NaN" in out
        assert out.rstrip().endswith("--fail-on nan,overflow: FAIL (nan)")


# One value of each kind the cast treats apart: NaN, both Infs, both zeros, ordinary values,
# negatives (invalid in unsigned formats), tiny values, and finite values beyond the largest
# finite value of every format but float64 on both sides; none sits on a rounding tie.
SPECIALS_DATA = np.array(
    [np.nan, np.inf, -np.inf, 0.0, -0.0, 1.0, -3.0, 0.1, 2.0**-150, 7.0, -7.0, 30.5, -30.5,
     250.0, -250.0, 1000.0, -1000.0, 7e4, -7e4, 1e6, -1e6, 1e39, -1e39, 1e300, -1e300],
    dtype=np.float64,
)
# Stochastic rounding draws: only values whose result the draw cannot change (exact in every
# format, or beyond every format's range by more than one step).
STOCHASTIC_DATA = np.array([np.nan, np.inf, -np.inf, 0.0, -0.0, 1.0, -1.0, 0.5, 1e300, -1e300])
# format kinds (specials convention, or unsigned) with an ml_dtypes/numpy counterpart
KIND_FORMATS = {
    "ieee": ["bfloat16", "float16", "float8_e5m2", "float8_e4m3", "float8_e3m4"],
    "fn": ["float8_e4m3fn"],
    "fnuz": ["float8_e4m3fnuz", "float8_e5m2fnuz", "float8_e4m3b11fnuz"],
    "finite": ["float6_e2m3fn", "float6_e3m2fn", "float4_e2m1fn"],
    "unsigned": ["float8_e5m3fnu", "float8_e8m0fnu"],
}
ROUNDINGS = ["roundTiesToEven", "roundTiesToAway", "roundTowardPositive", "roundTowardNegative",
             "roundTowardZero", "stochastic"]


def _expected_specials(x: np.ndarray, name: str, rounding: str, overflow: str) -> tuple[int, int]:
    """(NaN, Inf) in the results, from ml_dtypes' casts (round to nearest even) and the rules
    of the other modes: IEEE 754-2019 §7.4 (toward +Inf, a positive overflow is Inf and a
    negative one the most negative finite value; toward -Inf the mirror; toward zero the largest
    finite value) and saturation (ONNX Cast saturate=True: Inf and overflow to the largest
    finite value). An unsigned format makes every negative value NaN whatever the options."""
    dt = np.dtype(getattr(ml_dtypes, name, None) or getattr(np, name))
    top = float(ml_dtypes.finfo(dt).max)

    def kind(v: float) -> str:
        with np.errstate(over="ignore", invalid="ignore"):  # overflow is what is looked at
            r = float(np.array([v]).astype(dt)[0])
        return "nan" if np.isnan(r) else "inf" if np.isinf(r) else "finite"

    out = {"nan": 0, "inf": 0, "finite": 0}
    with np.errstate(invalid="ignore"):
        unsigned = not float(np.array([-1.0]).astype(dt)[0]) == -1.0
    for v in map(float, x):
        if np.isnan(v) or (unsigned and v < 0):
            got = kind(v)
        elif overflow == "saturate":
            got = kind(min(max(v, -top), top))
        elif np.isinf(v) or rounding in ("roundTiesToEven", "roundTiesToAway", "stochastic"):
            got = kind(v)
        elif rounding == "roundTowardPositive" and v > top:
            got = kind(np.inf)
        elif rounding == "roundTowardNegative" and v < -top:
            got = kind(-np.inf)
        else:
            got = kind(min(max(v, -top), top))
        out[got] += 1
    return out["nan"], out["inf"]


@pytest.mark.parametrize("overflow", ["standard", "saturate"])
@pytest.mark.parametrize(
    "quantiles, rounding",
    # a counts-only scan refuses stochastic rounding (test_scan_counts_only_gives_the_same_counts)
    [(q, r) for q in ("exact", "none") for r in ROUNDINGS if (q, r) != ("none", "stochastic")],
)
def test_scan_counts_the_results_nan_and_inf(capsys, tmp_path, quantiles, rounding, overflow):
    data = STOCHASTIC_DATA if rounding == "stochastic" else SPECIALS_DATA
    np.save(tmp_path / "x.npy", data)
    names = [n for kind in KIND_FORMATS.values() for n in kind]
    if quantiles == "none":
        names.remove("float8_e8m0fnu")  # see test_e8m0_overflow_counts_only below
    code, out, err = run(capsys, "scan", str(tmp_path / "x.npy"), "--formats", ",".join(names),
                         "--rounding", rounding, "--overflow", overflow, "--quantiles", quantiles,
                         "--seed", "7", "--json", "--no-progress", "--fail-on", "nan,inf,nonfinite")
    assert err == "", err
    rows = json.loads(out)["tensors"][0]["formats"]
    for name in names:
        want = _expected_specials(data, name, rounding, overflow)
        got = rows[name]["result_nan"], rows[name]["result_inf"]
        assert got == want, (name, got, want)
        assert rows[name]["nan"] == 1 and rows[name]["inf"] == 2  # the input's, unchanged
    assert code == 1  # the input holds NaN and Inf
    assert json.loads(out)["failed"] == ["inf", "nan", "nonfinite"]  # sorted


@pytest.mark.parametrize("quantiles", [
    "exact",
    "none",  # counts only: the overflow threshold comes from rounding.exceeds_largest
])
def test_e8m0_overflow_counts_only(capsys, tmp_path, quantiles):
    # 1e39 > 2**127 * 1.5 (E8M0's largest value and its rounding midpoint with no significand
    # bits, OCP MX v1.0 Table 7): ml_dtypes makes it NaN
    data = np.array([1e39, 1.0])
    with np.errstate(over="ignore"):
        assert np.isnan(data.astype(ml_dtypes.float8_e8m0fnu)[0])
    np.save(tmp_path / "x.npy", data)
    _, out, _ = run(capsys, "scan", str(tmp_path / "x.npy"), "--formats", "e8m0", "--json",
                    "--no-progress", "--quantiles", quantiles)
    assert json.loads(out)["tensors"][0]["formats"]["float8_e8m0fnu"]["result_nan"] == 1


@pytest.mark.parametrize("condition", ["nan", "inf", "nonfinite"])
def test_fail_on_counts_cast_results(capsys, tmp_path, condition):
    # 1e6: float16 overflows to Inf (IEEE 754 binary16 max 65504), float8_e4m3fn to NaN (no Inf)
    with np.errstate(over="ignore"):
        assert np.isinf(np.float64(1e6).astype(np.float16))
    np.save(tmp_path / "x.npy", np.array([1.0, 1e6]))
    for fmt, fails in (("fp16", condition in ("inf", "nonfinite")),
                       ("e4m3", condition in ("nan", "nonfinite")), ("bf16", False)):
        code, _, _ = run(capsys, "scan", str(tmp_path / "x.npy"), "--formats", fmt, "--fail-on",
                         condition, "--no-progress", "--quantiles", "none")
        assert code == (1 if fails else 0), (fmt, condition)


def test_fail_on_subnormal(capsys, tmp_path):
    np.save(tmp_path / "x.npy", np.array([1.0, 2.0**-20]))  # float16 subnormal (below 2**-14)
    code, _, _ = run(capsys, "scan", str(tmp_path / "x.npy"), "--formats", "fp16", "--fail-on",
                     "subnormal", "--no-progress")
    assert code == 1
    code, _, _ = run(capsys, "scan", str(tmp_path / "x.npy"), "--formats", "fp32", "--fail-on",
                     "subnormal", "--no-progress")
    assert code == 0


def test_fail_on_help_defines_each_class(capsys):
    code, out, _ = run(capsys, "scan", "--help")
    text = " ".join(out.split())
    assert code == 0
    for words in ("nan: a NaN in the input or in any cast result", "inf: an Inf in the input or "
                  "in any cast result", "nonfinite: either", "subnormal: a value whose result is "
                  "subnormal", "default bfloat16,float16,float8_e4m3fn,float8_e5m2",
                  "stochastic: away from zero with probability", "not with --quantiles none",
                  "a .npy, .npz or .safetensors file", "--seed N", "--max-ratio R"):
        assert words in text, words


# ----- issue 16: seeds, names, words -----------------------------------------------------------

def test_stochastic_scan_is_repeatable(capsys, tmp_path):
    np.save(tmp_path / "x.npy", np.linspace(0.01, 1, 1000))
    argv = ["scan", str(tmp_path / "x.npy"), "--formats", "e4m3", "--rounding", "stochastic",
            "--no-progress", "--json"]
    _, first, _ = run(capsys, *argv)
    seed = json.loads(first)["seed"]
    assert isinstance(seed, int) and 0 <= seed < 2**63  # drawn, then reported
    _, again, _ = run(capsys, *argv, "--seed", str(seed))
    assert json.loads(again) == json.loads(first)
    _, text, _ = run(capsys, *argv[:-1], "--seed", str(seed))
    assert f"--seed {seed} repeats it" in text


def test_stochastic_show_names_its_seed(capsys):
    code, out, _ = run(capsys, "show", "0.1", "--formats", "e4m3", "--rounding", "sr", "--json")
    seed = json.loads(out)["seed"]
    assert code == 0 and isinstance(seed, int)
    _, again, _ = run(capsys, "show", "0.1", "--formats", "e4m3", "--rounding", "sr", "--json",
                      "--seed", str(seed))
    assert json.loads(again) == json.loads(out)
    _, text, _ = run(capsys, "show", "0.1", "--formats", "e4m3", "--rounding", "sr", "--seed", "5")
    assert "seed 5" in text


@pytest.mark.parametrize("seed", ["-1", str(2**63), "x"])
def test_bad_seed_exit_2(capsys, seed):
    code, out, err = run(capsys, "show", "1", "--rounding", "sr", "--seed", seed)
    assert code == 2 and out == "" and "--seed" in err and len(err.splitlines()) == 1


def test_show_block_format_points_to_scan(capsys):
    code, _, err = run(capsys, "show", "1", "--formats", "mxfp4")
    assert code == 2 and len(err.splitlines()) == 1
    assert "'mxfp4' is an MX block format" in err and "bitprism scan FILE --formats mxfp4" in err
    assert "float4_e2m1fn" in err


def test_scan_prints_names_escaped(capsys, tmp_path):
    # a name holding an escape sequence, a line break that would forge a verdict line, and a
    # lone surrogate (which a UTF-8 terminal cannot encode)
    names = ["\x1b[31mred", "w\nfails: none", "\ud800"]
    header, data = {}, b""
    for i, name in enumerate(names):
        header[name] = {"dtype": "F32", "shape": [1], "data_offsets": [4 * i, 4 * i + 4]}
        data += np.float32([1.0]).tobytes()
    text = json.dumps(header)  # json writes the surrogate as the escape \ud800
    path = tmp_path / "n.safetensors"
    path.write_bytes(struct.pack("<Q", len(text)) + text.encode() + data)
    code, out, err = run(capsys, "scan", str(path), "--formats", "fp16", "--no-progress",
                         "--fail-on", "nan")
    assert code == 0 and err == ""
    for line in out.splitlines():
        assert line.isprintable(), repr(line)
    assert "== \\x1b[31mred (1, float32) ==" in out and "== w\\nfails: none (1, float32) ==" in out
    assert "== \\ud800 (1, float32) ==" in out
    code, out, _ = run(capsys, "scan", str(path), "--formats", "fp16", "--no-progress", "--json")
    out.encode("ascii")  # ASCII escapes: valid JSON whatever the names hold
    assert [t["name"] for t in json.loads(out)["tensors"]] == names


def test_formats_lists_every_alias(capsys):
    from bitprism.formats import format_aliases

    code, out, _ = run(capsys, "formats")
    assert code == 0 and out.endswith("\n") and not out.endswith("\n\n")
    for alias in format_aliases():
        line = next(l for l in out.splitlines() if l.startswith(f"  {alias.format} "))
        assert alias.name in line.replace("*", "").split(", ") or f" {alias.name}" in line
    assert ("e4m3 -> float8_e4m3fn: the OCP E4M3 without Inf (largest 448); the IEEE-style "
            "E4M3 with Inf (largest 240) is float8_e4m3") in out
    assert "float -> float32" in out and "get_format(float) gives float64" in out
    code, out, _ = run(capsys, "formats", "--json")
    assert out.endswith("}\n")
    listed = {a["name"]: (a["format"], a["note"]) for a in json.loads(out)["aliases"]}
    assert listed == {a.name: (a.format, a.note) for a in format_aliases()}


@pytest.mark.parametrize("quantiles", ["exact", "none"])
def test_mx_block_with_an_inf_is_all_nan(capsys, tmp_path, quantiles):
    # OCP MX v1.0 §6.3: a block holding NaN or Inf gets the NaN scale, so each of its 32
    # values is NaN; the next block, all finite, keeps finite values
    data = np.concatenate([np.linspace(-1, 1, 32), np.linspace(-2, 2, 32)])
    data[3] = np.inf
    np.save(tmp_path / "x.npy", data)
    code, out, _ = run(capsys, "scan", str(tmp_path / "x.npy"), "--formats", "mxfp4,mxfp8_e5m2",
                       "--json", "--no-progress", "--quantiles", quantiles, "--fail-on", "nan")
    rows = json.loads(out)["tensors"][0]["formats"]
    for name in ("mxfp4", "mxfp8_e5m2"):
        assert (rows[name]["result_nan"], rows[name]["result_inf"]) == (32, 0), name
    assert code == 1
