"""What the JupyterLab browser tests share: the server, the browser and page helpers.

The fixtures ``lab`` and ``page`` (in ``conftest.py``) are built from ``start_lab`` and
``open_browser``; the helpers wait for the kernel, poll, drag and save failure dumps.
Follows shared/BROWSER-TESTING.md: loopback server with every Jupyter directory isolated,
Debian's chromium through playwright's ``executable_path`` (nothing is downloaded).
"""

from __future__ import annotations

import contextlib
import importlib.util
import json
import os
import secrets
import shutil
import socket
import subprocess
import sys
import time
import urllib.request
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
ARTIFACTS = Path(__file__).resolve().parent / "artifacts"
#: Notebooks copied into the server's root for the tests to open.
SMOKE_NOTEBOOKS = (ROOT / "notebooks" / "explore_smoke.ipynb",
                   ROOT / "notebooks" / "effect_smoke.ipynb")
CHROMIUM = os.environ.get("HEDGEROW_CHROMIUM", "/usr/bin/chromium")
CHROMIUM_FLAGS = ["--no-sandbox", "--disable-gpu", "--disable-background-networking",
                  "--disable-component-update", "--disable-sync", "--no-first-run",
                  "--disable-dev-shm-usage"]


def missing():
    """Return what the lab tests need and this machine lacks (empty when all is there)."""
    out = [m for m in ("playwright", "jupyterlab", "ipywidgets", "bqplot", "ipykernel")
           if importlib.util.find_spec(m) is None]
    if not Path(CHROMIUM).exists():
        out.append(f"chromium at {CHROMIUM}")
    return out


def skip_unless_ready(pytest):
    """Skip the calling test module when a piece is missing; fail instead under CI=true."""
    lacking = missing()
    if lacking:
        reason = (f"browser test needs {', '.join(lacking)} (install the test extra and "
                  f"chromium)")
        if os.environ.get("CI", "").lower() == "true":
            raise RuntimeError(f"CI=true but {reason}")
        pytest.skip(reason, allow_module_level=True)


def free_port():
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def write_settings(settings_dir: Path):
    """User settings so no kernel-selection dialog or news toast covers the page."""
    for rel, body in (
        ("@jupyterlab/notebook-extension/tracker.jupyterlab-settings",
         {"autoStartDefaultKernel": True}),
        ("@jupyterlab/apputils-extension/notification.jupyterlab-settings",
         {"fetchNews": "false", "checkForUpdates": False}),
    ):
        path = settings_dir / rel
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(json.dumps(body))


@contextlib.contextmanager
def start_lab(base: Path):
    """Run JupyterLab on a free loopback port; yield its url, token, record file and root.

    The kernels import this checkout's hedgerow (``PYTHONPATH``) and find the record file
    the smoke notebooks write in ``HEDGEROW_BROWSER_RECORD``.
    """
    root = base / "root"
    root.mkdir()
    for book in SMOKE_NOTEBOOKS:
        shutil.copy(book, root / book.name)
    record = base / "record.json"
    env = dict(os.environ)
    for var, sub in (("JUPYTER_CONFIG_DIR", "config"), ("JUPYTER_RUNTIME_DIR", "runtime"),
                     ("JUPYTERLAB_SETTINGS_DIR", "settings"),
                     ("JUPYTERLAB_WORKSPACES_DIR", "workspaces")):
        (base / sub).mkdir()
        env[var] = str(base / sub)
    write_settings(base / "settings")
    env["HEDGEROW_BROWSER_RECORD"] = str(record)
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    port, token = free_port(), secrets.token_hex(16)
    log = open(base / "server.log", "w")
    proc = subprocess.Popen(
        [sys.executable, "-m", "jupyter", "lab", "--no-browser", "--ServerApp.ip=127.0.0.1",
         f"--ServerApp.port={port}", "--ServerApp.port_retries=0",
         f"--IdentityProvider.token={token}", f"--ServerApp.root_dir={root}",
         "--ServerApp.allow_root=True",
         "--LabApp.check_for_updates_class=jupyterlab.NeverCheckForUpdate",
         "--LabApp.news_url=None", "--LabApp.expose_app_in_browser=True"],
        env=env, stdout=log, stderr=subprocess.STDOUT, cwd=root)
    try:
        url = f"http://127.0.0.1:{port}"
        deadline = time.monotonic() + 45
        while True:
            try:
                with urllib.request.urlopen(f"{url}/api/status?token={token}", timeout=2):
                    break
            except OSError:
                if proc.poll() is not None or time.monotonic() > deadline:
                    raise RuntimeError("JupyterLab did not start: "
                                       + (base / "server.log").read_text()[-2000:]) from None
                time.sleep(0.3)
        yield {"url": url, "token": token, "record": record, "log": base / "server.log",
               "root": root}
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=15)
        except subprocess.TimeoutExpired:
            proc.kill()
        log.close()


@contextlib.contextmanager
def open_browser(profile: Path):
    """Yield one headless Chromium page (fresh profile), its console lines captured."""
    from playwright.sync_api import sync_playwright

    with sync_playwright() as p:
        ctx = p.chromium.launch_persistent_context(
            str(profile), executable_path=CHROMIUM, headless=True, args=CHROMIUM_FLAGS,
            viewport={"width": 1400, "height": 1000})
        try:
            pg = ctx.pages[0] if ctx.pages else ctx.new_page()
            pg.console_lines = []
            pg.on("console", lambda m: pg.console_lines.append(f"{m.type}: {m.text}"))
            yield pg
        finally:
            ctx.close()


KERNEL_READY = """() => {
  const w = window.jupyterapp && window.jupyterapp.shell.currentWidget;
  const k = w && w.sessionContext && w.sessionContext.session
            && w.sessionContext.session.kernel;
  return k && k.connectionStatus === 'connected' && k.status === 'idle' ? k.id : null;
}"""


def wait_for_kernel(page, timeout=60):
    """Wait until the same connected, idle kernel is seen twice a second apart."""
    from playwright.sync_api import Error as PlaywrightError

    deadline = time.monotonic() + timeout
    last = None
    while time.monotonic() < deadline:
        try:
            kid = page.evaluate(KERNEL_READY)
        except PlaywrightError as exc:
            # JupyterLab may still be navigating (a workspace redirect right after the
            # first load destroys the page's context); poll the new page instead
            if "Execution context was destroyed" not in str(exc):
                raise
            kid = None
        if kid and kid == last:
            return kid
        last = kid
        time.sleep(1.0)
    raise TimeoutError("the notebook's kernel never became connected and idle")


def run_all(page):
    """Run every cell of the current notebook through the Run menu."""
    page.locator(".lm-MenuBar-itemLabel", has_text="Run").first.click()
    page.locator(".lm-Menu-itemLabel", has_text="Run All Cells").first.click()


def read_record(path):
    """The JSON the smoke notebook's kernel wrote last (None while absent or half-written)."""
    try:
        return json.loads(Path(path).read_text())
    except (OSError, ValueError):
        return None


def wait_until(fn, timeout, what):
    """Poll ``fn`` every 0.1 s until it returns something true; return that."""
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        value = fn()
        if value:
            return value
        time.sleep(0.1)
    raise TimeoutError(f"timed out after {timeout} s waiting for {what}")


def settled(page, locator, pause=0.5):
    """True once ``locator`` is on screen and its box is the same ``pause`` s apart."""
    if locator.count() == 0:
        return False
    locator.scroll_into_view_if_needed()
    first = locator.bounding_box()
    time.sleep(pause)
    return bool(first) and first["width"] > 0 and locator.bounding_box() == first


def drag(page, handle, dx):
    """Press on the middle of ``handle``, move ``dx`` px right in ten steps, release."""
    handle.scroll_into_view_if_needed()
    box = handle.bounding_box()
    x, y = box["x"] + box["width"] / 2, box["y"] + box["height"] / 2
    page.mouse.move(x, y)
    page.mouse.down()
    for k in range(1, 11):
        page.mouse.move(x + dx * k / 10, y)
    page.mouse.up()
    return time.perf_counter()


def save_failure(page, name):
    """A screenshot, the console log and the output areas' HTML in ``artifacts/``."""
    ARTIFACTS.mkdir(exist_ok=True)
    page.screenshot(path=str(ARTIFACTS / f"{name}-failure.png"), full_page=True)
    (ARTIFACTS / f"{name}-console.log").write_text("\n".join(page.console_lines))
    html = page.evaluate("() => Array.from(document.querySelectorAll('.jp-OutputArea'))"
                         ".map(e => e.innerHTML).join('\\n')")
    (ARTIFACTS / f"{name}-output.html").write_text(html)
