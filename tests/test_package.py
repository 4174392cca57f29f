"""Package-level promises: the public surface, the version, and a numeric core free of UI."""

from __future__ import annotations

import subprocess
import sys

import bitprism


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
    out = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, check=True
    ).stdout.strip()
    assert out == ""
