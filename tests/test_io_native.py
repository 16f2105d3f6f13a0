"""orbtool's own formats: NPZ and plain text round trips, cube writer checked by ASE's reader.

The external reference is ASE (``ase.io.cube.read_cube_data``), which must read the cube files
orbtool writes back to the same numbers, cell and atoms.
"""

import numpy as np
import pytest
from ase.build import bulk
from ase.io.cube import read_cube_data

import orbtool
from orbtool.errors import InputFormatError
from orbtool.grid import Grid
from orbtool.spectra import BandProjections, ProjectedDOS
from orbtool.units import BOHR


def _pdos(rng, nspin=2):
    e = np.linspace(-5.0, 5.0, 41)
    chans = [(0, "Ga", "s", 0), (0, "Ga", "px", 0), (-1, "As", "p", 0)]
    if nspin == 2:
        chans += [(c[0], c[1], c[2], 1) for c in chans]
    return ProjectedDOS(e, rng.random((len(chans), e.size)), chans, total=rng.random((nspin, e.size)),
                        fermi=0.37, nspin=nspin)


def _proj(rng, occupations=True):
    atoms = bulk("GaAs", "zincblende", a=5.65)
    ns, nk, nb = 2, 3, 4
    return BandProjections(rng.random((nk, 3)), [1, 2, 1], rng.random((ns, nk, nb)),
                           rng.random((ns, nk, nb)) if occupations else None,
                           rng.random((ns, nk, nb, 2, 4)), ("s", "py", "pz", "px"), atoms=atoms, fermi=0.1)


@pytest.mark.parametrize("fmt,suffix", [("orbtool-text", ".pdos.txt"), ("npz", ".npz")])
@pytest.mark.parametrize("nspin", [1, 2])
def test_pdos_round_trip(tmp_path, fmt, suffix, nspin):
    p = _pdos(np.random.default_rng(1), nspin)
    path = orbtool.io.write_pdos(tmp_path / ("x" + suffix), p, format=fmt)
    q = orbtool.io.read_pdos(path)
    assert q.channels == p.channels and q.nspin == nspin and q.fermi == p.fermi
    np.testing.assert_array_equal(q.values, p.values)  # %.17g text is exact for float64
    np.testing.assert_array_equal(q.total, p.total)
    np.testing.assert_array_equal(q.energies, p.energies)


@pytest.mark.parametrize("fmt", ["orbtool-text", "npz"])
@pytest.mark.parametrize("occ", [True, False])
def test_projections_round_trip(tmp_path, fmt, occ):
    p = _proj(np.random.default_rng(2), occ)
    path = orbtool.io.write_projections(tmp_path / "p.dat", p, format=fmt)
    q = orbtool.io.read_projections(path)
    np.testing.assert_array_equal(q.weights, p.weights)
    np.testing.assert_array_equal(q.energies, p.energies)
    np.testing.assert_array_equal(q.kweights, p.kweights)
    assert (q.occupations is None) == (not occ)
    assert q.orbitals == p.orbitals


def test_grid_npz_round_trip(tmp_path):
    g = Grid(np.random.default_rng(3).random((4, 5, 6)), np.diag([3.0, 4.0, 5.0]), origin=[0.1, 0.2, 0.3],
             atoms=bulk("Si"), unit="e/Å^3", name="total", meta={"k": 1})
    h = orbtool.io.read_grid(orbtool.io.write_grid(tmp_path / "g.npz", g))
    np.testing.assert_array_equal(h.values, g.values)
    np.testing.assert_array_equal(h.origin, g.origin)
    assert h.unit == g.unit and h.name == "total" and h.meta["k"] == 1
    np.testing.assert_array_equal(h.atoms.positions, g.atoms.positions)


def test_cube_writer_read_by_ase(tmp_path):
    # external check: ASE's cube reader must see the same numbers (atomic units: e/Bohr^3)
    atoms = bulk("Si", "diamond", a=5.43, cubic=True)
    rng = np.random.default_rng(4)
    g = Grid(rng.random((6, 7, 8)), atoms.cell.array, atoms=atoms, unit="e/Å^3")
    path = orbtool.io.write_grid(tmp_path / "d.cube", g)
    data, ase_atoms = read_cube_data(str(path))
    np.testing.assert_allclose(data, g.values * BOHR**3, rtol=1e-9)
    np.testing.assert_allclose(ase_atoms.positions, atoms.positions, atol=1e-6)
    back = orbtool.io.read_grid(path, cache=False)
    np.testing.assert_allclose(back.values, g.values, rtol=1e-9)
    assert back.unit == "e/Å^3"


def test_wrong_kind_npz(tmp_path):
    p = orbtool.io.write_pdos(tmp_path / "x.npz", _pdos(np.random.default_rng(5)), format="npz")
    with pytest.raises(InputFormatError, match="holds a pdos"):
        orbtool.io.read_grid(p)


@pytest.mark.parametrize("text,line", [
    ("# orbtool-pdos 1\n# nspin: 1\n# columns: energy Ga0:s:up\n0 1\n1 x\n", 5),
    ("# orbtool-pdos 1\n# nspin: 1\n# columns: energy Ga0:s:up\n0 1\n1 2 3\n", 5),
    ("# orbtool-pdos 1\n# nspin: 3\n# columns: energy Ga0:s:up\n0 1\n1 2\n", 2),
    ("# orbtool-pdos 1\n# nspin: 1\n# columns: energy Ga0:q:up\n0 1\n1 2\n", 3),
])
def test_pdos_text_errors(tmp_path, text, line):
    f = tmp_path / "bad.pdos.txt"
    f.write_text(text)
    with pytest.raises(InputFormatError) as err:
        orbtool.io.read_pdos(f)
    assert err.value.line == line and err.value.path == str(f)


def test_content_sniffing_ignores_names(tmp_path):
    # a renamed cube, DOSCAR and PROCAR are still recognised by their content
    from pathlib import Path

    from ase.io import write

    from orbtool.io.registry import guess_format
    fix = Path(__file__).parent / "fixtures" / "io" / "vasp_spin"
    write(tmp_path / "a.dat", bulk("Si", cubic=True), data=np.ones((2, 2, 2)), format="cube")
    (tmp_path / "b.dat").write_text((fix / "DOSCAR").read_text())
    (tmp_path / "c.dat").write_text((fix / "PROCAR").read_text())
    assert guess_format(tmp_path / "a.dat", "grid").name == "cube"
    assert guess_format(tmp_path / "b.dat", "pdos").name == "doscar"
    assert guess_format(tmp_path / "c.dat", "projections").name == "procar"
    with pytest.raises(InputFormatError, match="cannot tell the format"):
        guess_format(tmp_path / "b.dat", "grid")
