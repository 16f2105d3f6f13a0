"""The vacancy locator under rattles, reorderings, rigid shifts, complexes and bad input.

External references: crystals from ASE's bulk builders (``ase.build.bulk``) and
ASE's ``Atoms.rattle``; neighbour geometry of the rocksalt and zinc-blende
structures from C. Kittel, *Introduction to Solid State Physics*, ch. 1 [from
memory]. The property tests check that the located site is where the atom was
removed, which is known by construction.
"""

import numpy as np
import pytest
from ase.build import bulk
from ase.geometry import find_mic
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from orbtool.analysis.geometry import locate_vacancy
from orbtool.errors import GeometryError

A_NACL, A_ZNS = 5.64, 5.41
HOSTS = {
    "rocksalt": bulk("NaCl", "rocksalt", a=A_NACL, cubic=True).repeat(2),   # 64 atoms, d_nn = a/2 = 2.82 Å
    "zincblende": bulk("ZnS", "zincblende", a=A_ZNS, cubic=True).repeat(2),  # 64 atoms, d_nn = a√3/4 = 2.34 Å
}


def _remove(host, *indices):
    d = host.copy()
    del d[list(indices)]
    return d


def _make_defect(host, removed, rattle, seed, shift, permute):
    d = _remove(host, removed)
    rng = np.random.default_rng(seed)
    d.positions += rng.normal(scale=rattle, size=d.positions.shape)
    d.positions += shift
    # some atoms written as other periodic images (codes differ in how they wrap positions)
    wrap = rng.random(len(d)) < 0.3
    d.positions[wrap] += rng.integers(-1, 2, size=(int(wrap.sum()), 3)) @ d.cell.array
    if permute:
        d = d[rng.permutation(len(d))]
    return d


@settings(max_examples=30, deadline=None, derandomize=True, suppress_health_check=[HealthCheck.too_slow])
@given(kind=st.sampled_from(sorted(HOSTS)), removed=st.integers(0, 63), seed=st.integers(0, 2**16),
       rattle=st.floats(0.0, 0.1), permute=st.booleans(),
       shift=st.tuples(*[st.floats(-0.5, 0.5)] * 3))
def test_small_shift_finds_the_removed_atom(kind, removed, seed, rattle, permute, shift):
    host = HOSTS[kind]
    shift = np.array(shift)
    defect = _make_defect(host, removed, rattle, seed, shift, permute)
    site = locate_vacancy(host, defect)
    # a shift shorter than half a neighbour distance cannot be confused with a lattice translation
    assert site.host_index == removed
    assert site.element == host.get_chemical_symbols()[removed]
    err = find_mic(site.position - (host.positions[removed] + shift), host.cell, True)[1]
    assert err < 0.1
    # the mapping is the one we built: defect atom -> host atom with the same element
    assert np.array_equal(np.array(host.get_chemical_symbols())[site.mapping],
                          np.array(defect.get_chemical_symbols()))
    assert len(site.first_shell) == (6 if kind == "rocksalt" else 4)


@settings(max_examples=20, deadline=None, derandomize=True, suppress_health_check=[HealthCheck.too_slow])
@given(kind=st.sampled_from(sorted(HOSTS)), removed=st.integers(0, 63), seed=st.integers(0, 2**16),
       shift=st.tuples(*[st.floats(-6.0, 6.0)] * 3).filter(lambda s: np.linalg.norm(s) > 0.6))
def test_large_shift_finds_the_site(kind, removed, seed, shift):
    # any rigid shift: the host index may change to an equivalent site, the site position may not
    host = HOSTS[kind]
    shift = np.array(shift)
    defect = _make_defect(host, removed, 0.03, seed, shift, True)
    site = locate_vacancy(host, defect)  # equally short shifts differ by a lattice translation: same site
    err = find_mic(site.position - (host.positions[removed] + shift), host.cell, True)[1]
    assert err < 0.1
    assert site.element == host.get_chemical_symbols()[removed]


def test_relaxation_of_half_an_angstrom_is_tolerated():
    # neighbours moved 0.5 Å toward the site (common practice upper bound for vacancy relaxations)
    host = HOSTS["zincblende"]
    site0 = locate_vacancy(host, _remove(host, 1))
    d1 = A_ZNS * np.sqrt(3) / 4
    relaxed = site0.breathe(-0.5 / d1)
    relaxed = relaxed[np.random.default_rng(3).permutation(len(relaxed))]
    site = locate_vacancy(host, relaxed)
    assert site.host_index == 1
    assert [nb.radial_displacement for nb in site.first_shell] == pytest.approx([-0.5] * 4, abs=1e-9)


def test_strained_defect_cell_is_matched_by_fractional_coordinates():
    host = HOSTS["rocksalt"]
    defect = _remove(host, 9)
    defect.set_cell(defect.cell * 1.01, scale_atoms=True)
    site = locate_vacancy(host, defect)
    assert site.host_index == 9
    assert np.allclose(site.position, host.positions[9] * 1.01)
    assert site.first_shell[0].distance == pytest.approx(1.01 * A_NACL / 2, abs=1e-9)


def test_divacancy_and_coordination_lost():
    # two nearest cation sites in rocksalt (a/√2 apart) share 2 anion neighbours: two edge-sharing octahedra
    # (Kittel ch. 1 NaCl structure; derived)
    host = HOSTS["rocksalt"]
    na = [i for i, s in enumerate(host.get_chemical_symbols()) if s == "Na"]
    d = find_mic(host.positions[na] - host.positions[na[0]], host.cell, True)[1]
    partner = na[int(np.argmin(np.where(d > 0.1, d, np.inf)))]
    site = locate_vacancy(host, _remove(host, na[0], partner), expected=na[0])
    assert site.host_index == na[0] and [m.host_index for m in site.other_vacancies] == [partner]
    lost = site.coordination_lost()
    assert sorted(lost.tolist()) == [1, 1, 1, 1, 2, 2]
    assert site.descriptors()["n_vacancies"] == 2
    # seen from one vacancy, the partner lies along <110>: the operations of Oh that keep a <110>
    # direction form mm2 = C2v (International Tables Vol. A, site symmetry of m-3m along [110] [from memory])
    assert site.point_group == "C2v"
    # without expected= the lower index is taken and a note says how to choose
    auto = locate_vacancy(host, _remove(host, na[0], partner))
    assert auto.host_index == min(na[0], partner) and any("expected=" in n for n in auto.notes)


def test_anion_cation_divacancy_in_zincblende():
    host = HOSTS["zincblende"]
    site0 = locate_vacancy(host, _remove(host, 1))
    cation = site0.first_shell[0].host_index
    site = locate_vacancy(host, _remove(host, 1, cation), expected="S")
    assert site.element == "S" and len(site.first_shell) == 3  # one of the 4 Zn neighbours is gone
    assert site.point_group == "C3v"


def test_substitution_is_reported():
    host = HOSTS["zincblende"]
    defect = _remove(host, 1)
    sym = defect.get_chemical_symbols()
    sym[10] = "Cd" if sym[10] == "Zn" else "Se"
    defect.set_chemical_symbols(sym)
    site = locate_vacancy(host, defect)
    assert site.host_index == 1
    assert len(site.substitutions) == 1 and site.substitutions[0].index == 10
    assert site.substitutions[0].element == sym[10]


# ------------------------------------------------------------------- bad input
def test_bad_inputs_raise_geometry_error_with_advice():
    host = HOSTS["rocksalt"]
    with pytest.raises(GeometryError, match="cells differ"):
        locate_vacancy(host, _remove(bulk("NaCl", "rocksalt", a=A_NACL, cubic=True).repeat((2, 2, 3)), 0))
    with pytest.raises(GeometryError, match="no missing atom"):
        locate_vacancy(host, host.copy())
    extra = host.copy()
    extra.append("Na")
    extra.positions[-1] = [A_NACL / 4] * 3  # tetrahedral interstitial
    with pytest.raises(GeometryError, match="interstitial"):
        locate_vacancy(host, extra)
    with pytest.raises(GeometryError, match="element counts"):
        locate_vacancy(host, _remove(host, *range(0, 40, 2)))
    with pytest.raises(GeometryError, match="ase.Atoms"):
        locate_vacancy(host, np.zeros((3, 3)))
    with pytest.raises(GeometryError, match="not a host atom index"):
        locate_vacancy(host, _remove(host, 0), expected=500)
    with pytest.raises(GeometryError, match="expected="):
        locate_vacancy(host, _remove(host, 0), expected=object())


def test_frenkel_pair_is_an_interstitial_not_a_vacancy():
    host = HOSTS["zincblende"]
    defect = host.copy()
    defect.positions[5] += [A_ZNS / 2, 0, 0]  # vacancy-interstitial pair: same atom count
    with pytest.raises(GeometryError, match="interstitial|more than tolerance"):
        locate_vacancy(host, defect)


def test_split_vacancy_is_ambiguous_until_expected_is_given():
    # a like neighbour moved half-way to the vacancy sits equally near two sites
    host = HOSTS["rocksalt"]
    defect = _remove(host, 0)
    cl_like = [i for i, s in enumerate(host.get_chemical_symbols()) if s == host.get_chemical_symbols()[0]]
    vec = find_mic(host.positions[cl_like] - host.positions[0], host.cell, True)[0]
    d = np.linalg.norm(vec, axis=1)
    j = cl_like[int(np.argmin(np.where(d > 0.1, d, np.inf)))]
    jd = j - 1  # index in the defect cell (atom 0 removed)
    defect.positions[jd] -= vec[cl_like.index(j)] / 2
    with pytest.raises(GeometryError, match=f"equally good.*expected={0}|equally good.*expected={j}"):
        locate_vacancy(host, defect)
    site = locate_vacancy(host, defect, expected=j, tolerance=2.5)
    assert site.host_index == j
    site = locate_vacancy(host, defect, expected=host.positions[0], tolerance=2.5)
    assert site.host_index == 0


def test_equally_short_rigid_shifts_name_the_same_site():
    # shifting by exactly half an fcc translation (a/2, a/2, 0) leaves two equally short shifts; they differ
    # by a lattice translation, so both name the same place (Kittel ch. 1, fcc lattice of NaCl): no error,
    # a note, and the site where the atom was removed
    host = HOSTS["rocksalt"]
    defect = _remove(host, 0)
    half = np.array([A_NACL / 4, A_NACL / 4, 0.0])
    defect.positions += half
    site = locate_vacancy(host, defect)
    assert find_mic(site.position - (host.positions[0] + half), host.cell, True)[1] < 1e-6
    assert any("same site" in n for n in site.notes)
    assert locate_vacancy(host, defect, expected=0).host_index == 0


def test_summary_and_tiny_cell():
    # primitive diamond cell (2 atoms, ASE builder): the 4 first neighbours are images of one atom at a√3/4
    # (Kittel ch. 1); moving them rigidly is impossible and says so
    host = bulk("Si", "diamond", a=5.43)
    site = locate_vacancy(host, _remove(host, 0))
    assert len(site.first_shell) == 4 and {nb.index for nb in site.first_shell} == {0}
    assert [nb.host_distance for nb in site.first_shell] == pytest.approx([5.43 * np.sqrt(3) / 4] * 4, abs=1e-9)
    assert len({tuple(nb.image) for nb in site.first_shell}) == 4
    with pytest.raises(GeometryError, match="too small"):
        site.breathe(-0.05)
    text = site.summary()
    assert "Vacancy of Si" in text and "Td" in text
    with pytest.raises(GeometryError, match="no Cl atom"):
        locate_vacancy(HOSTS["zincblende"], _remove(HOSTS["zincblende"], 1), expected="Cl")
