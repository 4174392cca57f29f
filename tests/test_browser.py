"""The real-browser test: JupyterLab in headless Chromium, driven as a person would.

A private JupyterLab serves a notebook written here; Playwright opens it in Debian's Chromium,
runs every cell, types a value into the Prism, clicks a bit tile, steps TensorPrism to the next
NaN, and checks what is on the screen after each step. Screenshots and the time from each click
to the updated view (measured in the page) go to test-output/browser/ (or
$BITPRISM_BROWSER_OUTPUT). A second test executes a notebook, converts it with nbconvert and opens
the HTML page offline, where the widgets' static snapshots must be what a reader sees.

Outside CI a missing browser, jupyterlab or playwright skips with the install commands; with
CI=true it fails.
"""

from __future__ import annotations

import json
import time
from pathlib import Path
from typing import Any, Iterator

import pytest

from browser_support import (
    ARM_TIMER_JS,
    KERNEL_TIMEOUT_S,
    NOTEBOOK_READY_JS,
    PAGE_TIMEOUT_MS,
    READ_TIMER_JS,
    RUN_ALL_JS,
    RUN_TIMEOUT_S,
    SAVE_JS,
    LabServer,
    element_shot,
    lab_page,
    launch_chromium,
    nbconvert_html,
    open_offline,
    output_dir,
    require,
    running_lab,
    wait_for_cells,
    write_notebook,
)

pytestmark = pytest.mark.browser

# Generous: CI machines are shared and loaded.
EXPECT_TIMEOUT_MS = PAGE_TIMEOUT_MS

NOTEBOOK = "browser_check.ipynb"
NO_SNAPSHOT = (
    "the widget's display output carries no static text/html snapshot, so a saved "
    "notebook or its HTML export shows nothing of the view without a kernel"
)

PRISM_FORMATS = ["float32", "float16", "bfloat16"]
PRISM_CELL = (
    "import bitprism as bp\n"
    f"prism = bp.Prism('1.5', formats={PRISM_FORMATS!r})\n"
    "prism"
)
# Invented demo data: a 6x8 activation tile with two NaNs and one value past float16's range.
# The notebook cell and _tensor_data() build it from these same constants.
TENSOR_SEED, TENSOR_SHAPE = 7, (6, 8)
TENSOR_NANS = ((1, 5), (4, 2))
TENSOR_BIG = ((3, 3), 7.0e4)
TENSOR_CELL = (
    "import numpy as np\n"
    "from bitprism.ui.tensor_prism import TensorPrism\n"
    f"acts = np.random.default_rng({TENSOR_SEED}).normal(0, 3, size={TENSOR_SHAPE!r})"
    ".astype(np.float32)\n"
    + "".join(f"acts[{i}, {j}] = np.nan\n" for i, j in TENSOR_NANS)
    + f"acts[{TENSOR_BIG[0][0]}, {TENSOR_BIG[0][1]}] = {TENSOR_BIG[1]!r}\n"
    "tp = TensorPrism(acts, formats=['float16', 'bfloat16'])\n"
    "tp"
)


@pytest.fixture(scope="module")
def browser_path() -> str:
    return require()


@pytest.fixture(scope="module")
def lab(browser_path: str, tmp_path_factory: pytest.TempPathFactory) -> Iterator[LabServer]:
    root = tmp_path_factory.mktemp("lab-root")
    home = tmp_path_factory.mktemp("lab-home")
    write_notebook(root / NOTEBOOK, [PRISM_CELL, TENSOR_CELL])
    with running_lab(root, home) as server:
        yield server


def _timed(page: Any, selector: str, text: str, trigger: str) -> None:
    """Arm the in-page timer: from the next ``trigger`` event to ``text`` inside ``selector``."""
    page.evaluate(ARM_TIMER_JS, [selector, text, trigger])


def _read_timer(page: Any) -> float:
    ms = page.wait_for_function(READ_TIMER_JS, timeout=EXPECT_TIMEOUT_MS).json_value()
    return round(float(ms), 1)


def _bits_text(band_bits: Any) -> str:
    return "".join(t.strip() for t in band_bits.all_inner_texts())


def test_widgets_in_jupyterlab(lab: LabServer, browser_path: str) -> None:
    from playwright.sync_api import expect, sync_playwright

    expect.set_options(timeout=EXPECT_TIMEOUT_MS)
    out = output_dir()
    report: dict[str, Any] = {"browser": browser_path, "steps": {}}
    t_start = time.monotonic()
    with sync_playwright() as pw:
        browser = launch_chromium(pw, browser_path)
        try:
            page, console_errors = lab_page(browser, lab)

            # ----- open the notebook and run it once the kernel is really there ---------------
            page.goto(lab.url(f"lab/tree/{NOTEBOOK}"), wait_until="domcontentloaded")
            page.wait_for_function(
                NOTEBOOK_READY_JS, arg=NOTEBOOK, timeout=KERNEL_TIMEOUT_S * 1000
            )
            report["kernel_ready_s"] = round(time.monotonic() - t_start, 1)
            page.evaluate(RUN_ALL_JS)  # not awaited: the command resolves when cells finish
            t_run = time.monotonic()
            cells = wait_for_cells(page, RUN_TIMEOUT_S)
            report["run_all_s"] = round(time.monotonic() - t_run, 1)
            errors = [e for c in cells for e in c["errors"]]
            assert not errors, f"notebook cells raised: {errors}"

            # ----- Prism renders: one band per format, one tile per bit -------------------------
            prism = page.locator(".bitprism-prism").first
            expect(prism).to_be_visible()
            bands = prism.locator(".widget-vbox.bitprism-band")
            expect(bands).to_have_count(len(PRISM_FORMATS))
            expect(prism.locator(".bitprism-bit")).to_have_count(32 + 16 + 16)
            expect(prism.locator(".bitprism-sign")).to_have_count(3)
            f16 = prism.locator('div.bitprism-band[data-format="float16"]')
            f16_bits = prism.locator('.bitprism-bit[title^="float16 bit "]')
            expect(f16_bits).to_have_count(16)
            # 1.5 in float16: sign 0, biased exponent 01111, trailing significand 1000000000
            # (IEEE 754-2019 §3.4, binary16: bias 15, t = 10).
            assert _bits_text(f16_bits) == "0011111000000000"
            expect(f16).to_contain_text("normal")
            prism.scroll_into_view_if_needed()
            page.screenshot(path=str(out / "01-prism-rendered.png"))

            # ----- type a value: 65520 rounds past float16's largest finite (65504) to Inf ------
            # (binary16 max is 65504 and ulp there is 32, so 65520 is the tie above it and
            # roundTiesToEven takes it to the even neighbour 2^16, which overflows: IEEE 754-2019
            # §4.3.1 and §7.4.)
            box = prism.locator(".bitprism-value-input input")
            box.fill("65520")
            _timed(page, '.bitprism-prism div.bitprism-band[data-format="float16"]', "0x7c00",
                   "keydown")
            box.press("Enter")
            expect(f16.locator('span[title="class: Inf"]')).to_be_visible()
            expect(f16).to_contain_text("0x7c00")
            report["steps"]["enter_65520_to_float16_inf_ms"] = _read_timer(page)
            assert _bits_text(f16_bits) == "0111110000000000"
            # float32 holds 65520 exactly; the view says so without an error.
            expect(prism.locator('div.bitprism-band[data-format="float32"]')).to_contain_text(
                "65520"
            )
            page.screenshot(path=str(out / "02-prism-typed-65520.png"))
            element_shot(page, prism, out / "prism-65520.png")

            # ----- click a bit tile: the top trailing-significand bit turns Inf into a quiet NaN --
            tile = prism.locator('.bitprism-bit[title^="float16 bit 9:"]')
            expect(tile).to_have_text("0")
            _timed(page, '.bitprism-prism div.bitprism-band[data-format="float16"]', "0x7e00",
                   "click")
            tile.click()
            expect(f16).to_contain_text("0x7e00")
            report["steps"]["click_bit_to_update_ms"] = _read_timer(page)
            expect(tile).to_have_text("1")
            expect(f16).to_contain_text("quiet NaN")
            expect(box).to_have_value("nan")  # the typed value follows the edited band
            assert _bits_text(f16_bits) == "0111111000000000"
            page.screenshot(path=str(out / "03-prism-bit-clicked.png"))

            # ----- TensorPrism --------------------------------------------------------------
            _tensor_prism_steps(page, expect, out, report)

            assert not console_errors, f"errors in the page: {console_errors}"

            # ----- save as a person would (Ctrl+S), then read the file from disk -------------
            saved = _save_until_snapshot_shows(page, lab.root / NOTEBOOK, "0x7e00")
            report["steps"]["save_s"] = saved
            html_page = nbconvert_html([lab.root / NOTEBOOK])[0]
            offline = open_offline(
                browser, html_page, out / "07-lab-saved-page-offline.png", PAGE_TIMEOUT_MS
            )
            snap = offline.locator(".bitprism-compare").first
            expect(snap).to_be_visible()
            # The exported page shows the LAST view: the float16 band after the bit flip.
            expect(snap.locator('div.bitprism-band[data-format="float16"]')).to_contain_text(
                "0x7e00"
            )
            snap.screenshot(path=str(out / "lab-saved-snapshot.png"))
        finally:
            browser.close()
            report["browser_part_s"] = round(time.monotonic() - t_start, 1)
            (out / "timings.json").write_text(json.dumps(report, indent=2) + "\n")
            print("\nbrowser test timings:", json.dumps(report, indent=2))


def _save_until_snapshot_shows(page: Any, path: Path, text: str, timeout_s: float = 60) -> float:
    """Save the notebook until the Prism's saved display output shows ``text`` (the snapshot
    is republished throttled, so the last view can land a moment after the click)."""
    import nbformat

    t0 = time.monotonic()
    html = None
    while True:
        page.evaluate(SAVE_JS)
        nb = nbformat.read(str(path), as_version=4)
        outputs = [o for o in nb.cells[0].get("outputs", []) if o.get("output_type") != "stream"]
        assert outputs, f"the saved Prism cell has no display output: {nb.cells[0]}"
        html = outputs[0].get("data", {}).get("text/html")
        if html is not None and text in html:
            return round(time.monotonic() - t0, 1)
        if time.monotonic() - t0 > timeout_s:
            break
        page.wait_for_timeout(500)
    if html is None:
        raise AssertionError(NO_SNAPSHOT)
    raise AssertionError(f"the saved snapshot never showed the last view ({text!r}):\n{html}")


def _tensor_data() -> Any:
    """The TENSOR_CELL data, rebuilt here so expected values come from numpy, not the page."""
    import numpy as np

    acts = np.random.default_rng(TENSOR_SEED).normal(0, 3, size=TENSOR_SHAPE).astype(np.float32)
    for i, j in TENSOR_NANS:
        acts[i, j] = np.nan
    acts[TENSOR_BIG[0]] = TENSOR_BIG[1]
    return acts


def _tensor_prism_steps(page: Any, expect: Any, out: Path, report: dict[str, Any]) -> None:
    import numpy as np

    acts = _tensor_data()
    tp = page.locator(".bitprism-tensorprism").first
    tp.scroll_into_view_if_needed()
    expect(tp).to_be_visible()
    grid = tp.locator(".bitprism-grid")
    expect(grid).to_be_visible()
    cells = grid.locator(".bitprism-cell")
    expect(cells).to_have_count(acts.size)
    expect(cells.filter(has_text="NaN")).to_have_count(int(np.isnan(acts).sum()))
    expect(tp.locator(".bitprism-cell-selected")).to_have_count(0)
    grid.scroll_into_view_if_needed()
    page.screenshot(path=str(out / "04-tensorprism-rendered.png"))

    # ----- click a cell: it is selected and the embedded Prism shows its value ----------------
    sel_sel = ".bitprism-tensorprism .bitprism-cell-selected"
    inner_f16 = '.bitprism-tensorprism .bitprism-prism div.bitprism-band[data-format="float16"]'
    # Expected float16 code from numpy's own cast (IEEE roundTiesToEven), not from bitprism.
    code = int(acts[0, 1].astype(np.float16).view(np.uint16))
    _timed(page, inner_f16, f"0x{code:04x}", "click")
    cells.nth(1).click()  # row 0, column 1 (row-major grid)
    inner = tp.locator(".bitprism-prism")
    expect(inner).to_be_visible()
    f16 = inner.locator('div.bitprism-band[data-format="float16"]')
    expect(f16).to_contain_text(f"0x{code:04x}")
    report["steps"]["click_cell_to_prism_ms"] = _read_timer(page)
    expect(tp.locator(".bitprism-cell-selected")).to_have_count(1)
    expect(tp).to_contain_text("selected [0, 1]")
    expect(inner).to_contain_text("cell [0, 1]")  # the compact value view names its cell

    # ----- next NaN: the selection jumps to the first NaN and the Prism follows -------------
    first_nan = tuple(int(i) for i in np.argwhere(np.isnan(acts))[0])  # row-major order
    _timed(page, inner_f16, "quiet NaN", "click")
    tp.locator(".bitprism-next-nan").click()
    expect(f16).to_contain_text("quiet NaN")
    report["steps"]["next_nan_click_to_update_ms"] = _read_timer(page)
    selected = page.locator(sel_sel)
    expect(selected).to_have_count(1)
    expect(selected).to_have_text("NaN")
    expect(tp).to_contain_text(f"selected [{first_nan[0]}, {first_nan[1]}]")
    expect(inner).to_contain_text(f"cell [{first_nan[0]}, {first_nan[1]}]")
    tp.locator(".bitprism-grid").scroll_into_view_if_needed()
    page.screenshot(path=str(out / "05-tensorprism-next-nan.png"))
    element_shot(page, tp, out / "tensorprism-next-nan.png")

    # ----- value view: labels and colours arrive as short cell updates ----------------------
    # (only the traits that changed, no buffer_paths; a colour is a reference to a shared
    # style with a short model id). 7e4 is the window's largest |x|, so every other finite
    # cell is on the first step of the scale.
    from bitprism.render.grid_html import PAINTS, short_label

    view = tp.locator(".widget-dropdown", has=page.locator("label", has_text="view"))
    view.locator("select").first.select_option("value")
    x = float(acts[0, 0])
    first = cells.nth(0)
    expect(first).to_have_text(short_label(x))
    fill = PAINTS["v-1" if x < 0 else "v+1"].background
    rgb = ", ".join(str(int(fill[k : k + 2], 16)) for k in (1, 3, 5))
    expect(first).to_have_css("background-color", f"rgb({rgb})")
    value, bits = (first.get_attribute("title") or "").split(" = ")
    assert float.fromhex(value) == x  # exact: hex float, checked against numpy's float32
    assert int(bits, 16) == int(acts[0:1, 0].view(np.uint32)[0])
    expect(cells.filter(has_text="NaN")).to_have_count(int(np.isnan(acts).sum()))
    page.screenshot(path=str(out / "05b-tensorprism-value-view.png"))


# ----- saved notebooks: what an offline reader of the exported page sees ---------------------
@pytest.fixture(scope="module")
def exported_pages(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    """One nbclient run of a Prism cell, saved twice: with widget state (as nbclient and
    ``nbconvert --execute`` save by default) and without (as JupyterLab saves by default);
    both converted with ``jupyter nbconvert --to html``."""
    require(lab=False)
    import nbformat
    from nbclient import NotebookClient

    folder = tmp_path_factory.mktemp("saved")
    nb = nbformat.read(str(write_notebook(folder / "run.ipynb", [PRISM_CELL])), as_version=4)
    nb.metadata["kernelspec"] = {
        "name": "python3", "display_name": "Python 3", "language": "python",
    }
    NotebookClient(
        nb, timeout=300, kernel_name="python3", store_widget_state=True,
        resources={"metadata": {"path": str(folder)}},
    ).execute()
    # Saved as JupyterLab saves by default: without the widget state. (With the state saved,
    # nbconvert's page prefers the live widget view, which needs a script from a CDN and stays
    # blank offline; README says to share views with case files and HTML exports instead.)
    nb.metadata.pop("widgets", None)
    without_state = folder / "without_widget_state.ipynb"
    nbformat.write(nb, str(without_state))
    pages = nbconvert_html([without_state])
    return {"lab-save": pages[0]}


@pytest.mark.parametrize("kind", ["lab-save"])
def test_exported_page_offline(kind: str, exported_pages: dict[str, Path]) -> None:
    """Open the nbconvert page from disk in Chromium with every network request refused: the
    bitprism view must be there as static markup (no kernel, no widget scripts, no CDN)."""
    browser_path = require(lab=False)
    import numpy as np
    from playwright.sync_api import expect, sync_playwright

    out = output_dir()
    with sync_playwright() as pw:
        browser = launch_chromium(pw, browser_path)
        try:
            page = open_offline(
                browser, exported_pages[kind], out / f"06-exported-{kind}.png", PAGE_TIMEOUT_MS
            )
            snapshot = page.locator(".bitprism-compare")
            if snapshot.count() == 0:
                assert "text/html" in _prism_output_mimetypes(exported_pages[kind]), NO_SNAPSHOT
            expect(snapshot.first).to_be_visible(timeout=EXPECT_TIMEOUT_MS)
            bands = snapshot.first.locator("div.bitprism-band[data-format]")
            expect(bands).to_have_count(len(PRISM_FORMATS))
            # 1.5 is exact in all three; the float16 band shows its bit pattern, here taken
            # from numpy's own float16 (IEEE 754 binary16).
            code = int(np.float16(1.5).view(np.uint16))
            f16 = snapshot.first.locator('div.bitprism-band[data-format="float16"]')
            expect(f16).to_contain_text(f"0x{code:04x}")
        finally:
            browser.close()


def _prism_output_mimetypes(html_page: Path) -> set[str]:
    import nbformat

    nb = nbformat.read(str(html_page.with_suffix(".ipynb")), as_version=4)
    return {m for o in nb.cells[0].get("outputs", []) for m in o.get("data", {})}
