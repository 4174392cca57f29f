"""Reading .npy, .npz and .safetensors files (bitprism.tensors.files).

Every file is built here, in tmp_path. The safetensors files come from a small writer in this
module (struct + json), written from the format documentation independently of the reader:
8-byte little-endian header length N, N bytes of UTF-8 JSON
``{name: {"dtype", "shape", "data_offsets": [begin, end]}, "__metadata__": {...}}``, then the
data buffer, with offsets relative to the start of that buffer.
"""

from __future__ import annotations

import io
import json
import os
import struct
import subprocess
import sys
import zipfile
from pathlib import Path
from typing import Any

import ml_dtypes
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from bitprism.errors import BitprismError, UnsupportedInputError
from bitprism.tensors.files import TensorFile, open_tensor, open_tensors

# ----- an independent safetensors writer ---------------------------------------------------

# Element widths in bytes, from the safetensors format documentation's dtype list.
_WIDTH = {
    "F64": 8, "F32": 4, "F16": 2, "BF16": 2, "F8_E4M3": 1, "F8_E5M2": 1, "F8_E8M0": 1,
    "F8_E4M3FNUZ": 1, "F8_E5M2FNUZ": 1, "I8": 1, "I16": 2, "I32": 4, "I64": 8,
    "U8": 1, "U16": 2, "U32": 4, "U64": 8, "BOOL": 1,
}


def write_safetensors(
    path: Path,
    tensors: dict[str, tuple[str, list[int], bytes]],
    metadata: dict[str, str] | None = None,
) -> Path:
    """Lay tensors out back to back in the given order; the header is padded with spaces to a
    multiple of 8 bytes, as the reference writer does."""
    header: dict[str, Any] = {}
    if metadata is not None:
        header["__metadata__"] = metadata
    data = b""
    for name, (dtype, shape, raw) in tensors.items():
        header[name] = {"dtype": dtype, "shape": shape, "data_offsets": [len(data), len(data) + len(raw)]}
        data += raw
    return write_raw_safetensors(path, json.dumps(header).encode("utf-8"), data)


def write_raw_safetensors(path: Path, header: bytes, data: bytes = b"") -> Path:
    path.write_bytes(safetensors_bytes(header, data))
    return path


def safetensors_bytes(header: bytes, data: bytes = b"") -> bytes:
    header += b" " * (-len(header) % 8)
    return struct.pack("<Q", len(header)) + header + data


def le_bytes(codes: list[int], width: int) -> bytes:
    return b"".join(c.to_bytes(width, "little") for c in codes)


# ----- safetensors: every dtype, bit for bit -------------------------------------------------

# safetensors dtype -> the numpy / ml_dtypes dtype its bytes mean. F8_E4M3 is the OCP E4M3 with
# no Inf (ml_dtypes float8_e4m3fn); F8_E8M0 the OCP Microscaling scale (float8_e8m0fnu).
EXPECTED_DTYPE = {
    "F64": np.dtype(np.float64),
    "F32": np.dtype(np.float32),
    "F16": np.dtype(np.float16),
    "BF16": np.dtype(ml_dtypes.bfloat16),
    "F8_E4M3": np.dtype(ml_dtypes.float8_e4m3fn),
    "F8_E5M2": np.dtype(ml_dtypes.float8_e5m2),
    "F8_E8M0": np.dtype(ml_dtypes.float8_e8m0fnu),
    "F8_E4M3FNUZ": np.dtype(ml_dtypes.float8_e4m3fnuz),
    "F8_E5M2FNUZ": np.dtype(ml_dtypes.float8_e5m2fnuz),
    "I8": np.dtype(np.int8),
    "I16": np.dtype(np.int16),
    "I32": np.dtype(np.int32),
    "I64": np.dtype(np.int64),
    "U8": np.dtype(np.uint8),
    "U16": np.dtype(np.uint16),
    "U32": np.dtype(np.uint32),
    "U64": np.dtype(np.uint64),
    "BOOL": np.dtype(np.bool_),
}


@pytest.mark.parametrize("code", sorted(EXPECTED_DTYPE))
def test_safetensors_dtype_round_trip_keeps_bits(tmp_path: Path, code: str) -> None:
    width = _WIDTH[code]
    rng = np.random.default_rng(width)
    if code == "BOOL":
        codes = [0, 1, 1, 0, 1, 0]
    elif width == 1:
        codes = list(range(256))  # every 8-bit pattern, NaNs included
    else:
        codes = [int(c) for c in rng.integers(0, 1 << (8 * width), size=24, dtype=np.uint64)]
        codes[:3] = [0, 1, (1 << (8 * width)) - 1]  # zero, smallest subnormal, a NaN pattern
    raw = le_bytes(codes, width)
    shape = [len(codes) // 2, 2]
    path = write_safetensors(tmp_path / "t.safetensors", {"w": (code, shape, raw)})
    arr = open_tensor(path)
    assert arr.dtype == EXPECTED_DTYPE[code]
    assert arr.shape == tuple(shape)
    assert isinstance(arr, np.memmap)
    bits = arr.view(f"<u{width}").ravel()
    assert [int(b) for b in bits] == codes


@pytest.mark.parametrize(
    "code, pattern, value",
    [
        # Values from the OCP 8-bit floating point specification (OFP8) rev 1.0 tables and
        # the OCP Microscaling spec v1.0 (E8M0: 127 is 2**0); BF16 0x3F80 is 1.0 (bfloat16
        # is the top half of binary32).
        ("BF16", 0x3F80, 1.0),
        ("F16", 0x7BFF, 65504.0),
        ("F8_E4M3", 0x7E, 448.0),
        ("F8_E5M2", 0x7B, 57344.0),
        ("F8_E8M0", 0x7F, 1.0),
        ("F8_E8M0", 0x80, 2.0),
    ],
)
def test_safetensors_decoded_values(tmp_path: Path, code: str, pattern: int, value: float) -> None:
    raw = le_bytes([pattern], _WIDTH[code])
    path = write_safetensors(tmp_path / "v.safetensors", {"x": (code, [1], raw)})
    assert float(open_tensor(path)[0]) == value


def test_safetensors_several_tensors_file_order_and_metadata(tmp_path: Path) -> None:
    tensors = {
        "z.last": ("F32", [2], le_bytes([0x3F800000, 0x40000000], 4)),
        "a.first": ("BF16", [3], le_bytes([0x3F80, 0x4000, 0x7FC1], 2)),
        "m.middle": ("U8", [1], b"\x07"),
    }
    path = write_safetensors(tmp_path / "model.safetensors", tensors, {"format": "pt"})
    tf = open_tensors(path)
    assert isinstance(tf, TensorFile)
    assert list(tf) == ["z.last", "a.first", "m.middle"]  # data order, not name order
    assert tf.metadata == {"format": "pt"}
    assert tf["z.last"].tolist() == [1.0, 2.0]
    assert tf["a.first"].view(np.uint16).tolist() == [0x3F80, 0x4000, 0x7FC1]
    with pytest.raises(BitprismError, match=r"model\.safetensors: holds 3 tensors.*'z\.last'"):
        open_tensor(path)
    assert open_tensor(path, "m.middle").tolist() == [7]
    with pytest.raises(BitprismError, match=r"no tensor named 'a\.frist' \(did you mean 'a\.first'"):
        open_tensor(path, "a.frist")


def test_safetensors_header_order_differs_from_data_order(tmp_path: Path) -> None:
    # Writers may list tensors in any order; file order is the order of the data.
    header = {
        "second": {"dtype": "U8", "shape": [1], "data_offsets": [1, 2]},
        "first": {"dtype": "U8", "shape": [1], "data_offsets": [0, 1]},
    }
    path = write_raw_safetensors(tmp_path / "o.safetensors", json.dumps(header).encode(), b"\x01\x02")
    tf = open_tensors(path)
    assert list(tf) == ["first", "second"]
    assert tf["second"].tolist() == [2]


def test_safetensors_empty_and_zero_dim_tensors(tmp_path: Path) -> None:
    tensors = {
        "empty": ("F32", [0, 3], b""),
        "scalar": ("BF16", [], le_bytes([0xBF80], 2)),
    }
    path = write_safetensors(tmp_path / "e.safetensors", tensors)
    tf = open_tensors(path)
    assert tf["empty"].shape == (0, 3) and tf["empty"].dtype == np.float32
    assert tf["scalar"].shape == () and float(tf["scalar"]) == -1.0


def test_safetensors_only_empty_tensors(tmp_path: Path) -> None:
    path = write_safetensors(tmp_path / "e.safetensors", {"e": ("F16", [0], b"")})
    assert open_tensor(path).shape == (0,)


def test_safetensors_no_tensors(tmp_path: Path) -> None:
    path = write_raw_safetensors(tmp_path / "none.safetensors", b"{}")
    assert len(open_tensors(path)) == 0
    with pytest.raises(BitprismError, match=r"none\.safetensors: holds no tensors"):
        open_tensor(path)


def test_safetensors_overlapping_regions_are_allowed(tmp_path: Path) -> None:
    header = {
        "whole": {"dtype": "U16", "shape": [2], "data_offsets": [0, 4]},
        "bytes": {"dtype": "U8", "shape": [4], "data_offsets": [0, 4]},
    }
    path = write_raw_safetensors(tmp_path / "ov.safetensors", json.dumps(header).encode(), b"\x01\x02\x03\x04")
    tf = open_tensors(path)
    assert tf["whole"].tolist() == [0x0201, 0x0403]
    assert tf["bytes"].tolist() == [1, 2, 3, 4]


def test_safetensors_unaligned_offset(tmp_path: Path) -> None:
    # Offsets need not be multiples of the element size; numpy reads unaligned views.
    tensors = {"pad": ("U8", [1], b"\x00"), "f": ("F32", [1], struct.pack("<f", 1.5))}
    path = write_safetensors(tmp_path / "u.safetensors", tensors)
    assert open_tensor(path, "f").tolist() == [1.5]


# ----- safetensors: bad files ------------------------------------------------------------------

GOOD_ENTRY = {"dtype": "F32", "shape": [3, 3], "data_offsets": [0, 36]}


def _bad_header(tmp_path: Path, header: Any, data: bytes = bytes(36)) -> Path:
    return write_raw_safetensors(tmp_path / "model.safetensors", json.dumps(header).encode(), data)


@pytest.mark.parametrize(
    "header, problem",
    [
        ([1, 2], r"header is a JSON list, not an object"),
        ("text", r"header is a JSON str, not an object"),
        ({"w": [1]}, r"tensor 'w' is described by a JSON list, not an object"),
        ({"w": {"dtype": "F32", "shape": [3, 3]}}, r"tensor 'w' lacks 'data_offsets'"),
        ({"w": {"data_offsets": [0, 36]}}, r"tensor 'w' lacks 'dtype', 'shape'"),
        (
            {"w": {"dtype": "F32", "shape": [3, 3], "data_offsets": [0, 100]}},
            r"tensor 'w' has data_offsets \[0, 100\] outside the 36-byte data buffer",
        ),
        (
            {"w": {"dtype": "F32", "shape": [3, 3], "data_offsets": [0, 32]}},
            r"tensor 'w' has data_offsets \[0, 32\] \(32 bytes\) but shape \[3, 3\] of F32 "
            r"needs 36 bytes",
        ),
        (
            {"w": {"dtype": "F32", "shape": [3, -3], "data_offsets": [0, 36]}},
            r"tensor 'w' has shape \[3, -3\]; expected a list of integers >= 0",
        ),
        (
            {"w": {"dtype": "F32", "shape": [True, 9], "data_offsets": [0, 36]}},
            r"tensor 'w' has shape \[True, 9\]",
        ),
        (
            {"w": {"dtype": "F32", "shape": "3x3", "data_offsets": [0, 36]}},
            r"tensor 'w' has shape '3x3'",
        ),
        (
            {"w": {"dtype": "F32", "shape": [3, 3], "data_offsets": [-4, 32]}},
            r"tensor 'w' has data_offsets \[-4, 32\]; expected \[begin, end\], integers >= 0",
        ),
        (
            {"w": {"dtype": "F32", "shape": [3, 3], "data_offsets": [0]}},
            r"tensor 'w' has data_offsets \[0\]",
        ),
        (
            {"w": {"dtype": "F32", "shape": [3, 3], "data_offsets": [0.0, 36.0]}},
            r"tensor 'w' has data_offsets \[0\.0, 36\.0\]",
        ),
        (
            {"w": {"dtype": "F32", "shape": [0], "data_offsets": [8, 4]}},
            r"tensor 'w' has data_offsets \[8, 4\] with begin after end",
        ),
        (
            {"w": {"dtype": "F128", "shape": [3, 3], "data_offsets": [0, 36]}},
            r"tensor 'w' has unknown dtype 'F128'; known: F64, F32",
        ),
        (
            {"w": {"dtype": 32, "shape": [3, 3], "data_offsets": [0, 36]}},
            r"tensor 'w' has dtype 32, not a string",
        ),
        (
            {"w": GOOD_ENTRY, "__metadata__": ["not", "an", "object"]},
            r"'__metadata__' is a JSON list, not an object",
        ),
        (
            # A shape whose product overflows 64 bits must still be caught by the size check.
            {"w": {"dtype": "F32", "shape": [2**40, 2**40], "data_offsets": [0, 36]}},
            r"tensor 'w' has data_offsets \[0, 36\] .* needs 4835703278458516698824704 bytes",
        ),
    ],
)
def test_safetensors_bad_header_is_named(tmp_path: Path, header: Any, problem: str) -> None:
    path = _bad_header(tmp_path, header)
    with pytest.raises(BitprismError, match=r"model\.safetensors: " + problem):
        open_tensors(path)


@pytest.mark.parametrize(
    "code, problem",
    [
        ("F4", r"packs 4-bit floats two to a byte"),
        ("F6_E2M3", r"packs 6-bit floats across byte boundaries"),
        ("C64", r"holds complex numbers"),
    ],
)
def test_safetensors_defined_but_refused_dtypes(tmp_path: Path, code: str, problem: str) -> None:
    # F4/F6 are 4 and 6 bits per element in the format's dtype list, with no element order
    # inside a byte given; C64 is complex.
    header = {"w": {"dtype": code, "shape": [2], "data_offsets": [0, 1 if code == "F4" else 8]}}
    path = write_raw_safetensors(tmp_path / "packed.safetensors", json.dumps(header).encode(), bytes(8))
    with pytest.raises(UnsupportedInputError, match=r"packed\.safetensors: tensor 'w' has dtype '" + code + "'.*" + problem):
        open_tensors(path)


def test_safetensors_duplicate_name(tmp_path: Path) -> None:
    text = b'{"w": ' + json.dumps(GOOD_ENTRY).encode() + b', "w": ' + json.dumps(GOOD_ENTRY).encode() + b"}"
    path = write_raw_safetensors(tmp_path / "dup.safetensors", text, bytes(36))
    with pytest.raises(BitprismError, match=r"dup\.safetensors: header names 'w' twice"):
        open_tensors(path)


def test_safetensors_too_short_for_length(tmp_path: Path) -> None:
    path = tmp_path / "short.safetensors"
    path.write_bytes(b"\x10\x00\x00")
    with pytest.raises(BitprismError, match=r"short\.safetensors: is 3 bytes long, too short"):
        open_tensors(path)


def test_safetensors_empty_file(tmp_path: Path) -> None:
    path = tmp_path / "zero.safetensors"
    path.write_bytes(b"")
    with pytest.raises(BitprismError, match=r"zero\.safetensors: is 0 bytes long"):
        open_tensors(path)


def test_safetensors_header_length_past_end(tmp_path: Path) -> None:
    path = tmp_path / "cut.safetensors"
    path.write_bytes(struct.pack("<Q", 500) + b'{"w": {}}')
    with pytest.raises(BitprismError, match=r"cut\.safetensors: header length 500 runs past the end of the file \(17 bytes\)"):
        open_tensors(path)


@pytest.mark.parametrize("length", [100_000_001, 2**63, 2**64 - 1])
def test_safetensors_absurd_header_length_is_capped(tmp_path: Path, length: int) -> None:
    # Refused from the 8 length bytes alone: nothing is allocated from the claimed length.
    path = tmp_path / "huge.safetensors"
    path.write_bytes(struct.pack("<Q", length) + b"{}")
    with pytest.raises(BitprismError, match=rf"huge\.safetensors: header length {length} is larger than the 100000000-byte limit"):
        open_tensors(path)


def test_safetensors_invalid_utf8(tmp_path: Path) -> None:
    path = write_raw_safetensors(tmp_path / "bin.safetensors", b'{"\xff\xfe": 1}')
    with pytest.raises(BitprismError, match=r"bin\.safetensors: header is not valid UTF-8 \(byte 2 of the header\)"):
        open_tensors(path)


def test_safetensors_invalid_json(tmp_path: Path) -> None:
    path = write_raw_safetensors(tmp_path / "js.safetensors", b'{"w": {"dtype": "F32",')
    with pytest.raises(BitprismError, match=r"js\.safetensors: header is not valid JSON \(.* at character \d+\)"):
        open_tensors(path)


def test_safetensors_deeply_nested_json(tmp_path: Path) -> None:
    path = write_raw_safetensors(tmp_path / "deep.safetensors", b"[" * 200_000 + b"]" * 200_000)
    with pytest.raises(BitprismError, match=r"deep\.safetensors: header"):
        open_tensors(path)


def test_safetensors_data_truncated(tmp_path: Path) -> None:
    path = write_safetensors(tmp_path / "trunc.safetensors", {"w": ("F32", [3, 3], bytes(36))})
    path.write_bytes(path.read_bytes()[:-10])
    with pytest.raises(BitprismError, match=r"trunc\.safetensors: tensor 'w' has data_offsets \[0, 36\] outside the 26-byte data buffer"):
        open_tensors(path)


# ----- safetensors: cross-check with the reference implementation (optional) ----------------


def test_safetensors_package_numpy_files_read_back(tmp_path: Path) -> None:
    st_numpy = pytest.importorskip("safetensors.numpy")
    rng = np.random.default_rng(7)
    tensors = {
        "f64": rng.standard_normal((3, 4)),
        "f32": rng.standard_normal(5).astype(np.float32),
        "f16": np.array([np.inf, -0.0, 65504.0], dtype=np.float16),
        "i64": np.arange(6, dtype=np.int64).reshape(2, 3),
        "b": np.array([True, False]),
        "scalar": np.array(2.5, dtype=np.float32),
    }
    path = tmp_path / "ref.safetensors"
    st_numpy.save_file(tensors, str(path), metadata={"who": "reference"})
    tf = open_tensors(path)
    assert set(tf) == set(tensors)
    assert tf.metadata == {"who": "reference"}
    for name, expected in tensors.items():
        got = tf[name]
        assert got.dtype == expected.dtype and got.shape == expected.shape
        assert got.tobytes() == expected.tobytes(), name


def test_safetensors_package_torch_files_keep_bits(tmp_path: Path) -> None:
    torch = pytest.importorskip("torch")
    st_torch = pytest.importorskip("safetensors.torch")
    codes8 = torch.arange(256, dtype=torch.int32).to(torch.uint8)
    codes16 = torch.tensor([0x3F80, 0x7FC1, 0xFF81, 0x0001, 0x8000], dtype=torch.int32).to(torch.int16)
    tensors = {"bf16": codes16.view(torch.bfloat16), "f16": codes16.clone().view(torch.float16)}
    expected_np = {"bf16": ml_dtypes.bfloat16, "f16": np.float16}
    for name in ("float8_e4m3fn", "float8_e5m2", "float8_e8m0fnu"):
        if hasattr(torch, name):
            tensors[name] = codes8.clone().view(getattr(torch, name))
            expected_np[name] = getattr(ml_dtypes, name)
    path = tmp_path / "torch.safetensors"
    try:
        st_torch.save_file(tensors, str(path))
    except Exception as exc:  # an older safetensors without some float8 type
        pytest.skip(f"safetensors cannot write these dtypes: {exc}")
    tf = open_tensors(path)
    for name, tensor in tensors.items():
        got = tf[name]
        assert got.dtype == np.dtype(expected_np[name]), name
        width = torch.int16 if tensor.element_size() == 2 else torch.uint8
        assert got.view(f"<u{tensor.element_size()}").tolist() == [
            int(v) & (0xFFFF if tensor.element_size() == 2 else 0xFF)
            for v in tensor.view(width).tolist()
        ], name


# ----- .npy ----------------------------------------------------------------------------------


def test_npy_is_memory_mapped(tmp_path: Path) -> None:
    data = np.arange(12, dtype=np.float32).reshape(3, 4)
    np.save(tmp_path / "w.npy", data)
    tf = open_tensors(tmp_path / "w.npy")
    assert list(tf) == ["w"]  # one tensor, named after the file's stem
    arr = open_tensor(str(tmp_path / "w.npy"))
    assert isinstance(arr, np.memmap) and arr.dtype == np.float32
    assert not arr.flags.writeable
    np.testing.assert_array_equal(arr, data)


@pytest.mark.parametrize(
    "data",
    [np.zeros((0, 3), np.float16), np.array(1.25, dtype=np.float64), np.arange(6.0).reshape(2, 3).T],
    ids=["empty", "zero-dim", "fortran-order"],
)
def test_npy_shapes(tmp_path: Path, data: np.ndarray) -> None:
    np.save(tmp_path / "a.npy", data)
    arr = open_tensor(tmp_path / "a.npy")
    assert arr.shape == data.shape and arr.dtype == data.dtype
    np.testing.assert_array_equal(arr, data)


def test_npy_name_selects_the_stem(tmp_path: Path) -> None:
    np.save(tmp_path / "w.npy", np.ones(2))
    assert open_tensor(tmp_path / "w.npy", "w").tolist() == [1.0, 1.0]
    with pytest.raises(BitprismError, match=r"w\.npy: no tensor named 'x'; it holds: 'w'"):
        open_tensor(tmp_path / "w.npy", "x")


def test_npy_ml_dtypes_are_saved_as_raw_void(tmp_path: Path) -> None:
    # numpy.save keeps only the bytes of an ml_dtypes array: its descriptor becomes '<V2'.
    # Seen with numpy 2.x / ml_dtypes 0.5+; this test notices if that changes.
    bits = np.array([0x3F80, 0x7FC1, 0x8000, 0x0001], dtype=np.uint16)
    np.save(tmp_path / "bf.npy", bits.view(ml_dtypes.bfloat16))
    with pytest.raises(BitprismError, match=r"bf\.npy: tensor 'bf' is stored as raw 2-byte items .*raw_as='bfloat16'"):
        open_tensor(tmp_path / "bf.npy")
    arr = open_tensor(tmp_path / "bf.npy", raw_as="bfloat16")
    assert arr.dtype == ml_dtypes.bfloat16
    assert arr.view(np.uint16).tolist() == bits.tolist()
    arr8 = open_tensors(tmp_path / "bf.npy", raw_as=ml_dtypes.bfloat16)["bf"]
    assert arr8.view(np.uint16).tolist() == bits.tolist()
    with pytest.raises(BitprismError, match=r"tensor 'bf' has 2-byte items but raw_as='float8_e4m3fn' is 1 byte"):
        open_tensor(tmp_path / "bf.npy", raw_as="float8_e4m3fn")


def test_raw_as_leaves_typed_tensors_alone(tmp_path: Path) -> None:
    np.save(tmp_path / "f.npy", np.ones(3, np.float16))
    assert open_tensor(tmp_path / "f.npy", raw_as="bfloat16").dtype == np.float16


def test_raw_as_must_name_a_dtype(tmp_path: Path) -> None:
    np.save(tmp_path / "f.npy", np.ones(3, np.float16))
    with pytest.raises(BitprismError, match=r"raw_as='tf32' names a format with no numpy"):
        open_tensor(tmp_path / "f.npy", raw_as="tf32")


def _npy_bytes(descr: str, shape: tuple[int, ...], data: bytes) -> bytes:
    """A version 1.0 .npy file written by hand (numpy's format.rst): magic, version, header
    length, a dict literal padded with spaces and ending in a newline, then the data."""
    text = f"{{'descr': {descr!r}, 'fortran_order': False, 'shape': {shape!r}, }}"
    text += " " * (-(10 + len(text) + 1) % 64) + "\n"
    return b"\x93NUMPY\x01\x00" + struct.pack("<H", len(text)) + text.encode("latin1") + data


def _forbid_numpy_loaders(monkeypatch: pytest.MonkeyPatch) -> None:
    def forbidden(*args: Any, **kwargs: Any) -> None:
        raise AssertionError("numpy's array loader must not see an object array")

    monkeypatch.setattr(np, "load", forbidden)
    monkeypatch.setattr(np.lib.format, "read_array", forbidden)


def test_npy_object_array_is_refused_before_loading(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    # The payload is not even a pickle: the refusal comes from the header alone, before any
    # loader could try to unpickle it.
    path = tmp_path / "obj.npy"
    path.write_bytes(_npy_bytes("|O", (2,), b"not a pickle stream at all"))
    _forbid_numpy_loaders(monkeypatch)
    with pytest.raises(UnsupportedInputError, match=r"obj\.npy: holds Python objects .*never unpickles"):
        open_tensors(path)


def test_npy_truncated(tmp_path: Path) -> None:
    path = tmp_path / "cut.npy"
    path.write_bytes(_npy_bytes("<f4", (10,), bytes(12)))
    with pytest.raises(BitprismError, match=r"cut\.npy: is truncated: shape \[10\] of float32 needs 40 bytes after the 128-byte header, but only 12 follow"):
        open_tensor(path)


@pytest.mark.parametrize(
    "content, problem",
    [
        (b"", r"is not a readable \.npy array"),
        (b"\x93NUMPY", r"is not a readable \.npy array"),
        (b"NOTNUMPY" + bytes(100), r"is not a readable \.npy array"),
        (b"\x93NUMPY\x01\x00\x20\x00{'descr': 'zz', 'shape': (1,)}     \n", r"is not a readable \.npy array"),
        # a cut-short dictionary: numpy's header tokenizer raises its own error type
        (b"\x93NUMPY\x01\x00\x30\x00{'descr': '<f4', 'shape': (4, 5" + b" " * 23 + b"\n",
         r"is not a readable \.npy array \(its header dictionary is cut short"),
    ],
    ids=["empty", "magic-only", "bad-magic", "bad-descr", "unbalanced-brackets"],
)
def test_npy_malformed(tmp_path: Path, content: bytes, problem: str) -> None:
    path = tmp_path / "bad.npy"
    path.write_bytes(content)
    with pytest.raises(BitprismError, match=r"bad\.npy: " + problem):
        open_tensors(path)


def test_npy_big_endian_is_kept_as_stored(tmp_path: Path) -> None:
    data = np.array([1.5, -2.0], dtype=">f4")
    np.save(tmp_path / "be.npy", data)
    arr = open_tensor(tmp_path / "be.npy")
    assert arr.dtype == np.dtype(">f4") and arr.tolist() == [1.5, -2.0]


# ----- .npz ----------------------------------------------------------------------------------


def test_npz_uncompressed_members_are_memory_mapped(tmp_path: Path) -> None:
    a = np.arange(6, dtype=np.float32).reshape(2, 3)
    b = np.array([0x3F80], dtype=np.uint16)
    f = np.asfortranarray(np.arange(6.0).reshape(2, 3))
    np.savez(tmp_path / "p.npz", zeta=a, alpha=b, fort=f, empty=np.zeros((0,), np.float16), s=np.float64(3.0))
    tf = open_tensors(tmp_path / "p.npz")
    assert list(tf) == ["zeta", "alpha", "fort", "empty", "s"]  # archive order
    assert isinstance(tf["zeta"], np.memmap)
    np.testing.assert_array_equal(tf["zeta"], a)
    np.testing.assert_array_equal(tf["fort"], f)
    assert tf["empty"].shape == (0,) and tf["empty"].dtype == np.float16
    assert tf["s"].shape == () and float(tf["s"]) == 3.0
    assert tf["alpha"].tolist() == [0x3F80]


def test_npz_compressed_members_are_read_one_at_a_time(tmp_path: Path) -> None:
    a = np.linspace(-1, 1, 50, dtype=np.float64)
    buf = io.BytesIO()
    np.save(buf, a)
    path = tmp_path / "c.npz"
    with zipfile.ZipFile(path, "w", compression=zipfile.ZIP_DEFLATED) as zf:
        zf.writestr("good.npy", buf.getvalue())
        zf.writestr("broken.npy", b"\x93NUMPY garbage")
    tf = open_tensors(path)
    assert list(tf) == ["good", "broken"]
    np.testing.assert_array_equal(open_tensor(path, "good"), a)  # the broken member is never read
    with pytest.raises(BitprismError, match=r"c\.npz: member 'broken\.npy' is not a readable \.npy array"):
        tf["broken"]


def test_npz_ml_dtypes_need_raw_as(tmp_path: Path) -> None:
    bits = np.array([0x00, 0x7E, 0xFE, 0x7F], dtype=np.uint8)
    np.savez_compressed(tmp_path / "f8.npz", w=bits.view(ml_dtypes.float8_e4m3fn))
    with pytest.raises(BitprismError, match=r"f8\.npz: tensor 'w' is stored as raw 1-byte items"):
        open_tensor(tmp_path / "f8.npz")
    arr = open_tensor(tmp_path / "f8.npz", raw_as="float8_e4m3fn")
    assert arr.dtype == ml_dtypes.float8_e4m3fn and arr.view(np.uint8).tolist() == bits.tolist()


@pytest.mark.parametrize("compression", [zipfile.ZIP_STORED, zipfile.ZIP_DEFLATED], ids=["stored", "deflated"])
def test_npz_object_member_is_refused(tmp_path: Path, monkeypatch: pytest.MonkeyPatch, compression: int) -> None:
    path = tmp_path / "obj.npz"
    with zipfile.ZipFile(path, "w", compression=compression) as zf:
        zf.writestr("o.npy", _npy_bytes("|O", (1,), b"not a pickle"))
    _forbid_numpy_loaders(monkeypatch)
    with pytest.raises(UnsupportedInputError, match=r"obj\.npz: member 'o\.npy' holds Python objects"):
        open_tensor(path)


@pytest.mark.parametrize("compression", [zipfile.ZIP_STORED, zipfile.ZIP_DEFLATED], ids=["stored", "deflated"])
def test_npz_member_shape_larger_than_its_data(tmp_path: Path, compression: int) -> None:
    # A header claiming 10**12 float64 values in a tiny member is refused before any allocation.
    path = tmp_path / "lie.npz"
    with zipfile.ZipFile(path, "w", compression=compression) as zf:
        zf.writestr("x.npy", _npy_bytes("<f8", (10**12,), bytes(16)))
    with pytest.raises(BitprismError, match=r"lie\.npz: member 'x\.npy' has shape \[1000000000000\] of float64 \(8000000000000 bytes\) but 16 bytes of data"):
        open_tensor(path)


def test_npz_not_a_zip(tmp_path: Path) -> None:
    path = tmp_path / "fake.npz"
    path.write_bytes(b"this is not a zip archive")
    with pytest.raises(BitprismError, match=r"fake\.npz: is not a readable \.npz \(zip\) archive"):
        open_tensors(path)


def test_npz_needing_a_newer_zip_version(tmp_path: Path) -> None:
    # APPNOTE.TXT 4.3.12: the central directory entry (signature PK\x01\x02) holds "version
    # needed to extract" at offset 6; zipfile refuses versions above 6.3 with NotImplementedError
    np.savez(tmp_path / "v.npz", a=np.ones(3))
    data = bytearray((tmp_path / "v.npz").read_bytes())
    entry = data.index(b"PK\x01\x02")
    data[entry + 6 : entry + 8] = struct.pack("<H", 99)
    (tmp_path / "v.npz").write_bytes(bytes(data))
    with pytest.raises(BitprismError, match=r"v\.npz: is a \.npz \(zip\) archive this reader cannot open"):
        open_tensors(tmp_path / "v.npz")


def _valid_files() -> dict[str, bytes]:
    """One small valid file of each kind (and a compressed .npz), to damage."""
    npy, npz, npz_deflated = io.BytesIO(), io.BytesIO(), io.BytesIO()
    np.save(npy, np.linspace(-3, 3, 20, dtype=np.float32).reshape(4, 5))
    np.savez(npz, a=np.ones(7), c=np.zeros((2, 2), np.float32))
    np.savez_compressed(npz_deflated, a=np.ones(7), c=np.zeros((2, 2), np.float32))
    header = {"w": {"dtype": "F32", "shape": [3], "data_offsets": [0, 12]},
              "b": {"dtype": "F16", "shape": [2], "data_offsets": [12, 16]}}
    safetensors = safetensors_bytes(json.dumps(header).encode(),
                                    np.float32([1, 2, 3]).tobytes() + np.float16([4, 5]).tobytes())
    return {"a.npy": npy.getvalue(), "a.npz": npz.getvalue(), "z.npz": npz_deflated.getvalue(),
            "a.safetensors": safetensors}


_VALID = _valid_files()


@settings(max_examples=400, deadline=None)
@given(
    kind=st.sampled_from(sorted(_VALID)),
    edits=st.lists(
        st.tuples(
            st.sampled_from(["set", "cut", "insert"]),
            st.one_of(st.integers(0, 127), st.integers(0, 1 << 16)),  # headers come first
            st.one_of(st.binary(min_size=1, max_size=4),
                      st.sampled_from([b"(", b")", b"{", b"}", b"'", b'"', b":", b",", b"9", b"\xff"])),
        ),
        min_size=1, max_size=4,
    ),
)
def test_damaged_files_give_a_clear_error_or_read(tmp_path_factory: pytest.TempPathFactory, kind: str,
                                                  edits: list[tuple[str, int, bytes]]) -> None:
    # any damage to a valid file is either harmless or a BitprismError naming the file; never
    # a traceback from numpy, zipfile, json or struct (the bad-input rule)
    data = bytearray(_VALID[kind])
    for op, at, blob in edits:
        at %= len(data) + 1
        if op == "set" and at < len(data):
            data[at] = blob[0]
        elif op == "cut":
            del data[at:]
        else:
            data[at:at] = blob
    path = tmp_path_factory.mktemp("damaged") / kind
    path.write_bytes(bytes(data))
    try:
        tensors = open_tensors(path)
        for name in tensors:
            # every byte read; tobytes, not sum: a damaged descr may be a valid structured
            # dtype ('<f4,'), which the reader returns and as_array refuses later
            np.asarray(tensors[name]).tobytes()
    except BitprismError as exc:
        assert kind in str(exc)


def test_npz_truncated_archive(tmp_path: Path) -> None:
    np.savez(tmp_path / "t.npz", a=np.ones(100))
    path = tmp_path / "t.npz"
    path.write_bytes(path.read_bytes()[:300])
    with pytest.raises(BitprismError, match=r"t\.npz: "):
        open_tensor(path)


# ----- paths -----------------------------------------------------------------------------------


def test_missing_file(tmp_path: Path) -> None:
    with pytest.raises(BitprismError, match=r"nothere\.safetensors: no such file"):
        open_tensors(tmp_path / "nothere.safetensors")


def test_directory_is_not_a_file(tmp_path: Path) -> None:
    (tmp_path / "d.npz").mkdir()
    with pytest.raises(BitprismError, match=r"d\.npz: not a file"):
        open_tensors(tmp_path / "d.npz")


def test_unknown_suffix_is_sniffed_or_refused(tmp_path: Path) -> None:
    np.save(tmp_path / "w.npy", np.ones(2))
    (tmp_path / "w.bin").write_bytes((tmp_path / "w.npy").read_bytes())
    assert open_tensor(tmp_path / "w.bin").tolist() == [1.0, 1.0]
    (tmp_path / "notes.txt").write_text("hello")
    with pytest.raises(BitprismError, match=r"notes\.txt: unknown file kind '\.txt'; bitprism reads \.npy, \.npz, \.safetensors"):
        open_tensors(tmp_path / "notes.txt")


def test_path_must_be_text_or_pathlike() -> None:
    with pytest.raises(UnsupportedInputError, match=r"path must be a str or os\.PathLike, got bytes"):
        open_tensors(b"w.npy")  # type: ignore[arg-type]


def test_repr_lists_names(tmp_path: Path) -> None:
    path = write_safetensors(tmp_path / "r.safetensors", {"w": ("U8", [1], b"\x01")})
    assert repr(open_tensors(path)).endswith("safetensors, 1 tensor: 'w')")


# ----- issue 16: every dimension checked, odd names, non-regular files, streamed members -----

_BIG = 2**63  # one past numpy's largest dimension (npy_intp, int64 here)


@pytest.mark.parametrize(
    "shape, got",
    [
        # a zero dimension makes the product 0, so a size check alone let these through to
        # numpy, which then failed with its own errors (issue 16 item 9 reproducers)
        ((0, _BIG), str(_BIG)),
        ((True,), "True"),
        ((-1,), "-1"),
    ],
    ids=["zero-beside-2**63", "bool", "negative"],
)
def test_npy_every_dimension_is_checked(tmp_path: Path, shape: tuple[Any, ...], got: str) -> None:
    path = tmp_path / "d.npy"
    path.write_bytes(_npy_bytes("<f4", shape, bytes(4)))
    with pytest.raises(BitprismError, match=rf"d\.npy: has shape .*; expected a list of integers "
                                            rf">= 0 and below 2\*\*63, got {got}$"):
        open_tensors(path)


def test_npy_zero_size_with_huge_dimensions_follows_numpy(tmp_path: Path) -> None:
    # numpy's own rule (ctors.c, "array is too big"): the non-zero dimensions times the item size
    # must fit in npy_intp. The test asks numpy which shapes it builds and expects the same.
    for shape in [(0, 2**60), (0, 2**61), (0, 2**40, 2**40)]:
        path = tmp_path / "z.npy"
        path.write_bytes(_npy_bytes("<f4", shape, b""))
        try:
            np.zeros(shape, np.float32)
        except ValueError:
            with pytest.raises(BitprismError, match=r"z\.npy: has shape .* exceed numpy's limit"):
                open_tensors(path)
        else:
            arr = open_tensor(path)
            assert arr.shape == shape and arr.dtype == np.float32


def test_npy_more_dimensions_than_numpy_allows(tmp_path: Path) -> None:
    path = tmp_path / "m.npy"
    path.write_bytes(_npy_bytes("<f4", (1,) * 70, bytes(4)))
    with pytest.raises(BitprismError, match=r"m\.npy: has 70 dimensions; numpy allows at most"):
        open_tensors(path)


@pytest.mark.parametrize("compression", [zipfile.ZIP_STORED, zipfile.ZIP_DEFLATED], ids=["stored", "deflated"])
def test_npz_member_every_dimension_is_checked(tmp_path: Path, compression: int) -> None:
    path = tmp_path / "m.npz"
    with zipfile.ZipFile(path, "w", compression=compression) as zf:
        zf.writestr("a.npy", _npy_bytes("<f4", (0, _BIG), b""))
    with pytest.raises(BitprismError, match=r"m\.npz: member 'a\.npy' has shape \[0, 9223372036854775808\]"):
        open_tensor(path)


@pytest.mark.parametrize(
    "shape, problem",
    [
        ([0, 10**30], r"has shape \[0, 10{30}\]; expected a list of integers >= 0 and below 2\*\*63"),
        ([2**31, 2**31, 2**31, 0], r"has shape \[2147483648, 2147483648, 2147483648, 0\]: "
                                   r"9903520314283042199192993792 items of 4 bytes .* exceed numpy's limit"),
    ],
    ids=["zero-beside-1e30", "zero-beside-2**93"],
)
def test_safetensors_zero_dimension_does_not_hide_the_others(tmp_path: Path, shape: list[int],
                                                             problem: str) -> None:
    path = write_raw_safetensors(
        tmp_path / "z.safetensors",
        json.dumps({"a": {"dtype": "F32", "shape": shape, "data_offsets": [0, 0]}}).encode(),
    )
    with pytest.raises(BitprismError, match=r"z\.safetensors: tensor 'a' " + problem):
        open_tensors(path)


@pytest.mark.parametrize("where", ["shape", "metadata"])
def test_safetensors_huge_integer_is_refused_while_parsing(tmp_path: Path, where: str) -> None:
    # Python refuses int() of more than sys.int_info.default_max_str_digits digits (4300; Python
    # docs, "Integer string conversion length limitation") with a bare ValueError
    digits = sys.int_info.default_max_str_digits + 1
    huge = "9" * digits
    if where == "shape":
        text = '{"a": {"dtype": "F32", "shape": [%s], "data_offsets": [0, 0]}}' % huge
    else:
        text = '{"__metadata__": {"n": %s}, "a": {"dtype": "F32", "shape": [0], "data_offsets": [0, 0]}}' % huge
    path = write_raw_safetensors(tmp_path / "h.safetensors", text.encode())
    with pytest.raises(BitprismError, match=rf"h\.safetensors: header holds an integer of {digits} digits"):
        open_tensors(path)


def test_safetensors_names_are_kept_as_written(tmp_path: Path) -> None:
    # JSON strings may hold any code point, lone surrogates included (RFC 8259 §7 allows the
    # escape); the reader keeps them, and the command line escapes them when it prints
    header = b'{"\\ud800": {"dtype": "U8", "shape": [1], "data_offsets": [0, 1]}, ' \
             b'"\\u001b[31m\\nfails: none": {"dtype": "U8", "shape": [1], "data_offsets": [1, 2]}}'
    path = write_raw_safetensors(tmp_path / "n.safetensors", header, b"\x01\x02")
    assert list(open_tensors(path)) == ["\ud800", "\x1b[31m\nfails: none"]


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="needs POSIX named pipes")
@pytest.mark.parametrize("name", ["pipe", "pipe.npy", "pipe.safetensors"])
def test_fifo_is_refused_before_it_is_opened(tmp_path: Path, name: str) -> None:
    # opening a FIFO for reading blocks until a writer comes; run in a subprocess so a
    # regression shows as a timeout, not a hung suite
    os.mkfifo(tmp_path / name)
    code = ("import sys\nfrom bitprism.tensors.files import open_tensors\n"
            "from bitprism.errors import BitprismError\n"
            "try:\n    open_tensors(sys.argv[1])\nexcept BitprismError as exc:\n    print(exc)\n")
    done = subprocess.run([sys.executable, "-c", code, str(tmp_path / name)], capture_output=True,
                          text=True, timeout=30)
    assert f"{name}: not a file: it is a FIFO (named pipe)" in done.stdout, done.stderr


@pytest.mark.skipif(not os.path.exists("/dev/null"), reason="needs /dev/null")
def test_device_behind_a_symlink_is_refused(tmp_path: Path) -> None:
    os.symlink("/dev/null", tmp_path / "w.npy")
    with pytest.raises(BitprismError, match=r"w\.npy: not a file: it is a character device"):
        open_tensors(tmp_path / "w.npy")


def test_dangling_symlink_says_so(tmp_path: Path) -> None:
    os.symlink(tmp_path / "gone.npy", tmp_path / "w.npy")
    with pytest.raises(BitprismError, match=r"w\.npy: no such file \(a symbolic link to a missing file\)"):
        open_tensors(tmp_path / "w.npy")


def test_path_with_control_characters_is_shown_escaped(tmp_path: Path) -> None:
    path = tmp_path / "a\x1b[2Jb\n.npy"
    with pytest.raises(BitprismError) as info:
        open_tensors(path)
    assert "a\\x1b[2Jb\\n.npy: no such file" in str(info.value)


def _deflated_npz(path: Path, arr: np.ndarray, method: int = zipfile.ZIP_DEFLATED) -> None:
    with zipfile.ZipFile(path, "w", compression=method) as zf:
        with zf.open("a.npy", "w", force_zip64=True) as f:
            np.lib.format.write_array(f, arr)


def test_npz_compressed_member_is_streamed_into_a_mapped_file(tmp_path: Path) -> None:
    a = np.arange(3 * 5, dtype=np.float32).reshape(3, 5)
    for order, arr in (("C", a), ("F", np.asfortranarray(a))):
        path = tmp_path / f"{order}.npz"
        _deflated_npz(path, arr)
        tf = open_tensors(path)
        got = tf["a"]
        assert isinstance(got, np.memmap) and not got.flags.writeable
        np.testing.assert_array_equal(got, a)  # numpy's own writer made the member
        assert got.flags.f_contiguous == (order == "F")
        tf.release("a")
        assert tf["a"] is not got  # read again after release


def test_npz_compressed_member_keeps_bits(tmp_path: Path) -> None:
    bits = np.arange(1 << 16, dtype=np.uint16)  # every float16 pattern, NaN payloads included
    path = tmp_path / "b.npz"
    np.savez_compressed(path, h=bits.view(np.float16))
    assert open_tensor(path).view(np.uint16).tolist() == bits.tolist()


def test_npz_compressed_zero_size_member(tmp_path: Path) -> None:
    path = tmp_path / "e.npz"
    np.savez_compressed(path, e=np.zeros((0, 3), np.float16))
    arr = open_tensor(path)
    assert arr.shape == (0, 3) and arr.dtype == np.float16


def test_npz_ratio_cap(tmp_path: Path) -> None:
    zeros = np.zeros(1 << 20, np.float32)
    path = tmp_path / "bz.npz"
    _deflated_npz(path, zeros, zipfile.ZIP_BZIP2)  # bzip2 packs zeros far beyond 1100:1
    info = zipfile.ZipFile(path).infolist()[0]
    ratio = info.file_size / info.compress_size
    assert ratio > 1100
    with pytest.raises(BitprismError, match=r"bz\.npz: member 'a\.npy' declares \d+ bytes from \d+ "
                                            r"compressed \(more than 1100 times as many\)"):
        open_tensor(path)
    assert not open_tensor(path, max_ratio=None).any()
    assert not open_tensor(path, max_ratio=ratio + 1).any()
    np.savez_compressed(tmp_path / "d.npz", z=np.zeros(1 << 22, np.float32))  # deflate's best
    assert not open_tensor(tmp_path / "d.npz").any()


@pytest.mark.parametrize("bad", [0, 0.5, -3, float("nan"), True, "10", [1]])
def test_max_ratio_must_be_a_number_of_at_least_one(tmp_path: Path, bad: Any) -> None:
    np.save(tmp_path / "w.npy", np.ones(2))
    with pytest.raises(BitprismError, match=r"max_ratio must be a number >= 1 .* or None for no cap; got"):
        open_tensors(tmp_path / "w.npy", max_ratio=bad)


@pytest.mark.skipif(sys.platform != "linux", reason="reads the peak resident set of a Linux process")
def test_npz_compressed_member_is_not_decompressed_in_memory(tmp_path: Path) -> None:
    # 256 MiB of float32 deflated to about 1 MiB. Before, opening the member allocated all of it
    # (numpy.lib.format.read_array); now it goes to a temporary file in 4 MiB chunks.
    n = (256 << 20) // 4
    path = tmp_path / "big.npz"
    header = io.BytesIO()
    np.lib.format.write_array_header_1_0(header, {"descr": "<f4", "fortran_order": False, "shape": (n,)})
    with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as zf, zf.open("w.npy", "w", force_zip64=True) as f:
        f.write(header.getvalue())
        block = np.zeros(1 << 22, np.float32)
        block[:: 1 << 12] = 1.5
        for _ in range(n // block.size):
            f.write(block.tobytes())
    # VmHWM (peak resident set of this process image, proc(5)); ru_maxrss would carry the
    # peak of the pytest process the child was forked from across exec
    code = (
        "import re, sys\n"
        "def peak():\n"
        "    return int(re.search(r'VmHWM:\\s+(\\d+)', open('/proc/self/status').read())[1])\n"
        "from bitprism.tensors.files import open_tensor\n"
        "before = peak()\n"
        "arr = open_tensor(sys.argv[1])\n"
        "assert arr.shape == (%d,) and float(arr[1 << 12]) == 1.5\n"
        "print((peak() - before) // 1024)\n" % n
    )
    done = subprocess.run([sys.executable, "-c", code, str(path)], capture_output=True, text=True,
                          timeout=300)
    assert done.returncode == 0, done.stderr
    assert int(done.stdout.split()[-1]) < 48, done.stdout  # MiB; before: 256 and more
