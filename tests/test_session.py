"""Session files: exact round trip, atomic writes, schema handling.

The bit-exactness check compares raw bytes of arrays (numpy's .npy format is
lossless by specification: NEP 1, "A simple file format for NumPy arrays").
"""

import json
import zipfile

import numpy as np
import pytest
from ase.build import bulk
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp

from orbtool.case import DefectCase, Family
from orbtool.errors import SessionError
from orbtool.grid import Grid
from orbtool.session import SCHEMA_VERSION, load_session, save_session
from orbtool.spectra import Channel, ProjectedDOS


def _case():
    host = bulk("ZnS", "zincblende", a=5.4, cubic=True)
    d = host.copy()
    del d[3]
    g = Grid(np.random.default_rng(0).random((4, 5, 6)), d.cell[:], atoms=d, unit="e/Å^3", name="state")
    p = ProjectedDOS(np.linspace(-3, 3, 7), np.random.default_rng(1).random((2, 7)),
                     [Channel(0, "Zn", "s"), Channel(1, "S", "p")], fermi=0.3)
    return DefectCase("zb:V_S", d, host, charge=2, defect_pdos=p, grids={"state": g},
                      total_energy=-123.456789012345, labels={"motif": "zb"}, provenance=("guessed x",))


def _same_bits(a, b):
    return a.dtype == b.dtype and a.shape == b.shape and a.tobytes() == b.tobytes()


def test_round_trip_case_and_family(tmp_path):
    c = _case()
    f = Family((c,), name="demo", references={"mu": {"Zn": -1.1}})
    out = save_session(tmp_path / "s.orbsession", {"family": f, "sel": (1, 2), "slider": 0.05,
                                                   "odd": {3: "x"}, "inf": float("inf")})
    back = load_session(out)
    c2 = back["family"]["zb:V_S"]
    assert _same_bits(c2.grids["state"].values, c.grids["state"].values)
    assert _same_bits(c2.defect.positions, c.defect.positions)
    assert c2.defect.get_chemical_symbols() == c.defect.get_chemical_symbols()
    assert c2.total_energy == c.total_energy and c2.charge == 2
    assert c2.defect_pdos.channels[1] == Channel(1, "S", "p", 0)
    assert back["sel"] == (1, 2) and back["odd"] == {3: "x"} and back["inf"] == float("inf")
    assert back["family"].references == {"mu": {"Zn": -1.1}}


@settings(max_examples=40, deadline=None)
@given(tree=st.recursive(
    st.one_of(st.none(), st.booleans(), st.integers(-2**60, 2**60), st.floats(allow_nan=False),
              st.text(max_size=8),
              hnp.arrays(dtype=st.sampled_from([np.float64, np.int32, np.complex128]),
                         shape=hnp.array_shapes(max_dims=3, max_side=4))),
    lambda ch: st.one_of(st.lists(ch, max_size=4), st.dictionaries(st.text(max_size=5), ch, max_size=4),
                         st.tuples(ch, ch)),
    max_leaves=12))
def test_round_trip_property(tmp_path_factory, tree):
    path = tmp_path_factory.mktemp("s") / "x.orbsession"
    save_session(path, {"t": tree})
    back = load_session(path)["t"]

    def same(a, b):
        if isinstance(a, np.ndarray):
            return isinstance(b, np.ndarray) and _same_bits(a, b)
        if isinstance(a, dict):
            return a.keys() == b.keys() and all(same(a[k], b[k]) for k in a)
        if isinstance(a, (list, tuple)):
            return type(a) is type(b) and len(a) == len(b) and all(same(x, y) for x, y in zip(a, b))
        if isinstance(a, float):
            return np.float64(a).tobytes() == np.float64(b).tobytes()
        return a == b and type(a) is type(b)
    assert same(tree, back)


def test_crash_while_writing_keeps_old_file(tmp_path, monkeypatch):
    path = tmp_path / "s.orbsession"
    save_session(path, {"v": 1})
    before = path.read_bytes()

    def boom(*a, **k):
        raise OSError("disk full (simulated)")
    monkeypatch.setattr(np, "save", boom)
    with pytest.raises(OSError, match="simulated"):
        save_session(path, {"v": np.arange(3)})
    assert path.read_bytes() == before
    assert [p.name for p in tmp_path.iterdir()] == ["s.orbsession"]  # no temp file left behind
    monkeypatch.undo()
    assert load_session(path) == {"v": 1}


def test_refuses_newer_schema_and_migrates_older(tmp_path):
    newer = tmp_path / "new.orbsession"
    with zipfile.ZipFile(newer, "w") as z:
        z.writestr("session.json", json.dumps({"format": "orbtool-session", "schema": SCHEMA_VERSION + 1,
                                               "orbtool": "9.9", "content": {}}))
    with pytest.raises(SessionError, match="Upgrade orbtool"):
        load_session(newer)
    older = tmp_path / "old.orbsession"
    with zipfile.ZipFile(older, "w") as z:
        z.writestr("session.json", json.dumps({"format": "orbtool-session", "schema": 0, "payload": {"a": 1}}))
    assert load_session(older) == {"a": 1}


def test_never_overwrites_foreign_file(tmp_path):
    mine = tmp_path / "notes.txt"
    mine.write_text("my notes")
    with pytest.raises(SessionError, match="overwrite=True"):
        save_session(mine, {"a": 1})
    assert mine.read_text() == "my notes"
    save_session(mine, {"a": 1}, overwrite=True)
    assert load_session(mine) == {"a": 1}


def test_damaged_and_missing(tmp_path):
    bad = tmp_path / "bad.orbsession"
    bad.write_bytes(b"\x00garbage" * 10)
    with pytest.raises(SessionError, match="damaged"):
        load_session(bad)
    with pytest.raises(SessionError, match="no such"):
        load_session(tmp_path / "nope.orbsession")
