"""Grid readers checked against ASE (a general-purpose reference library).

Files are written by ``ase.io.write(..., format="cube")``, ASE's XSF writer and ASE's
charge-density writer ``ase.calculators.vasp.VaspChargeDensity``; orbtool must read back the
same numbers (1e-10 relative) and identical atoms.
"""

import bz2
import gzip
import lzma
import shutil

import numpy as np
import pytest
from ase.build import bulk, molecule
from ase.calculators.vasp import VaspChargeDensity
from ase.io import write
from ase.io.cube import read_cube_data
from ase.io.xsf import read_xsf

import orbtool
from orbtool.units import BOHR


@pytest.fixture(autouse=True)
def _cache(tmp_path, monkeypatch):
    monkeypatch.setenv("ORBTOOL_CACHE_DIR", str(tmp_path / "cache"))


def _atoms_equal(a, b):
    assert a.get_chemical_symbols() == b.get_chemical_symbols()
    np.testing.assert_allclose(a.positions, b.positions, rtol=0, atol=1e-10)
    np.testing.assert_allclose(a.cell.array, b.cell.array, rtol=0, atol=1e-10)


@pytest.mark.parametrize("signed", [False, True])
def test_cube_written_by_ase(tmp_path, signed):
    atoms = bulk("GaAs", "zincblende", a=5.65, cubic=True)
    rng = np.random.default_rng(0)
    data = rng.random((10, 12, 14)) * 3.0
    if signed:
        data -= 1.5
    f = tmp_path / "x.cube"
    write(f, atoms, data=data)
    ref, ref_atoms = read_cube_data(str(f))
    g = orbtool.io.read_grid(f, quantity="raw")
    np.testing.assert_allclose(g.values, ref, rtol=1e-10, atol=0)
    _atoms_equal(g.atoms, ref_atoms)
    np.testing.assert_allclose(g.cell, ref_atoms.cell.array, rtol=1e-10, atol=1e-10)
    au = orbtool.io.read_grid(f, cache=False, units="bohr")
    # atomic-unit conversion at the edge: e/Bohr^3 -> e/Å^3 or Bohr^-3/2 -> Å^-3/2 (ase.units.Bohr)
    if signed:
        assert au.unit == "Å^-3/2"
        np.testing.assert_allclose(au.values, ref * BOHR**-1.5, rtol=1e-12)
    else:
        assert au.unit == "e/Å^3"
        np.testing.assert_allclose(au.values, ref * BOHR**-3, rtol=1e-12)
    assert au.meta["unit_convention"] == "bohr" and "given by the caller" in au.meta["unit_convention_reason"]
    # "auto": ASE's ase.io.write stores the array unchanged (ASE's cube writer source: data.tofile, no
    # scaling); random numbers are no physical field, whichever evidence decides, the reason is recorded
    auto = orbtool.io.read_grid(f, cache=False)
    assert auto.meta["unit_convention"] == "angstrom" and auto.meta["unit_convention_reason"]
    np.testing.assert_allclose(auto.values, ref, rtol=1e-12)


def test_cube_origin_and_molecule(tmp_path):
    # a molecular cube: ASE writes the box origin; the grid origin must follow it (in Å)
    m = molecule("H2O")
    m.center(vacuum=3.0)
    m.translate([0.7, -0.3, 0.2])
    data = np.random.default_rng(1).random((8, 9, 10))
    f = tmp_path / "w.cube"
    write(f, m, data=data, origin=[0.5, -0.25, 1.0])
    ref, ref_atoms = read_cube_data(str(f))
    g = orbtool.io.read_grid(f, quantity="raw")
    np.testing.assert_allclose(g.values, ref, rtol=1e-10)
    with open(f) as fh:
        origin_bohr = np.array(fh.readlines()[2].split()[1:4], float)
    np.testing.assert_allclose(g.origin, origin_bohr * BOHR, atol=1e-9)
    _atoms_equal(g.atoms, ref_atoms)


@pytest.mark.parametrize("opener,suffix", [(gzip.open, ".gz"), (bz2.open, ".bz2"), (lzma.open, ".xz")])
def test_compressed(tmp_path, opener, suffix):
    atoms = bulk("Si", cubic=True)
    data = np.random.default_rng(2).random((6, 6, 6))
    f = tmp_path / "x.cube"
    write(f, atoms, data=data)
    with open(f, "rb") as src, opener(str(f) + suffix, "wb") as dst:
        shutil.copyfileobj(src, dst)
    g = orbtool.io.read_grid(str(f) + suffix, quantity="raw")
    np.testing.assert_allclose(g.values, read_cube_data(str(f))[0], rtol=1e-10)


def _vasp_density(tmp_path, name, spin, aug=True, fmt="chgcar"):
    atoms = bulk("GaAs", "zincblende", a=5.65) * (1, 1, 2)
    rng = np.random.default_rng(3)
    v = VaspChargeDensity(None)
    v.atoms = [atoms]
    v.chg = [rng.random((8, 9, 10)) * 0.1]
    if spin:
        v.chgdiff = [rng.random((8, 9, 10)) * 0.02 - 0.01]
    if aug:
        v.aug = "augmentation occupancies 1 3\n 0.1 0.2 0.3\naugmentation occupancies 2 2\n 0.1 0.2\n"
        v.augdiff = v.aug
    f = tmp_path / name
    v.write(str(f), format=fmt)
    return f, v


@pytest.mark.parametrize("spin", [False, True])
def test_chgcar_written_by_ase(tmp_path, spin):
    f, v = _vasp_density(tmp_path, "CHGCAR", spin)
    ref = VaspChargeDensity(str(f))  # ASE's reader divides by the cell volume too
    grids = orbtool.io.read_grids(f)
    assert [g.name for g in grids] == (["total", "magnetisation"] if spin else ["total"])
    np.testing.assert_allclose(grids[0].values, ref.chg[0], rtol=1e-10)
    if spin:
        np.testing.assert_allclose(grids[1].values, ref.chgdiff[0], rtol=1e-10, atol=1e-14)
    _atoms_equal(grids[0].atoms, ref.atoms[0])
    assert grids[0].unit == "e/Å^3"
    # charge: integral of ρ equals the mean of the stored ρ·V values (definition of the layout)
    stored_mean = np.mean(v.chg[0] * v.atoms[0].get_volume())
    assert grids[0].integrate() == pytest.approx(stored_mean, rel=1e-9)


def test_locpot_not_divided_and_parchg_gz(tmp_path):
    f, v = _vasp_density(tmp_path, "LOCPOT", spin=False, aug=False)
    g = orbtool.io.read_grid(f)
    assert g.unit == "eV"
    np.testing.assert_allclose(g.values, v.chg[0] * v.atoms[0].get_volume(), rtol=1e-10)
    f2, v2 = _vasp_density(tmp_path, "PARCHG", spin=False, aug=False)
    with open(f2, "rb") as src, gzip.open(str(f2) + ".gz", "wb") as dst:
        shutil.copyfileobj(src, dst)
    g2 = orbtool.io.read_grid(str(f2) + ".gz")
    np.testing.assert_allclose(g2.values, VaspChargeDensity(str(f2)).chg[0], rtol=1e-10)


def test_chg_ten_per_line(tmp_path):
    # the CHG layout (10 values per line, 5 significant digits) goes through the general parser
    f, v = _vasp_density(tmp_path, "CHG", spin=False, aug=False, fmt="chg")
    g = orbtool.io.read_grid(f)
    np.testing.assert_allclose(g.values, VaspChargeDensity(str(f)).chg[0], rtol=1e-10)


def test_xsf_written_by_ase(tmp_path):
    atoms = bulk("Si")
    data = np.random.default_rng(4).random((5, 6, 7))
    f = tmp_path / "x.xsf"
    write(f, atoms, data=data)
    with open(f) as fh:
        ref, origin, span, ref_atoms = read_xsf(fh, read_data=True)
    g = orbtool.io.read_grid(f)
    np.testing.assert_allclose(g.values, ref, rtol=1e-10)
    np.testing.assert_allclose(g.origin, origin, atol=1e-12)
    _atoms_equal(g.atoms, ref_atoms)


def test_xsf_periodic_duplicate_planes_dropped(tmp_path):
    # XCrySDen general grid: a periodic field repeats its first plane at the end (XSF documentation)
    inner = np.random.default_rng(5).random((4, 5, 6))
    full = np.pad(inner, [(0, 1)] * 3, mode="wrap")
    vals = "\n".join(" ".join(f"{x:.12e}" for x in row) for row in full.reshape(-1, order="F").reshape(-1, 5))
    f = tmp_path / "p.xsf"
    f.write_text("BEGIN_BLOCK_DATAGRID_3D\n test\n BEGIN_DATAGRID_3D_rho\n 5 6 7\n 0 0 0\n 4 0 0\n 0 5 0\n"
                 f" 0 0 6\n{vals}\n END_DATAGRID_3D\nEND_BLOCK_DATAGRID_3D\n")
    g = orbtool.io.read_grid(f, quantity="density")
    np.testing.assert_allclose(g.values, inner, rtol=1e-12)
    np.testing.assert_allclose(g.cell, np.diag([4.0, 5.0, 6.0]))
    assert g.name == "rho" and g.unit == "e/Å^3"


def test_multi_orbital_cube(tmp_path):
    # Gaussian cube documentation: negative atom count, then "nmo id1 id2 ..."; orbital index fastest
    rng = np.random.default_rng(6)
    a, b = rng.random((3, 4, 5)) - 0.5, rng.random((3, 4, 5)) - 0.5
    inter = np.stack([a, b], axis=-1).ravel()
    body = "\n".join(" ".join(f"{x:13.5E}" for x in inter[i:i + 6]) for i in range(0, inter.size, 6))
    f = tmp_path / "mo.cube"
    f.write_text("orbitals\nMO coefficients\n   -1    0.0    0.0    0.0\n    3    0.5 0.0 0.0\n    4    0.0 0.5 0.0\n"
                 "    5    0.0 0.0 0.5\n    8    8.0    0.0 0.0 0.0\n    2   12   13\n" + body + "\n")
    grids = orbtool.io.read_grids(f)
    assert [g.name for g in grids] == ["orbital 12", "orbital 13"]
    written = np.array([float(f"{x:13.5E}") for x in b.ravel()]).reshape(b.shape)  # Python's parse as reference
    np.testing.assert_allclose(grids[1].values, written * BOHR**-1.5, rtol=1e-12)
    assert orbtool.io.read_grid(f, index=1).name == "orbital 13"
    # negative counts: Å axes (Gaussian convention); values kept as given
    f2 = tmp_path / "ang.cube"
    f2.write_text(f.read_text().replace("    3    0.5", "   -3    0.5").replace("    4    0.0 0.5", "   -4    0.0 0.5")
                  .replace("    5    0.0 0.0 0.5", "   -5    0.0 0.0 0.5"))
    g = orbtool.io.read_grid(f2)
    np.testing.assert_allclose(g.cell, np.diag([1.5, 2.0, 2.5]))


def test_cache_hit_and_invalidation(tmp_path):
    atoms = bulk("Si", cubic=True)
    f = tmp_path / "c.cube"
    write(f, atoms, data=np.ones((4, 4, 4)))
    g1 = orbtool.io.read_grid(f)
    cached = list((tmp_path / "cache").glob("*.npz"))
    assert len(cached) == 1 and sorted(p.name for p in tmp_path.iterdir()) == ["c.cube", "cache"]
    g2 = orbtool.io.read_grid(f)
    np.testing.assert_array_equal(g1.values, g2.values)
    write(f, atoms, data=np.full((4, 4, 4), 2.0))  # changed source -> re-read
    g3 = orbtool.io.read_grid(f, units="bohr")
    assert float(g3.values.mean()) == pytest.approx(2.0 * BOHR**-3, rel=1e-12)
    orbtool.io.read_grid(f, cache=False)
    assert len(list((tmp_path / "cache").glob("*.npz"))) == 2  # one per (source state, options) key


def test_many_chunks_and_odd_values(tmp_path, monkeypatch):
    # small chunks force block boundaries inside numbers, lines and between spin blocks;
    # three-digit exponents and values with another layout go through the general parser
    import orbtool.io._bulk as bulk_mod
    monkeypatch.setattr(bulk_mod, "_CHUNK", 4096)
    atoms = bulk("Si", cubic=True)
    rng = np.random.default_rng(8)
    data = rng.lognormal(-3.0, 3.0, (20, 18, 16)) * rng.choice([-1.0, 1.0], (20, 18, 16))
    data[3, 4, 5], data[10, 1, 2] = 1.5e-120, -2.5e+150
    f = tmp_path / "big.cube"
    write(f, atoms, data=data)
    np.testing.assert_allclose(orbtool.io.read_grid(f, quantity="raw", cache=False).values,
                               read_cube_data(str(f))[0], rtol=1e-10, atol=0)
    c, _ = _vasp_density(tmp_path, "CHGCAR_big", spin=True)
    ref = VaspChargeDensity(str(c))
    grids = orbtool.io.read_grids(c, cache=False)
    np.testing.assert_allclose(grids[0].values, ref.chg[0], rtol=1e-10)
    np.testing.assert_allclose(grids[1].values, ref.chgdiff[0], rtol=1e-10, atol=1e-14)


def test_chgcar_in_the_codes_own_layout(tmp_path):
    # VASP manual (CHGCAR page): values as E18.11 ("0.12345678901E+03"), five per line, x fastest;
    # after the augmentation blocks of a spin-polarised run a line of per-atom moments precedes
    # the second block's counts
    atoms = bulk("GaAs", "zincblende", a=5.65)
    rng = np.random.default_rng(9)
    rho, mag = rng.random((5, 6, 7)) * 0.05, rng.random((5, 6, 7)) * 0.01 - 0.005
    vol = atoms.get_volume()

    def block(x):
        flat = (x * vol).ravel(order="F")
        rows = [" ".join(f"{v:18.11E}" for v in flat[i:i + 5]) for i in range(0, flat.size, 5)]
        return "\n".join(rows) + "\n"

    pos = "\n".join(" ".join(f"{c:.8f}" for c in p) for p in atoms.get_scaled_positions())
    head = ("GaAs\n   1.00000000000000\n" + "\n".join(" ".join(f"{c:.10f}" for c in v) for v in atoms.cell)
            + f"\n   Ga   As\n     1     1\nDirect\n{pos}\n\n    5    6    7\n")
    aug = "augmentation occupancies   1  3\n  0.1E+00  0.2E+00 -0.3E+00\naugmentation occupancies   2  1\n  0.5E+00\n"
    f = tmp_path / "CHGCAR"
    f.write_text(head + block(rho) + aug + "  0.100E+01  0.000E+00\n    5    6    7\n" + block(mag) + aug)
    total, m = orbtool.io.read_grids(f, cache=False)
    np.testing.assert_allclose(total.values, rho, rtol=1e-10)
    np.testing.assert_allclose(m.values, mag, rtol=1e-9, atol=1e-15)
    assert m.name == "magnetisation"


def test_chg_with_several_images(tmp_path):
    # CHG of a multi-step run holds one structure + grid per image (ASE writes and reads all of them)
    atoms = bulk("Si")
    v = VaspChargeDensity(None)
    rng = np.random.default_rng(10)
    v.atoms, v.chg = [atoms, atoms], [rng.random((4, 4, 5)), rng.random((4, 4, 5))]
    v.write(str(tmp_path / "CHG"), format="chg")
    ref = VaspChargeDensity(str(tmp_path / "CHG"))
    (g,) = orbtool.io.read_grids(tmp_path / "CHG", cache=False)
    np.testing.assert_allclose(g.values, ref.chg[0], rtol=1e-10)
    assert "only the first" in g.meta["notes"][0]
