"""Data objects: construction checks and the analytic integral of a Gaussian.

External reference for the integral: the normalisation of a 3-D Gaussian,
∫ (2πσ²)^(-3/2) exp(-r²/2σ²) d³r = 1 (any calculus text); on a periodic grid
the rectangle rule is spectrally accurate for smooth periodic integrands
(Trefethen & Weideman, SIAM Rev. 56, 385 (2014), Sec. 3).
"""

import numpy as np
import pytest
from ase.build import bulk

from orbtool.case import DefectCase, Family
from orbtool.errors import InputFormatError
from orbtool.grid import Grid
from orbtool.spectra import BandProjections, Channel, ProjectedDOS


def gaussian_grid(cell, n, center, sigma):
    g = Grid(np.zeros(n), cell)
    d = g.minimum_image_distance(center)
    vals = (2 * np.pi * sigma**2) ** -1.5 * np.exp(-d**2 / (2 * sigma**2))
    return g.with_values(vals, unit="e/Å^3")


@pytest.mark.parametrize("cell", [np.diag([8.0, 9.0, 10.0]),
                                  np.array([[8.0, 0, 0], [3.0, 8.5, 0], [1.0, 1.5, 9.0]])])
def test_gaussian_integrates_to_one(cell):
    # centre near a corner: the Gaussian wraps across faces, periodicity must hold
    g = gaussian_grid(cell, (60, 64, 72), center=[0.3, 0.2, 0.1], sigma=0.6)
    assert g.integrate() == pytest.approx(1.0, abs=1e-6)


def test_sphere_mask_wraps_and_matches_volume():
    cell = np.diag([10.0, 10.0, 10.0])
    g = Grid(np.ones((80, 80, 80)), cell)
    m = g.sphere_mask([0.0, 0.0, 0.0], 3.0)
    # sphere volume 4/3 π r³ (geometry) within discretisation error
    assert g.integrate(mask=m) == pytest.approx(4 / 3 * np.pi * 27, rel=0.02)
    # corner sphere wraps: points at the far corner are inside too
    assert m[-1, -1, -1] and m[0, 0, 0]


def test_skewed_minimum_image_matches_ase():
    from ase.geometry import get_distances
    cell = np.array([[6.0, 0, 0], [4.5, 5.0, 0], [1.0, 2.0, 6.5]])
    g = Grid(np.zeros((7, 8, 9)), cell)
    c = np.array([0.4, 5.1, 2.2])
    pts = g.points.reshape(-1, 3)
    _, d_ase = get_distances(pts, [c], cell=cell, pbc=True)
    assert np.allclose(g.minimum_image_distance(c).ravel(), d_ase[:, 0], atol=1e-10)


def test_voxel_volume_and_points():
    cell = np.diag([2.0, 3.0, 4.0])
    g = Grid(np.zeros((2, 3, 4)), cell, origin=[1, 1, 1])
    assert g.voxel_volume == pytest.approx(1.0)
    assert np.allclose(g.points[1, 2, 3], [2.0, 3.0, 4.0])


@pytest.mark.parametrize("kwargs, fragment", [
    (dict(values=np.zeros((2, 2)), cell=np.eye(3)), "3 dimensions"),
    (dict(values=np.full((2, 2, 2), np.nan), cell=np.eye(3)), "non-finite"),
    (dict(values=np.zeros((2, 2, 2)), cell=-np.eye(3)), "positive volume"),
    (dict(values=np.zeros((2, 2, 2)), cell=np.eye(3), unit="furlongs"), "unit must be"),
    (dict(values=np.zeros((2, 2, 2)), cell=np.eye(2)), "shape (3, 3)"),
])
def test_grid_bad_construction(kwargs, fragment):
    with pytest.raises(InputFormatError, match=fragment.replace("(", r"\(").replace(")", r"\)")):
        Grid(**kwargs)


def _pdos(nspin=1):
    e = np.linspace(-5, 5, 101)
    chans = [Channel(0, "Sn", "s", 0), Channel(0, "Sn", "px", 0), Channel(1, "S", "p", 0)]
    if nspin == 2:
        chans += [Channel(0, "Sn", "s", 1)]
    vals = np.abs(np.random.default_rng(0).normal(size=(len(chans), e.size)))
    return ProjectedDOS(e, vals, chans, nspin=nspin, fermi=0.1)


def test_pdos_select_by_l_and_element():
    p = _pdos()
    assert np.allclose(p.select(l=1), p.values[1] + p.values[2])
    assert np.allclose(p.select(elements="Sn"), p.values[0] + p.values[1])
    assert p.orbital_resolution() == "lm"
    with pytest.raises(KeyError):
        p.select(elements="O")


def test_pdos_bad_construction():
    e = np.linspace(0, 1, 5)
    with pytest.raises(InputFormatError, match="increasing"):
        ProjectedDOS(e[::-1], np.zeros((1, 5)), [Channel(0, "Si", "s")])
    with pytest.raises(InputFormatError, match="shape"):
        ProjectedDOS(e, np.zeros((2, 5)), [Channel(0, "Si", "s")])
    with pytest.raises(InputFormatError, match="unknown orbital"):
        ProjectedDOS(e, np.zeros((1, 5)), [Channel(0, "Si", "q")])
    with pytest.raises(InputFormatError, match="spin"):
        ProjectedDOS(e, np.zeros((1, 5)), [Channel(0, "Si", "s", 1)], nspin=1)


def _proj(occ=True):
    nk, nb, na = 2, 3, 2
    rng = np.random.default_rng(1)
    return BandProjections(
        kpoints=np.zeros((nk, 3)), kweights=[1, 3], energies=np.sort(rng.normal(size=(1, nk, nb)), axis=-1),
        occupations=np.full((1, nk, nb), 2.0) if occ else None,
        weights=rng.random((1, nk, nb, na, 4)), orbitals=("s", "py", "pz", "px"))


def test_projections_character_normalised_and_weights():
    p = _proj()
    assert p.kweights.sum() == pytest.approx(1.0)
    assert p.character(1).sum() == pytest.approx(1.0)
    assert p.band_occupation(0) == pytest.approx(2.0)
    assert list(p.orbital_ls()) == [0, 1, 1, 1]


def test_projections_without_occupations_say_so():
    with pytest.raises(InputFormatError, match="occupations"):
        _proj(occ=False).band_occupation(0)


def test_projections_bad_occupation_range():
    p = _proj()
    with pytest.raises(InputFormatError, match="occupations must lie"):
        BandProjections(p.kpoints, p.kweights, p.energies, p.occupations * 2, p.weights, p.orbitals)


def test_case_and_family():
    host = bulk("NaCl", "rocksalt", a=5.6, cubic=True)
    d = host.copy()
    del d[0]
    c1 = DefectCase("a", d, host, charge=1, labels={"motif": "rs"})
    c2 = DefectCase("b", d, host, charge=0, labels={"motif": "zb"})
    fam = Family((c1, c2))
    assert fam["b"] is c2 and len(fam.where(motif="rs")) == 1
    assert fam.elements() == {"Na", "Cl"}
    assert "q = +1" in c1.summary()
    with pytest.raises(InputFormatError, match="duplicate"):
        Family((c1, c1))
    with pytest.raises(InputFormatError, match="charge"):
        DefectCase("x", d, charge=0.5)
