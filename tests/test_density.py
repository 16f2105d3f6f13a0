"""Partition and localisation of grid densities.

External references
-------------------
* A normalised 3-D Gaussian of width σ has its radius distributed as a chi
  distribution with 3 degrees of freedom (the Maxwell distribution): the mass
  inside radius R is chi₃.cdf(R/σ) = erf(x/√2) − √(2/π) x e^{−x²/2}, x = R/σ
  (M. Abramowitz & I. Stegun, Handbook of Mathematical Functions (1964),
  26.4 chi-square distribution with ν = 3 [section from memory]); evaluated
  with scipy.stats.chi, not with orbtool.
* ∫ρ² dV of a normalised 3-D Gaussian is (4πσ²)^(-3/2) (Gaussian product
  integral, any calculus text).
* On a periodic grid the rectangle rule is spectrally accurate for smooth
  periodic integrands (Trefethen & Weideman, SIAM Rev. 56, 385 (2014), Sec. 3).
* A molecule's orbital: pyscf (a reference library) gives the Mulliken
  populations of one orbital (R. S. Mulliken, J. Chem. Phys. 23, 1833 (1955))
  and writes the orbital as a cube file; the partition of that cube must rank
  the atoms as Mulliken does and agree with it within 0.05 per atom
  (the tolerance we state for real-space vs basis-set partitions of valence
  orbitals; common practice to expect differences of a few percent).
"""

import numpy as np
import pytest
from ase import Atoms
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.stats import chi

from orbtool.analysis._partition import nearest_atom_sums, sphere_sums
from orbtool.analysis.density import localisation, partition
from orbtool.errors import GeometryError, InputFormatError
from orbtool.grid import Grid

SKEWED = np.array([[7.0, 0.0, 0.0], [2.0, 6.5, 0.0], [1.0, 1.5, 8.0]])
MAXWELL = chi(df=3)


def gaussians(cell, shape, centres, sigma, amplitudes, origin=(0.0, 0.0, 0.0)):
    """Sum of normalised periodic Gaussians (nearest image only; σ ≪ cell)."""
    g = Grid(np.zeros(shape), cell, origin=origin)
    vals = np.zeros(shape)
    for c, a in zip(centres, amplitudes):
        d = g.minimum_image_distance(c)
        vals += a * (2 * np.pi * sigma**2) ** -1.5 * np.exp(-d**2 / (2 * sigma**2))
    return g.with_values(vals, unit="e/Å^3")


def test_voronoi_recovers_gaussian_amplitudes_in_skewed_cell():
    rng = np.random.default_rng(3)
    frac = np.array([[0.1, 0.1, 0.1], [0.6, 0.2, 0.5], [0.3, 0.7, 0.8], [0.8, 0.8, 0.2], [0.95, 0.45, 0.6]])
    pos = frac @ SKEWED + [0.2, -0.1, 0.3]
    atoms = Atoms("SiSiOOC", positions=pos, cell=SKEWED, pbc=True)
    dmin = atoms.get_all_distances(mic=True)[np.triu_indices(5, 1)].min()
    sigma = 0.22
    amp = rng.uniform(0.5, 2.0, 5)
    g = gaussians(SKEWED, (56, 56, 64), pos, sigma, amp, origin=[0.2, -0.1, 0.3])
    g = g.with_values(g.values, atoms=atoms)
    part = partition(g, "voronoi")
    # each cell contains the ball of radius dmin/2 about its atom: what leaks is bounded by the
    # Maxwell tail beyond dmin/2, from every atom (Abramowitz & Stegun 26.4 via scipy.stats.chi)
    leak = MAXWELL.sf(dmin / 2 / sigma) * amp.sum()
    assert np.allclose(part.charges, amp, atol=leak + 1e-7)
    assert part.total == pytest.approx(amp.sum(), rel=1e-7)
    assert abs(part.outside) < 1e-9


def test_spheres_match_maxwell_mass():
    cell = np.diag([9.0, 9.5, 10.0])
    pos = np.array([[1.0, 1.0, 1.0], [5.5, 5.0, 6.0]])   # the first sphere wraps across faces
    sigma = 0.5
    g = gaussians(cell, (108, 114, 120), pos, sigma, [1.0, 2.0])
    atoms = Atoms("HO", positions=pos, cell=cell, pbc=True)
    radii = {"H": 0.6, "O": 1.1}
    part = partition(g, "spheres", atoms=atoms, radii=radii)
    want = np.array([MAXWELL.cdf(0.6 / sigma), 2.0 * MAXWELL.cdf(1.1 / sigma)])
    # a sharp sphere on a grid converges slowly (counting of surface voxels, error ~ h/R):
    # we accept 1 % at h ≈ 0.083 Å, R/h ≈ 7–13 (common practice for point-in-sphere sums)
    assert np.allclose(part.charges, want, rtol=1e-2)
    assert part.outside == pytest.approx(3.0 - part.charges.sum())


def test_kernels_agree_with_direct_minimum_image_masks():
    # the direct construction (one full-grid distance map per atom) is the straightforward route
    rng = np.random.default_rng(0)
    g = Grid(rng.random((30, 28, 33)), SKEWED, origin=[0.3, -0.2, 0.1])
    pos = rng.random((9, 3)) @ SKEWED + g.origin
    d = np.stack([g.minimum_image_distance(p) for p in pos])
    labels = d.argmin(axis=0)
    direct = np.bincount(labels.ravel(), weights=g.values.ravel(), minlength=9)
    for levels in (0, 1, 2, 3):
        assert np.allclose(nearest_atom_sums(g.values, g.cell, g.origin, pos, levels=levels), direct,
                           rtol=1e-12)
    r = np.array([1.0, 1.5, 0.5, 2.0, 1.0, 1.0, 1.2, 0.0, 1.9])
    direct_s = np.array([g.values[g.sphere_mask(p, ri)].sum() if ri > 0 else 0.0 for p, ri in zip(pos, r)])
    assert np.allclose(sphere_sums(g.values, g.cell, g.origin, pos, r), direct_s, rtol=1e-12)


def test_localisation_of_a_gaussian():
    cell = np.diag([10.0, 10.0, 10.0])
    sigma = 0.8
    site = np.array([9.5, 0.3, 5.0])            # near a face: wrapping must hold
    offset = np.array([0.3, -0.2, 0.1])
    g = gaussians(cell, (100, 100, 100), [site + offset], sigma, [1.0])
    loc = localisation(g, site, within=(1.0, 2.0))
    # IPR of a normalised Gaussian: (4πσ²)^(-3/2)
    assert loc.ipr == pytest.approx((4 * np.pi * sigma**2) ** -1.5, rel=1e-6)
    assert np.allclose(loc.centroid_offset, offset, atol=1e-6)
    # about the Gaussian's own centre: Maxwell quantiles (scipy.stats.chi, df=3)
    loc0 = localisation(g, site + offset, within=(1.0, 2.0), bin_width=0.02)
    assert loc0.r50 == pytest.approx(MAXWELL.ppf(0.5) * sigma, abs=0.02)
    assert loc0.r90 == pytest.approx(MAXWELL.ppf(0.9) * sigma, abs=0.02)
    assert loc0.within[1.0] == pytest.approx(MAXWELL.cdf(1.0 / sigma), rel=1e-2)
    assert loc0.within[2.0] == pytest.approx(MAXWELL.cdf(2.0 / sigma), rel=1e-2)
    # shell-averaged density follows the Gaussian itself
    sel = (loc0.radii > 0.5) & (loc0.radii < 2.0)
    ref = (2 * np.pi * sigma**2) ** -1.5 * np.exp(-loc0.radii[sel] ** 2 / (2 * sigma**2))
    assert np.allclose(loc0.radial_density[sel], ref, rtol=0.05)
    assert loc0.complete_radius == pytest.approx(5.0)
    assert "participation volume" in loc0.summary()


def test_bad_inputs_are_named():
    g = gaussians(np.diag([6.0, 6.0, 6.0]), (24, 24, 24), [[3, 3, 3]], 0.5, [1.0])
    wrong = Atoms("H", positions=[[3, 3, 3]], cell=np.diag([6.0, 6.0, 7.0]), pbc=True)
    with pytest.raises(GeometryError, match="do not belong together"):
        partition(g, atoms=wrong)
    right = Atoms("H", positions=[[3, 3, 3]], cell=np.diag([6.0, 6.0, 6.0]), pbc=True)
    with pytest.raises(InputFormatError, match="radii"):
        partition(g, "spheres", atoms=right)
    with pytest.raises(InputFormatError, match="no sphere radius given for H"):
        partition(g, "spheres", atoms=right, radii={"O": 1.0})
    with pytest.raises(InputFormatError, match="meet its own periodic image"):
        partition(g, "spheres", atoms=right, radii=3.5)
    with pytest.raises(InputFormatError, match="method"):
        partition(g, "bader", atoms=right)
    with pytest.raises(InputFormatError, match="carries no structure"):
        partition(g)
    with pytest.raises(InputFormatError, match="potential"):
        partition(g.with_values(g.values, unit="eV"), atoms=right)
    with pytest.raises(InputFormatError, match="negative"):
        localisation(g.with_values(g.values - 2 * g.values.mean()), [3, 3, 3])


@pytest.mark.slow
def test_carbon_monoxide_orbitals_against_pyscf_mulliken(tmp_path):
    pyscf = pytest.importorskip("pyscf")
    from ase.io.cube import read_cube
    from pyscf.tools import cubegen

    from orbtool.units import BOHR

    mol = pyscf.gto.M(atom="C 0 0 0; O 0 0 1.128", basis="sto-3g", verbose=0)
    mf = pyscf.scf.RHF(mol).run()
    S = mol.intor("int1e_ovlp")
    ao_atom = np.array([label[0] for label in mol.ao_labels(fmt=False)])
    homo = mol.nelectron // 2 - 1
    # 1π (O-heavy), 5σ (HOMO, C lone pair) and 2π* (LUMO, C-heavy): the ranking flips between them
    for mo in (homo - 2, homo, homo + 1):
        c = mf.mo_coeff[:, mo]
        mulliken = np.array([(c * (S @ c))[ao_atom == a].sum() for a in range(2)])
        path = tmp_path / f"mo{mo}.cube"
        cubegen.orbital(mol, str(path), c, nx=48, ny=48, nz=64, margin=5.0)
        with open(path) as fh:
            cube = read_cube(fh)
        g = Grid(cube["data"] * BOHR**-1.5, cube["atoms"].cell, origin=cube["origin"], atoms=cube["atoms"],
                 unit="Å^-3/2", source=str(path))
        vor = partition(g, "voronoi")
        assert vor.total == pytest.approx(1.0, abs=5e-3)           # a normalised orbital
        assert np.array_equal(vor.ranking(), np.argsort(-mulliken))
        assert np.allclose(vor.fractions, mulliken, atol=0.05)
        sph = partition(g, "spheres", radii={"C": 0.77, "O": 0.73})
        assert np.array_equal(sph.ranking(), np.argsort(-mulliken))


@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 2**31 - 1), natoms=st.integers(1, 12),
       shape=st.tuples(st.integers(3, 21), st.integers(3, 21), st.integers(3, 21)))
def test_voronoi_matches_scipy_periodic_kdtree(seed, natoms, shape):
    # reference: scipy's cKDTree with periodic boxsize (orthogonal cells) labels every point by
    # its nearest atom; orbtool's block descent must give the same cell sums
    from scipy.spatial import cKDTree

    rng = np.random.default_rng(seed)
    lengths = rng.uniform(3.0, 9.0, 3)
    pos = rng.random((natoms, 3)) * lengths
    values = rng.random(shape)
    g = Grid(values, np.diag(lengths))
    pts = np.stack(np.meshgrid(*[np.arange(n) / n * L for n, L in zip(shape, lengths)], indexing="ij"), -1)
    _, label = cKDTree(pos, boxsize=lengths).query(pts.reshape(-1, 3) % lengths)
    want = np.bincount(label, weights=values.ravel(), minlength=natoms)
    got = nearest_atom_sums(g.values, g.cell, g.origin, pos)
    assert np.allclose(got, want, rtol=1e-10, atol=1e-10)


@pytest.mark.parametrize("cell", [np.diag([7.0, 7.5, 8.0]), SKEWED])
def test_overlap_count_matches_ase_all_pair_distances(cell):
    # reference: ASE's every-pair minimum-image distances (Atoms.get_all_distances(mic=True))
    from orbtool.analysis.density import _overlapping_pairs
    rng = np.random.default_rng(3)
    atoms = Atoms("H30", positions=rng.random((30, 3)) @ cell, cell=cell, pbc=True)
    d = atoms.get_all_distances(mic=True)
    for rad in (0.4, 0.9, 1.4):
        r = np.full(30, rad)
        r[::7] = 0.0  # an empty sphere overlaps nothing
        want = (r[:, None] + r[None, :] > d) & ~np.eye(30, dtype=bool) & (r[:, None] > 0) & (r[None, :] > 0)
        assert _overlapping_pairs(atoms, r) == int(want.sum() // 2)


def test_negative_density_still_refused_and_positive_one_accepted():
    cell = np.diag([6.0, 6.0, 6.0])
    rng = np.random.default_rng(4)
    atoms = Atoms("H2", positions=[[1, 1, 1], [4, 4, 4]], cell=cell, pbc=True)
    vals = rng.random((20, 20, 20))
    ok = partition(Grid(vals, cell, atoms=atoms, unit="e/Å^3"))
    # every point belongs to some nearest-atom cell: the charges add up to the rectangle-rule integral
    assert ok.charges.sum() == pytest.approx(ok.total)
    with pytest.raises(InputFormatError, match="negative part"):
        partition(Grid(vals - 0.5, cell, atoms=atoms, unit="e/Å^3"))
