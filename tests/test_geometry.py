"""Vacancy locator, neighbour shells and edits against standard crystal geometry.

External references
-------------------
* Crystals from ASE's bulk builders (``ase.build.bulk``), a general-purpose
  reference library; neighbour counts and distances of the standard structures
  from C. Kittel, *Introduction to Solid State Physics* (8th ed., Wiley 2005),
  ch. 1, Table 2 and the NaCl / ZnS / diamond / hcp structure descriptions
  [table location from memory]: sc/bcc/fcc first neighbours 6 at a, 8 at a√3/2,
  12 at a/√2; rocksalt 6 unlike neighbours at a/2; zinc blende and diamond 4 at
  a√3/4; wurtzite 4 (site symmetry C3v, space group P6₃mc).
* Site symmetries: Oh for rocksalt and bcc sites, Td for zinc blende and diamond,
  C3v for wurtzite, D3h for hcp (International Tables for Crystallography Vol. A,
  Wyckoff positions of Fm-3m 4a, Im-3m 2a, F-43m 4a, Fd-3m 8a, P6₃mc 2b,
  P6₃/mmc 2c [from memory]).
* Neighbour lists and minimum images compared with ``ase.neighborlist.neighbor_list``
  and ``ase.geometry.find_mic``.
"""

import numpy as np
import pytest
from ase import Atoms
from ase.build import bulk
from ase.geometry import find_mic
from ase.neighborlist import neighbor_list

from orbtool.analysis.geometry import cluster_shells, locate_vacancy
from orbtool.analysis.periodic import minimum_image, site_neighbours
from orbtool.errors import GeometryError


def _remove(host, index):
    d = host.copy()
    del d[index]
    return d


# --------------------------------------------------------------- crystal tables
A_MGO, A_GAAS, A_FE = 4.21, 5.65, 2.87


@pytest.mark.parametrize("name, host, removed, n1, d1, group", [
    # rocksalt anion vacancy: 6 cations at a/2, Oh (Kittel ch. 1, NaCl structure)
    ("rocksalt", bulk("MgO", "rocksalt", a=A_MGO, cubic=True).repeat(2), 1, 6, A_MGO / 2, "Oh"),
    # zinc blende anion vacancy: 4 cations at a√3/4, Td (Kittel ch. 1, ZnS structure)
    ("zincblende", bulk("GaAs", "zincblende", a=A_GAAS, cubic=True).repeat(2), 1, 4, A_GAAS * np.sqrt(3) / 4, "Td"),
    # bcc: 8 at a√3/2, Oh (Kittel ch. 1, Table 2)
    ("bcc", bulk("Fe", "bcc", a=A_FE, cubic=True).repeat(3), 0, 8, A_FE * np.sqrt(3) / 2, "Oh"),
    # fcc: 12 at a/√2, Oh (Kittel ch. 1, Table 2)
    ("fcc", bulk("Cu", "fcc", a=3.61, cubic=True).repeat(2), 0, 12, 3.61 / np.sqrt(2), "Oh"),
])
def test_standard_crystals(name, host, removed, n1, d1, group):
    site = locate_vacancy(host, _remove(host, removed))
    assert site.host_index == removed
    assert site.element == host.get_chemical_symbols()[removed]
    assert len(site.first_shell) == n1
    assert [nb.host_distance for nb in site.first_shell] == pytest.approx([d1] * n1, abs=1e-6)
    assert site.point_group == group and site.host_point_group == group
    assert np.allclose(site.position, host.positions[removed])
    # Oh has 48 operations, Td 24 (F. A. Cotton, Chemical Applications of Group Theory, character tables)
    assert len(site.operations) == {"Oh": 48, "Td": 24}[group]
    for r in site.operations:
        assert np.allclose(r @ r.T, np.eye(3), atol=1e-8)


def test_second_shells_zincblende_and_rocksalt():
    # zinc blende: 12 like atoms at a/√2 second; rocksalt: 12 like atoms at a/√2 (Kittel ch. 1)
    for host, el in ((bulk("GaAs", "zincblende", a=A_GAAS, cubic=True).repeat(2), "As"),
                     (bulk("MgO", "rocksalt", a=A_MGO, cubic=True).repeat(2), "O")):
        site = locate_vacancy(host, _remove(host, 1))
        a = host.cell[0, 0] / 2
        assert len(site.second_shell) == 12
        assert {nb.element for nb in site.second_shell} == {el}
        assert [nb.host_distance for nb in site.second_shell] == pytest.approx([a / np.sqrt(2)] * 12, abs=1e-6)


def test_wurtzite_c3v_and_hcp_d3h():
    # wurtzite: 4 neighbours, site symmetry C3v (P6₃mc, Wyckoff 2b) although the tetrahedron is almost regular
    host = bulk("ZnO", "wurtzite", a=3.25, c=5.21).repeat((3, 3, 2))
    site = locate_vacancy(host, _remove(host, 1))
    assert len(site.first_shell) == 4 and {nb.element for nb in site.first_shell} == {"Zn"}
    assert site.point_group == "C3v" and len(site.operations) == 6
    # hcp metal: 12 neighbours (near-ideal c/a), site symmetry D3h (P6₃/mmc, Wyckoff 2c)
    host = bulk("Mg", "hcp", a=3.21, c=5.21).repeat((3, 3, 2))
    site = locate_vacancy(host, _remove(host, 0))
    assert len(site.first_shell) == 12 and site.point_group == "D3h"


def test_operations_map_first_shell_onto_itself():
    host = bulk("GaAs", "zincblende", a=A_GAAS, cubic=True).repeat(2)
    site = locate_vacancy(host, _remove(host, 1))
    v = np.array([nb.vector for nb in site.first_shell])
    for r, p in zip(site.operations, site.permutations):
        assert np.allclose(v @ r.T, v[p], atol=1e-6)


# --------------------------------------------------------- periodic primitives
def _random_cell(rng):
    cell = np.eye(3) * rng.uniform(3.0, 6.0) + rng.normal(scale=1.2, size=(3, 3))
    if np.linalg.det(cell) < 0:
        cell[0] *= -1
    return cell


@pytest.mark.parametrize("seed", range(6))
def test_site_neighbours_match_ase_neighborlist(seed):
    # reference: ase.neighborlist.neighbor_list (same S convention: D = x_j + S·cell − x_i)
    rng = np.random.default_rng(seed)
    cell = _random_cell(rng)
    pbc = [True, True, bool(seed % 2)]
    pos = rng.random((9, 3)) @ cell
    atoms = Atoms("H9", positions=pos, cell=cell, pbc=pbc)
    cutoff = 3.5
    i, j, dist, vec, shift = neighbor_list("ijdDS", atoms, cutoff)
    for a in range(len(atoms)):
        idx, sh, v, d = site_neighbours(cell, pos, pbc, pos[a], cutoff)
        sel = i == a
        ref = sorted(zip(j[sel].tolist(), map(tuple, shift[sel].tolist())))
        got = sorted(zip(idx.tolist(), map(tuple, sh.tolist())))
        assert got == ref
        assert np.sort(d) == pytest.approx(np.sort(dist[sel]), abs=1e-9)
        assert np.allclose(pos[idx] + sh @ cell - pos[a], v)


@pytest.mark.parametrize("seed", range(4))
def test_minimum_image_matches_ase_find_mic(seed):
    rng = np.random.default_rng(100 + seed)
    cell = _random_cell(rng)
    vec = rng.normal(scale=8.0, size=(50, 3))
    mic, shifts = minimum_image(cell, vec, True)
    ref, ref_len = find_mic(vec, cell, True)
    assert np.linalg.norm(mic, axis=1) == pytest.approx(ref_len, abs=1e-9)
    assert np.allclose(vec + shifts @ cell, mic)


def test_cluster_shells_gap_rule():
    # common practice: a new shell where sorted distances jump by more than the tolerance
    assert cluster_shells([2.35, 3.84, 2.36, 4.50, 3.85], gap=0.2).tolist() == [1, 2, 1, 3, 2]


# ------------------------------------------------------------ relaxed structures
def test_breathing_and_radial_displacements_are_recovered():
    # construct a 4 % inward breathing relaxation: radial displacement must be −0.04·d (geometry)
    host = bulk("Si", "diamond", a=5.43, cubic=True).repeat(2)
    defect = _remove(host, 0)
    site0 = locate_vacancy(host, defect)
    relaxed = site0.breathe(-0.04)
    site = locate_vacancy(host, relaxed)
    d = 5.43 * np.sqrt(3) / 4
    for nb in site.first_shell:
        assert nb.radial_displacement == pytest.approx(-0.04 * d, abs=1e-9)
        assert nb.tangential_displacement == pytest.approx(0.0, abs=1e-9)
        assert nb.distance == pytest.approx(0.96 * d, abs=1e-9)
    desc = site.descriptors()
    assert desc["breathing_fraction"] == pytest.approx(-0.04, abs=1e-9)
    assert desc["pair_distance_mean"] == pytest.approx(0.96 * d * np.sqrt(8 / 3), abs=1e-9)  # tetrahedron edge
    assert desc["angle_mean"] == pytest.approx(np.degrees(np.arccos(-1 / 3)), abs=1e-6)  # 109.47°
    assert desc["distortion_total"] == pytest.approx(0.0, abs=1e-9)
    assert site.point_group == "Td"


def test_tetragonal_pairing_lowers_td_to_d2d():
    # the E (tetragonal) distortion of a Td vacancy along a four-fold axis is the pairing distortion of
    # symmetry D2d: two neighbour pairs approach (2 short + 4 long neighbour–neighbour distances); a T2
    # distortion along the same axis gives C2v (G. D. Watkins' vacancy distortions, e.g. M. Lannoo &
    # J. Bourgoin, Point Defects in Semiconductors I, Springer 1981, ch. 4 [from memory])
    host = bulk("Si", "diamond", a=5.43, cubic=True).repeat(2)
    site = locate_vacancy(host, _remove(host, 0))
    modes = site.distortion_modes()
    assert {"breathing", "E.1", "E.2", "T2.1", "T2.2", "T2.3"} == set(modes)
    dist = locate_vacancy(host, site.distort("E.1", 0.3), symprec=0.02)
    assert dist.point_group == "D2d"
    v = np.array([nb.vector for nb in dist.first_shell])
    i, j = np.triu_indices(4, 1)
    pairs = np.sort(np.linalg.norm(v[i] - v[j], axis=1))
    assert pairs[1] - pairs[0] < 1e-6 and pairs[5] - pairs[2] < 1e-6 and pairs[2] - pairs[1] > 0.1
    desc = dist.descriptors()
    assert desc["distortion_E"] == pytest.approx(0.3, abs=1e-6)
    assert desc["distortion_T2"] == pytest.approx(0.0, abs=1e-6)
    assert desc["pair_distance_spread"] > 0.05
    t2 = locate_vacancy(host, site.distort("T2.1", 0.3), symprec=0.02)
    assert t2.point_group == "C2v"
    assert t2.descriptors()["distortion_T2"] == pytest.approx(0.3, abs=1e-6)
    # the octahedral vacancy: Eg along the four-fold axis is the tetragonal Jahn–Teller distortion, D4h
    # (J. H. Van Vleck's Q3 mode of an octahedron, J. Chem. Phys. 7, 72 (1939) [from memory])
    rs = bulk("MgO", "rocksalt", a=A_MGO, cubic=True).repeat(2)
    oct_site = locate_vacancy(rs, _remove(rs, 1))
    assert locate_vacancy(rs, oct_site.distort("Eg.1", 0.3), symprec=0.02).point_group == "D4h"


def test_relaxed_subshells_split_a_paired_shell():
    # two of the four neighbours pulled 0.2 Å inward: the host shell of 4 splits 2 + 2 (by construction)
    host = bulk("Si", "diamond", a=5.43, cubic=True).repeat(2)
    site = locate_vacancy(host, _remove(host, 0))
    rhat = np.array([nb.vector / nb.distance for nb in site.first_shell])
    pattern = rhat * np.array([-1.0, -1.0, 0.0, 0.0])[:, None]
    moved = locate_vacancy(host, site.distort(pattern, 0.2 * np.sqrt(2)))
    groups = moved.relaxed_subshells(1, gap=0.05)
    assert [len(g) for g in groups] == [2, 2]
    assert groups[0][0].distance == pytest.approx(5.43 * np.sqrt(3) / 4 - 0.2, abs=1e-9)


def test_mode_patterns_are_orthonormal():
    host = bulk("MgO", "rocksalt", a=A_MGO, cubic=True).repeat(2)
    site = locate_vacancy(host, _remove(host, 1))
    modes = site.distortion_modes()
    m = np.array([v.ravel() for v in modes.values()])
    assert np.allclose(m @ m.T, np.eye(len(m)), atol=1e-8)
    # empty octahedron (6 atoms): internal modes A1g + Eg + T1u + T2g + T2u, as for an octahedral XY6
    # molecule without its centre (K. Nakamoto, Infrared and Raman Spectra of Inorganic and Coordination
    # Compounds, octahedral XY6 table, minus the central atom's T1u [from memory])
    labels = sorted({k.split(".")[0] for k in modes})
    assert labels == ["Eg", "T1u", "T2g", "T2u", "breathing"]


# -------------------------------------------------------------------- edits
def test_edits_return_new_atoms_and_leave_inputs_untouched():
    host = bulk("GaAs", "zincblende", a=A_GAAS, cubic=True).repeat(2)
    defect = _remove(host, 1)
    before_h, before_d = host.positions.copy(), defect.positions.copy()
    site = locate_vacancy(host, defect)
    out = site.breathe(-0.05)
    assert out is not defect
    assert np.array_equal(host.positions, before_h) and np.array_equal(defect.positions, before_d)
    moved = [nb.index for nb in site.first_shell]
    d = np.linalg.norm(find_mic(out.positions[moved] - site.position, out.cell, True)[0], axis=1)
    assert d == pytest.approx([0.95 * A_GAAS * np.sqrt(3) / 4] * 4, abs=1e-9)
    others = np.setdiff1d(np.arange(len(defect)), moved)
    assert np.array_equal(out.positions[others], defect.positions[others])
    sc = site.scale_shell(1.1, shell=2)
    d2 = np.linalg.norm(find_mic(sc.positions[[nb.index for nb in site.second_shell]] - site.position,
                                 sc.cell, True)[0], axis=1)
    assert d2 == pytest.approx([1.1 * A_GAAS / np.sqrt(2)] * 12, abs=1e-9)
    sw = site.swap_element("Ga", "In", shell=1)
    assert [sw.get_chemical_symbols()[i] for i in moved] == ["In"] * 4
    assert sw.get_chemical_symbols().count("In") == 4 and defect.get_chemical_symbols().count("In") == 0
    assert site.swap_element("Ga", "Al").get_chemical_symbols().count("Al") == 32
    with pytest.raises(GeometryError, match="no Zn"):
        site.swap_element("Zn", "Cd")
    with pytest.raises(GeometryError, match="unknown distortion mode"):
        site.distort("Q7", 0.1)


def test_emt_relaxed_copper_vacancy():
    # a real relaxation: ASE's EMT potential (K. W. Jacobsen, P. Stoltze, J. K. Nørskov, Surf. Sci. 366, 394
    # (1996)) relaxes a Cu vacancy keeping Oh; the radial displacements must equal those measured directly
    # with ase.geometry on the relaxed positions; fcc-metal first neighbours relax inward ([from memory])
    from ase.calculators.emt import EMT
    from ase.geometry import get_distances
    from ase.optimize import BFGS

    host = bulk("Cu", "fcc", a=3.61, cubic=True).repeat(2)
    relaxed = _remove(host, 0)
    relaxed.calc = EMT()
    BFGS(relaxed, logfile=None).run(fmax=0.005, steps=200)
    relaxed.calc = None
    shifted = relaxed.copy()
    shifted.positions += [0.7, 0.3, -0.2]
    order = np.random.default_rng(1).permutation(len(shifted))
    site = locate_vacancy(host, shifted[order], symprec=0.01)
    assert site.host_index == 0 and site.point_group == "Oh"
    assert np.allclose(site.shift, [0.7, 0.3, -0.2], atol=1e-6)
    _, d = get_distances(relaxed.positions, [host.positions[0]], cell=host.cell, pbc=True)
    first = np.argsort(d[:, 0])[:12]
    radial = np.sort(d[first, 0] - 3.61 / np.sqrt(2))
    assert np.sort([nb.radial_displacement for nb in site.first_shell]) == pytest.approx(radial, abs=1e-6)
    assert radial.max() < 0  # inward
    assert site.descriptors()["distortion_total"] == pytest.approx(0.0, abs=1e-4)


@pytest.mark.parametrize("seed", range(4))
def test_shells_match_ase_neighborlist_on_random_cells(seed):
    # every periodic image within the reported shells is exactly ASE's neighbour list of the removed atom
    rng = np.random.default_rng(500 + seed)
    cell = np.eye(3) * 7.0 + rng.normal(scale=1.0, size=(3, 3))
    pos = [rng.random(3) @ cell]
    while len(pos) < 24:  # random atoms at least 1.2 Å apart
        p = rng.random(3) @ cell
        if find_mic(np.array(pos) - p, cell, True)[1].min() > 1.2:
            pos.append(p)
    host = Atoms(["Si", "O"] * 12, positions=pos, cell=cell, pbc=True)
    removed = int(rng.integers(len(host)))
    site = locate_vacancy(host, _remove(host, removed), n_shells=4, shell_tolerance=0.05)
    got = sorted((nb.host_index, tuple(nb.image)) for sh in site.shells for nb in sh)
    rmax = max(nb.host_distance for sh in site.shells for nb in sh)
    i, j, shift = neighbor_list("ijS", host, rmax + 1e-6)
    ref = sorted((int(b), tuple(int(x) for x in s)) for a, b, s in zip(i, j, shift) if a == removed and b != removed)
    assert got == ref
