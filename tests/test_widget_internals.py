"""The ipywidgets internals ``bitprism.ui.widget_internals`` relies on still behave as assumed,
and the installed ipywidgets is inside the range it was checked with (pinned in pyproject)."""

from __future__ import annotations

import re
from pathlib import Path
from typing import Any

import ipywidgets as W
import pytest
from ipywidgets import Widget
from ipywidgets.widgets.widget import widget_serialization
from packaging.specifiers import SpecifierSet

from bitprism.ui.widget_internals import has_class, model_ref, push_state, short_model_id

SUPPORTED = ">=8.1,<9"  # the ipywidgets versions widget_internals was checked with
PYPROJECT = Path(__file__).resolve().parents[1] / "pyproject.toml"


@pytest.fixture()
def sent(monkeypatch: pytest.MonkeyPatch) -> list[tuple[Widget, dict[str, Any]]]:
    """Messages widgets send to the front-end, recorded instead of sent (headless)."""
    out: list[tuple[Widget, dict[str, Any]]] = []
    monkeypatch.setattr(Widget, "_send", lambda self, msg, buffers=None: out.append((self, msg)))
    return out


def test_supported_range_is_pinned_and_installed() -> None:
    requirements = re.findall(r'"ipywidgets([^"]*)"', PYPROJECT.read_text(encoding="utf-8"))
    assert requirements == [SUPPORTED]
    assert W.__version__ in SpecifierSet(SUPPORTED), W.__version__


def test_push_state_sends_one_partial_update(sent: list[tuple[Widget, dict[str, Any]]]) -> None:
    style = W.ButtonStyle(button_color="#b51c80", model_id=short_model_id())
    b = W.Button(description="0")
    sent.clear()
    push_state(b, {"description": "NaN", "tooltip": "0x7fc00000", "style": style})
    assert sent == [(b, {"method": "update", "state": {
        "description": "NaN", "tooltip": "0x7fc00000", "style": f"IPY_MODEL_{style.model_id}"}})]
    assert b.description == "NaN" and b.tooltip == "0x7fc00000" and b.style is style


def test_push_state_matches_the_public_path_without_buffer_paths(
    sent: list[tuple[Widget, dict[str, Any]]],
) -> None:
    style = W.ButtonStyle(model_id=short_model_id())
    pushed, public = W.Button(), W.Button()
    changes = {"description": "1e-3", "tooltip": "0x1p-10 = 0x1400", "style": style}
    sent.clear()
    push_state(pushed, changes)
    with public.hold_sync():
        for k, v in changes.items():
            setattr(public, k, v)
    (w1, m1), (w2, m2) = sent
    assert (w1, w2) == (pushed, public)
    assert m2["buffer_paths"] == []  # the 20 bytes per cell that push_state leaves out
    assert m1 == {k: v for k, v in m2.items() if k != "buffer_paths"}
    assert {k: getattr(pushed, k) for k in changes} == {k: getattr(public, k) for k in changes}


def test_update_without_buffer_paths_is_accepted(
    sent: list[tuple[Widget, dict[str, Any]]],
) -> None:
    b = W.Button(description="0")
    b._handle_msg({"content": {"data": {"method": "update", "state": {"description": "7"}}},
                   "buffers": []})
    assert b.description == "7"


def test_model_id_format() -> None:
    ids = [short_model_id() for _ in range(3)]
    assert len(set(ids)) == 3
    assert all(re.fullmatch(r"[0-9a-f]{11,31}", i) for i in ids)
    assert len({i[:10] for i in ids}) == 1  # one random prefix per process, then a counter
    style = W.ButtonStyle(model_id=ids[0])
    assert style.model_id == ids[0]  # the model_id keyword becomes the comm id
    assert model_ref(style) == f"IPY_MODEL_{ids[0]}"
    assert model_ref(style) == widget_serialization["to_json"](style, None)
    ordinary = W.Button().model_id
    assert re.fullmatch(r"[0-9a-f]{32}", ordinary)  # 32 digits: never equal to a short id


def test_has_class() -> None:
    b = W.Button()
    assert not has_class(b, "bitprism-cell-selected")
    b.add_class("bitprism-cell-selected")
    assert has_class(b, "bitprism-cell-selected")
    b.remove_class("bitprism-cell-selected")
    assert not has_class(b, "bitprism-cell-selected")
