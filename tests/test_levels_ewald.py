"""External checks of the Ewald sums and the charged-cell corrections."""

import math

import numpy as np
import pytest
from ase.build import bulk

from orbtool.errors import InputFormatError, ModelError
from orbtool.grid import Grid
from orbtool.levels.correction import charge_correction, image_charge_energy, makov_payne_energy, potential_alignment
from orbtool.levels.ewald import ewald_energy, lattice_madelung_alpha
from orbtool.units import COULOMB


def _madelung(atoms, charges, eta=None):
    """α per nearest-neighbour distance: E_cell = −N_pairs α e²/(4πε₀ r₀)."""
    q = np.array([charges[s] for s in atoms.get_chemical_symbols()], float)
    d = atoms.get_all_distances(mic=True)
    r0 = d[d > 1e-8].min()
    e = ewald_energy(atoms.cell[:], atoms.positions, q, eta=eta)
    return -e * r0 / (len(q) / 2) / COULOMB


# Kittel, Introduction to Solid State Physics, chapter "Crystal binding", table of Madelung constants
# (values from memory, as also listed in REFERENCES.md): NaCl 1.747565, CsCl 1.762675, ZnS 1.6381.
@pytest.mark.parametrize("atoms, charges, expected, tol", [
    (bulk("NaCl", "rocksalt", a=5.64, cubic=True), {"Na": 1, "Cl": -1}, 1.747565, 2e-6),
    (bulk("NaCl", "rocksalt", a=5.64), {"Na": 1, "Cl": -1}, 1.747565, 2e-6),  # primitive fcc cell
    (bulk("CsCl", "cesiumchloride", a=4.12), {"Cs": 1, "Cl": -1}, 1.762675, 2e-6),
    (bulk("ZnS", "zincblende", a=5.41, cubic=True), {"Zn": 2, "S": -2}, 4 * 1.63806, 4e-5),
    (bulk("ZnS", "zincblende", a=5.41), {"Zn": 1, "S": -1}, 1.63806, 1e-5),
])
def test_madelung_constants_kittel(atoms, charges, expected, tol):
    assert _madelung(atoms, charges) == pytest.approx(expected, abs=tol)


def test_point_charge_simple_cubic_alpha():
    # Leslie & Gillan, J. Phys. C 18, 973 (1985); Makov & Payne, PRB 51, 4014 (1995): α(sc) = 2.8373
    alpha, length = lattice_madelung_alpha(np.eye(3) * 9.3)
    assert length == pytest.approx(9.3)
    assert alpha == pytest.approx(2.8373, abs=1e-4)


@pytest.mark.parametrize("eta", [0.15, 0.35, 0.8, 1.6])
def test_independent_of_splitting_parameter(eta):
    # Ewald, Ann. Phys. 369, 253 (1921): the split is exact, so the total cannot depend on η.
    cell = np.array([[6.0, 0.3, 0.0], [0.5, 7.0, 0.2], [0.1, 0.4, 8.0]])
    pos = np.array([[0.0, 0.0, 0.0], [1.0, 2.0, 3.0], [4.0, 1.0, 2.0]])
    q = np.array([2.0, -0.5, 1.0])  # net charge: the background term is exercised
    eps = np.array([[4.0, 0.5, 0.1], [0.5, 6.0, -0.3], [0.1, -0.3, 9.0]])
    ref = ewald_energy(cell, pos, q, eps)
    assert ewald_energy(cell, pos, q, eps, eta=eta) == pytest.approx(ref, rel=1e-11, abs=1e-12)


def test_anisotropic_reduces_to_scalar_and_rescaled_cell():
    # Coordinate change r = ε^{1/2} s (Rurali & Cartoixà, Nano Lett. 9, 975 (2009)): for diagonal ε
    # the energy is the vacuum energy of the rescaled cell divided by sqrt(det ε); for ε = ε·1 it is E_vac/ε.
    cell = np.array([[6.0, 0.3, 0.0], [0.5, 7.0, 0.2], [0.1, 0.4, 8.0]])
    pos = np.array([[0.0, 0.0, 0.0], [1.0, 2.0, 3.0]])
    q = np.array([2.0, -0.5])
    e_vac = ewald_energy(cell, pos, q)
    assert ewald_energy(cell, pos, q, 4.0) == pytest.approx(e_vac / 4.0, rel=1e-12)
    assert ewald_energy(cell, pos, q, 4.0 * np.eye(3)) == pytest.approx(e_vac / 4.0, rel=1e-12)
    epsd = np.array([3.0, 5.0, 11.0])
    s = np.diag(1 / np.sqrt(epsd))
    rescaled = ewald_energy(cell @ s, pos @ s, q) / math.sqrt(epsd.prod())
    assert ewald_energy(cell, pos, q, np.diag(epsd)) == pytest.approx(rescaled, rel=1e-12)
    # a rotated tensor with the cell rotated along gives the same energy (rotation invariance)
    th = 0.4
    rot = np.array([[math.cos(th), -math.sin(th), 0], [math.sin(th), math.cos(th), 0], [0, 0, 1]])
    assert ewald_energy(cell, pos, q, rot @ np.diag(epsd) @ rot.T) == pytest.approx(
        ewald_energy(cell @ rot, pos @ rot, q, np.diag(epsd)), rel=1e-11)


def test_image_correction_equals_makov_payne_leading_term():
    # Makov & Payne (1995) eq. 15: correction q²α/(2εL); sc α = 2.8373
    q, eps, L = 2, 10.0, 12.0
    expected = q * q * 2.8373 * COULOMB / (2 * eps * L)
    assert image_charge_energy(q, np.eye(3) * L, eps) == pytest.approx(expected, rel=5e-5)
    mp = makov_payne_energy(q, np.eye(3) * L, eps, quadrupole=3.0)
    assert mp["leading"] == pytest.approx(expected, rel=5e-5)
    # third-order term 2πqQ/(3εL³), same paper
    assert mp["quadrupole"] == pytest.approx(2 * math.pi * q * 3.0 * COULOMB / (3 * eps * L ** 3), rel=1e-12)
    corr = charge_correction(q, np.eye(3) * L, eps, scheme="makov-payne", quadrupole=3.0)
    assert corr.used == ("image", "quadrupole")
    assert corr.energy == pytest.approx(mp["leading"] + mp["quadrupole"], rel=1e-12)
    assert any("alignment term not included" in n for n in corr.notes)
    ew = charge_correction(q, np.eye(3) * L, eps)  # default scheme: Ewald image term, α reported
    assert ew.used == ("image",) and ew.details["alpha_effective"] == pytest.approx(2.8373, abs=1e-4)


def _potential_grids(cell, n, shift, center):
    """Host: a smooth periodic potential; defect: the same plus a bump at the defect plus a constant shift."""
    g = Grid(values=np.zeros((n, n, n)), cell=cell, unit="eV")
    f = [np.arange(n) / n] * 3
    host = np.cos(2 * np.pi * f[0])[:, None, None] + 0.5 * np.sin(2 * np.pi * f[1])[None, :, None] + 0 * f[2]
    r = g.minimum_image_distance(center)
    bump = 3.0 * np.exp(-(r / 1.0) ** 2)  # negligible (< 1e-20) beyond 7 Å
    return g.with_values(host), g.with_values(host + bump + shift)


def test_potential_alignment_recovers_constant_shift():
    # Far-from-defect average (Lany & Zunger, PRB 78, 235104 (2008)): a uniform offset of the defect
    # potential is recovered exactly when the localised part has decayed in the far region.
    cell = np.eye(3) * 20.0
    center = np.array([5.0, 5.0, 5.0])
    host, defect = _potential_grids(cell, 24, -0.137, center)
    pa = potential_alignment(host, defect, center)
    assert pa.far_radius == pytest.approx(8.0)
    assert pa.delta_v == pytest.approx(-0.137, abs=1e-12)
    corr = charge_correction(-2, cell, 9.0, host_potential=host, defect_potential=defect, defect_position=center)
    assert corr.terms["alignment"] == pytest.approx(-2 * -0.137, abs=1e-12)
    assert set(corr.used) == {"image", "alignment"}
    assert corr.energy == pytest.approx(corr.terms["image"] + corr.terms["alignment"], rel=1e-14)


def test_bad_inputs_raise():
    cell = np.eye(3) * 10
    for eps in (0.5, -3.0,  # ε = 1 (vacuum) is allowed: test_vacuum_dielectric_is_accepted...
                0.999, np.diag([5.0, 0.9, 5.0])):
        with pytest.raises(ModelError, match="principal value"):
            charge_correction(1, cell, eps)
    with pytest.raises(ModelError, match="symmetric"):
        charge_correction(1, cell, np.array([[5, 1, 0], [0, 5, 0], [0, 0, 5.0]]))
    with pytest.raises(ModelError, match="scalar dielectric"):
        charge_correction(1, cell, np.diag([5.0, 6.0, 7.0]), scheme="makov-payne")
    with pytest.raises(ModelError, match="cubic"):
        makov_payne_energy(1, np.diag([10.0, 10.0, 12.0]), 5.0, quadrupole=1.0)
    host, defect = _potential_grids(np.eye(3) * 20.0, 12, 0.0, np.zeros(3))
    with pytest.raises(InputFormatError, match="unit"):
        potential_alignment(host.with_values(host.values, unit="arb"), defect, np.zeros(3))
    with pytest.raises(ModelError, match="both"):
        charge_correction(1, cell, 5.0, host_potential=host)
    with pytest.raises(ModelError, match="no grid point"):
        potential_alignment(host, defect, np.zeros(3), far_radius=100.0)


def test_vacuum_dielectric_is_accepted_and_matches_makov_payne():
    """ε = 1 (vacuum, the setting of Makov & Payne, Phys. Rev. B 51, 4014 (1995)): leading correction
    q²α/(2L) with α = 2.8373 for a simple cubic cell (same paper); the Ewald image energy of a point
    charge in a cubic cell equals it; the Madelung result names the length it refers to."""
    cell = np.eye(3) * 10.0
    mp = makov_payne_energy(1, cell, 1.0)
    assert mp["leading"] == pytest.approx(2.8373 * COULOMB / 20.0, rel=1e-4)
    assert image_charge_energy(1, cell, 1.0) == pytest.approx(mp["leading"], rel=1e-6)
    assert float(charge_correction(1, cell, 1.0)) == pytest.approx(mp["leading"], rel=1e-6)
    assert makov_payne_energy(2, cell, 1.0)["leading"] == pytest.approx(4 * mp["leading"], rel=1e-12)
    with pytest.raises(ModelError, match="≥ 1"):
        image_charge_energy(1, cell, 0.9)
    m = lattice_madelung_alpha(cell)
    alpha, length = m
    assert alpha == pytest.approx(2.8373, abs=1e-4) and length == pytest.approx(10.0)
    assert m.length == length and "L = V^(1/3) = 10.000000 Å" in m.reference
