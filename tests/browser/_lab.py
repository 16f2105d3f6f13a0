"""JupyterLab + headless Debian Chromium helpers shared by the browser test and
``benchmarks/bench_app_browser.py`` (internal)."""

from __future__ import annotations

import io
import json
import os
import socket
import subprocess
import sys
import time
import urllib.request
from pathlib import Path

import numpy as np

SENTINEL = "ORBTOOL-APP-READY"
FLAGS = ["--no-sandbox", "--disable-gpu", "--enable-unsafe-swiftshader", "--disable-background-networking",
         "--disable-component-update", "--disable-sync", "--no-first-run", "--disable-quic"]


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def start_lab(root: Path, token: str, port: int) -> subprocess.Popen:
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
    while time.time() - t0 < 300:  # the machine may be busy: JupyterLab then takes minutes to start
        if proc.poll() is not None:
            raise RuntimeError(f"JupyterLab exited: {(root / 'lab.log').read_text()[-2000:]}")
        try:
            urllib.request.urlopen(f"http://127.0.0.1:{port}/api/status?token={token}", timeout=2)
            return proc
        except OSError:
            time.sleep(0.3)
    proc.terminate()
    raise RuntimeError("JupyterLab did not start within 300 s")


def stop_lab(proc: subprocess.Popen, port: int, token: str) -> None:
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


def ink_fraction(png: bytes) -> float:
    """Fraction of pixels that differ clearly (> 40 in some channel) from the
    most common colour (the opaque canvas background)."""
    from PIL import Image

    img = np.asarray(Image.open(io.BytesIO(png)).convert("RGB")).reshape(-1, 3).astype(int)
    colours, counts = np.unique(img, axis=0, return_counts=True)
    bg = colours[np.argmax(counts)]
    return float(np.mean(np.abs(img - bg).max(axis=1) > 40))



def open_notebook(page, port, token, name, timeout_ms=600_000):
    """Open notebook ``name`` in JupyterLab, run all cells, wait for SENTINEL in an output."""
    page.set_default_timeout(120_000)  # a busy machine: JupyterLab's assets and kernels are slow
    page.goto(f"http://127.0.0.1:{port}/lab/tree/{name}?token={token}", timeout=300_000)
    page.wait_for_function(
        "() => { const w = window.jupyterapp && window.jupyterapp.shell.currentWidget;"
        " const k = w && w.sessionContext && w.sessionContext.session && w.sessionContext.session.kernel;"
        " return k && k.connectionStatus === 'connected'; }", timeout=300_000)
    page.evaluate("window.jupyterapp.commands.execute('notebook:run-all-cells')")
    page.locator(".jp-OutputArea-output pre", has_text=SENTINEL).wait_for(timeout=timeout_ms)


#: JavaScript: run Python code in the open notebook's kernel (not shown in the notebook); resolves with its
#: printed output (the browser's own connection to the kernel, as the notebook's cells use it)
KERNEL_EVAL_JS = """async (code) => {
  const w = window.jupyterapp.shell.currentWidget;
  const k = w.sessionContext.session.kernel;
  const f = k.requestExecute({code, silent: false, store_history: false});
  let out = "";
  f.onIOPub = (msg) => {
    if (msg.header.msg_type === "stream") out += msg.content.text;
    if (msg.header.msg_type === "error") out += "ERROR " + msg.content.ename + ": " + msg.content.evalue;
  };
  await f.done;
  return out;
}"""


def kernel_eval(page, code: str) -> str:
    """Printed output of ``code`` run in the notebook's kernel from the page."""
    return page.evaluate(KERNEL_EVAL_JS, code)


def wait_kernel(page, code: str, expect: str, timeout_s: float = 300.0, every_ms: int = 1000) -> str:
    """Run ``code`` in the kernel until its output (stripped) is ``expect``; returns the last output."""
    t0 = time.time()
    out = ""
    while time.time() - t0 < timeout_s:
        out = kernel_eval(page, code).strip()
        if out == expect:
            return out
        page.wait_for_timeout(every_ms)
    return out


#: JavaScript: the text column of every bokeh data source named ``name`` in the page (all documents)
SOURCE_TEXT_JS = """(name) => {
  const out = [];
  const B = window.Bokeh; if (!B || !B.index) return out;
  const views = B.index.roots ? [...B.index.roots] : [...B.index];
  const docs = new Set(views.map((v) => v.model.document));
  for (const d of docs) {
    const m = d.get_model_by_name(name);
    if (!m) continue;
    const data = m.data;
    const col = data instanceof Map ? data.get("text") : data["text"];
    out.push(Array.from(col || []));
  }
  return out;
}"""


def make_notebook(path: Path, cells) -> None:
    """Write a notebook of code ``cells`` (strings) with nbformat."""
    import nbformat

    nb = nbformat.v4.new_notebook()
    nb.cells = [nbformat.v4.new_code_cell(c) for c in cells]
    nb.metadata["kernelspec"] = {"name": "python3", "display_name": "Python 3", "language": "python"}
    nbformat.write(nb, str(path))
