"""TensorPrism in a real browser through a whole session (issue 18).

A private JupyterLab serves a notebook of invented 48 x 80 activations (NaN, Inf, outliers);
Playwright drives Debian's Chromium as a person would:

* 100 timed interactions (finding every kind of event, pans near the edges, view, scale and
  format changes, window reshapes, cell clicks), each measured in the page from the event to
  the updated text; a headless twin of the widget (same data, same steps, in this process)
  says what the page must show after each step, so every latency is "until the right view";
* the fit at 848- and 468-px output columns, in the light and the dark theme (screenshots;
  nothing reaches past the output column, no label is cut short, no white box in the dark);
* the rich display of every result object (scan, scale advice, comparison, MX result);
* a view pinned with the button, the notebook saved, its kernel shut down and the page
  reloaded: the pinned view is there, and "model not found" is not in its place; the saved
  notebook converted by nbconvert and opened offline;
* one example notebook in Notebook 7 (the ``notebook`` package's pages on the same server):
  both widgets render and answer a click.

Screenshots and the latency table go to test-output/browser/ (or $BITPRISM_BROWSER_OUTPUT).
Outside CI a missing browser, jupyterlab or playwright skips; with CI=true it fails.
"""

from __future__ import annotations

import json
import re
import statistics
import time
import urllib.request
from pathlib import Path
from typing import Any, Callable, Iterator

import pytest

from browser_support import (
    KERNEL_NAME,
    KERNEL_TIMEOUT_S,
    NOTEBOOK_READY_JS,
    PAGE_TIMEOUT_MS,
    REPO,
    RUN_ALL_JS,
    RUN_TIMEOUT_S,
    SAVE_JS,
    STEP_TIMEOUT_MS,
    LabServer,
    element_shot,
    lab_page,
    launch_chromium,
    markup_text,
    nbconvert_html,
    open_offline,
    output_dir,
    require,
    running_lab,
    set_theme,
    wait_for_cells,
    write_notebook,
)

pytestmark = pytest.mark.browser

INTERACTIONS = 100
# Targets: p95 under 300 ms with no upward trend. Asserted with a margin for loaded CI
# machines; the real figures are written to tensor-session.json and printed.
P95_LIMIT_MS = 800.0
TREND_LIMIT = 2.0  # median of the last 20 over the median of the first 20

SESSION = "tensor_session.ipynb"
EXAMPLE = "02_nan_hunt.ipynb"
FORMATS = ["float16", "bfloat16"]
# Invented activations: normal(0, 3) with a negative quiet NaN, two more NaNs, an Inf, an
# outlier past float16's range and a value float16 flushes to zero. _activations() rebuilds
# the same array here for the headless twin.
DATA_CELL = (
    "import numpy as np\n"
    "import bitprism as bp\n"
    "from bitprism.ui.tensor_prism import TensorPrism\n"
    "acts = (np.random.default_rng(18).standard_normal((48, 80)) * 3).astype(np.float32)\n"
    "acts[10, 10] = np.uint32(0xFFC00000).view(np.float32)\n"
    "acts[30, 77] = np.nan\nacts[47, 0] = np.nan\nacts[2, 79] = np.inf\n"
    "acts[20, 40] = 7.0e4\nacts[21, 41] = -3.0e-9\n"
)
TP_CELL = f"tp = TensorPrism(acts, formats={FORMATS!r})\ntp"
RESULTS_CELL = (
    "finite = np.where(np.isfinite(acts), acts, 0).astype(np.float32)\n"
    "display(bp.scan(acts, ['float16', 'bfloat16', 'mxfp4'], progress=False))\n"
    "display(bp.suggest_scale(finite, 'float8_e4m3fn'))\n"
    "display(bp.compare('0.1', ['float32', 'bfloat16', 'float16']))\n"
    "display(bp.mx_quantize(finite, 'mxfp4'))\n"
)


def _activations() -> Any:
    import numpy as np

    acts = (np.random.default_rng(18).standard_normal((48, 80)) * 3).astype(np.float32)
    acts[10, 10] = np.uint32(0xFFC00000).view(np.float32)
    acts[30, 77] = np.nan
    acts[47, 0] = np.nan
    acts[2, 79] = np.inf
    acts[20, 40] = 7.0e4
    acts[21, 41] = -3.0e-9
    return acts


@pytest.fixture(scope="module")
def browser_path() -> str:
    return require()


@pytest.fixture(scope="module")
def lab(browser_path: str, tmp_path_factory: pytest.TempPathFactory) -> Iterator[LabServer]:
    import nbformat

    root = tmp_path_factory.mktemp("tensor-lab-root")
    home = tmp_path_factory.mktemp("tensor-lab-home")
    write_notebook(root / SESSION, [DATA_CELL, TP_CELL, RESULTS_CELL])
    example = nbformat.read(str(REPO / "example_notebooks" / EXAMPLE), as_version=4)
    example.metadata["kernelspec"] = {"name": KERNEL_NAME, "language": "python",
                                      "display_name": "Python (bitprism test)"}
    for cell in example.cells:
        if cell.cell_type == "code":
            cell.outputs, cell.execution_count = [], None
    nbformat.write(example, str(root / EXAMPLE))
    # Notebook 7's pages on the same server show its application to the page as the lab does
    # (LabApp.expose_app_in_browser); its own switch is read from the private config folder.
    (home / "config").mkdir(exist_ok=True)
    expose = json.dumps({"JupyterNotebookApp": {"expose_app_in_browser": True}})
    for name in ("jupyter_server_config.json", "jupyter_notebook_config.json"):
        (home / "config" / name).write_text(expose)
    with running_lab(root, home) as server:
        yield server


# ----- in-page timing: from the event to the exact text the twin predicts ----------------------
ARM_EXACT_JS = """
([selector, text, trigger]) => {
  const norm = (s) => s.replace(/\\s+/g, ' ').trim();
  const want = norm(text);
  const st = { t0: null, t1: null };
  window.__bpStep = st;
  const start = (ev) => {
    if (trigger === 'keydown' && ev.key !== 'Enter') return;
    if (st.t0 === null) st.t0 = performance.now();
  };
  document.addEventListener(trigger, start, { capture: true });
  const check = () => {
    if (st.t0 === null || st.t1 !== null) return;
    const el = document.querySelector(selector);
    if (el && norm(el.textContent) === want) {
      st.t1 = performance.now();
      observer.disconnect();
      document.removeEventListener(trigger, start, { capture: true });
    }
  };
  const observer = new MutationObserver(check);
  observer.observe(document.body, {
    subtree: true, childList: true, characterData: true, attributes: true,
  });
}
"""
READ_EXACT_JS = """
() => {
  const st = window.__bpStep;
  return st && st.t0 !== null && st.t1 !== null ? st.t1 - st.t0 : null;
}
"""
HEAP_JS = "() => (performance.memory ? performance.memory.usedJSHeapSize : null)"

TP = ".bitprism-tensorprism"
WATCHED = {  # what a step may change, in the order the widget updates them (last first)
    "caption": f"{TP} .bitprism-prism .bitprism-caption",
    "legend": f"{TP} .bitprism-legend-caption",
    "count": f"{TP} .bitprism-count-overflow",
    "position": f"{TP} .bitprism-position",
    "message": f"{TP} > .bitprism-message",
}


def _twin_texts(tp: Any) -> dict[str, str]:
    from bitprism.render.grid_html import legend_html

    caption = tp.prism.caption if tp.prism is not None else ""
    return {
        "caption": caption,
        "legend": markup_text(legend_html(tp._paint).split("</div>")[0], collapse=True),
        "count": markup_text(tp.nav_counts["overflow"].value, collapse=True),
        "position": markup_text(tp.position_html.value, collapse=True),
        "message": markup_text(tp.message_html.value, collapse=True),
    }


# ----- the steps of a session: (name, action on the page, the same on the twin) ----------------
Step = tuple[str, str, Callable[[Any], None], Callable[[Any], None]]


def _steps(page: Any, twin: Any) -> Iterator[Step]:
    """Candidate steps, cycling through every kind of interaction; a step that would change
    nothing on the page is skipped by the caller (the twin tells)."""
    tp = page.locator(TP).first

    def click(css: str) -> Callable[[Any], None]:
        return lambda _: tp.locator(css).first.click()

    def menu(label: str, value: str) -> Callable[[Any], None]:
        dd = tp.locator(".widget-dropdown", has=page.locator("label", has_text=label)).first
        return lambda _: dd.locator("select").select_option(value)

    def typed(css: str, text: str) -> Callable[[Any], None]:
        def act(_: Any) -> None:
            box = tp.locator(css).first
            box.fill(text)
            box.press("Enter")
        return act

    def number(label: str, value: int) -> Callable[[Any], None]:
        def act(_: Any) -> None:
            section = tp.locator(".bitprism-options").first
            if not section.locator("input[type=number]").first.is_visible():
                section.locator(".jupyter-widget-Collapse-header").first.click()
            field = section.locator(f".bitprism-{label} input").first
            field.fill(str(value))
            field.press("Enter")
        return act

    def cell(i: int, j: int) -> Callable[[Any], None]:
        def act(_: Any) -> None:
            cols = twin._cell_grid.capacity[1]
            tp.locator(".bitprism-grid .bitprism-cell").nth(i * cols + j).click()
        return act

    kinds = ["nan", "overflow", "inf", "underflow", "largest-error"]
    views = ["value", "class", "error", "compare", "cast"]
    k = 0
    while True:
        kind = kinds[k % len(kinds)]
        trait_kind = kind.replace("-", "_")
        back = k % 3 == 2
        way = "prev" if back else "next"
        if not twin.nav_buttons[f"{way}-{trait_kind}"].disabled:  # nothing there: disabled
            yield (f"{way} {kind}", "click", click(f".bitprism-{way}-{kind}"),
                   lambda t, a=trait_kind, b=back: t.find_next(a, b))
        pans = ["page-right", "right", "page-down", "down", "page-left", "left", "page-up",
                "up"]
        pan = pans[k % len(pans)]
        yield (f"pan {pan}", "click", click(f".bitprism-pan-{pan}"), lambda t, p=pan: t.pan(p))
        edge = ["47, 79", "0, 0", "47, 0", "0, 79", "24, 79", "47, 40"][k % 6]
        yield (f"go to {edge}", "keydown", typed(".bitprism-goto input", edge),
               lambda t, e=edge: t.goto(e))
        pan2 = pans[(k + 3) % len(pans)]
        yield (f"pan {pan2} near the edge", "click", click(f".bitprism-pan-{pan2}"),
               lambda t, p=pan2: t.pan(p))
        view = views[k % len(views)]
        yield (f"view {view}", "change", menu("view", view),
               lambda t, v=view: setattr(t, "view", v))
        fmt = FORMATS[(k // 2 + 1) % 2]
        if k % 2:
            yield (f"format A {fmt}", "change", menu("format A", fmt),
                   lambda t, f=fmt: setattr(t, "format_a", f))
        if view in ("value", "error"):  # where the scale shows
            scale = ["quantile", "log", "linear", "auto"][(k // 5) % 4]
            yield (f"scale {scale}", "change", menu("scale", scale),
                   lambda t, s=scale: setattr(t, "value_scale", s))
        i, j = (3 * k) % 8, (5 * k) % 10
        yield (f"click cell {i},{j}", "click", cell(i, j), lambda t, a=i, b=j: t._on_cell_click(a, b))
        if k % 2 == 0:
            rows, cols = [(6, 7), (16, 12), (3, 12), (12, 5), (9, 9), (16, 12)][(k // 2) % 6]
            yield (f"rows {rows}", "keydown", number("rows", rows),
                   lambda t, r=rows: setattr(t, "rows", r))
            yield (f"cols {cols}", "keydown", number("cols", cols),
                   lambda t, c=cols: setattr(t, "cols", c))
        k += 1


def _twin_state(tp: Any) -> tuple[Any, ...]:
    return tuple(getattr(tp, n) for n in ("rows", "cols", "row_offset", "col_offset", "view",
                                          "format_a", "value_scale", "selected", "fixed"))


def _run_session(page: Any, twin: Any, n: int) -> list[dict[str, Any]]:
    rows: list[dict[str, Any]] = []
    before = _twin_texts(twin)
    for name, trigger, act, mirror in _steps(page, twin):
        if len(rows) == n:
            break
        state = _twin_state(twin)
        mirror(twin)
        after = _twin_texts(twin)
        changed = [k for k in WATCHED if after[k] != before[k]]
        if not changed:  # nothing for a person to see: not a timed step of the session
            if _twin_state(twin) != state:
                act(page)  # but the widget's state moves as the twin's did
                page.wait_for_timeout(300)
            continue
        key = changed[0]
        page.evaluate(ARM_EXACT_JS, [WATCHED[key], after[key], trigger])
        act(page)
        try:
            ms = page.wait_for_function(READ_EXACT_JS, timeout=STEP_TIMEOUT_MS).json_value()
        except Exception as exc:
            shown = {k: page.locator(css).first.text_content() for k, css in WATCHED.items()}
            raise AssertionError(f"step {len(rows) + 1} ({name}): the page never showed "
                                 f"{key} {after[key]!r}; it shows {shown!r}; the twin "
                                 f"{after!r}; steps so far {[r['action'] for r in rows]}"
                                 ) from exc
        rows.append({"step": len(rows) + 1, "action": name, "watched": key,
                     "ms": round(float(ms), 1)})
        before = after
    return rows


def _latency_table(rows: list[dict[str, Any]]) -> dict[str, float]:
    ms = [r["ms"] for r in rows]
    srt = sorted(ms)
    return {
        "n": len(ms),
        "p50_ms": round(statistics.median(ms), 1),
        "p95_ms": round(srt[min(len(srt) - 1, int(round(0.95 * len(srt))) - 1)], 1),
        "max_ms": round(max(ms), 1),
        "first20_median_ms": round(statistics.median(ms[:20]), 1),
        "last20_median_ms": round(statistics.median(ms[-20:]), 1),
    }


# ----- fit and theme ---------------------------------------------------------------------------
FIT_JS = """
(sel) => {
  const root = document.querySelector(sel);
  const out = root.closest('.jp-OutputArea-output') || root.parentElement;
  const limit = out.getBoundingClientRect().right + 1;
  const past = [];
  const cut = [];
  for (const el of root.querySelectorAll('*')) {
    const r = el.getBoundingClientRect();
    if (r.width === 0 || r.height === 0) continue;
    if (el.closest('.bitprism-grid') && el !== root.querySelector('.bitprism-grid')) continue;
    if (r.right > limit) past.push((el.className || el.tagName) + ' ' + Math.round(r.right));
    if (el.matches('label.widget-label, .widget-label') && el.scrollWidth > el.clientWidth + 1)
      cut.push(el.textContent);
  }
  const grid = root.querySelector('.bitprism-grid');
  const heads = [...grid.querySelectorAll('.bitprism-head')].filter(
    (h) => h.getBoundingClientRect().width > 0 && h.textContent.trim() !== '');
  const narrow = heads.filter((h) => h.scrollWidth > h.clientWidth + 1).map((h) => h.textContent);
  return { limit, right: root.getBoundingClientRect().right, past, cut, narrow,
           gridRight: grid.getBoundingClientRect().right };
}
"""

THEME_CHECK_JS = """
(sel) => {
  const root = document.querySelector(sel);
  const bg = (el) => getComputedStyle(el).backgroundColor;
  const boxes = [...root.querySelectorAll('.bitprism-scan, .bitprism-legend, .widget-html-content')]
    .map(bg).filter((c) => c === 'rgb(255, 255, 255)');
  const sel_ = root.querySelector('.bitprism-cell-selected');
  return { white: boxes.length,
           outline: sel_ ? getComputedStyle(sel_).outlineColor : null,
           outlineWidth: sel_ ? getComputedStyle(sel_).outlineWidth : null };
}
"""


def _luminance(rgb: str) -> float:
    r, g, b = (int(v) / 255 for v in re.findall(r"\d+", rgb)[:3])

    def lin(c: float) -> float:
        return c / 12.92 if c <= 0.04045 else ((c + 0.055) / 1.055) ** 2.4

    return 0.2126 * lin(r) + 0.7152 * lin(g) + 0.0722 * lin(b)


WIDGET_OUTPUT_WIDTH_JS = """
() => {
  const tp = document.querySelector('.jp-OutputArea-output .bitprism-tensorprism');
  return tp ? tp.closest('.jp-OutputArea-output').getBoundingClientRect().width : null;
}
"""


def _widget_output_width(page: Any) -> float | None:
    """Width of the output holding the TensorPrism (``output_width`` measures the first
    output area, here the hidden snapshot slot); the same column as every output's."""
    value = page.evaluate(WIDGET_OUTPUT_WIDTH_JS)
    return None if value is None else float(value)


def _fit_output(page: Any, target: float) -> float:
    """Size the window (file browser open) so the output column is ``target`` px wide."""
    for _ in range(4):
        width = _widget_output_width(page)
        assert width is not None, "no output area to measure"
        if abs(width - target) < 1:
            return width
        size = page.viewport_size
        page.set_viewport_size({"width": int(size["width"] + target - width),
                                "height": size["height"]})
        page.wait_for_timeout(400)
    return float(_widget_output_width(page) or 0)


def _check_fit(page: Any, width: int, report: dict[str, Any]) -> None:
    fit = page.evaluate(FIT_JS, TP)
    report[f"fit_{width}"] = fit
    assert not fit["past"], f"at {width} px these reach past the output column: {fit['past']}"
    assert not fit["cut"], f"at {width} px these labels are cut short: {fit['cut']}"
    assert not fit["narrow"], f"at {width} px these row/column numbers are cut: {fit['narrow']}"


def _check_dark(page: Any, report: dict[str, Any]) -> None:
    dark = page.evaluate(THEME_CHECK_JS, TP)
    report["dark"] = dark
    assert dark["white"] == 0, "a white box in the dark theme"
    assert dark["outline"] is not None and _luminance(dark["outline"]) > 0.5, dark


def _open(page: Any, lab: LabServer, path: str, name: str) -> None:
    page.goto(lab.url(path), wait_until="domcontentloaded")
    page.wait_for_function(NOTEBOOK_READY_JS, arg=name, timeout=KERNEL_TIMEOUT_S * 1000)


def _run_all(page: Any) -> None:
    page.evaluate(RUN_ALL_JS)
    cells = wait_for_cells(page, RUN_TIMEOUT_S)
    errors = [e for c in cells for e in c["errors"]]
    assert not errors, f"notebook cells raised: {errors}"


def test_tensorprism_session(lab: LabServer, browser_path: str) -> None:
    from playwright.sync_api import expect, sync_playwright

    from bitprism.ui.tensor_prism import TensorPrism

    expect.set_options(timeout=PAGE_TIMEOUT_MS)
    out = output_dir()
    report: dict[str, Any] = {"browser": browser_path}
    t_start = time.monotonic()
    twin = TensorPrism(_activations(), formats=FORMATS)
    with sync_playwright() as pw:
        browser = launch_chromium(pw, browser_path)
        try:
            page, errors = lab_page(browser, lab)
            _open(page, lab, f"lab/tree/{SESSION}", SESSION)
            _run_all(page)
            report["output_848"] = _fit_output(page, 848)
            tp = page.locator(TP).first
            expect(tp.locator(".bitprism-grid .bitprism-cell")).to_have_count(16 * 12)
            _rich_results(page, expect, report)

            # ----- first find: the NaN at [10, 10] and its bits, 0xffc00000 ---------------
            tp.locator(".bitprism-next-nan").click()
            twin.find_next("nan")
            caption = tp.locator(".bitprism-prism .bitprism-caption")
            expect(caption).to_have_text(twin.prism.caption)
            assert "0xffc00000" in twin.prism.caption
            _check_fit(page, 848, report)
            element_shot(page, tp, out / "tensorprism-848-light.png")
            element_shot(page, tp, out / "tensorprism-next-nan.png")
            set_theme(page, dark=True)
            _check_dark(page, report)
            element_shot(page, tp, out / "tensorprism-848-dark.png")
            set_theme(page, dark=False)

            # ----- 100 interactions, each timed to the view the twin predicts -------------
            heap0 = page.evaluate(HEAP_JS)
            rows = _run_session(page, twin, INTERACTIONS)
            heap1 = page.evaluate(HEAP_JS)
            table = _latency_table(rows)
            report.update(session=table, heap_mb=[round((h or 0) / 2**20, 1) for h in
                                                  (heap0, heap1)], steps=rows)
            (out / "tensor-session.json").write_text(json.dumps(report, indent=1) + "\n")
            print("\nTensorPrism session:", json.dumps(table))
            assert table["n"] == INTERACTIONS
            assert table["p95_ms"] < P95_LIMIT_MS, table
            assert table["last20_median_ms"] < TREND_LIMIT * table["first20_median_ms"], table

            # ----- 468 px, light and dark (the outlier at [20, 40] selected) ------------------
            goto = tp.locator(".bitprism-goto input")
            goto.fill("20, 40")
            goto.press("Enter")
            twin.goto("20, 40")
            expect(caption).to_have_text(twin.prism.caption)
            report["output_468"] = _fit_output(page, 468)
            tp.scroll_into_view_if_needed()
            page.wait_for_timeout(300)
            _check_fit(page, 468, report)
            element_shot(page, tp, out / "tensorprism-468-light.png")
            set_theme(page, dark=True)
            _check_dark(page, report)
            element_shot(page, tp, out / "tensorprism-468-dark.png")
            set_theme(page, dark=False)
            _fit_output(page, 848)

            # ----- pin (the cast to float16, the outlier selected), save, shut the kernel
            # down, reload ------------------------------------------------------------------
            for label, value in (("format A", "float16"), ("view", "cast")):
                dd = tp.locator(".widget-dropdown", has=page.locator("label", has_text=label))
                dd.first.locator("select").select_option(value)
            twin.format_a, twin.view = "float16", "cast"
            expect(tp.locator(".bitprism-legend-caption")).to_have_text(twin._paint.caption)
            _pin_save_reopen(page, lab, expect, out, report)
            assert not errors, f"errors in the page: {errors}"

            # ----- the saved notebook through nbconvert, offline --------------------------------
            html_page = nbconvert_html([lab.root / SESSION])[0]
            offline = open_offline(browser, html_page, out / "saved-page-offline.png",
                                   PAGE_TIMEOUT_MS)
            expect(offline.locator(".bitprism-pinned").first).to_be_visible()
            expect(offline.locator(".bitprism-pinned .bitprism-cell-selected").first).to_be_visible()
            offline.locator(".bitprism-pinned").first.screenshot(
                path=str(out / "saved-page-offline-pinned.png"))
            case_page = twin.export_html(out / "tensorprism-case.html", note="invented data")
            shown = open_offline(browser, case_page, out / "tensorprism-case-page.png",
                                 PAGE_TIMEOUT_MS)
            expect(shown.locator(".bitprism-detail").first).to_be_visible()
        finally:
            browser.close()
            report["seconds"] = round(time.monotonic() - t_start, 1)
            (out / "tensor-session.json").write_text(json.dumps(report, indent=1) + "\n")


def _rich_results(page: Any, expect: Any, report: dict[str, Any]) -> None:
    """Item 8: scan, scale advice, comparison and MX result display as HTML, not text."""
    cell = page.locator(".jp-Cell").nth(2)
    outputs = cell.locator(".jp-OutputArea-output")
    expect(outputs).to_have_count(4)
    for css in (".bitprism-scan", ".bitprism-advice", ".bitprism-compare", ".bitprism-mx"):
        expect(cell.locator(css).first).to_be_visible()
    expect(cell.locator(".jp-RenderedText")).to_have_count(0)  # no fallback to plain text
    report["rich_display"] = "scan, advice, compare, mx: HTML"


def _pin_save_reopen(page: Any, lab: LabServer, expect: Any, out: Path,
                     report: dict[str, Any]) -> None:
    import nbformat

    tp = page.locator(TP).first
    tp.locator(".bitprism-pin").click()
    cell = page.locator(".jp-Cell").nth(1)
    pinned = cell.locator(".bitprism-pinned")
    expect(pinned).to_have_count(1)
    expect(pinned.first).to_be_visible()
    deadline = time.monotonic() + 60
    while True:  # save until the file holds the pin (the update can land after the click)
        page.evaluate(SAVE_JS)
        nb = nbformat.read(str(lab.root / SESSION), as_version=4)
        htmls = [o.get("data", {}).get("text/html", "") for o in nb.cells[1].outputs]
        if any("bitprism-pinned" in h for h in htmls):
            break
        assert time.monotonic() < deadline, "the saved notebook never held the pinned view"
        page.wait_for_timeout(500)
    # shut the kernel down (its widgets go with it) and reload the page
    with urllib.request.urlopen(lab.url("api/sessions"), timeout=10) as r:
        sessions = json.loads(r.read())
    for s in sessions:
        req = urllib.request.Request(lab.url(f"api/sessions/{s['id']}"), method="DELETE")
        urllib.request.urlopen(req, timeout=30).close()
    page.reload(wait_until="domcontentloaded")
    cell = page.locator(".jp-Cell").nth(1)
    pinned = cell.locator(".bitprism-pinned")
    expect(pinned.first).to_be_visible()
    expect(pinned.locator(".bitprism-cell-selected").first).to_be_visible()
    outputs = cell.locator(".jp-OutputArea-output")
    # the live view's output now says "model not found" (its widget went with the kernel);
    # the snapshot slot hides itself; the pinned view is there as it was
    expect(cell).to_contain_text("model not found", timeout=PAGE_TIMEOUT_MS)
    texts = [outputs.nth(k).inner_text() if outputs.nth(k).is_visible() else "<hidden>"
             for k in range(outputs.count())]
    report["reopened_outputs"] = [t[:60] for t in texts]
    assert texts[0] == "<hidden>", texts
    pin_outputs = [t for t in texts if "pinned TensorPrism view" in t]
    assert len(pin_outputs) == 1 and "model not found" not in pin_outputs[0]
    element_shot(page, cell, out / "tensorprism-reopened-without-kernel.png")


def test_example_notebook_in_notebook_7(lab: LabServer, browser_path: str) -> None:
    """Item 7: beyond JupyterLab. Notebook 7's pages (the ``notebook`` package) on the same
    server: the NaN-hunt example runs, both widgets render and answer a click."""
    pytest.importorskip("notebook", reason="Notebook 7 is the `notebook` package (test extra)")
    from playwright.sync_api import expect, sync_playwright

    expect.set_options(timeout=PAGE_TIMEOUT_MS)
    out = output_dir()
    with sync_playwright() as pw:
        browser = launch_chromium(pw, browser_path)
        try:
            page, errors = lab_page(browser, lab)
            _open(page, lab, f"notebooks/{EXAMPLE}", EXAMPLE)
            assert "/notebooks/" in page.url and page.locator("#main-panel, .jp-NotebookPanel").count()
            page.wait_for_timeout(1000)
            # Notebook 7.6 itself reports "Cannot read properties of undefined (reading
            # 'schema')" while it loads, with or without bitprism: only new errors count
            loading = list(errors)
            _run_all(page)
            tp = page.locator(TP).first
            expect(tp.locator(".bitprism-grid .bitprism-cell").first).to_be_visible()
            tp.locator(".bitprism-next-nan").click()
            expect(tp.locator(".bitprism-prism .bitprism-caption")).to_contain_text("cell [")
            expect(tp.locator(".bitprism-cell-selected")).to_have_count(1)
            prism = page.locator(".bitprism-prism:not(.bitprism-tensorprism .bitprism-prism)")
            prism = prism.last
            expect(prism).to_be_visible()
            before = prism.inner_text()
            button = prism.locator("button:not([disabled])")
            for css in ("button:has-text('next up')", ".bitprism-bit"):
                if prism.locator(css).count():
                    button = prism.locator(css)
                    break
            button.first.click()
            page.wait_for_function(
                "([el, old]) => el.innerText !== old", arg=[prism.element_handle(), before],
                timeout=PAGE_TIMEOUT_MS)
            element_shot(page, tp, out / "notebook7-tensorprism.png")
            assert errors == loading, f"errors in the page: {errors[len(loading):]}"
        finally:
            browser.close()
