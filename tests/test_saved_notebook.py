"""A saved notebook shows a widget's view without a kernel: beside the live view, a snapshot
slot carries the static HTML of the last view (updated, throttled, as the view changes; hidden
where widgets render, shown by nbconvert), and pinned views are plain HTML outputs that every
front end shows (issue 18 item 6)."""

from __future__ import annotations

import subprocess
import sys
import time
from html.parser import HTMLParser
from pathlib import Path
from typing import Any

import nbformat
import numpy as np
import pytest

from bitprism.ui import snapshots
from bitprism.ui.prism import Prism
from bitprism.ui.tensor_prism import TensorPrism

WIDGET_VIEW = "application/vnd.jupyter.widget-view+json"


# ----- throttle, headless (display functions replaced by recorders) ----------------------------
class _Recorder:
    def __init__(self) -> None:
        self.shown: list[tuple[dict[str, Any], str]] = []
        self.updates: list[tuple[dict[str, Any], str]] = []

    def display(self, bundle: dict[str, Any], raw: bool, display_id: str | None = None) -> None:
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
    (snap, snap_id), (live, live_id), (pins, pins_id) = recorder.shown
    # the live view: the widget itself, with no HTML of its own (a page prints nothing for it)
    assert live[WIDGET_VIEW]["model_id"] == p.model_id and live_id is None
    assert live["text/plain"] and live["text/html"] == ""
    # the snapshot slot: a view of no model (hidden where widgets render) and the static view
    assert snap[WIDGET_VIEW]["model_id"] == "" and snap_id
    assert snap["text/html"] == p._static_html()
    # the pins slot: hidden and empty until a view is pinned
    assert pins[WIDGET_VIEW]["model_id"] == "" and pins["text/html"] == "" and pins_id


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
    assert display_id == recorder.shown[0][1]  # the snapshot slot, never the live view
    assert bundle[WIDGET_VIEW]["model_id"] == ""
    assert bundle["text/html"] == p._static_html() and "0.5" in bundle["text/html"]
    time.sleep(0.35)  # the interval has passed: the next change is published at once
    p.value = "0.75"
    assert len(recorder.updates) == 2 and "0.75" in recorder.updates[1][0]["text/html"]


def test_pin_writes_static_html_of_the_running_cell(recorder: _Recorder) -> None:
    a = np.arange(12, dtype=np.float32).reshape(3, 4)
    tp = TensorPrism(a, formats=["bfloat16"])
    tp.select((1, 2))
    tp.pin()
    (bundle, display_id), = recorder.shown
    assert display_id is None and set(bundle) == {"text/html", "text/plain"}  # no widget view
    html = bundle["text/html"]
    assert "pinned TensorPrism view" in html and "bitprism-grid" in html
    assert tp._static_html() in html and "<script" not in html
    p = Prism("0.1", formats=["float32", "bfloat16"])  # the Prism has it too (CaseFileMixin)
    p.pin()
    bundle = recorder.shown[-1][0]
    assert set(bundle) == {"text/html", "text/plain"} and p._static_html() in bundle["text/html"]


def test_pin_button_fills_the_pins_slot_under_the_widget(recorder: _Recorder) -> None:
    a = np.arange(12, dtype=np.float32).reshape(3, 4)
    tp = TensorPrism(a, formats=["bfloat16"])
    tp.pin_button.click()  # not displayed: there is no output to pin into
    assert "not displayed by a notebook cell" in tp.message and recorder.updates == []
    tp._ipython_display_()
    snap_id, pins_id = recorder.shown[0][1], recorder.shown[2][1]
    tp.select((2, 3))
    tp.pin_button.click()
    assert tp.message == "" and "pinned" in tp.info
    pinned = [b for b, i in recorder.updates if i == pins_id]
    assert len(pinned) == 1 and set(pinned[0]) == {"text/html", "text/plain"}
    assert "selected [2, 3]" not in pinned[0]["text/html"]  # markup of the view, not the line
    assert "bitprism-cell-selected" in pinned[0]["text/html"]
    emptied = [b for b, i in recorder.updates if i == snap_id]
    assert emptied[-1]["text/html"] == ""  # the pins are what a reader sees now
    tp.pin_button.click()
    assert [b for b, i in recorder.updates if i == pins_id][-1]["text/html"].count(
        "bitprism-pinned") == 2


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
    assert [o.output_type for o in outputs] == ["display_data"] * 3
    snap, live, pins = (o.data for o in outputs)
    assert snap[WIDGET_VIEW]["model_id"] == "" and live[WIDGET_VIEW]["model_id"]
    expected = _expected_last_view()
    assert snap["text/html"] == expected  # the LAST view, not the first
    assert live["text/html"] == "" and pins["text/html"] == ""
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


PIN_CELLS = [
    "import numpy as np\nfrom bitprism.ui.tensor_prism import TensorPrism\n"
    "a = np.arange(48, dtype=np.float32).reshape(6, 8) / 4\na[2, 5] = np.nan\n"
    "tp = TensorPrism(a, formats=['float16'])\ntp",
    "tp.find_next('nan')\ntp.pin_button.click()",  # as the button does: into cell 0
    "tp.view = 'value'\ntp.pin()",  # the method: an output of this cell
]


def test_pinned_views_are_plain_html_outputs_of_a_saved_notebook(tmp_path: Path) -> None:
    """Issue 18 item 6: pinned views are outputs every front end shows without a kernel
    (``text/html`` only: no widget view that would read "model not found")."""
    from nbclient import NotebookClient

    nb = nbformat.v4.new_notebook()
    nb.metadata["kernelspec"] = {"name": "python3", "display_name": "Python 3",
                                 "language": "python"}
    nb.cells = [nbformat.v4.new_code_cell(src) for src in PIN_CELLS]
    NotebookClient(nb, timeout=120, kernel_name="python3", store_widget_state=False,
                   resources={"metadata": {"path": str(tmp_path)}}).execute()
    snap, live, pins = (o.data for o in nb.cells[0].outputs)
    assert WIDGET_VIEW in live and snap["text/html"] == ""  # the pin replaced the snapshot
    assert set(pins) == {"text/html", "text/plain"}
    assert "pinned TensorPrism view" in pins["text/html"]
    assert "bitprism-cell-selected" in pins["text/html"]  # the NaN found, selected
    assert "cell [2, 5] of float32 [6, 8]" in pins["text/html"]  # and its bits
    assert [o.output_type for o in nb.cells[1].outputs] == []
    (here,) = nb.cells[2].outputs
    assert set(here.data) == {"text/html", "text/plain"}
    assert "value (violet negative, teal positive)" in here.data["text/html"]
