"""Crafted bad files through the readers, the scan and the command line (issue 16, items 9, 10).

Each case is a file written here from the format's documentation (numpy's format.rst for
.npy, APPNOTE.TXT through ``zipfile`` for .npz, the safetensors format documentation), or a
path that is not a regular file. Through the API, every case either reads cleanly or raises a
``BitprismError`` that names the file (warnings are errors in this suite). Through ``bitprism
scan`` in a subprocess (every warning shown, a timeout of a few seconds), a bad file exits 2
with one line on stderr and no traceback, and a good one exits 0 or 1 with nothing on stderr
and its names escaped.
"""

from __future__ import annotations

import bz2
import json
import os
import socket
import struct
import subprocess
import sys
import zipfile
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

import numpy as np
import pytest

from bitprism.errors import BitprismError
from bitprism.tensors.adapters import as_array
from bitprism.tensors.file_checks import printable
from bitprism.tensors.files import open_tensors
from bitprism.tensors.scan import scan

WIDGETS = str(Path(__file__).resolve().parents[1] / "widgets")
POSIX = os.name == "posix"
CLI_TIMEOUT = 10  # seconds; every case takes well under one (a hang is the failure looked for)


def npy_bytes(descr: str, shape: str, data: bytes = b"", fortran: bool = False,
              version: tuple[int, int] = (1, 0)) -> bytes:
    """A .npy file by hand (numpy's format.rst): magic, version, header length, a dict literal
    padded with spaces to a multiple of 64 and ending in a newline, then the data. ``shape`` is
    the literal's text, so it can say what numpy would never write."""
    text = f"{{'descr': {descr!r}, 'fortran_order': {fortran}, 'shape': {shape}, }}"
    size = 4 if version == (1, 0) else 6
    text += " " * (-(8 + size + len(text) + 1) % 64) + "\n"
    length = struct.pack("<H" if size == 4 else "<I", len(text))
    return b"\x93NUMPY" + bytes(version) + length + text.encode("latin1") + data


def safetensors_bytes(header: bytes | dict, data: bytes = b"") -> bytes:
    """8-byte little-endian header length, the JSON header padded with spaces, the data."""
    raw = header if isinstance(header, bytes) else json.dumps(header).encode()
    raw += b" " * (-len(raw) % 8)
    return struct.pack("<Q", len(raw)) + raw + data


def zip_bytes(path: Path, members: dict[str, bytes], method: int = zipfile.ZIP_DEFLATED) -> None:
    with zipfile.ZipFile(path, "w", compression=method) as zf:
        for name, data in members.items():
            zf.writestr(name, data)


@dataclass(frozen=True)
class Case:
    name: str  # the file's name (its suffix chooses the reader)
    make: Callable[[Path], None]  # writes the file (or what the path names) at the given path
    bad: bool  # True: refused (exit 2); False: read (exit 0 or 1)
    posix_only: bool = False


def write(data: bytes) -> Callable[[Path], None]:
    return lambda p: p.write_bytes(data)


def npz(members: dict[str, bytes], method: int = zipfile.ZIP_DEFLATED) -> Callable[[Path], None]:
    return lambda p: zip_bytes(p, members, method)


def _crc_damaged(p: Path) -> None:
    # a deflated member whose stored CRC-32 no longer matches its data (a stored member is
    # mapped in place, never read whole, so its CRC is not checked)
    zip_bytes(p, {"a.npy": npy_bytes("<f4", "(4,)", F32)})
    data = bytearray(p.read_bytes())
    for sig, at in ((b"PK\x03\x04", 14), (b"PK\x01\x02", 16)):  # CRC-32 field of both headers
        i = data.index(sig)
        data[i + at] ^= 0xFF
    p.write_bytes(bytes(data))


def _encrypted_flag(p: Path) -> None:
    zip_bytes(p, {"a.npy": npy_bytes("<f4", "(1,)", bytes(4))})
    data = bytearray(p.read_bytes())
    for sig, at in ((b"PK\x03\x04", 6), (b"PK\x01\x02", 8)):  # general purpose bit 0: encrypted
        i = data.index(sig)
        data[i + at] |= 1
    p.write_bytes(bytes(data))


def _symlink(target: str) -> Callable[[Path], None]:
    return lambda p: os.symlink(target, p)


def _symlink_to_good(p: Path) -> None:
    good = p.with_name("target.npy")
    np.save(good, np.float32([1, 2]))
    os.symlink(good, p)


def _loop(p: Path) -> None:
    os.symlink(p.with_name("loop_b"), p)
    os.symlink(p, p.with_name("loop_b"))


def _socket(p: Path) -> None:
    s = socket.socket(socket.AF_UNIX)
    s.bind(os.fspath(p))
    s.close()


ZEROS = npy_bytes("<f4", f"({1 << 22},)", bytes(1 << 24))  # 16 MiB of zeros
F32 = np.float32([1.0, -2.0, np.inf, np.nan]).tobytes()

CASES = [
    # ----- .npy
    Case("good.npy", write(npy_bytes("<f4", "(4,)", F32)), False),
    Case("truncated.npy", write(npy_bytes("<f4", "(10,)", bytes(12))), True),
    Case("cut_header.npy", write(npy_bytes("<f4", "(4,)")[:30]), True),
    Case("zero_beside_2_63.npy", write(npy_bytes("<f4", f"(0, {2**63})")), True),
    Case("zero_beside_huge.npy", write(npy_bytes("<f4", f"(0, {2**62}, {2**62})")), True),
    Case("bool_dim.npy", write(npy_bytes("<f4", "(True,)", bytes(4))), True),
    Case("negative_dim.npy", write(npy_bytes("<f4", "(-1,)", bytes(4))), True),
    Case("too_many_dims.npy", write(npy_bytes("<f4", "(" + "1, " * 80 + ")", bytes(4))), True),
    Case("huge_int_dim.npy", write(npy_bytes("<f4", "(" + "9" * 5000 + ",)")), True),
    Case("zero_size.npy", write(npy_bytes("<f4", f"(0, {2**40})")), False),
    Case("bad_descr.npy", write(npy_bytes("zz", "(1,)", bytes(4))), True),
    Case("object.npy", write(npy_bytes("|O", "(1,)", b"not a pickle")), True),
    Case("text.npy", write(npy_bytes("<U2", "(1,)", bytes(8))), True),
    Case("complex.npy", write(npy_bytes("<c8", "(1,)", bytes(8))), True),
    Case("void.npy", write(npy_bytes("|V2", "(2,)", bytes(4))), True),
    Case("void0.npy", write(npy_bytes("|V0", "(3,)")), True),
    Case("structured.npy", write(npy_bytes("[('a', '<f4')]", "(1,)", bytes(4))), True),
    Case("version3.npy", write(npy_bytes("<f4", "(1,)", bytes(4), version=(3, 0))), True),
    Case("fortran.npy", write(npy_bytes("<f4", "(2, 2)", F32, fortran=True)), False),
    Case("version2.npy", write(npy_bytes("<f4", "(4,)", F32, version=(2, 0))), False),
    # ----- .npz
    Case("stored_zero_beside_2_63.npz",
         npz({"a.npy": npy_bytes("<f4", f"(0, {2**63})")}, zipfile.ZIP_STORED), True),
    Case("deflated_zero_beside_2_63.npz", npz({"a.npy": npy_bytes("<f4", f"(0, {2**63})")}), True),
    Case("deflated_bool_dim.npz", npz({"a.npy": npy_bytes("<f4", "(True,)", bytes(4))}), True),
    Case("deflated_short.npz", npz({"a.npy": npy_bytes("<f4", "(8,)", bytes(8))}), True),
    Case("deflated_good.npz", npz({"a.npy": npy_bytes("<f4", "(4,)", F32)}), False),
    # zeros deflated about 1000:1: a bomb within the cap, read through a temporary file
    Case("zip_bomb_within_cap.npz", npz({"z.npy": ZEROS}), False),
    # the same zeros under bzip2 expand about 10**5 times: beyond the cap, refused unread
    Case("bzip2_bomb.npz", npz({"z.npy": ZEROS}, zipfile.ZIP_BZIP2), True),
    Case("crc_damaged.npz", _crc_damaged, True),
    Case("encrypted.npz", _encrypted_flag, True),
    Case("duplicate_members.npz",
         npz({"a.npy": npy_bytes("<f4", "(1,)", bytes(4)), "a": npy_bytes("<f4", "(1,)", bytes(4))}),
         True),
    Case("escape_member_name.npz",
         npz({"\x1b[31mred\nfails: none.npy": npy_bytes("<f4", "(4,)", F32)}), False),
    Case("not_a_zip.npz", write(b"PK\x03\x04 but nothing else"), True),
    # ----- .safetensors
    Case("zero_beside_1e30.safetensors",
         write(safetensors_bytes({"a": {"dtype": "F32", "shape": [0, 10**30], "data_offsets": [0, 0]}})),
         True),
    Case("zero_beside_2_31_cubed.safetensors",
         write(safetensors_bytes({"a": {"dtype": "F32", "shape": [2**31, 2**31, 2**31, 0],
                                        "data_offsets": [0, 0]}})), True),
    Case("huge_int.safetensors",
         write(safetensors_bytes(('{"a": {"dtype": "F32", "shape": [%s], "data_offsets": [0, 0]}}'
                                  % ("9" * 5000)).encode())), True),
    Case("float_shape.safetensors",
         write(safetensors_bytes(b'{"a": {"dtype": "F32", "shape": [1e400], "data_offsets": [0, 0]}}')),
         True),
    Case("nan_shape.safetensors",
         write(safetensors_bytes(b'{"a": {"dtype": "F32", "shape": [NaN], "data_offsets": [0, 0]}}')),
         True),
    Case("bool_shape.safetensors",
         write(safetensors_bytes({"a": {"dtype": "F32", "shape": [True], "data_offsets": [0, 4]}},
                                 bytes(4))), True),
    Case("surrogate_name.safetensors",
         write(safetensors_bytes(b'{"\\ud800": {"dtype": "F32", "shape": [4], "data_offsets": [0, 16]}}',
                                 F32)), False),
    Case("escape_name.safetensors",
         write(safetensors_bytes({"\x1b[2J\nfails: none\r": {"dtype": "F32", "shape": [4],
                                                             "data_offsets": [0, 16]}}, F32)), False),
    Case("empty_name.safetensors",
         write(safetensors_bytes({"": {"dtype": "F32", "shape": [4], "data_offsets": [0, 16]}}, F32)),
         False),
    Case("deep.safetensors", write(safetensors_bytes(b"[" * 100_000 + b"]" * 100_000)), True),
    Case("header_past_end.safetensors", write(struct.pack("<Q", 1 << 40) + b"{}"), True),
    Case("bad_dtype.safetensors",
         write(safetensors_bytes({"a": {"dtype": "F4", "shape": [2], "data_offsets": [0, 1]}}, b"\0")),
         True),
    # ----- paths that are not regular files
    Case("directory.npy", lambda p: p.mkdir(), True),
    Case("fifo.npy", lambda p: os.mkfifo(p), True, posix_only=True),
    Case("fifo_no_suffix", lambda p: os.mkfifo(p), True, posix_only=True),
    Case("device.npy", _symlink("/dev/null"), True, posix_only=True),
    Case("device_no_suffix", _symlink("/dev/zero"), True, posix_only=True),
    Case("socket.npy", _socket, True, posix_only=True),
    Case("dangling.npy", _symlink("nowhere.npy"), True, posix_only=True),
    Case("loop.npy", _loop, True, posix_only=True),
    Case("link_to_good.npy", _symlink_to_good, False, posix_only=True),
    Case("missing.safetensors", lambda p: None, True),
    Case("unknown_suffix.txt", write(b"hello"), True),
]


@pytest.fixture(scope="module")
def made(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    out = {}
    for case in CASES:
        if case.posix_only and not POSIX:
            continue
        path = tmp_path_factory.mktemp("h", numbered=True) / case.name
        case.make(path)
        out[case.name] = path
    return out


def _names_the_file(message: str, path: Path) -> bool:
    return printable(path.name) in message


@pytest.mark.parametrize("case", CASES, ids=[c.name for c in CASES])
def test_api_reads_cleanly_or_names_the_file(made: dict[str, Path], case: Case) -> None:
    # warnings are errors in this suite (pyproject filterwarnings), so a numpy RuntimeWarning
    # on the way fails the case too
    if case.name not in made:
        pytest.skip("needs POSIX file kinds")
    path = made[case.name]
    try:
        tensors = open_tensors(path)
        for name in tensors:
            tensors[name]
            # as_array names the file in its refusals; the scan then reads what it accepted
            arr = as_array(path, name=name)
            scan(arr, ["float16", "float8_e4m3fn", "mxfp4"], progress=False)
    except BitprismError as exc:
        assert case.bad, f"{case.name} should read: {exc}"
        assert _names_the_file(str(exc), path), str(exc)
    else:
        assert not case.bad, f"{case.name} should be refused"


def _run_cli(path: Path) -> subprocess.CompletedProcess[str]:
    env = dict(os.environ, PYTHONPATH=WIDGETS, PYTHONIOENCODING="utf-8")
    return subprocess.run(
        # every warning shown, none turned into an exception a broad ``except`` could swallow
        [sys.executable, "-W", "always", "-m", "bitprism.cli", "scan", os.fspath(path),
         "--formats", "fp16,e4m3,mxfp4", "--no-progress", "--fail-on", "nan"],
        capture_output=True, text=True, env=env, timeout=CLI_TIMEOUT, cwd=path.parent,
        errors="backslashreplace",
    )


@pytest.fixture(scope="module")
def cli_runs(made: dict[str, Path]) -> dict[str, subprocess.CompletedProcess[str] | str]:
    """Every case through the command line, two at a time (the machine has two cores)."""

    def one(name: str) -> subprocess.CompletedProcess[str] | str:
        try:
            return _run_cli(made[name])
        except subprocess.TimeoutExpired:
            return f"no answer within {CLI_TIMEOUT} s"

    with ThreadPoolExecutor(2) as pool:
        return dict(zip(made, pool.map(one, list(made))))


@pytest.mark.slow
@pytest.mark.parametrize("case", CASES, ids=[c.name for c in CASES])
def test_cli_answers_each_file_in_one_line(cli_runs: dict, made: dict[str, Path], case: Case) -> None:
    if case.name not in cli_runs:
        pytest.skip("needs POSIX file kinds")
    done = cli_runs[case.name]
    assert not isinstance(done, str), done  # no hang
    assert "Traceback" not in done.stderr and "Warning" not in done.stderr, done.stderr
    if case.bad:
        assert done.returncode == 2, (done.returncode, done.stdout, done.stderr)
        lines = done.stderr.splitlines()
        assert len(lines) == 1 and done.stdout == "", done.stderr
        assert _names_the_file(lines[0], made[case.name]), lines[0]
        assert len(lines[0]) < 1000, lines[0]  # a header quoted whole would not be one line
    else:
        assert done.returncode in (0, 1) and done.stderr == "", done.stderr
        for line in done.stdout.splitlines():  # names reach the terminal escaped
            assert line.isprintable(), repr(line)
        assert "\nfails: none" not in done.stdout


def test_compressed_bomb_beyond_the_cap_reads_when_allowed(tmp_path: Path) -> None:
    # the way around the cap: max_ratio=None (``--max-ratio 0``) reads the member, and its
    # values are the zeros written (bz2, the standard library, made the member)
    path = tmp_path / "bomb.npz"
    zip_bytes(path, {"z.npy": npy_bytes("<f4", f"({1 << 20},)", bytes(1 << 22))}, zipfile.ZIP_BZIP2)
    info = zipfile.ZipFile(path).infolist()[0]
    assert info.file_size > 1100 * info.compress_size
    assert len(bz2.compress(bytes(1 << 22))) * 1100 < 1 << 22  # bzip2 expands beyond the cap
    with pytest.raises(BitprismError, match=r"bomb\.npz: member 'z\.npy' declares .* refused as a "
                                             r"likely decompression bomb.*max_ratio=None"):
        open_tensors(path)["z"]
    arr = open_tensors(path, max_ratio=None)["z"]
    assert arr.shape == (1 << 20,) and not arr.any()
