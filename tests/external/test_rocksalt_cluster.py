"""The whole orbtool pipeline on real DFT output that orbtool did not produce.

Data: ``tests/external/data`` (made by ``generate.py`` with pyscf, a registry
Kohn–Sham code; see the README there): an anion vacancy in a Li14F13⁺
rocksalt cluster holding one electron (an F-centre-like state), breathing
variants of its first shell (±5 %) and a first-shell cation swap Li → Na.

Every expectation is the engine's own number (``engine.json``: MO energies,
occupations, the atom the generator removed, the unit norm of Kohn–Sham
orbitals), never a value orbtool computed earlier.

Path: io.load_case (POSCAR, orbtool text projections/PDOS, cube) →
analysis.locate_vacancy → align / in_gap_states → compare_routes (projection
vs grid partition) → neighbour_moments.
"""

from __future__ import annotations

import numpy as np
import pytest
from external_cases import DATA, DEFECTS

#: pyscf MO energies are stored to 1 µeV in the text fixture; the issue asks for 1 meV
ENERGY_TOL = 1e-3


def _engine_state(states, rec):
    """The DefectState that is the engine's in-gap orbital (same spin and band index)."""
    hits = [s for s in states if s.spin == rec["state_spin"] and s.band == rec["state_index"]]
    assert len(hits) == 1, f"engine orbital (spin {rec['state_spin']}, MO {rec['state_index']}) not among " \
                           f"in-gap states {[(s.spin, s.band) for s in states]}"
    return hits[0]


def test_fixtures_are_compact_and_record_the_engine(engine):
    """Issue 9: fixtures ≤ 15 MB, with the engine version that made them."""
    size = sum(f.stat().st_size for f in DATA.rglob("*") if f.is_file())
    assert size <= 15 * 2 ** 20, f"fixtures are {size / 2 ** 20:.1f} MB"
    folders = sorted(d.name for d in DATA.iterdir() if d.is_dir())
    assert set(DEFECTS) | {"host"} <= set(folders)
    for name in folders:
        rec = engine[name]
        assert rec["engine"] == "pyscf" and rec["engine_version"] and rec["case"] == name
        assert rec["basis"] and rec["xc"]


@pytest.mark.parametrize("name", DEFECTS)
def test_locate_vacancy_finds_the_removed_atom(name, engine, sites):
    site = sites[name]
    rec = engine[name]
    # the generator removed host atom rec["removed_host_index"] (the central F)
    assert site.host_index == rec["removed_host_index"]
    assert site.element == "F"
    # six first neighbours on the cube axes at d_nn (1 ± breathing), point group Oh
    # (rocksalt anion site: standard crystallography, e.g. Kittel, Introduction to Solid State Physics, ch. 1)
    first = site.first_shell
    assert len(first) == 6
    expected_d = rec["d_nn_A"] * (1 + rec["breathe"])
    np.testing.assert_allclose([nb.distance for nb in first], expected_d, atol=1e-4)
    assert {nb.element for nb in first} == {rec["swap"] or "Li"}
    assert site.point_group == "Oh"


def test_cation_swap_is_reported_as_substitutions(sites):
    subs = sites["vac_na"].substitutions
    assert len(subs) == 6
    assert all("Na" in str(s) for s in subs)


@pytest.mark.parametrize("name", DEFECTS)
def test_in_gap_state_energy_and_occupation_match_engine(name, engine, cases, sites):
    from orbtool.analysis import align, in_gap_states
    rec = engine[name]
    case = cases[name]
    alignment = align(case, site=sites[name])
    states = in_gap_states(case, site=sites[name], alignment=alignment)
    st = _engine_state(states, rec)
    # defect-cell scale: the engine's MO energy (pyscf mo_energy × HARTREE2EV) to 1 meV
    assert abs(st.energy - rec["state_energy_eV"]) < ENERGY_TOL
    # host scale: the engine's energy plus the alignment orbtool states it applied
    assert abs(st.energy_aligned - alignment.shift - rec["state_energy_eV"]) < ENERGY_TOL
    assert any(f"{alignment.shift:+.4f}" in p for p in st.provenance)
    # occupation: pyscf mo_occ of that orbital (1 electron, UKS) out of a spin orbital's 1
    assert st.occupation == pytest.approx(rec["state_occupation"], abs=1e-9)
    assert st.max_occupation == 1.0
    # host band edges: the engine's host HOMO/LUMO (RKS) to 1 meV
    assert abs(st.edges.vbm - engine["host"]["homo_eV"][0]) < ENERGY_TOL
    assert abs(st.edges.cbm - engine["host"]["lumo_eV"][0]) < ENERGY_TOL


@pytest.mark.parametrize("name", DEFECTS)
def test_state_character_matches_engine_lowdin(name, engine, cases, sites):
    """orbtool's atom weights of the state equal the engine's Löwdin atom populations of that MO."""
    from orbtool.analysis import in_gap_states
    rec = engine[name]
    st = _engine_state(in_gap_states(cases[name], site=sites[name]), rec)
    ref = np.asarray(rec["state_lowdin_atoms"])
    # fixture weights rounded to 1e-6 per orbital column; engine.json to 1e-5 per atom
    np.testing.assert_allclose(st.atom_weights, ref / ref.sum(), atol=3e-5)
    first = [nb.index for nb in sites[name].first_shell]
    assert st.shell_fractions[1] == pytest.approx(ref[first].sum(), abs=1e-4)


def test_state_cube_is_normalised(cases, engine):
    """∫|ψ|² of the engine's in-gap orbital cube = 1 (orthonormal Kohn–Sham orbitals) within 1 %."""
    grid = cases["vac"].grids["state"]
    assert grid.unit == "Å^-3/2"
    norm = grid.integrate(square=True)
    assert norm == pytest.approx(1.0, rel=0.01)
    # and equals the engine's own sum over the same points (cube text keeps 6 significant digits)
    assert norm == pytest.approx(engine["vac"]["state_norm_on_grid"], rel=1e-4)
    # the grid spans the structure's box (cell), atoms identical
    np.testing.assert_allclose(grid.cell, cases["vac"].defect.cell[:], atol=1e-4)
    np.testing.assert_allclose(grid.atoms.get_positions(), cases["vac"].defect.get_positions(), atol=1e-5)


def test_projection_and_grid_routes_agree_on_dominant_atoms(cases, sites, engine):
    """Löwdin projections (engine) vs a Voronoi partition of the engine's orbital cube.

    Tolerance: the six first-shell Li are the top six atoms by both routes and
    their summed weight agrees within 0.05. The routes differ by design
    beyond that: Löwdin assigns by basis function, Voronoi by space, and the
    state's density in the empty vacancy is shared among the first shell by
    Voronoi while the diffuse Li functions carry it in Löwdin; the second
    shell differs by ≈0.1 for that reason (measured 0.16 vs 0.25).
    """
    from orbtool.analysis import in_gap_states
    from orbtool.analysis.character import compare_routes
    case, site = cases["vac"], sites["vac"]
    st = _engine_state(in_gap_states(case, site=site), engine["vac"])
    rc = compare_routes(st, case.grids["state"], site, method="voronoi", top=6)
    first = {nb.index for nb in site.first_shell}
    assert set(np.argsort(-rc.grid_weights)[:6]) == first
    assert set(np.argsort(-rc.projection_weights)[:6]) == first
    assert rc.top_overlap == 1.0
    p1, g1 = rc.shells[1]
    assert abs(p1 - g1) < 0.05
    assert rc.max_difference < 0.03


def test_first_shell_pdos_variance_drops_when_the_anion_is_removed(cases, sites):
    """Moments theorem (Cyrot-Lackmann, Adv. Phys. 16, 393 (1967)): the second
    central moment of an orbital's local DOS is Σ_j |H_ij|²; removing the
    neighbouring anion removes hoppings, so it must drop for the first-shell
    cation. Taken over the whole range both PDOS cover (everything but the
    F 1s cores), where the theorem applies best (measured: Δvariance
    −1.0 eV² for Li s, −4.7 eV² for Li p). A window cut at the F 2p band
    (−15 … 20 eV) flips the s channel (+0.2 eV²): windows break the theorem,
    so none is used here."""
    from orbtool.analysis import neighbour_moments
    mc = neighbour_moments(cases["vac"], sites["vac"])
    first = {nb.index for nb in sites["vac"].first_shell}
    assert {r.atom for r in mc.rows} == first
    assert sorted({r.orbital for r in mc.rows}) == ["p", "s"]
    for r in mc.rows:
        assert r.variance_change < 0, (r.atom, r.orbital, r.variance_change)


@pytest.mark.parametrize("name", ("host", "vac"))
def test_total_density_cube_matches_engine_sum(name, engine):
    """The gzipped all-electron density cube read by orbtool integrates to the engine's own sum
    over the same points (``density_on_grid``; not the electron count, because 1s cores are
    narrower than the grid spacing — see README), and is non-negative."""
    import orbtool
    rec = engine[name]
    grid = orbtool.read_grid(DATA / name / "total" / "density.cube.gz", cache=False, quantity="density")
    assert grid.unit == "e/Å^3" and grid.shape == (rec["ngrid"],) * 3
    assert grid.values.min() >= 0
    # cube text keeps 6 significant digits
    assert grid.integrate() == pytest.approx(rec["density_on_grid"], rel=1e-4)
