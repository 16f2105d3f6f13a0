"""Browser response of the app: key press on a slider → updated readout and diagram.

Runs JupyterLab with headless Debian Chromium (the stack of ``tests/browser``),
opens the app on the in-memory silicon vacancy of ``tests/test_views_app.py``
and, for each slider, presses an arrow key ``--presses`` times. Each press is
timed in the page (``performance.now()``) from just before the key event to
the frame in which the readout text *and* the diagram's data source (level
explorer) or the atom count (structure R slider) show the new state.

    python benchmarks/bench_app_browser.py [--presses 20]

Prints median and worst per slider and the machine load (``os.getloadavg``)
before and after, because the numbers depend on it. A benchmark, not a test:
nothing is asserted.
"""

from __future__ import annotations

import argparse
import os
import secrets
import shutil
import statistics
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests" / "browser"))
sys.path.insert(0, str(ROOT / "tests"))

from _lab import FLAGS, SENTINEL, free_port, make_notebook, open_notebook, start_lab, stop_lab  # noqa: E402

#: page-side state of one view: the readout text plus the data the diagram draws
STATE_JS = """(kind) => {
  const txt = (sel) => { const e = document.querySelector(sel); return e ? e.innerText : ""; };
  if (kind === "atoms") return txt(".orbtool-structure .orbtool-msg");
  let diag = "";
  const B = window.Bokeh;
  if (B && B.index) {
    const views = B.index.roots ? [...B.index.roots] : [...B.index];
    for (const d of new Set(views.map((v) => v.model.document))) {
      for (const n of ["orbtool.levels.sigma", "orbtool.levels.links"]) {
        const m = d.get_model_by_name(n);
        if (!m) continue;
        const data = m.data;
        const get = (k) => Array.from((data instanceof Map ? data.get(k) : data[k]) || []);
        diag += JSON.stringify([get("bottom"), get("text")]);
      }
    }
  }
  return txt(".orbtool-level") + "|" + diag;
}"""

#: resolves with ms from t0 to the frame where the diagram (or the atom count) changed, and the readout
#: too when its text changes at all (a step can move the level by less than the readout's last digit)
WAIT_JS = """([kind, before, t0]) => {
  const s = (%s)(kind);
  if (kind === "atoms") return s !== before ? performance.now() - t0 : false;
  const [r0, d0] = before.split("|"); const [r1, d1] = s.split("|");
  if (d1 === d0) return false;
  const tr = window.__orbtoolReadoutAt;
  return Math.max(performance.now(), tr || 0) - t0;
}""" % STATE_JS

#: marks the time of the first change of the readout after a key press
WATCH_JS = """() => {
  window.__orbtoolReadoutAt = null;
  const e = document.querySelector(".orbtool-level");
  if (!e) return;
  if (window.__orbtoolObs) window.__orbtoolObs.disconnect();
  window.__orbtoolObs = new MutationObserver(() => {
    if (window.__orbtoolReadoutAt === null) window.__orbtoolReadoutAt = performance.now(); });
  window.__orbtoolObs.observe(e.closest(".widget-html") || e.parentElement, {subtree: true, childList: true,
                                                                   characterData: true});
}"""

SLIDERS = (("Level explorer", "coupling scale", "levels"), ("Level explorer", "breathing", "levels"),
           ("Level explorer", "on-site offset", "levels"), ("Structure", "R (Å)", "atoms"))


def _cells() -> list[str]:
    return [f"import sys\nsys.path.insert(0, {str(ROOT / 'tests')!r})\nimport orbtool\n"
            "from test_views_app import make_case\ncase, site = make_case()\n"
            "app = orbtool.widgets.App(case)\napp.structure.only_near.value = True",
            "app", f"print({SENTINEL!r})"]


def measure(page, app, tab, label, kind, presses):
    app.locator(".lm-TabBar-tab", has_text=tab).first.click()
    page.wait_for_timeout(2500)
    slider = app.locator(".widget-slider", has_text=label).first
    handle = slider.locator(".noUi-handle").first
    handle.focus()
    times = []
    unchanged = [0]
    for i in range(presses):
        key = "ArrowRight" if (i // 5) % 2 == 0 else "ArrowLeft"  # stay inside the range
        before = page.evaluate(f"({STATE_JS})", kind)
        page.evaluate(f"({WATCH_JS})()")
        t0 = page.evaluate("performance.now()")
        page.keyboard.press(key)
        try:
            ms = page.wait_for_function(WAIT_JS, arg=[kind, before, t0], timeout=8_000).json_value()
            times.append(float(ms))
        except Exception:  # the step changed nothing visible (e.g. the same atom count): not a response to time
            unchanged[0] += 1
        page.wait_for_timeout(250)  # a person's pace between presses
    return times, unchanged[0]


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--presses", type=int, default=20)
    args = ap.parse_args()
    chromium = shutil.which("chromium")
    if chromium is None:
        print("Debian's chromium is not installed; nothing measured")
        return 1
    from playwright.sync_api import sync_playwright

    root = Path(tempfile.mkdtemp(prefix="orbtool-bench-browser-"))
    make_notebook(root / "bench.ipynb", _cells())
    token, port = secrets.token_hex(16), free_port()
    load0 = os.getloadavg()
    proc = start_lab(root, token, port)
    results = {}
    try:
        with sync_playwright() as pw:
            browser = pw.chromium.launch(executable_path=chromium, args=FLAGS, headless=True)
            page = browser.new_page(viewport={"width": 1000, "height": 1100})
            open_notebook(page, port, token, "bench.ipynb")
            page.wait_for_timeout(2000)
            app = page.locator(".orbtool-app").first
            app.scroll_into_view_if_needed()
            for tab, label, kind in SLIDERS:
                results[label] = measure(page, app, tab, label, kind, args.presses)
            browser.close()
    finally:
        stop_lab(proc, port, token)
    load1 = os.getloadavg()
    print(f"machine: {os.cpu_count()} cores; load average (1/5/15 min) before {load0[0]:.1f}/{load0[1]:.1f}/"
          f"{load0[2]:.1f}, after {load1[0]:.1f}/{load1[1]:.1f}/{load1[2]:.1f}; {time.strftime('%Y-%m-%d %H:%M')}")
    print(f"{'slider':<16} {'timed':>6} {'no change':>9} {'median ms':>10} {'worst ms':>9}")
    for label, (t, n0) in results.items():
        med, worst = (statistics.median(t), max(t)) if t else (float("nan"), float("nan"))
        print(f"{label:<16} {len(t):>6} {n0:>9} {med:>10.0f} {worst:>9.0f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
