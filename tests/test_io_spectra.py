"""DOS and projection readers on hand-written fixtures (tests/fixtures/io/README.md).

Each fixture follows the format's public documentation (VASP manual DOSCAR/PROCAR pages,
Quantum ESPRESSO INPUT_PROJWFC, CP2K &PDOS). The checks use relations the documentation
states: the total DOS is the sum of the per-atom lm channels, the ``ldos`` column of a projwfc
file is the sum of its m columns, ``tot`` entries are row sums, occupations lie in [0, 1] for
spin-polarised and [0, 2] for unpolarised runs.
"""

from pathlib import Path

import numpy as np
import pytest

import orbtool
from orbtool.errors import InputFormatError
from orbtool.units import HARTREE

FIX = Path(__file__).parent / "fixtures" / "io"


def test_doscar_spin_lm():
    p = orbtool.io.read_pdos(FIX / "vasp_spin" / "DOSCAR")
    assert p.nspin == 2 and p.orbital_resolution() == "lm" and len(p.channels) == 2 * 9 * 2
    assert p.atoms.get_chemical_symbols() == ["Ga", "As"]  # from the POSCAR beside it
    assert p.fermi == 0.5  # EFERMI on line 6 of the fixture
    for s in (0, 1):  # DOSCAR: total DOS = sum of the per-atom lm channels (values written to 4 digits)
        np.testing.assert_allclose(p.select(spin=s), p.total[s], rtol=1e-3)
    # the VASP lm order: s py pz px dxy dyz dz2 dxz dx2-y2, up/down interleaved per orbital
    assert [c.orbital for c in p.channels[:6:2]] == ["s", "py", "pz"]
    assert p.channels[1].spin == 1
    np.testing.assert_allclose(p.select(atoms=0, orbitals="px", spin=1), 0.5 * p.select(atoms=0, orbitals="px",
                                                                                          spin=0))


def test_doscar_nospin_l_from_folder():
    p = orbtool.io.read_pdos(FIX / "vasp_nospin")
    assert p.nspin == 1 and p.orbital_resolution() == "l"
    np.testing.assert_allclose(p.select(), p.total[0], rtol=1e-3)
    assert p.select(elements="As", l=2)[0] == pytest.approx(0.6)  # fixture row 1, As d column


@pytest.mark.parametrize("folder,nspin", [("qe_nospin", 1), ("qe_spin", 2)])
def test_projwfc(folder, nspin):
    p = orbtool.io.read_pdos(FIX / folder)
    assert p.nspin == nspin and p.orbital_resolution() == "lm"
    assert {c.orbital for c in p.channels} == {"s", "px", "py", "pz"}
    assert p.total.shape == (nspin, 4)
    for s in range(nspin):  # pdos_tot = sum of all projections (projwfc documentation)
        np.testing.assert_allclose(p.select(spin=s), p.total[s], rtol=1e-3)
    # projwfc's p order is pz, px, py: the fixture's m-th column is base*(m+1)
    assert p.select(atoms=1, orbitals="py", spin=0)[0] == pytest.approx(0.4 * 3)


def test_cp2k_pdos_counts_electrons():
    p = orbtool.io.read_pdos(FIX / "cp2k", sigma=0.05)
    assert p.nspin == 1 and {c.element for c in p.channels} == {"Ga", "As"}
    assert p.fermi == pytest.approx(-0.1 * HARTREE)  # "E(Fermi) = -0.1 a.u." in the header; 1 Ha from ase.units
    # broadened weights integrate to 2 × (sum of the weights) for a closed shell
    w = sum(np.loadtxt(FIX / "cp2k" / f"demo-k{k}-1.pdos")[:, 3:].sum() for k in (1, 2))
    assert p.integrate(p.select()) == pytest.approx(2 * w, rel=1e-6)


def test_procar_spin_lm_with_phase():
    b = orbtool.io.read_projections(FIX / "vasp_spin" / "PROCAR")
    assert b.weights.shape == (2, 2, 3, 2, 9)
    np.testing.assert_allclose(b.kpoints[1], [-0.5, -0.25, 0.5])  # fixed-width coordinates run together
    np.testing.assert_allclose(b.kweights, [0.25, 0.75])
    assert b.orbitals[-1] == "dx2-y2" and b.atoms is not None
    assert b.occupations.max() <= 1.0  # spin-polarised: at most one electron per state
    # the band after the phase table is read correctly: band 3 of atom 2, s weight 0.006
    assert b.weights[0, 0, 2, 1, 0] == pytest.approx(0.006)
    np.testing.assert_allclose(b.energies[1] - b.energies[0], 0.05)


def test_procar_nospin_l():
    b = orbtool.io.read_projections(FIX / "vasp_nospin" / "PROCAR")
    assert b.weights.shape == (1, 2, 3, 2, 3) and b.orbitals == ("s", "p", "d")
    assert b.band_occupation(0) == pytest.approx(2.0)
    np.testing.assert_allclose(b.kweights, [0.25, 0.75])


def test_energies():
    # last "E0=" of the fixture OSZICAR and last "energy(sigma->0)" of the fixture OUTCAR (README table)
    assert orbtool.io.read_energy(FIX / "vasp_spin" / "OSZICAR") == pytest.approx(-9.8771234)
    assert orbtool.io.read_energy(FIX / "vasp_nospin" / "OUTCAR") == pytest.approx(-10.20612345)


def test_structure_matches_ase():
    from ase.io import read
    a = orbtool.io.read_structure(FIX / "vasp_spin" / "POSCAR")
    b = read(FIX / "vasp_spin" / "POSCAR", format="vasp")
    np.testing.assert_array_equal(a.positions, b.positions)
    with pytest.raises(InputFormatError):
        orbtool.io.read_structure(FIX / "vasp_spin" / "DOSCAR", format="vasp")


@pytest.mark.parametrize("edit,line", [
    (lambda t: t.replace("-3.000 2.0000E-02", "-3.000 2.0000E-0x", 1), 14),   # non-numeric token
    (lambda t: "\n".join(t.splitlines()[:20]) + "\n", 20),                      # truncated in atom 2
    (lambda t: t.replace("   2   2   1   0", "   3   3   1   0", 1), 1),       # atom count vs POSCAR
])
def test_doscar_errors(tmp_path, edit, line):
    d = tmp_path / "run"
    d.mkdir()
    (d / "POSCAR").write_text((FIX / "vasp_spin" / "POSCAR").read_text())
    (d / "DOSCAR").write_text(edit((FIX / "vasp_spin" / "DOSCAR").read_text()))
    with pytest.raises(InputFormatError) as err:
        orbtool.io.read_pdos(d / "DOSCAR")
    assert err.value.line == line and err.value.path == str(d / "DOSCAR")


def test_doscar_mixed_spin_blocks(tmp_path):
    # a spin-polarised total block followed by unpolarised (9-column) atom blocks
    lines = (FIX / "vasp_spin" / "DOSCAR").read_text().splitlines()
    cut = [ln if i < 12 or ln.startswith("     6.0") else " ".join(ln.split()[:10]) for i, ln in enumerate(lines)]
    f = tmp_path / "DOSCAR"
    f.write_text("\n".join(cut) + "\n")
    with pytest.raises(InputFormatError, match="spin"):
        orbtool.io.read_pdos(f, atoms=None)


def test_procar_errors(tmp_path):
    text = (FIX / "vasp_spin" / "PROCAR").read_text()
    f = tmp_path / "PROCAR"
    f.write_text(text.replace("band     2 # energy", "band     7 # energy", 1))
    with pytest.raises(InputFormatError, match="band 2") as err:
        orbtool.io.read_projections(f)
    band2 = next(i for i, ln in enumerate(text.splitlines()) if ln.startswith("band     2"))
    assert err.value.line == band2 + 1
    second = text.index("# of k-points", text.index("# of k-points") + 1)
    f.write_text(text[:second] + text[second:].replace("# of bands:   3", "# of bands:   4", 1))
    with pytest.raises(InputFormatError, match="second spin block"):
        orbtool.io.read_projections(f)
