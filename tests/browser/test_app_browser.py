"""The app in a real browser: JupyterLab + headless Debian Chromium via Playwright.

Two notebooks, at a 1000 px wide window:

* ``01_quick_start.ipynb`` top to bottom, as a new user runs it;
* a notebook built here on the in-memory silicon vacancy (``tests/test_views_app.py``)
  whose case has a hostile name and whose coupling knob is set by code *before*
  the app is displayed. The browser must show the name as text, the diagram
  at the knob set by code; keys on the slider move readout and diagram
  together; Restore on the Structure tab works without a browser error;
  a single cube loaded by path shows in the 3-D view with the header on it.

Screenshots of every tab after each action go to a temporary folder (path
printed; ``ORBTOOL_BROWSER_ARTIFACTS`` chooses it). Nothing in the repository
is written: ``python tests/browser/screenshots.py`` refreshes the committed
pictures.
"""

from __future__ import annotations

import os
import secrets
import shutil
import sys
import tempfile
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).parent))
from _lab import (  # noqa: E402
    FLAGS,
    SENTINEL,
    SOURCE_TEXT_JS,
    free_port,
    ink_fraction,
    kernel_eval,
    make_notebook,
    open_notebook,
    start_lab,
    stop_lab,
    wait_kernel,
)

pytestmark = [pytest.mark.browser, pytest.mark.slow]

ROOT = Path(__file__).resolve().parents[2]
NOTEBOOK = Path(os.environ.get("ORBTOOL_APP_NOTEBOOK", ROOT / "notebooks" / "01_quick_start.ipynb"))
HOSTILE = '<img src=x onerror="document.title=\'pwned\'">'
COUPLING = 0.87  # set by code before display (inside every fit's validated range: the sliders start at 1)
WIDTH = 1000
#: kernel code: True once the browser reports every isosurface drawn at the slider's isovalue
IN_STEP = ("sv = app.structure; d = sv.view._ngl_repr_dict.get('1', {})\n"
           "lv = [r.get('params', {}).get('isolevel') for r in d.values()]\n"
           "print(bool(lv) and not sv._pending and len(lv) == sv._n_surfaces and "
           "all(v is not None and abs(v / sv.isovalue.value - 1) < 1e-6 for v in lv))")
SAVED_ISO = "print(ISO_SAVED)"


def _cells(tests_dir: Path, cube: Path) -> list[str]:
    return [
        f"import sys, dataclasses\nsys.path.insert(0, {str(tests_dir)!r})\nimport orbtool\n"
        "from test_views_app import make_case\n"
        f"case, site = make_case()\ncase = dataclasses.replace(case, name={HOSTILE!r})\n"
        "app = orbtool.widgets.App(case)\n"
        f"app.levels.set(coupling_scale={COUPLING})  # before display: the diagram must show it too\n"
        "app.structure.isovalue.value = app.structure.isovalue.value * 1.5\nISO_SAVED = app.structure.isovalue.value\n"
        "app.session.path.value = 's.orbsession'\nassert app.session.save() is not None, app.session.status.value\n"
        "app.structure.isovalue.value = app.structure.isovalue.value / 1.5\n"
        f"app.loader.path.value = {str(cube)!r}",
        "app",
        f"print({SENTINEL!r}, f'coupling × {{app.levels.coupling.value:.2f}}')",
    ]


def _write_cube(case, path: Path) -> None:
    import numpy as np
    from ase.io.cube import write_cube

    dens = np.asarray(case.grids["state"].values) ** 2
    dens[dens < 1e-30] = 0.0
    with open(path, "w") as fh:
        write_cube(fh, case.defect, data=dens)


@pytest.fixture(scope="module")
def chromium():
    path = shutil.which("chromium")
    if path is None:
        pytest.skip("Debian's chromium is not installed (.ci/run installs it with apt-get); browser test skipped")
    return path


@pytest.fixture(scope="module")
def shots():
    # artifacts outlive pytest's tmp_path rotation: a folder of their own (or ORBTOOL_BROWSER_ARTIFACTS)
    out = Path(os.environ.get("ORBTOOL_BROWSER_ARTIFACTS") or tempfile.mkdtemp(prefix="orbtool-browser-"))
    out.mkdir(parents=True, exist_ok=True)
    print(f"screenshots in {out}")
    return out


def _tab(app, page, name, wait=1200):
    app.locator(".lm-TabBar-tab", has_text=name).first.click()
    page.wait_for_timeout(wait)


def _all_tabs(app, page, shots, step):
    for name in ("Load", "Structure", "PDOS", "Level explorer", "Family"):
        _tab(app, page, name, 2500 if name == "Structure" else 900)
        app.screenshot(path=str(shots / f"{step}_{name.lower().replace(' ', '_')}.png"))


def _run(chromium, tmp_path, shots, notebook_name, check):
    token, port = secrets.token_hex(16), free_port()
    proc = start_lab(tmp_path, token, port)
    messages: list[tuple[str, str]] = []
    try:
        from playwright.sync_api import sync_playwright

        with sync_playwright() as pw:
            browser = pw.chromium.launch(executable_path=chromium, args=FLAGS, headless=True)
            page = browser.new_page(viewport={"width": WIDTH, "height": 1100})
            page.on("console", lambda m: messages.append((m.type, m.text)))
            page.on("pageerror", lambda e: messages.append(("pageerror", f"{e}\n{getattr(e, 'stack', '')}")))
            open_notebook(page, port, token, notebook_name)
            page.wait_for_timeout(1500)
            errors_in_cells = page.locator(".jp-OutputArea-output[data-mime-type='application/vnd.jupyter.stderr']")
            tracebacks = [t for t in errors_in_cells.all_inner_texts() if "Traceback" in t or "Error" in t]
            assert not tracebacks, tracebacks
            app = page.locator(".orbtool-app").first
            app.scroll_into_view_if_needed()
            check(page, app)
            browser.close()
    finally:
        stop_lab(proc, port, token)
        (shots / f"console_{notebook_name}.txt").write_text("\n".join(f"{t}: {m}" for t, m in messages))
    errors = [m for m in messages if m[0] in ("error", "pageerror")]
    assert not errors, errors


def test_quick_start_notebook_in_jupyterlab(chromium, tmp_path, shots):
    shutil.copy(NOTEBOOK, tmp_path / NOTEBOOK.name)

    def check(page, app):
        _tab(app, page, "Structure", 3000)
        png = app.locator("canvas >> visible=true").first.screenshot(path=str(shots / "quick_structure.png"))
        assert ink_fraction(png) > 0.01, "the nglview canvas is blank"
        _tab(app, page, "PDOS", 1500)
        assert ink_fraction(app.locator(".bk-Canvas >> visible=true").first.screenshot()) > 0.01
        _tab(app, page, "Level explorer", 1500)
        readout = app.locator(".orbtool-level").first
        before = readout.inner_text()
        handle = app.locator(".widget-slider", has_text="coupling scale").first.locator(".noUi-handle").first
        handle.focus()
        for _ in range(8):
            page.keyboard.press("ArrowRight")
            page.wait_for_timeout(120)
        page.wait_for_function("([b]) => { const e = document.querySelector('.orbtool-level');"
                               " return e && e.innerText !== b; }", arg=[before], timeout=15_000)
        page.wait_for_timeout(800)
        _all_tabs(app, page, shots, "quick")
        _tab(app, page, "Level explorer", 1500)  # the whole-app picture shows the explorer after the keys
        app.screenshot(path=str(shots / "app.png"))

    _run(chromium, tmp_path, shots, NOTEBOOK.name, check)


def test_set_before_display_keys_and_hostile_name(chromium, tmp_path, shots):
    _app_check(chromium, tmp_path, shots, further=False)


def test_restore_on_structure_tab_and_single_cube(chromium, tmp_path, shots):
    _app_check(chromium, tmp_path, shots, further=True)


def _app_check(chromium, tmp_path, shots, further):
    sys.path.insert(0, str(ROOT / "tests"))
    from test_views_app import make_case

    cube = tmp_path / "state.cube"
    _write_cube(make_case()[0], cube)
    make_notebook(tmp_path / "app_check.ipynb", _cells(ROOT / "tests", cube))

    def links(page):
        return [t for texts in page.evaluate(SOURCE_TEXT_JS, "orbtool.levels.links") for t in texts]

    def check(page, app):
        # the hostile case name is text in the header, never an element
        header = app.locator(".orbtool-header").first
        assert "<img src=x" in header.inner_text()
        assert app.locator(".orbtool-header img").count() == 0 and page.title() != "pwned"
        _all_tabs(app, page, shots, "1_loaded")
        # knob set by code before display: the diagram shows it (not coupling × 1.00)
        _tab(app, page, "Level explorer", 1500)
        assert f"coupling × {COUPLING:.2f}" in links(page), links(page)
        readout = app.locator(".orbtool-level").first
        before = readout.inner_text()
        slider = app.locator(".widget-slider", has_text="coupling scale").first
        slider.locator(".noUi-handle").first.focus()
        for _ in range(5):
            page.keyboard.press("ArrowRight")
            page.wait_for_timeout(150)
        page.wait_for_function("([b]) => { const e = document.querySelector('.orbtool-level');"
                               " return e && e.innerText !== b; }", arg=[before], timeout=15_000)
        page.wait_for_timeout(1000)
        value = float(slider.locator(".widget-readout").first.inner_text())
        assert f"coupling × {value:.2f}" in links(page), (value, links(page))  # readout and diagram together
        _all_tabs(app, page, shots, "2_keys")
        if not further:
            return
        # restore on the Structure tab: progress shown, no browser error (checked at the end), and the
        # 3-D view in step with the isovalue slider: the isolevel the browser's NGL stage reports drawing
        # (nglview's _ngl_repr_dict, sent by the front end) is the slider's value, the one saved
        _tab(app, page, "Structure", 2500)
        app.locator(".orbtool-session button", has_text="Restore").first.click()
        page.locator(".orbtool-session .orbtool-msg", has_text="restored from").wait_for(timeout=300_000)
        progress = "p = app.session.progress; print(p.layout.visibility, p.value, p.bar_style)"
        assert kernel_eval(page, progress).strip() == "visible 4 success"
        in_step = wait_kernel(page, IN_STEP, "True")
        assert in_step == "True", in_step
        readout = app.locator(".orbtool-isovalue .widget-readout").first.inner_text()
        assert float(readout) == pytest.approx(float(kernel_eval(page, SAVED_ISO)), rel=0.03), readout
        png = app.locator("canvas >> visible=true").first.screenshot()
        assert ink_fraction(png) > 0.01, "the nglview canvas is blank after Restore"
        _all_tabs(app, page, shots, "3_restored")
        # a single cube by path, typed into the loader as a user does: the 3-D view shows it, the header
        # follows the file
        _tab(app, page, "Load", 800)
        box = app.locator(".orbtool-loader input[type=text]").first
        box.fill(str(cube))
        assert wait_kernel(page, "print(app.loader.path.value)", str(cube)) == str(cube)
        app.locator(".orbtool-loader button", has_text="Load").first.click()
        # the app switches to the Structure tab, so the loader's message is attached but hidden
        page.locator(".orbtool-loader .orbtool-msg", has_text="loaded").wait_for(state="attached", timeout=300_000)
        assert "state.cube" in app.locator(".orbtool-header").first.inner_text()
        assert wait_kernel(page, IN_STEP, "True") == "True"
        png = app.locator("canvas >> visible=true").first.screenshot()
        assert ink_fraction(png) > 0.01, "the nglview canvas is blank for a single cube"
        _all_tabs(app, page, shots, "4_single_cube")

    _run(chromium, tmp_path, shots, "app_check.ipynb", check)
