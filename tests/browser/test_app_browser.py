"""The app in a real browser: JupyterLab + headless Debian Chromium via Playwright.

Runs the app notebook top to bottom in JupyterLab, moves a level-explorer
slider with the keyboard, and checks that the readout changed, that the
bokeh and nglview canvases are not blank, and that the browser console
reported no error. Screenshots go to a temporary folder (path printed) and
one to ``sample_outputs/app_screenshot.png``.
"""

from __future__ import annotations

import io
import json
import os
import secrets
import shutil
import socket
import subprocess
import sys
import tempfile
import time
import urllib.request
from pathlib import Path

import numpy as np
import pytest

pytestmark = [pytest.mark.browser, pytest.mark.slow]

ROOT = Path(__file__).resolve().parents[2]
NOTEBOOK = Path(os.environ.get("ORBTOOL_APP_NOTEBOOK", ROOT / "notebooks" / "01_quick_start.ipynb"))
SENTINEL = "ORBTOOL-APP-READY"
FLAGS = ["--no-sandbox", "--disable-gpu", "--enable-unsafe-swiftshader", "--disable-background-networking",
         "--disable-component-update", "--disable-sync", "--no-first-run", "--disable-quic"]


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _start_lab(root: Path, token: str, port: int) -> subprocess.Popen:
    env = dict(os.environ, JUPYTER_CONFIG_DIR=str(root / ".cfg"), JUPYTER_RUNTIME_DIR=str(root / ".rt"),
               JUPYTERLAB_WORKSPACES_DIR=str(root / ".ws"), JUPYTERLAB_SETTINGS_DIR=str(root / ".settings"),
               JUPYTER_PLATFORM_DIRS="1")
    # no news or update pop-ups over the notebook
    note = root / ".settings" / "@jupyterlab" / "apputils-extension"
    note.mkdir(parents=True, exist_ok=True)
    (note / "notification.jupyterlab-settings").write_text(json.dumps({"fetchNews": "false",
                                                                       "checkForUpdates": False}))
    cmd = [sys.executable, "-m", "jupyter", "lab", "--no-browser", "--ip=127.0.0.1", f"--port={port}",
           f"--IdentityProvider.token={token}", f"--ServerApp.root_dir={root}", "--allow-root",
           "--LabApp.expose_app_in_browser=True", "--LabApp.news_url=None",
           "--LabApp.check_for_updates_class=jupyterlab.NeverCheckForUpdate"]
    log = open(root / "lab.log", "w")
    proc = subprocess.Popen(cmd, env=env, stdout=log, stderr=subprocess.STDOUT, cwd=root)
    t0 = time.time()
    while time.time() - t0 < 90:
        if proc.poll() is not None:
            raise RuntimeError(f"JupyterLab exited: {(root / 'lab.log').read_text()[-2000:]}")
        try:
            urllib.request.urlopen(f"http://127.0.0.1:{port}/api/status?token={token}", timeout=2)
            return proc
        except OSError:
            time.sleep(0.3)
    proc.terminate()
    raise RuntimeError("JupyterLab did not start within 90 s")


def _stop_lab(proc: subprocess.Popen, port: int, token: str) -> None:
    # polite shutdown first (also stops the kernels), then the PID we started
    try:
        req = urllib.request.Request(f"http://127.0.0.1:{port}/api/shutdown?token={token}", method="POST")
        urllib.request.urlopen(req, timeout=5)
    except OSError:
        pass
    try:
        proc.wait(15)
    except subprocess.TimeoutExpired:
        proc.terminate()
        try:
            proc.wait(10)
        except subprocess.TimeoutExpired:
            proc.kill()


def _ink_fraction(png: bytes) -> float:
    """Fraction of pixels that differ clearly (> 40 in some channel) from the
    most common colour (the opaque canvas background)."""
    from PIL import Image

    img = np.asarray(Image.open(io.BytesIO(png)).convert("RGB")).reshape(-1, 3).astype(int)
    colours, counts = np.unique(img, axis=0, return_counts=True)
    bg = colours[np.argmax(counts)]
    return float(np.mean(np.abs(img - bg).max(axis=1) > 40))


@pytest.fixture(scope="module")
def chromium():
    path = shutil.which("chromium")
    if path is None:
        pytest.skip("Debian's chromium is not installed (.ci/run installs it with apt-get); browser test skipped")
    return path


def test_app_notebook_in_jupyterlab(chromium, tmp_path):
    from playwright.sync_api import sync_playwright

    # artifacts outlive pytest's tmp_path rotation: a folder of their own (or ORBTOOL_BROWSER_ARTIFACTS)
    shots = Path(os.environ.get("ORBTOOL_BROWSER_ARTIFACTS") or tempfile.mkdtemp(prefix="orbtool-browser-"))
    shots.mkdir(parents=True, exist_ok=True)
    print(f"screenshots in {shots}")
    shutil.copy(NOTEBOOK, tmp_path / NOTEBOOK.name)
    token, port = secrets.token_hex(16), _free_port()
    proc = _start_lab(tmp_path, token, port)
    messages: list[tuple[str, str]] = []
    try:
        with sync_playwright() as pw:
            browser = pw.chromium.launch(executable_path=chromium, args=FLAGS, headless=True)
            page = browser.new_page(viewport={"width": 1400, "height": 1100})
            page.on("console", lambda m: messages.append((m.type, m.text)))
            page.on("pageerror", lambda e: messages.append(("pageerror", f"{e}\n{getattr(e, 'stack', '')}")))
            page.goto(f"http://127.0.0.1:{port}/lab/tree/{NOTEBOOK.name}?token={token}")
            page.wait_for_function(
                "() => { const w = window.jupyterapp && window.jupyterapp.shell.currentWidget;"
                " const k = w && w.sessionContext && w.sessionContext.session && w.sessionContext.session.kernel;"
                " return k && k.connectionStatus === 'connected'; }", timeout=120_000)
            page.evaluate("window.jupyterapp.commands.execute('notebook:run-all-cells')")
            page.locator(".jp-OutputArea-output pre", has_text=SENTINEL).wait_for(timeout=180_000)
            page.wait_for_timeout(1500)
            errors_in_cells = page.locator(".jp-OutputArea-output[data-mime-type='application/vnd.jupyter.stderr']")
            tracebacks = [t for t in errors_in_cells.all_inner_texts() if "Traceback" in t or "Error" in t]
            assert not tracebacks, tracebacks

            app = page.locator(".orbtool-app").first
            app.scroll_into_view_if_needed()

            # structure tab: the nglview canvas must show something
            app.locator(".lm-TabBar-tab", has_text="Structure").first.click()
            page.wait_for_timeout(3000)
            ngl = app.locator("canvas >> visible=true").first
            ngl_png = ngl.screenshot(path=str(shots / "structure.png"))
            assert _ink_fraction(ngl_png) > 0.01, "the nglview canvas is blank"

            # PDOS tab: the bokeh canvas (inside shadow DOM; Playwright's CSS pierces it)
            app.locator(".lm-TabBar-tab", has_text="PDOS").first.click()
            page.wait_for_timeout(1500)
            bk = app.locator(".bk-Canvas >> visible=true").first
            bk_png = bk.screenshot(path=str(shots / "pdos.png"))
            assert _ink_fraction(bk_png) > 0.01, "the bokeh PDOS canvas is blank"

            # level explorer: move the coupling slider with the keyboard, the readout must change
            app.locator(".lm-TabBar-tab", has_text="Level explorer").first.click()
            page.wait_for_timeout(1500)
            readout = app.locator(".orbtool-level").first
            before = readout.inner_text()
            slider = app.locator(".widget-slider", has_text="coupling scale").first
            handle = slider.locator(".noUi-handle").first
            handle.focus()
            for _ in range(8):
                page.keyboard.press("ArrowRight")
                page.wait_for_timeout(120)
            page.wait_for_function(
                "([b]) => { const e = document.querySelector('.orbtool-level');"
                " return e && e.innerText !== b; }", arg=[before], timeout=15_000)
            after = readout.inner_text()
            assert after != before
            page.wait_for_timeout(800)
            lv = app.locator(".bk-Canvas >> visible=true").first
            assert _ink_fraction(lv.screenshot(path=str(shots / "levels.png"))) > 0.01
            app.screenshot(path=str(shots / "app.png"))
            out = ROOT / "sample_outputs"
            out.mkdir(exist_ok=True)
            shutil.copy(shots / "app.png", out / "app_screenshot.png")
            browser.close()
    finally:
        _stop_lab(proc, port, token)
    (shots / "console.txt").write_text("\n".join(f"{t}: {m}" for t, m in messages))
    errors = [m for m in messages if m[0] in ("error", "pageerror")]
    assert not errors, errors
    assert before != after
