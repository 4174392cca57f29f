"""Helpers of the real-browser tests: find the browser, run a private JupyterLab, drive a page.

Nothing here talks to the network beyond 127.0.0.1. JupyterLab runs with every Jupyter folder
(settings, workspaces, config, runtime, data) inside a temporary directory, with a kernel spec of
its own that points at this interpreter, so a person's own Jupyter set-up changes nothing.
"""

from __future__ import annotations

import json
import os
import re
import secrets
import shutil
import signal
import socket
import subprocess
import sys
import time
import urllib.error
import urllib.request
from contextlib import contextmanager
from dataclasses import dataclass, field
from html.parser import HTMLParser
from pathlib import Path
from typing import Any, Iterator

import pytest

REPO = Path(__file__).resolve().parents[1]

#: How long a page action or expectation, one timed step of a session, a notebook's kernel and
#: running every cell may take (generous: CI machines are shared).
PAGE_TIMEOUT_MS = 60_000
STEP_TIMEOUT_MS = 30_000
KERNEL_TIMEOUT_S = 180.0
RUN_TIMEOUT_S = 240.0

#: The kernel spec the test notebooks name; written into the private Jupyter data folder.
KERNEL_NAME = "bitprism-browser-test"

#: Flags known to work for Debian's chromium in a container without a display or a GPU.
CHROMIUM_ARGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--disable-dev-shm-usage",
]

INSTALL_HINT = (
    'install what it needs with `apt-get install -y chromium` (the browser) and '
    '`pip install -e ".[test]"` (jupyterlab, playwright, nbconvert)'
)


def in_ci() -> bool:
    return os.environ.get("CI", "").strip().lower() in ("1", "true", "yes")


def find_chromium() -> str | None:
    """The browser to drive: $BITPRISM_CHROMIUM, else Debian's ``chromium`` on the PATH."""
    explicit = os.environ.get("BITPRISM_CHROMIUM")
    if explicit:
        return explicit if Path(explicit).exists() else None
    for name in ("chromium", "chromium-browser"):
        found = shutil.which(name)
        if found:
            return found
    return None


def missing_requirements(*, browser: bool = True, lab: bool = True) -> list[str]:
    """What is missing for a browser test, as short phrases (empty when all is there)."""
    missing = []
    try:
        import playwright.sync_api  # noqa: F401
    except ImportError:
        missing.append("the playwright Python package")
    if lab:
        try:
            import jupyterlab  # noqa: F401
        except ImportError:
            missing.append("jupyterlab")
    try:
        import nbconvert  # noqa: F401
        import nbformat  # noqa: F401
    except ImportError:
        missing.append("nbformat/nbconvert")
    if browser and find_chromium() is None:
        missing.append("a Chromium browser (no `chromium` on the PATH, nor $BITPRISM_CHROMIUM)")
    return missing


def require(*, lab: bool = True) -> str:
    """Skip (outside CI) or fail (in CI) when the browser test cannot run; return the browser."""
    missing = missing_requirements(lab=lab)
    if missing:
        text = f"browser test cannot run: missing {', '.join(missing)}; {INSTALL_HINT}"
        if in_ci():
            pytest.fail(text + " (CI=true: a missing browser is a failure, not a skip)")
        pytest.skip(text)
    chromium = find_chromium()
    assert chromium is not None
    return chromium


def output_dir() -> Path:
    """Where screenshots and timings go: $BITPRISM_BROWSER_OUTPUT or test-output/browser/."""
    env = os.environ.get("BITPRISM_BROWSER_OUTPUT")
    out = Path(env) if env else REPO / "test-output" / "browser"
    out.mkdir(parents=True, exist_ok=True)
    return out


def free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def write_notebook(path: Path, cells: list[str]) -> Path:
    """A notebook of code cells without outputs, naming the private kernel spec."""
    import nbformat

    nb = nbformat.v4.new_notebook()
    nb.metadata["kernelspec"] = {
        "name": KERNEL_NAME,
        "display_name": "Python (bitprism test)",
        "language": "python",
    }
    nb.metadata["language_info"] = {"name": "python"}
    nb.cells = [nbformat.v4.new_code_cell(src) for src in cells]
    nbformat.write(nb, str(path))
    return path


# ----- JupyterLab ------------------------------------------------------------------------------
@dataclass
class LabServer:
    """A JupyterLab process on 127.0.0.1 serving ``root`` (see ``start_lab``)."""

    root: Path
    port: int
    token: str
    process: subprocess.Popen[bytes]
    log_path: Path
    started: float = field(default_factory=time.monotonic)

    @property
    def base_url(self) -> str:
        return f"http://127.0.0.1:{self.port}"

    def url(self, path: str) -> str:
        sep = "&" if "?" in path else "?"
        return f"{self.base_url}/{path.lstrip('/')}{sep}token={self.token}"

    def log_tail(self, chars: int = 4000) -> str:
        try:
            return self.log_path.read_text(errors="replace")[-chars:]
        except OSError:
            return ""


def _jupyter_env(home: Path) -> dict[str, str]:
    env = dict(os.environ)
    dirs = {
        "JUPYTERLAB_SETTINGS_DIR": home / "lab-settings",
        "JUPYTERLAB_WORKSPACES_DIR": home / "lab-workspaces",
        "JUPYTER_CONFIG_DIR": home / "config",
        "JUPYTER_RUNTIME_DIR": home / "runtime",
        "JUPYTER_DATA_DIR": home / "data",
        "IPYTHONDIR": home / "ipython",
    }
    for name, path in dirs.items():
        path.mkdir(parents=True, exist_ok=True)
        env[name] = str(path)
    env.pop("JUPYTER_PATH", None)
    env.pop("JUPYTER_TOKEN", None)
    # No announcements or update checks: they would pop up over the screenshots.
    notes = dirs["JUPYTERLAB_SETTINGS_DIR"] / "@jupyterlab" / "apputils-extension"
    notes.mkdir(parents=True, exist_ok=True)
    (notes / "notification.jupyterlab-settings").write_text(
        json.dumps({"fetchNews": "false", "checkForUpdates": False})
    )
    # The kernel the test notebooks name: this very interpreter, whatever else is installed.
    spec = dirs["JUPYTER_DATA_DIR"] / "kernels" / KERNEL_NAME
    spec.mkdir(parents=True, exist_ok=True)
    (spec / "kernel.json").write_text(
        json.dumps(
            {
                "argv": [sys.executable, "-m", "ipykernel_launcher", "-f", "{connection_file}"],
                "display_name": "Python (bitprism test)",
                "language": "python",
            }
        )
    )
    return env


def _status_ok(server: LabServer) -> bool:
    try:
        with urllib.request.urlopen(server.url("api/status"), timeout=5) as r:
            return bool(r.status == 200)
    except (urllib.error.URLError, OSError):
        return False


def start_lab(root: Path, home: Path, *, timeout: float = 180.0, attempts: int = 3) -> LabServer:
    """Start JupyterLab serving ``root`` and wait until it answers; retry on a new port if it
    dies early (the free port can be taken between picking and binding)."""
    env = _jupyter_env(home)
    last = ""
    for attempt in range(attempts):
        port = free_port()
        token = secrets.token_hex(16)
        log_path = home / f"jupyterlab-{attempt}.log"
        cmd = [
            sys.executable, "-m", "jupyter", "lab",
            "--allow-root", "--no-browser",
            "--ip=127.0.0.1", f"--port={port}",
            f"--IdentityProvider.token={token}",
            "--ServerApp.port_retries=0",
            f"--ServerApp.root_dir={root}",
            "--LabApp.news_url=None",
            "--LabApp.check_for_updates_class=jupyterlab.NeverCheckForUpdate",
            "--LabApp.expose_app_in_browser=True",
            "--KernelSpecManager.ensure_native_kernel=True",
        ]  # fmt: skip
        with open(log_path, "wb") as log:
            proc = subprocess.Popen(
                cmd, cwd=str(root), env=env, stdin=subprocess.DEVNULL, stdout=log,
                stderr=subprocess.STDOUT, start_new_session=True,
            )
        server = LabServer(root=root, port=port, token=token, process=proc, log_path=log_path)
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            if proc.poll() is not None:
                break
            if _status_ok(server):
                return server
            time.sleep(0.25)
        last = server.log_tail()
        stop_lab(server)
    raise RuntimeError(f"JupyterLab did not start after {attempts} attempts; last log:\n{last}")


def lab_page(browser: Any, lab: LabServer) -> tuple[Any, list[str]]:
    """A 1280x1000 page that reaches only the lab (and data:/blob: URLs), with the page
    timeout set, and the list its script errors are collected in."""
    page = browser.new_page(viewport={"width": 1280, "height": 1000})
    page.set_default_timeout(PAGE_TIMEOUT_MS)
    block_network(page, (lab.base_url, "data:", "blob:"))
    errors: list[str] = []
    page.on("pageerror", lambda exc: errors.append(str(exc)))
    return page, errors


def element_shot(page: Any, element: Any, path: Path) -> None:
    """Screenshot one widget whole: grow the window so JupyterLab's notebook panel (which
    scrolls inside itself) shows all of it, let the layout settle, then put the window back."""
    size = page.viewport_size
    box = element.bounding_box()
    if box is not None and box["height"] + 250 > size["height"]:
        page.set_viewport_size({"width": size["width"], "height": int(box["height"]) + 250})
    try:
        element.scroll_into_view_if_needed()
        page.wait_for_timeout(200)
        element.screenshot(path=str(path))
    finally:
        page.set_viewport_size(size)


@contextmanager
def running_lab(root: Path, home: Path) -> Iterator[LabServer]:
    """A private JupyterLab serving ``root`` for the length of a ``with`` block."""
    server = start_lab(root, home)
    try:
        yield server
    finally:
        stop_lab(server)


class _Text(HTMLParser):
    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.parts: list[str] = []

    def handle_data(self, data: str) -> None:
        self.parts.append(data)


def markup_text(markup: str, collapse: bool = False) -> str:
    """The text of some markup as a browser holds it (``collapse``: style blocks dropped and
    whitespace collapsed, as the page shows it)."""
    if collapse:
        markup = re.sub(r"<style>.*?</style>", "", markup, flags=re.DOTALL)
    p = _Text()
    p.feed(markup)
    text = "".join(p.parts)
    return " ".join(text.split()) if collapse else text


def stop_lab(server: LabServer) -> None:
    """Shut the server down (kernels too) by its API, then make sure by process id."""
    proc = server.process
    if proc.poll() is None:
        try:
            req = urllib.request.Request(server.url("api/shutdown"), method="POST", data=b"")
            urllib.request.urlopen(req, timeout=10).close()
        except (urllib.error.URLError, OSError):
            pass
        try:
            proc.wait(timeout=20)
        except subprocess.TimeoutExpired:
            proc.terminate()
            try:
                proc.wait(timeout=10)
            except subprocess.TimeoutExpired:
                proc.kill()
                proc.wait(timeout=10)
    # Anything the server started and left behind (a kernel) is in its own process group.
    try:
        os.killpg(proc.pid, signal.SIGKILL)
    except (ProcessLookupError, PermissionError):
        pass


# ----- the browser -------------------------------------------------------------------------------
def launch_chromium(playwright: Any, executable: str) -> Any:
    return playwright.chromium.launch(
        executable_path=executable, headless=True, args=CHROMIUM_ARGS, timeout=120_000
    )


def block_network(page: Any, allowed_prefixes: tuple[str, ...]) -> None:
    """Abort every request that does not start with one of ``allowed_prefixes``."""

    def handle(route: Any) -> None:
        if route.request.url.startswith(allowed_prefixes):
            route.continue_()
        else:
            route.abort()

    page.route("**/*", handle)


# In-page timing: a capture-phase listener stamps the moment the click (or the Enter key) reaches
# the page, and a MutationObserver stamps the first moment the expected text is in place. Both
# are performance.now() in the page, so the measure excludes Playwright's own round trips.
ARM_TIMER_JS = """
([selector, text, trigger]) => {
  const st = { t0: null, t1: null };
  window.__bitprismTimer = st;
  const start = (ev) => {
    if (trigger === 'keydown' && ev.key !== 'Enter') return;
    if (st.t0 === null) st.t0 = performance.now();
  };
  document.addEventListener(trigger, start, { capture: true, once: false });
  const check = () => {
    if (st.t0 === null || st.t1 !== null) return;
    const el = document.querySelector(selector);
    if (el && el.textContent.includes(text)) {
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

READ_TIMER_JS = """
() => {
  const st = window.__bitprismTimer;
  return st && st.t0 !== null && st.t1 !== null ? st.t1 - st.t0 : null;
}
"""

NOTEBOOK_READY_JS = """
(name) => {
  const app = window.jupyterapp;
  const w = app && app.shell && app.shell.currentWidget;
  if (!w || !w.context || !w.context.path.endsWith(name) || !w.sessionContext) return false;
  const ctx = w.sessionContext;
  const kernel = ctx.session && ctx.session.kernel;
  return !!(ctx.isReady && kernel && kernel.status === 'idle'
            && kernel.connectionStatus === 'connected');
}
"""

RUN_ALL_JS = """
() => { window.jupyterapp.commands.execute('notebook:run-all-cells'); return true; }
"""

# Progress of the current notebook from its model (independent of which cells are on screen).
CELLS_STATE_JS = """
() => {
  const w = window.jupyterapp.shell.currentWidget;
  const cells = w.content.model.cells;
  const out = [];
  for (let i = 0; i < cells.length; i++) {
    const c = cells.get(i);
    if (c.type !== 'code') continue;
    const errors = [];
    for (let j = 0; j < c.outputs.length; j++) {
      const o = c.outputs.get(j).toJSON();
      if (o.output_type === 'error') errors.push(o.ename + ': ' + o.evalue);
    }
    out.push({ count: c.executionCount, errors });
  }
  return out;
}
"""


def wait_for_cells(page: Any, timeout_s: float) -> list[dict[str, Any]]:
    """Wait until every code cell of the current notebook has an execution count."""
    deadline = time.monotonic() + timeout_s
    state: list[dict[str, Any]] = []
    while time.monotonic() < deadline:
        state = page.evaluate(CELLS_STATE_JS)
        if state and all(c["count"] is not None for c in state):
            return state
        page.wait_for_timeout(250)
    raise AssertionError(f"notebook did not finish within {timeout_s:.0f} s: {state}")


SAVE_JS = """
async () => { await window.jupyterapp.commands.execute('docmanager:save'); return true; }
"""


# ----- saved notebooks ---------------------------------------------------------------------------
def nbconvert_html(notebooks: list[Path], timeout: float = 300.0) -> list[Path]:
    """``jupyter nbconvert --to html`` on each notebook (one process); the pages written."""
    done = subprocess.run(
        [sys.executable, "-m", "jupyter", "nbconvert", "--to", "html", "--log-level=WARN",
         *map(str, notebooks)],
        capture_output=True, text=True, timeout=timeout, check=False,
    )
    assert done.returncode == 0, f"nbconvert failed:\n{done.stderr[-3000:]}"
    pages = [nb.with_suffix(".html") for nb in notebooks]
    for page in pages:
        assert page.is_file(), f"nbconvert wrote no {page.name}"
    return pages


def open_offline(browser: Any, html_path: Path, shot: Path, timeout_ms: float) -> Any:
    """Open a page from disk with every request other than file:, data: and blob: refused,
    screenshot it, and return the page (the caller closes the browser)."""
    page = browser.new_page(viewport={"width": 1100, "height": 900})
    page.set_default_timeout(timeout_ms)
    block_network(page, ("file:", "data:", "blob:"))
    page.goto(html_path.as_uri(), wait_until="load")
    page.screenshot(path=str(shot))
    return page


# ----- theme and width -----------------------------------------------------------------------------
THEME_JS = """
async (dark) => {
  const theme = dark ? 'JupyterLab Dark' : 'JupyterLab Light';
  await window.jupyterapp.commands.execute('apputils:change-theme', { theme });
  return true;
}
"""

OUTPUT_WIDTH_JS = """
() => {
  const out = document.querySelector('.jp-OutputArea-output');
  return out ? out.getBoundingClientRect().width : null;
}
"""


def set_theme(page: Any, dark: bool, timeout_s: float = 30.0) -> None:
    """Switch JupyterLab's theme (its own command) and wait until the page says it is on."""
    page.evaluate(THEME_JS, dark)
    want = "false" if dark else "true"
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        if page.evaluate("() => document.body.dataset.jpThemeLight") == want:
            page.wait_for_timeout(300)  # the theme's stylesheet settles
            return
        page.wait_for_timeout(100)
    raise AssertionError(f"JupyterLab did not switch to the {'dark' if dark else 'light'} theme")


def output_width(page: Any) -> float | None:
    """Width in CSS pixels of the first output area of the current notebook (None: none)."""
    value = page.evaluate(OUTPUT_WIDTH_JS)
    return None if value is None else float(value)
