"""App session panel: save the analysis, restore it in a fresh app, refuse damaged / newer files.

Reference for "exact": a restored float must have the same IEEE-754 bit pattern as the saved one
(``float.hex``, Python standard library); the file must be a ZIP archive with a JSON header, as
read by the standard library's ``zipfile`` and ``json`` (our format, docs/formats.md).
"""

from __future__ import annotations

import dataclasses
import json
import zipfile

import pytest

pytestmark = pytest.mark.slow  # the demo family is analysed twice (~5 s each on a shared core)


def _hex(v):
    return v.hex() if isinstance(v, float) else v


def _widget_values(app):
    """Every widget value the session must bring back, floats as bit patterns."""
    le, ex, sv = app.levels, app.pdos, app.structure
    return {"case": app.case.name, "tab": app.tabs.selected_index,
            "breathing": _hex(le.breathing.value), "mode": le.mode.value, "amplitude": _hex(le.amplitude.value),
            "coupling": _hex(le.coupling.value), "onsite": _hex(le.onsite.value), "swap": le.swap.value,
            "channels": tuple(ex.picker.value), "window": tuple(_hex(v) for v in ex.window.value),
            "isovalue": _hex(sv.isovalue.value), "only_near": sv.only_near.value, "radius": _hex(sv.radius.value),
            "board": (app.board.x.value, app.board.y.value), "readout": le.readout.value}


@pytest.fixture(scope="module")
def demo_family():
    import orbtool
    import orbtool.pipeline

    return orbtool.load_family(orbtool.pipeline.demo_manifest())


@pytest.fixture(scope="module")
def saved(tmp_path_factory, demo_family):
    from orbtool.widgets import App

    tmp = tmp_path_factory.mktemp("session")
    family = demo_family
    # pretend the data folder has since moved away: the session must carry the data itself
    family = dataclasses.replace(family, source=str(tmp / "moved-away" / "family.toml"))
    app = App(family)
    other = [c.name for c in family if c.name != app.case.name and c.name.startswith("GeS-rocksalt_V_S")][0]
    app.board.select(other)
    le = app.levels
    assert le is not None and app.case.name == other
    le.mode.value = le.mode.options[min(2, len(le.mode.options) - 1)]
    le.swap.value = le.swap.options[-1]
    # values that are not on any slider step, to catch rounding anywhere on the way
    assert le.set(breathing=0.0312345678901, amplitude=0.1234567, coupling_scale=1.1732,
                  onsite_shift=-0.3141592653589793) == []
    ex = app.pdos
    ex.picker.value = tuple(list(ex.choices)[2:5])
    ex.window.value = (-0.7312345, 1.3712345)
    app.structure.isovalue.value = app.structure.isovalue.value * 1.7
    app.structure.only_near.value = True
    app.structure.radius.value = 7.5
    app.board.x.value = app.board.x.options[-1][1]  # options are (plain name, column key)
    app.tabs.selected_index = 3
    values = _widget_values(app)
    path = tmp / "work.orbsession"
    app.session.path.value = str(path)
    assert app.session.save() == path, app.session.status.value
    return app, values, path


def test_restore_in_a_fresh_app_is_bit_exact(saved):
    from orbtool.widgets import App

    app, values, path = saved
    with zipfile.ZipFile(path) as z:  # standard-library reader: a ZIP with our JSON header
        head = json.loads(z.read("session.json"))
    assert head["format"] == "orbtool-session" and head["content"]["app"]["case"] == values["case"]
    fresh = App()
    fresh.session.path.value = str(path)
    notes = fresh.session.restore()
    assert notes is not None, fresh.session.status.value
    assert _widget_values(fresh) == values  # every float bit-identical, same level readout
    assert fresh.family is not app.family and fresh.family.name == app.family.name
    assert "no longer exists" in fresh.loader.status.value  # restored although the folder moved
    assert "Traceback" not in fresh.session.status.value


def _rewrite_header(src, dst, edit):
    """Copy session ``src`` to ``dst`` with ``edit(doc)`` applied to its JSON header."""
    with zipfile.ZipFile(src) as zin, zipfile.ZipFile(dst, "w") as zout:
        for item in zin.infolist():
            data = zin.read(item.filename)
            if item.filename == "session.json":
                doc = json.loads(data)
                edit(doc)
                data = json.dumps(doc).encode()
            zout.writestr(item.filename, data, compress_type=zipfile.ZIP_STORED)  # stored: fast to write


def _set(**changes):
    def edit(doc):
        for key, value in changes.items():
            node = doc
            *parents, last = key.split("__")
            for p in parents:
                node = node[p]
            node[last] = value
    return edit


def test_damaged_newer_and_missing_files_leave_the_app_as_it_was(saved, tmp_path):
    from orbtool.session import SCHEMA_VERSION, save_session
    from orbtool.widgets import app_state

    app, values, path = saved
    raw = path.read_bytes()
    cut = tmp_path / "cut.orbsession"
    cut.write_bytes(raw[: len(raw) // 2])  # a copy interrupted half way
    newer = tmp_path / "newer.orbsession"
    _rewrite_header(path, newer, _set(schema=SCHEMA_VERSION + 1, orbtool="99.0"))
    # small sessions written through the public API (no data inside), each wrong in one way
    state = app_state(app)
    layout = save_session(tmp_path / "layout.orbsession", {"app": {**state, "state_version": 99}, "data": None})
    edited = save_session(tmp_path / "edited.orbsession", {"app": {**state, "levels": {
        **state["levels"], "coupling_scale": "1.2 or so"}}, "data": None})
    gone = save_session(tmp_path / "gone.orbsession", {"app": {**state, "source": {  # no data, folder vanished
        "path": "", "origin": str(tmp_path / "gone")}}, "data": None})
    wrong = save_session(tmp_path / "wrong.orbsession", {"app": state, "data": [1.0, 2.0]})
    other = save_session(tmp_path / "other.orbsession", {"fits": [1.0, 2.0]})
    cases = [(cut, "damaged"), (newer, f"schema {SCHEMA_VERSION + 1}"), (tmp_path / "none.orbsession", "no such"),
             (layout, "layout version 99"), (edited, "levels.coupling_scale"), (gone, "could not be read again"),
             (other, "not one saved by the app"), (wrong, "expected a DefectCase")]
    for bad, fragment in cases:
        app.session.path.value = str(bad)
        assert app.session.restore() is None
        msg = app.session.status.value
        assert fragment in msg and bad.name in msg and "current analysis kept" in msg, msg
        assert "Traceback" not in msg
        assert _widget_values(app) == values


def test_save_refuses_to_replace_a_file_that_is_not_a_session(saved, tmp_path):
    app, _, _ = saved
    notes = tmp_path / "notes.txt"
    notes.write_text("my own notes\n")
    app.session.path.value = str(notes)
    assert app.session.save() is None
    assert "not an orbtool session" in app.session.status.value
    assert notes.read_text() == "my own notes\n"


def test_restored_sliders_are_clamped_to_the_fit_range_and_say_so(saved):
    from orbtool.widgets.state import app_state, apply_state

    app, _, _ = saved
    state = app_state(app)
    lo, hi, _ = app.levels.ranges["coupling_scale"]
    state["levels"]["coupling_scale"] = hi * 10.0
    state["pdos"]["channels"] = ["no such channel"] + state["pdos"]["channels"]
    notes = apply_state(app, state, app.loader.value)
    assert app.levels.coupling.value == hi
    assert any("coupling_scale" in n and "clamped" in n for n in notes)
    assert "clamped" in app.levels.notes.value
    assert any("no such channel" in n for n in notes)
    newer = dict(state, state_version=state["state_version"] + 1)
    with pytest.raises(Exception, match="Upgrade orbtool"):
        apply_state(app, newer, app.loader.value)


def test_single_case_round_trip_and_rollback_when_applying_fails(demo_family, tmp_path, monkeypatch):
    from orbtool.widgets import App, app_state, save_app
    from orbtool.widgets import state as state_mod

    case = next(c for c in demo_family if c.name.startswith("GeS-rocksalt_V_S"))
    app = App(case)
    assert app.family is None and app.levels is not None
    app.levels.set(coupling_scale=1.2345678901234, onsite_shift=0.0987654321)
    app.pdos.window.value = (-0.4321, 1.2345)
    saved_state, readout = app_state(app), app.levels.readout.value
    path = save_app(app, tmp_path / "one.orbsession")
    fresh = App()
    fresh.session.path.value = str(path)
    assert fresh.session.restore() is not None, fresh.session.status.value
    assert app_state(fresh) == saved_state and fresh.levels.readout.value == readout
    assert fresh.case.name == case.name and fresh.case is not case

    # a failure half way through applying (after the level knobs were moved) puts the app back
    before = app_state(fresh)
    with zipfile.ZipFile(path) as z:
        head = json.loads(z.read("session.json"))
    head["content"]["app"]["levels"]["coupling_scale"] = 0.75
    other = tmp_path / "other.orbsession"
    _rewrite_header(path, other, lambda doc: doc.update(content=head["content"]))

    def broken(sv, saved, notes):
        raise RuntimeError("view went away")
    monkeypatch.setattr(state_mod, "_set_structure", broken)
    fresh.session.path.value = str(other)
    assert fresh.session.restore() is None
    assert "view went away" in fresh.session.status.value and "current analysis kept" in fresh.session.status.value
    monkeypatch.undo()
    assert app_state(fresh) == before and fresh.levels.readout.value == readout
