"""The package type-checks: ``python -m mypy widgets/bitprism`` (config in pyproject) is clean."""

from __future__ import annotations

import importlib.util
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


def test_mypy_clean():
    if importlib.util.find_spec("mypy") is None:
        pytest.skip("mypy is not installed (pip install -e '.[test]' brings it)")
    proc = subprocess.run(
        [sys.executable, "-m", "mypy", "widgets/bitprism"],
        cwd=ROOT,
        capture_output=True,
        text=True,
        timeout=600,
    )
    output = proc.stdout + proc.stderr
    print(output)
    assert proc.returncode == 0, f"mypy reported errors:\n{output}"
