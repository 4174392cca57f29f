"""Every example notebook runs top to bottom in a fresh kernel (nbclient), as CI promises."""

from __future__ import annotations

from pathlib import Path

import nbformat
import pytest
from nbclient import NotebookClient

NOTEBOOKS = sorted((Path(__file__).resolve().parents[1] / "example_notebooks").glob("*.ipynb"))


def test_there_are_example_notebooks() -> None:
    assert NOTEBOOKS, "example_notebooks/ must hold at least one notebook"


@pytest.mark.parametrize("path", NOTEBOOKS, ids=[p.stem for p in NOTEBOOKS])
def test_notebook_runs(path: Path, tmp_path: Path) -> None:
    nb = nbformat.read(path, as_version=4)
    for cell in nb.cells:  # stored without outputs: outputs are regenerated here
        if cell.cell_type == "code":
            assert not cell.get("outputs"), f"{path.name}: store notebooks without outputs"
    client = NotebookClient(
        nb, timeout=300, kernel_name="python3", resources={"metadata": {"path": str(tmp_path)}}
    )
    client.execute()
    errors = [
        out
        for cell in nb.cells
        if cell.cell_type == "code"
        for out in cell.get("outputs", [])
        if out.get("output_type") == "error"
    ]
    assert not errors
