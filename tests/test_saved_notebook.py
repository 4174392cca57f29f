"""A saved notebook shows a widget's last view without a kernel: the display output carries a
static HTML snapshot next to the widget view, updated (throttled) as the view changes."""

from __future__ import annotations

import subprocess
import sys
import time
from html.parser import HTMLParser
from pathlib import Path
from typing import Any

import nbformat
import pytest

from bitprism.ui import snapshots
from bitprism.ui.prism import Prism

WIDGET_VIEW = "application/vnd.jupyter.widget-view+json"


# ----- throttle, headless (display functions replaced by recorders) ----------------------------
class _Recorder:
    def __init__(self) -> None:
        self.shown: list[tuple[dict[str, Any], str]] = []
        self.updates: list[tuple[dict[str, Any], str]] = []

    def display(self, bundle: dict[str, Any], raw: bool, display_id: str) -> None:
        assert raw
        self.shown.append((bundle, display_id))

    def update_display(self, bundle: dict[str, Any], raw: bool, display_id: str) -> None:
        assert raw
        self.updates.append((bundle, display_id))


@pytest.fixture()
def recorder(monkeypatch: pytest.MonkeyPatch) -> _Recorder:
    import IPython.display

    rec = _Recorder()
    monkeypatch.setattr(IPython.display, "display", rec.display)
    monkeypatch.setattr(IPython.display, "update_display", rec.update_display)
    return rec


def test_display_bundle_has_widget_view_text_and_snapshot(recorder: _Recorder) -> None:
    p = Prism("0.1", formats=["float32", "float16"])
    p._ipython_display_()
    (bundle, display_id), = recorder.shown
    assert bundle[WIDGET_VIEW]["model_id"] == p.model_id
    assert bundle["text/plain"]
    assert bundle["text/html"] == p._static_html()
    assert display_id


def test_changes_are_throttled_with_a_final_update(
    recorder: _Recorder, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setattr(snapshots, "SNAPSHOT_INTERVAL", 0.3)
    p = Prism("0.1", formats=["float32", "float16"])
    p._ipython_display_()
    for v in ["0.2", "0.3", "0.4", "0.5"]:  # all within one interval of the display
        p.value = v
    assert recorder.updates == []  # throttled: nothing yet
    deadline = time.monotonic() + 5
    while not recorder.updates and time.monotonic() < deadline:
        time.sleep(0.05)
    (bundle, display_id), = recorder.updates  # one final update, of the last view
    assert display_id == recorder.shown[0][1]
    assert bundle["text/html"] == p._static_html() and "0.5" in bundle["text/html"]
    time.sleep(0.35)  # the interval has passed: the next change is published at once
    p.value = "0.75"
    assert len(recorder.updates) == 2 and "0.75" in recorder.updates[1][0]["text/html"]


def test_undisplayed_widget_publishes_nothing(recorder: _Recorder) -> None:
    p = Prism("0.1")
    p.value = "0.2"
    assert recorder.shown == [] and recorder.updates == []


# ----- a real kernel: execute, save, convert -----------------------------------------------------
CELLS = [
    "import bitprism\np = bitprism.Prism('0.1', ['float32', 'bfloat16', 'float16'])\np",
    "p.value = '0.2'",
    "for v in ['0.3', '1/3', '65504 * 2']:\n    p.value = v\np.overflow = 'saturate'",
]


def _expected_last_view() -> str:
    p = Prism("65504 * 2", ["float32", "bfloat16", "float16"])
    p.overflow = "saturate"
    return p._static_html()


def test_saved_notebook_shows_last_view(tmp_path: Path) -> None:
    from nbclient import NotebookClient

    nb = nbformat.v4.new_notebook()
    nb.metadata["kernelspec"] = {"name": "python3", "display_name": "Python 3",
                                 "language": "python"}
    nb.cells = [nbformat.v4.new_code_cell(src) for src in CELLS]
    # Saved as JupyterLab saves by default ("Save Widget State Automatically" off): outputs
    # only, no widget state, which is exactly when the static snapshot is all a reader has.
    NotebookClient(
        nb, timeout=120, kernel_name="python3", store_widget_state=False,
        resources={"metadata": {"path": str(tmp_path)}},
    ).execute()
    path = tmp_path / "saved.ipynb"
    nbformat.write(nb, path)

    outputs = nb.cells[0].outputs
    assert [o.output_type for o in outputs] == ["display_data"]
    data = outputs[0].data
    assert WIDGET_VIEW in data and "text/plain" in data
    expected = _expected_last_view()
    assert data["text/html"] == expected  # the LAST view, not the first
    assert "65504 * 2" in expected and "0.1</code>" not in expected
    assert all(not c.outputs for c in nb.cells[1:])

    try:
        import nbconvert  # noqa: F401
    except ImportError:
        pytest.skip("nbconvert is not installed (it is in the 'test' extra): pip install nbconvert")
    done = subprocess.run(
        [sys.executable, "-m", "nbconvert", "--to", "html", "--log-level=WARN", str(path)],
        capture_output=True, text=True, timeout=180, check=False,
    )
    assert done.returncode == 0, done.stderr
    page = (tmp_path / "saved.html").read_text(encoding="utf-8")
    # nbconvert re-serialises output HTML (attribute order, entities): compare parsed markup.
    assert _canonical(expected) in _canonical(page)
    assert _canonical(_first_view()) not in _canonical(page)


def _first_view() -> str:
    return Prism("0.1", ["float32", "bfloat16", "float16"])._static_html()


class _Canon(HTMLParser):
    """Markup as a token string: tags with sorted attributes, text with entities decoded."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.tokens: list[str] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        self.tokens.append(f"<{tag} {sorted((k, v or '') for k, v in attrs)!r}>")

    def handle_endtag(self, tag: str) -> None:
        self.tokens.append(f"</{tag}>")

    def handle_data(self, data: str) -> None:
        if data.strip():
            self.tokens.append(data)


def _canonical(markup: str) -> str:
    c = _Canon()
    c.feed(markup)
    c.close()
    return "\x00".join(c.tokens)
