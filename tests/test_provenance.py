"""Warnings, not silence: every place orbtool guesses records the guess in the result's
provenance/meta and shows it in ``summary()`` (issue 10).

Guesses covered: the file format (content sniffing vs the caller's ``format=``), the length unit
of a cube file (positive voxel counts = Bohr, negative = Å; Gaussian ``cubegen`` documentation,
"Cube" format, from memory), what a grid's values are (density/orbital), the role of a grid in
a run folder, which of several missing atoms is the vacancy, the energy alignment reference, the
band-edge method, and which in-gap state is "the" defect state.

External references: ASE's cube writer and reader (cell in Å from a Bohr cube), ASE's diamond Si
cell (a = 5.43 Å; first shell of 4 at a√3/4, second of 12 at a/√2 — Kittel, *Introduction to
Solid State Physics*, ch. 1, from memory), the hand-written DOSCAR/PROCAR fixtures.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from ase.build import bulk
from ase.geometry import get_distances
from ase.io import read, write

import orbtool
from orbtool.analysis import in_gap_states, locate_vacancy
from orbtool.case import DefectCase
from orbtool.spectra import BandProjections

FIX = Path(__file__).parent / "fixtures" / "io"


@pytest.fixture(autouse=True)
def _cache(tmp_path, monkeypatch):
    monkeypatch.setenv("ORBTOOL_CACHE_DIR", str(tmp_path / "cache"))


@pytest.fixture()
def bohr_cube(tmp_path):
    """A cube written by ASE (Bohr axes, positive counts), under a name that says nothing."""
    f = tmp_path / "mystery.dat"
    write(f, bulk("Si", cubic=True), format="cube", data=np.random.default_rng(0).random((3, 4, 5)))
    return f


# ------------------------------------------------------------------ format sniffing
def test_sniffed_format_is_recorded_and_shown(bohr_cube):
    g = orbtool.read_grid(bohr_cube, cache=False)
    assert "guessed from the file's content" in g.meta["format_reason"]
    assert g.meta["format"] == "cube"
    assert "guessed from the file's content" in g.summary()
    given = orbtool.read_grid(bohr_cube, format="cube", cache=False)
    assert "given by the caller" in given.meta["format_reason"] and "guessed" not in given.summary()


def test_sniffed_format_recorded_after_a_cache_hit(bohr_cube):
    """The cache must not replay a stale reason: first read with format=, then without."""
    orbtool.read_grid(bohr_cube, format="cube")
    g = orbtool.read_grid(bohr_cube)
    assert "guessed" in g.meta["format_reason"]


def test_spectra_record_how_their_format_was_chosen(tmp_path):
    src = (FIX / "vasp_spin" / "DOSCAR").read_bytes()
    (tmp_path / "dos.dat").write_bytes(src)  # no telling name: recognised by content
    pdos = orbtool.read_pdos(tmp_path / "dos.dat")
    assert pdos.meta["format"] == "doscar" and "content" in pdos.meta["format_reason"]
    proj = orbtool.read_projections(FIX / "vasp_spin" / "PROCAR")
    assert "guessed" in proj.meta["format_reason"]
    assert "given by the caller" in orbtool.read_projections(FIX / "vasp_spin" / "PROCAR",
                                                             format="procar").meta["format_reason"]


# ------------------------------------------------------------------ unit convention
def test_bohr_cube_recorded_and_converted_like_ase(bohr_cube):
    g = orbtool.read_grid(bohr_cube, cache=False)
    ref = read(bohr_cube, format="cube")  # ASE converts Bohr to Å on reading
    np.testing.assert_allclose(g.cell, ref.cell.array, atol=1e-6)
    assert g.meta["length_unit"] == "bohr"
    assert "bohr (converted to Å)" in g.summary()


def test_angstrom_cube_recorded(tmp_path):
    """Negative voxel counts mean Å axes (Gaussian cube convention, from memory): the cell is taken
    as written and the values are not converted from atomic units; both are recorded."""
    step = 1.5
    rows = [" 1 0.0 0.0 0.0", f"-2 {step} 0.0 0.0", f"-2 0.0 {step} 0.0", f"-2 0.0 0.0 {step}", " 1 1.0 0.0 0.0 0.0"]
    f = tmp_path / "ang.cube"
    f.write_text("hand-written\ndensity in Å units\n" + "\n".join(rows) + "\n" + " 0.5" * 8 + "\n")
    g = orbtool.read_grid(f, cache=False)
    np.testing.assert_allclose(g.cell, np.eye(3) * 2 * step)
    assert g.meta["length_unit"] == "angstrom" and "Å axes" in g.meta["quantity_reason"]
    assert "angstrom" in g.summary() and "Å axes" in g.summary()
    np.testing.assert_allclose(g.values, 0.5)  # no Bohr^-3 factor applied


def test_quantity_guess_is_recorded(bohr_cube):
    g = orbtool.read_grid(bohr_cube, cache=False)
    assert g.meta["quantity"] == "density" and g.meta["quantity_reason"] == "values are non-negative"
    assert "quantity      density: values are non-negative" in g.summary()
    raw = orbtool.read_grid(bohr_cube, cache=False, quantity="raw")
    assert raw.meta["quantity_reason"] == "given by the caller"


# ------------------------------------------------------------------ grid role in a run folder
def test_grid_role_guess_in_case_provenance(tmp_path, bohr_cube):
    run = tmp_path / "run"
    run.mkdir()
    write(run / "POSCAR", bulk("Si", cubic=True), format="vasp", direct=True)
    (run / "mystery.cube").write_bytes(bohr_cube.read_bytes())
    case = orbtool.load_case(run)
    assert "state" in case.grids
    assert any("guessed to be the in-gap state" in p for p in case.provenance)
    assert "guessed to be the in-gap state" in case.summary()


# ------------------------------------------------------------------ geometry: which vacancy is "the" site
def test_choice_among_several_missing_atoms_is_noted():
    host = bulk("Si", "diamond", 5.43, cubic=True).repeat(2)
    defect = host.copy()
    del defect[[10, 40]]
    site = locate_vacancy(host, defect)
    assert site.host_index in (10, 40)
    assert any("2 atoms are missing" in n for n in site.notes)
    assert "2 atoms are missing" in site.summary()


# ------------------------------------------------------------------ alignment and "the" defect state
REMOVED = 5


def _si_case(states_weights, energies, occupations, with_host=True):
    host = bulk("Si", "diamond", 5.43, cubic=True).repeat(2)
    defect = host.copy()
    del defect[REMOVED]
    n = len(defect)
    e = np.asarray(energies, float)[None, None, :]
    occ = np.asarray(occupations, float)[None, None, :]
    w = np.asarray(states_weights, float)[None, None, :, :, None]
    proj = BandProjections(np.zeros((1, 3)), [1.0], e, occ, w, ("s",))
    hflat = np.full(len(host), 1.0 / len(host))
    hproj = BandProjections(np.zeros((1, 3)), [1.0], np.array([[[-1.0, 1.0]]]), np.array([[[2.0, 0.0]]]),
                            np.array([hflat, hflat])[None, None, :, :, None], ("s",))
    return DefectCase("V_Si", defect, host=host if with_host else None, projections=proj, host_projections=hproj), n


def _shells(host_cell_atoms, defect):
    _, d = get_distances(defect.get_positions(), [host_cell_atoms.positions[REMOVED]], cell=defect.cell, pbc=True)
    d = d[:, 0]
    first = np.flatnonzero(np.abs(d - 5.43 * np.sqrt(3) / 4) < 0.05)
    second = np.flatnonzero(np.abs(d - 5.43 / np.sqrt(2)) < 0.05)
    assert len(first) == 4 and len(second) == 12  # Kittel ch. 1 (from memory): diamond shells
    return first, second


def test_unaligned_energies_and_edge_method_are_noted():
    host = bulk("Si", "diamond", 5.43, cubic=True).repeat(2)
    probe, n = _si_case([np.full(63, 1 / 63)] * 3, [-1.0, 0.2, 1.0], [2.0, 1.0, 0.0])
    first, second = _shells(host, probe.defect)
    gap = np.zeros(n)
    gap[first] = 0.2
    flat = np.full(n, 1.0 / n)
    case, _ = _si_case([flat, gap, flat], [-1.0, 0.2, 1.0], [2.0, 1.0, 0.0])
    (st,) = in_gap_states(case)
    assert any("NOT aligned" in p for p in st.provenance)
    assert any(p.startswith("band edges:") for p in st.provenance)
    text = st.summary()
    assert "NOT aligned" in text and "band edges:" in text


def test_defect_state_choice_is_noted():
    """Two in-gap states: "the" defect state is the one with the larger first-shell weight, and the
    case analysis says so (band, spin, reason)."""
    from orbtool.family import analyze_case
    host = bulk("Si", "diamond", 5.43, cubic=True).repeat(2)
    probe, n = _si_case([np.full(63, 1 / 63)] * 4, [-1.0, -0.2, 0.3, 1.0], [2.0, 2.0, 0.0, 0.0])
    first, second = _shells(host, probe.defect)
    flat = np.full(n, 1.0 / n)
    dangling = np.zeros(n)
    dangling[first] = 0.2
    dangling[second] = 0.1 / 12
    # the other in-gap level is localised too (40 % on the first shell), less so: a level spread evenly
    # over the cell would not be reported at all (in_gap_states keeps only localised levels)
    weaker = np.full(n, 0.6 / (n - len(first)))
    weaker[first] = 0.1
    case, _ = _si_case([flat, weaker, dangling, flat], [-1.0, -0.2, 0.3, 1.0], [2.0, 2.0, 0.0, 0.0])
    res = analyze_case(case)
    assert res.error is None, res.error
    assert len(res.states) == 2
    assert res.state.band == 2
    assert res.state.shell_fractions[1] == pytest.approx(0.8 / 0.9, abs=1e-12)
    note = [x for x in res.notes if "the defect state is taken to be" in x]
    assert note and "band 2" in note[0] and "largest first-shell weight" in note[0]
