"""A user's own folders: structures in any format ASE reads, the atoms of a cube, orbtool NPZ of
every kind, single files as host or defect, ``orbtool inspect`` on each kind, and what a lone
grid can and cannot give.

References: ASE's own readers (``ase.io.read``, ``ase.io.cube.read_cube_data``) for the atoms, and
the committed pyscf engine data of ``tests/external/data`` (its files and ``engine.json``).
"""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import ase.io
import numpy as np
import pytest
from ase.io.cube import read_cube_data

import orbtool
from orbtool.cli import main
from orbtool.errors import InputFormatError

DATA = Path(__file__).parent / "external" / "data"


@pytest.fixture(autouse=True)
def _cache(tmp_path, monkeypatch):
    monkeypatch.setenv("ORBTOOL_CACHE_DIR", str(tmp_path / "cache"))


def _copy_run(src: Path, dst: Path, structure: str | None):
    """The pyscf run folder with its POSCAR replaced by ``structure`` written by ASE (or none)."""
    dst.mkdir(parents=True)
    for f in src.iterdir():
        if f.is_file() and f.name != "POSCAR":
            shutil.copy(f, dst / f.name)
    atoms = ase.io.read(src / "POSCAR", format="vasp")
    if structure:
        ase.io.write(dst / structure, atoms)
    return atoms


def _same_atoms(a, b):
    assert a.get_chemical_symbols() == b.get_chemical_symbols()
    np.testing.assert_allclose(a.get_positions(), b.get_positions(), atol=1e-5)


@pytest.mark.parametrize("name", ["structure.extxyz", "structure.cif", "structure.xyz"])
def test_structure_formats_ase_reads(tmp_path, name):
    ref = _copy_run(DATA / "vac", tmp_path / "vac", name)
    host_ref = _copy_run(DATA / "host", tmp_path / "host", name)
    case = orbtool.load_case(tmp_path / "vac", host=tmp_path / "host")
    # reference: ASE's reading of the engine's POSCAR (the CIF writer keeps ~5 decimals of fractions)
    _same_atoms(case.defect, ref)
    _same_atoms(case.host, host_ref)
    assert f"defect: structure from {name}" in case.provenance
    # the rest of the folder is read as before: the engine's state index has its occupation
    rec = json.loads((DATA / "vac" / "engine.json").read_text())
    assert case.projections.band_occupation(rec["state_index"], rec["state_spin"]) == pytest.approx(
        rec["state_occupation"], abs=1e-6)


def test_poscar_preferred_over_other_structures(tmp_path):
    _copy_run(DATA / "vac", tmp_path / "vac", "structure.extxyz")
    shutil.copy(DATA / "vac" / "POSCAR", tmp_path / "vac" / "POSCAR")
    case = orbtool.load_case(tmp_path / "vac")
    assert "defect: structure from POSCAR" in case.provenance


def test_atoms_of_a_cube_when_no_structure_file(tmp_path):
    _copy_run(DATA / "vac", tmp_path / "vac", None)
    case = orbtool.load_case(tmp_path / "vac")
    # reference: ASE's cube reader on the same file (positions Bohr -> Å with ase.units.Bohr)
    _, atoms = read_cube_data(str(DATA / "vac" / "state.cube"))
    _same_atoms(case.defect, atoms)
    assert any("structure from the atoms of the grid 'state'" in p for p in case.provenance)


def test_single_files_as_defect_and_host(tmp_path):
    ref = ase.io.read(DATA / "host" / "POSCAR", format="vasp")
    ase.io.write(tmp_path / "host.extxyz", ref)
    case = orbtool.load_case(DATA / "vac" / "state.cube", host=tmp_path / "host.extxyz")
    _same_atoms(case.host, ref)
    assert "state" in case.grids and len(case.defect) == len(ref) - 1


def test_npz_of_every_kind_in_a_folder(tmp_path):
    src = orbtool.load_case(DATA / "vac")
    run = tmp_path / "npz_run"
    run.mkdir()
    orbtool.write_projections(run / "bands.npz", src.projections)
    orbtool.write_pdos(run / "dos.npz", src.defect_pdos, format="npz")
    orbtool.write_grid(run / "state.npz", src.grids["state"], format="npz")
    case = orbtool.load_case(run)
    np.testing.assert_array_equal(case.projections.energies, src.projections.energies)
    np.testing.assert_array_equal(case.defect_pdos.values, src.defect_pdos.values)
    np.testing.assert_array_equal(case.grids["state"].values, src.grids["state"].values)
    # the structure comes from the atoms stored in the NPZ archives (the cube's atoms, ASE's reading)
    _, atoms = read_cube_data(str(DATA / "vac" / "state.cube"))
    _same_atoms(case.defect, atoms)


def _inspect(path, capsys, *extra):
    assert main(["inspect", str(path), "--json", *extra]) == 0
    return json.loads(capsys.readouterr().out)


def test_inspect_says_what_each_kind_is(tmp_path, capsys):
    src = orbtool.load_case(DATA / "vac")
    atoms = ase.io.read(DATA / "vac" / "POSCAR", format="vasp")
    ase.io.write(tmp_path / "s.extxyz", atoms)
    orbtool.write_projections(tmp_path / "p.npz", src.projections)
    orbtool.write_pdos(tmp_path / "d.npz", src.defect_pdos, format="npz")
    orbtool.write_grid(tmp_path / "g.npz", src.grids["state"], format="npz")
    (tmp_path / "bands.json").write_text(json.dumps({"vbm": -1.0, "cbm": 1.5}))
    info = _inspect(tmp_path / "s.extxyz", capsys)
    assert (info["kind"], info["format"], info["atoms"]) == ("structure", "ase:extxyz", len(atoms))
    info = _inspect(tmp_path / "p.npz", capsys)
    assert (info["kind"], info["format"], info["bands"]) == ("projections", "npz", src.projections.nbands)
    assert _inspect(tmp_path / "d.npz", capsys)["kind"] == "pdos"
    info = _inspect(tmp_path / "g.npz", capsys)
    assert info["kind"] == "grid" and info["grids"][0]["shape"] == list(src.grids["state"].shape)
    info = _inspect(tmp_path / "bands.json", capsys)
    assert info["kind"] == "band-edges" and info["gap"] == pytest.approx(2.5)
    info = _inspect(DATA / "vac" / "projections.proj.txt.gz", capsys)
    assert info["kind"] == "projections" and info["has_occupations"]
    for info in (_inspect(f, capsys) for f in (tmp_path / "s.extxyz", tmp_path / "p.npz")):
        assert info["holds"]


def test_inspect_refuses_an_unknown_file(tmp_path, capsys):
    (tmp_path / "notes.txt").write_text("just some words\n")
    assert main(["inspect", str(tmp_path / "notes.txt")]) == 1
    assert "not a file format orbtool recognises" in capsys.readouterr().err


def test_what_a_single_grid_can_and_cannot_give():
    caps = orbtool.io.capabilities(DATA / "vac" / "state.cube")
    assert "state density view and localisation" in caps.can and "structure view" in caps.can
    assert "in-gap levels" in caps.cannot and "band edges" in caps.cannot
    assert any("per-bohr³ reading" in n for n in caps.notes)
    full = orbtool.io.capabilities(DATA / "vac", host=DATA / "host")
    assert "in-gap levels" in full.can and "tight-binding fit" in full.can
    grid = orbtool.read_grid(DATA / "vac" / "state.cube")
    assert orbtool.io.capabilities(grid).kind == "grid"
    assert "vacancy site and neighbour shells" in orbtool.io.capabilities(grid.atoms).cannot


def test_host_of_an_unsupported_kind_is_refused():
    with pytest.raises(InputFormatError, match="host must be a folder, a file or ase.Atoms"):
        orbtool.load_case(DATA / "vac", host=42)
