"""Checks of the periodic point-charge potential used for model-subtracted potential alignment."""

import numpy as np
import pytest
from ase.build import bulk

from orbtool.grid import Grid
from orbtool.levels import charge_correction, ewald_energy, potential_alignment
from orbtool.levels.model_potential import ewald_potential, point_charge_potential_grid
from orbtool.units import COULOMB

CELL = np.array([[9.0, 0.5, 0.0], [0.3, 10.0, 0.4], [0.2, 0.1, 11.0]])
EPS = np.array([[5.0, 0.3, 0.0], [0.3, 7.0, 0.2], [0.0, 0.2, 9.0]])


def test_rocksalt_site_potential_is_madelung():
    # Kittel, Introduction to Solid State Physics, "Crystal binding": the potential at an ion from all
    # others is ∓α e/(4πε₀ r₀) with α = 1.747565 (from memory)
    atoms = bulk("NaCl", "rocksalt", a=5.64, cubic=True)
    q = np.where(np.array(atoms.get_chemical_symbols()) == "Na", 1.0, -1.0)
    phi = ewald_potential(atoms.cell[:], atoms.positions, q, atoms.positions)
    assert phi * 2.82 / COULOMB == pytest.approx(-1.747565 * q, abs=2e-6)
    # and E = ½ Σ q_i φ_i is the Ewald energy (Ewald 1921)
    assert 0.5 * q @ phi == pytest.approx(ewald_energy(atoms.cell[:], atoms.positions, q), rel=1e-12)


def test_near_field_constant_is_leslie_gillan():
    # φ(r) − q/(ε r) → −α q/(ε L) as r → 0 for a simple cubic lattice, α = 2.8373
    # (Leslie & Gillan, J. Phys. C 18, 973 (1985); Makov & Payne, PRB 51, 4014 (1995))
    L, eps, r = 8.0, 4.0, 1e-3
    phi = ewald_potential(np.eye(3) * L, [[0.0, 0.0, 0.0]], [1.0], [[r, 0.0, 0.0]], eps)[0] / COULOMB
    assert phi - 1.0 / (eps * r) == pytest.approx(-2.8373 / (eps * L), abs=2e-5)


@pytest.mark.parametrize("eta", [0.25, 0.6, 1.3])
def test_potential_independent_of_eta_and_grid_matches_points(eta):
    pos = np.array([[1.0, 2.0, 3.0]])
    pts = np.array([[4.0, 5.0, 6.0], [0.0, 0.0, 0.0], [8.5, 9.5, 1.0]])
    ref = ewald_potential(CELL, pos, [2.0], pts, EPS)
    assert ewald_potential(CELL, pos, [2.0], pts, EPS, eta=eta) == pytest.approx(ref, rel=1e-11, abs=1e-12)
    g = Grid(values=np.zeros((10, 11, 12)), cell=CELL, origin=np.array([0.1, -0.2, 0.3]), unit="eV")
    v = point_charge_potential_grid(g, pos[0], 2.0, EPS)
    pick = [(0, 0, 0), (3, 7, 11), (9, 1, 5)]
    pts = np.array([g.points[i] for i in pick])
    assert [v[i] for i in pick] == pytest.approx(-ewald_potential(CELL, pos, [2.0], pts, EPS), abs=1e-11)


def test_model_subtracted_alignment_recovers_offset():
    # Freysoldt, Neugebauer & Van de Walle, PRL 102, 016402 (2009): once the model potential of the
    # screened point charge is removed, V_def − V_host is flat; a constant offset is recovered exactly
    cell = np.eye(3) * 12.0
    g = Grid(values=np.zeros((20, 20, 20)), cell=cell, unit="eV")
    host = g.with_values(np.cos(2 * np.pi * np.arange(20) / 20)[:, None, None] * np.ones((20, 20, 20)))
    centre = np.array([6.0, 6.0, 6.0])
    model = point_charge_potential_grid(g, centre, 1.0, 8.0)
    defect = host.with_values(host.values + model + 0.21)
    assert potential_alignment(host, defect, centre, model=model).delta_v == pytest.approx(0.21, abs=1e-12)
    plain = potential_alignment(host, defect, centre).delta_v
    assert abs(plain - 0.21) > 1e-3  # without the model the long-range tail biases the average
    corr = charge_correction(1, cell, 8.0, host_potential=host, defect_potential=defect, defect_position=centre,
                             subtract_model=True)
    assert corr.terms["alignment"] == pytest.approx(0.21, abs=1e-12)
    assert any("V_model" in n for n in corr.notes)
