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
