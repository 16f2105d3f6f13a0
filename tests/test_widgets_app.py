"""The app as a scientist uses it, headless: one knob state drives readout and
diagram (also when set before display), user text is escaped, own files with a
host field, single files, named uploads, sessions by reference, the 3-D view
built from its state before the browser has it.

Data: the in-memory silicon vacancy of ``test_views_app`` (ASE diamond Si,
Gaussian bands) and the Slater–Koster stand-in fit; files written with ASE.
"""

from __future__ import annotations

import dataclasses
import json
import sys
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).parent))

HOSTILE = '<img src=x onerror="document.title=\'pwned\'">'


@pytest.fixture(scope="module")
def si():
    from test_views_app import make_case

    return make_case()


@pytest.fixture(scope="module")
def standin():
    from tb_standin import make_site

    from orbtool.tb.cluster import ClusterModel
    from orbtool.tb.fit import fit
    from orbtool.tb.targets import Target

    site = make_site("Si", "diamond", a=5.431, repeat=2)
    return fit(ClusterModel.around(site, orbitals="sp"), [Target("Si", above_vbm=0.6, gap=1.1, site=site)]), site


@pytest.fixture(scope="module")
def run_folders(si, tmp_path_factory):
    """A defect run (POSCAR + the state as a Gaussian cube) and its host POSCAR, as a user has them."""
    from ase.io import write
    from ase.io.cube import write_cube

    case, _ = si
    root = tmp_path_factory.mktemp("runs")
    d, h = root / "Si_vac", root / "host"
    d.mkdir()
    h.mkdir()
    write(d / "POSCAR", case.defect, format="vasp")
    write(h / "POSCAR", case.host, format="vasp")
    g = case.grids["state"]
    dens = np.asarray(g.values) ** 2
    dens[dens < 1e-30] = 0.0  # 3-digit exponents are a reader question of their own (reported), not this test's
    with open(d / "state.cube", "w") as fh:  # ASE writes bohr; values as given
        write_cube(fh, case.defect, data=dens)
    return d, h


# --------------------------------------------------------------------------------------- one knob state
def test_set_before_display_reaches_readout_diagram_and_the_browser_bundle(standin):
    from orbtool.views.levels import LEVEL_SOURCES
    from orbtool.widgets import LevelExplorer

    fit, site = standin
    le = LevelExplorer(fit, site)
    pane = le.widget.children[0]
    assert pane._view_count == 0  # not displayed yet
    k = 0.5 * (1.0 + le.coupling.max) if le.coupling.max > 1.0 else 0.5 * (1.0 + le.coupling.min)
    le.set(coupling_scale=k, onsite_shift=0.1)
    expected = fit.predict(coupling_scale=le.coupling.value, onsite_shift=le.onsite.value)  # the model itself
    assert le.state.coupling_scale == le.coupling.value and le.state.onsite_shift == le.onsite.value
    assert le.prediction.level == pytest.approx(expected.level, abs=1e-12)
    assert f"{expected.above_vbm:.3f}" in le.readout.value
    sigma = le.figure.select_one({"name": LEVEL_SOURCES[3]}).data
    assert sigma["bottom"][0] == pytest.approx(expected.level - expected.sigma, abs=1e-12)
    # what the browser renders first is the current state, not the one at construction
    bundle = json.dumps(pane.render_bundle)
    assert repr(float(sigma["bottom"][0])) in bundle or f"{sigma['bottom'][0]}" in bundle
    once_shown = pane.render_bundle
    pane._view_count = 1  # the browser reports a view: from now on only patches go out
    le.set(onsite_shift=0.0)
    assert pane.render_bundle is once_shown


def test_a_knob_change_is_one_document_patch_that_bokeh_applies(standin):
    # bokeh's PATCH-DOC message holds a list of events (bokeh.protocol.messages.patch_doc); the pane sends
    # all sources a knob changed as one such patch (3 comm messages: header, metadata, content). Checked by
    # applying that patch with bokeh's own Document.apply_json_patch to the document the browser was given.
    from bokeh.document import Document

    from orbtool.views.levels import LEVEL_SOURCES
    from orbtool.widgets import LevelExplorer

    fit, site = standin
    le = LevelExplorer(fit, site)
    pane = le.widget.children[0]
    bundle = json.loads(json.dumps(pane.render_bundle, default=str)) if isinstance(pane.render_bundle, dict) \
        else json.loads(pane.render_bundle)
    (doc_json,) = bundle["docs_json"].values()
    browser_doc = Document.from_json(doc_json)
    pane._view_count = 1  # shown in a browser
    sent = []
    pane.send = lambda content, buffers=None: sent.append(content)
    le.set(coupling_scale=le.coupling.min, onsite_shift=0.1)
    assert len(sent) == 3 and all(m["msg"] == "patch" for m in sent)
    header, content = json.loads(sent[0]["payload"]), json.loads(sent[2]["payload"])
    assert header["msgtype"] == "PATCH-DOC"
    changed = {e["model"]["id"] for e in content["events"]}
    assert len(changed) >= 2  # several sources moved, one message
    browser_doc.apply_json_patch(content)
    for name in LEVEL_SOURCES:
        ours = le.figure.select_one({"name": name}).data
        theirs = browser_doc.get_model_by_name(name).data
        assert {k: list(v) for k, v in theirs.items()} == {k: list(v) for k, v in ours.items()}, name


def test_knob_set_by_code_is_the_same_state_as_by_widget(standin):
    from orbtool.widgets import LevelExplorer

    fit, site = standin
    a, b = LevelExplorer(fit, site), LevelExplorer(fit, site)
    a.set(breathing=-0.05, coupling_scale=a.coupling.min)
    b.breathing.value = -0.05
    b.coupling.value = b.coupling.min
    assert a.state == b.state and a.readout.value == b.readout.value
    with pytest.raises(KeyError):
        a.set(bogus=1.0)


def test_odd_mode_and_toxic_swap_notes():
    from orbtool.widgets.levels import odd_mode_note, toxic_swap_note

    # parity selection rule: a u mode changes sign under inversion, the energy does not
    assert "second order" in odd_mode_note("T1u.2") and odd_mode_note("Eg.1") == "" and odd_mode_note("T2.1") == ""
    tox = toxic_swap_note("Sn → Pb")
    assert "Pb" in tox and "toxic" in tox and "not measurements" in tox
    assert toxic_swap_note("Sn → Ge") == "" and toxic_swap_note("(as fitted)") == ""


# ------------------------------------------------------------------------------------------ escaping
def test_hostile_case_name_is_shown_as_text(si):
    from orbtool.widgets import App

    case, _ = si
    app = App(dataclasses.replace(case, name=HOSTILE))
    assert "<img" not in app.header.value and "&lt;img src=x onerror=" in app.header.value


# ---------------------------------------------------------------------------------------- own data
def test_loader_host_field_lets_the_vacancy_be_located(run_folders):
    from orbtool.widgets import App

    d, h = run_folders
    app = App()
    app.loader.path.value, app.loader.host.value = str(d), str(h / "POSCAR")
    app.loader.button.click()
    assert app.case is not None and app.case.name == "Si_vac", app.loader.status.value
    assert app.analysis.site is not None and len(app.analysis.site.first_shell) == 4  # diamond: 4 neighbours
    assert "Si_vac" in app.header.value and app.structure is not None


def test_single_cube_shows_the_grid_and_says_what_is_missing(run_folders, si):
    from orbtool.widgets import App

    d, _ = run_folders
    case, _ = si
    app = App(case)
    assert app.loader.load(d / "state.cube") is not None, app.loader.status.value
    assert app.case is None and app.structure is not None and app.structure.isovalue is not None
    assert "state.cube" in app.header.value and "host structure" in app.header.value
    assert "Si_vac" not in app.header.value  # the header follows the loaded file
    assert app.tabs.selected_index == 1 and "state.cube" in app.loader.status.value
    assert "no model" in app.panes["Level explorer"].children[0].value


def test_uploads_keep_their_file_names(run_folders):
    from orbtool.widgets import Loader

    d, _ = run_folders
    files = [{"name": n, "content": memoryview((d / n).read_bytes())} for n in ("POSCAR", "state.cube")]
    loader = Loader()
    loader._on_upload({"new": files})
    assert loader.value is not None, loader.status.value
    assert loader.value.name == "POSCAR + state" and "orbtool-upload" not in loader.status.value


def test_element_colours_and_density_legend(si):
    from orbtool import style
    from orbtool.widgets import StructureView

    case, site = si
    g = case.grids["state"]
    dens = g.with_values(np.asarray(g.values) ** 2, unit="e/Å^3")
    sv = StructureView(case.defect, site, dens)
    assert style.element_colour("Si") in sv.legend.value and "density" in sv.legend.value
    assert "ψ" not in sv.legend.value
    reps = [m for m in sv.view._ngl_msg_archive if m.get("methodName") == "addRepresentation"]
    colours = {m["kwargs"].get("color") for m in reps}
    assert style.element_colour("Si") in colours
    assert not [m for m in reps if m["args"][0] == "unitcell"]  # NGL's orange cell is not used
    shapes = [m for m in sv.view._ngl_msg_archive if m.get("methodName") == "addShape"]
    cell = [m for m in shapes if m["args"][0] == "cell"][0]["args"][1]
    assert len(cell) == 12 and all(e[3] == pytest.approx([int(style.MUTED[i:i + 2], 16) / 255 for i in (1, 3, 5)])
                                   for e in cell)


def _calls(view, sent):
    """nglview call messages of ``view``: those sent to the browser (``sent``) and those still queued."""
    queued = [cb._ngl_msg for cb in view._callbacks_before_loaded + view._remote_call_thread.q]
    return [m for m in sent if m.get("type") == "call_method"] + queued


def test_structure_changes_wait_until_the_browser_has_drawn_the_view(si):
    # nglview's front end (nglview 4.0, js/src/widget_ngl.ts handleCallMethod) looks a "Representation"
    # call up as stage.compList[c].reprList[r]: a call for parts it has not drawn yet fails in the browser
    # ("Cannot read properties of undefined (reading 'reprList')"). The browser reports what it has drawn in
    # _ngl_repr_dict; changes made before that are sent once it reports, as the state they left.
    from orbtool.widgets import StructureView

    case, site = si
    sv = StructureView(case.defect, site, case.grids["state"])
    view = sv.view
    built = list(view._ngl_msg_archive)
    sent = []
    view.send = lambda msg, buffers=None: sent.append(msg)
    iso = sv.isovalue.value * 2.0
    sv.set(isovalue=iso, radius=8.0, only_near=True)
    assert sv.view is view and sv._pending == {"atoms", "iso"}
    assert [m for m in _calls(view, sent) if m["methodName"] in ("setParameters", "removeAllRepresentations")] == []
    assert view._ngl_msg_archive == built  # the archive stays the view as built (no re-sent cube data)
    assert f"isovalue {sv.isovalue.value:.3g} " in sv.enclosed.value  # the text follows at once
    view.loaded = True  # the browser has the widget, but not its components yet
    sv.set(isovalue=iso * 1.1)
    assert [m for m in sent if m.get("methodName") == "setParameters"] == []
    view._ngl_repr_dict = {"0": {"0": {}}, "1": {"0": {}}}  # structure and one surface of two drawn
    assert [m for m in sent if m.get("methodName") == "setParameters"] == [] and "iso" in sv._pending
    view._ngl_repr_dict = {"0": {"0": {}, "1": {}, "2": {}}, "1": {"0": {}, "1": {}}}  # all drawn
    assert not sv._pending
    iso_calls = [m for m in sent if m.get("methodName") == "setParameters"]
    assert [(m["component_index"], m["repr_index"]) for m in iso_calls] == [(1, 0), (1, 1)]
    assert all(m["kwargs"]["isolevel"] == pytest.approx(sv.isovalue.value) for m in iso_calls)
    adds = [m for m in sent if m.get("methodName") == "addRepresentation"]
    near = sum(len(m["kwargs"]["sele"].lstrip("@").split(",")) for m in adds if m["kwargs"]["sele"] != "none")
    assert f"{near} of {len(case.defect)} atoms shown" in sv.status.value and near < len(case.defect)
    # once drawn, a change goes out at once and still leaves the archive alone
    sent.clear()
    sv.set(radius=4.0)
    kinds = [m["methodName"] for m in sent if m.get("type") == "call_method"]
    assert kinds[0] == "removeAllRepresentations" and set(kinds[1:]) == {"addRepresentation"}
    assert view._ngl_msg_archive == built


# -------------------------------------------------------------------------------------------- sessions
def test_session_keeps_a_reference_and_a_hash_not_the_data(run_folders, tmp_path):
    import zipfile

    from orbtool.widgets import App

    d, h = run_folders
    app = App()
    app.loader.load(d, str(h / "POSCAR"))
    app.structure.isovalue.value = app.structure.isovalue.value * 1.5
    app.session.path.value = str(tmp_path / "s.orbsession")
    out = app.session.save()
    assert out is not None, app.session.status.value
    with zipfile.ZipFile(out) as z:
        head = json.loads(z.read("session.json"))
        arrays = [n for n in z.namelist() if n.startswith("arrays/")]
    src = head["content"]["app"]["source"]
    assert len(src["sha256"]) == 64 and src["host"].endswith("POSCAR") and not arrays
    assert out.stat().st_size < 20_000
    fresh = App()
    fresh.session.path.value = str(out)
    steps = []
    fresh.session.progress.observe(lambda c: steps.append(c["new"]), names="value")
    notes = fresh.session.restore()
    assert notes is not None, fresh.session.status.value
    assert steps[-1] == 4 and len(set(steps)) >= 3
    assert fresh.case.name == "Si_vac" and fresh.structure.isovalue.value == pytest.approx(
        app.structure.isovalue.value)
    assert not any("changed" in n for n in notes)
