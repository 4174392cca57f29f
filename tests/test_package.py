"""Package-level promises: the public surface, the version, and a numeric core free of UI."""

from __future__ import annotations

import subprocess
import sys

import bitprism


def last_line_of(code: str) -> str:
    """The last line a fresh interpreter prints running ``code`` (which must succeed)."""
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    return done.stdout.strip().splitlines()[-1] if done.stdout.strip() else ""


def test_all_is_sorted_and_resolves() -> None:
    # httpx/attrs practice (common practice): one sorted __all__, every name importable
    assert list(bitprism.__all__) == sorted(bitprism.__all__)
    for name in bitprism.__all__:
        assert getattr(bitprism, name) is not None, name


def test_version_is_a_release_string() -> None:
    parts = bitprism.__version__.split(".")
    assert len(parts) >= 2 and all(p.isdigit() for p in parts[:2])


def test_import_does_not_load_ui_or_plotting_libraries() -> None:
    # design.md: the numeric core must be usable in a script, a test or a CI job
    code = (
        "import sys, bitprism, numpy as np\n"
        "bitprism.encode(np.float32([0.1]), 'e4m3'); bitprism.parse('2**-24')\n"
        "bad = sorted(m for m in sys.modules if m.split('.')[0] in "
        "('ipywidgets', 'IPython', 'matplotlib', 'torch', 'jax', 'dask'))\n"
        "print(','.join(bad))\n"
    )
    assert last_line_of(code) == ""


def test_ml_dtypes_is_imported_only_when_needed() -> None:
    # importing ml_dtypes takes most of a second; values, float16/32/64 arrays and .npy files of
    # them never need it, while an ml_dtypes input, a safetensors BF16 tensor or
    # Format.dtype of an 8-bit format load it (common practice: lazy imports for start-up time)
    code = (
        "import sys, tempfile, os, numpy as np, bitprism as bp\n"
        "from bitprism.cli import main\n"
        "x = np.float32([0.1, 65520, 1e-9, np.nan])\n"
        "bp.compare('65520', ['float16', 'bfloat16', 'float8_e4m3fn', 'float4_e2m1fn'])\n"
        "bp.encode(x, 'bfloat16'); bp.get_format(np.float16); bp.get_format(np.dtype('float32'))\n"
        "bp.scan(x, ['bfloat16', 'float8_e5m2'], progress=False)\n"
        "path = os.path.join(tempfile.mkdtemp(), 'x.npy'); np.save(path, x)\n"
        "main(['scan', path, '--formats', 'float16,float8_e4m3fn', '--no-progress'])\n"
        "before = 'ml_dtypes' in sys.modules\n"
        "dt = bp.get_format('float8_e4m3fn').dtype\n"
        "print(before, 'ml_dtypes' in sys.modules, dt)\n"
    )
    assert last_line_of(code) == "False True float8_e4m3fn"


def test_packaging_metadata_uses_an_spdx_license_string() -> None:
    # PEP 639 (license as an SPDX expression); setuptools 77+ reads it and warns that the older
    # table form ({ text = ... }) stops working in February 2027
    tomllib = __import__("pytest").importorskip("tomllib")
    from pathlib import Path

    meta = tomllib.loads((Path(__file__).resolve().parents[1] / "pyproject.toml").read_text())
    assert meta["project"]["license"] == "Apache-2.0"
    assert any(r.startswith("setuptools>=77") for r in meta["build-system"]["requires"])
