"""Where a key press on an app slider spends its time (a profiling tool, not a test).

    python tests/browser/latency_breakdown.py [--presses 10] [--sliders "coupling scale,breathing,R (Å)"]

Same stack and page-side timing as ``benchmarks/bench_app_browser.py`` (key press →
readout and diagram, or atom count, updated in the browser), plus the kernel's own
clock around the Python handler of the slider, so each press splits into

* **up**: key press → the kernel starts handling the change (browser, server, kernel queue);
* **kernel**: the handler (model prediction, figure data, messages built and sent);
* **down**: handler done → the browser shows the new readout and diagram;
  "readout text down" is the same for the readout alone.

Both clocks are the machine's wall clock (``time.time()`` in the kernel,
``performance.timeOrigin + performance.now()`` in the page). The load average
is printed because every number depends on it. Nothing is asserted; the
notebook and JupyterLab live in a temporary folder.
"""

from __future__ import annotations

import argparse
import json
import os
import secrets
import shutil
import statistics
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT / "benchmarks"))
sys.path.insert(0, str(ROOT / "tests" / "browser"))

import bench_app_browser as bench  # noqa: E402
from _lab import FLAGS, SENTINEL, free_port, make_notebook, open_notebook, start_lab, stop_lab  # noqa: E402


def _cells(log: str) -> list[str]:
    return [
        f"import sys, time, json\nsys.path.insert(0, {str(ROOT / 'tests')!r})\n"
        "import orbtool\nfrom orbtool.widgets import levels as _L, structure as _S\n"
        "from test_views_app import make_case\ncase, site = make_case()\n"
        f"KLOG = open({log!r}, 'w', buffering=1)\n"
        "def _timed(cls, name):\n"
        "    f = getattr(cls, name)\n"
        "    def g(self, *a, **k):\n"
        "        t0 = time.time(); r = f(self, *a, **k)\n"
        "        KLOG.write(json.dumps([name, t0 * 1e3, time.time() * 1e3]) + '\\n'); return r\n"
        "    setattr(cls, name, g)\n"
        "_timed(_L.LevelExplorer, '_on_change'); _timed(_S.StructureView, '_draw_atoms')\n"
        "app = orbtool.widgets.App(case)\napp.structure.only_near.value = True",
        "app", f"print({SENTINEL!r})"]


def _press(page, app, tab, label, kind, presses):
    app.locator(".lm-TabBar-tab", has_text=tab).first.click()
    page.wait_for_timeout(2500)
    app.locator(".widget-slider", has_text=label).first.locator(".noUi-handle").first.focus()
    rows = []
    for i in range(presses):
        key = "ArrowRight" if (i // 5) % 2 == 0 else "ArrowLeft"
        before = page.evaluate(f"({bench.STATE_JS})", kind)
        page.evaluate(f"({bench.WATCH_JS})()")
        t0 = page.evaluate("performance.now()")
        origin = page.evaluate("performance.timeOrigin")
        page.keyboard.press(key)
        try:
            ms = float(page.wait_for_function(bench.WAIT_JS, arg=[kind, before, t0], timeout=15_000).json_value())
            ra = page.evaluate("window.__orbtoolReadoutAt")
            rows.append((origin + t0, ms, None if ra is None else ra - t0))
        except Exception:  # nothing visible changed (e.g. the same atom count)
            pass
        page.wait_for_timeout(400)
    return rows


def _med(x):
    return statistics.median(x) if x else float("nan")


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--presses", type=int, default=10)
    ap.add_argument("--sliders", default="coupling scale,breathing,R (Å)")
    args = ap.parse_args()
    chromium = shutil.which("chromium")
    if chromium is None:
        print("Debian's chromium is not installed; nothing measured")
        return 1
    from playwright.sync_api import sync_playwright

    wanted = args.sliders.split(",")
    root = Path(tempfile.mkdtemp(prefix="orbtool-latency-"))
    log = root / "kernel.log"
    make_notebook(root / "latency.ipynb", _cells(str(log)))
    token, port = secrets.token_hex(16), free_port()
    load0 = os.getloadavg()
    proc = start_lab(root, token, port)
    results = {}
    try:
        with sync_playwright() as pw:
            browser = pw.chromium.launch(executable_path=chromium, args=FLAGS, headless=True)
            page = browser.new_page(viewport={"width": 1000, "height": 1100})
            open_notebook(page, port, token, "latency.ipynb")
            page.wait_for_timeout(2000)
            app = page.locator(".orbtool-app").first
            app.scroll_into_view_if_needed()
            for tab, label, kind in bench.SLIDERS:
                if label in wanted:
                    results[label] = _press(page, app, tab, label, kind, args.presses)
            browser.close()
    finally:
        stop_lab(proc, port, token)
    load1 = os.getloadavg()
    kernel = [json.loads(line) for line in log.read_text().splitlines()]
    print(f"load average (1/5/15 min) before {load0[0]:.1f}/{load0[1]:.1f}/{load0[2]:.1f}, "
          f"after {load1[0]:.1f}/{load1[1]:.1f}/{load1[2]:.1f}; {os.cpu_count()} cores")
    print(f"{'slider':<16} {'n':>3} {'total med':>9} {'worst':>6} {'up':>5} {'kernel':>6} {'down':>5} "
          f"{'readout down':>12}")
    for label, rows in results.items():
        name = "_draw_atoms" if label.startswith("R") else "_on_change"
        spans = [k for k in kernel if k[0] == name]
        up, work, down, total, rdown = [], [], [], [], []
        for t_press, ms, ra in rows:
            after = [k for k in spans if k[1] >= t_press - 5]
            if not after:
                continue
            k = after[0]
            up.append(k[1] - t_press)
            work.append(k[2] - k[1])
            down.append(t_press + ms - k[2])
            total.append(ms)
            if ra is not None:
                rdown.append(t_press + ra - k[2])
        print(f"{label:<16} {len(total):>3} {_med(total):>9.0f} {max(total, default=float('nan')):>6.0f} "
              f"{_med(up):>5.0f} {_med(work):>6.0f} {_med(down):>5.0f} {_med(rdown):>12.0f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
