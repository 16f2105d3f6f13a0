"""Cluster Hamiltonians against pythtb 1.8 (independent library), the Coulson–Kearsley defect molecule,
its octahedral analogue in closed form, and Harrison's universal couplings for Si."""

import numpy as np
import pytest
from pythtb import tb_model
from tb_standin import breathe, make_site
from test_tb_slater_koster import _orbitals  # noqa: F401  (same real harmonics)
from test_tb_slater_koster import _rotated_reference as _rot

import orbtool.tb.slater_koster as skm
from orbtool.errors import ModelError
from orbtool.tb import ClusterModel, harrison_coupling
from orbtool.units import HBAR2_OVER_ME

ETA = {"ss_sigma": -1.40, "sp_sigma": 1.84, "pp_sigma": 3.24, "pp_pi": -0.81}  # Froyen & Harrison 1979
V0 = {"ss_sigma": -1.9, "sp_sigma": 2.5, "pp_sigma": 4.4, "pp_pi": -1.1, "sd_sigma": -1.3, "pd_sigma": -1.6,
      "pd_pi": 0.8, "dd_sigma": -0.9, "dd_pi": 0.5, "dd_delta": -0.1}
FACTOR = {c: (2.5 if c.startswith("dd") else 1.75 if "d" in c.split("_")[0] else 1.0) for c in V0}


def _reference_hops(u, d, d0, n, lmax):
    """Hopping block built without orbtool's Table I: rotated bond-frame integrals × power law."""
    import test_tb_slater_koster as t

    saved = dict(t.V)
    try:
        t.V.update({c: V0[c] * (d0 / d) ** (n * FACTOR[c]) for c in V0})
        E = _rot(u)
    finally:
        t.V.clear()
        t.V.update(saved)
    no = (lmax + 1) ** 2
    return E[:no, :no]


@pytest.mark.parametrize("orbitals", ["s", "sp", "spd"])
def test_eigenvalues_equal_pythtb(orbitals):
    # pythtb 1.8 (Yusufaly, Vanderbilt, Coh): 0-d model with the same orbitals, on-site energies and hoppings.
    site = make_site()
    site = breathe(site, -0.04)  # a relaxed-looking geometry, still Td
    lmax = {"s": 0, "sp": 1, "spd": 2}[orbitals]
    onsite = {"Si": (-13.55, -6.52, -2.0)}
    m = ClusterModel.around(site, orbitals, scaling="power", n=2.0, v0=V0, onsite=onsite)
    H = m.hamiltonian()
    no = (lmax + 1) ** 2
    pos = m.vectors
    L = 50.0
    orb = np.repeat(pos / L + 0.5, no, axis=0)
    tb = tb_model(0, 3, np.eye(3) * L, orb)
    eps = np.tile(np.array([-13.55, -6.52, -6.52, -6.52] + [-2.0] * 5)[:no], len(pos))
    tb.set_onsite(list(eps))
    for i, j in m.pairs:
        R = pos[j] - pos[i]
        d = np.linalg.norm(R)
        blk = _reference_hops(R / d, d, m.law.d0, 2.0, lmax)
        for a in range(no):
            for b in range(no):
                if blk[a, b] != 0:
                    tb.set_hop(blk[a, b], i * no + a, j * no + b)
    ref = np.sort(tb.solve_all())
    np.testing.assert_allclose(np.linalg.eigvalsh(H), ref, atol=1e-10)
    np.testing.assert_allclose(m.solve().energies[0], ref, atol=1e-10)


def test_tetrahedral_defect_molecule_coulson_kearsley():
    # Coulson & Kearsley, Proc. R. Soc. A 241, 433 (1957): a1 = ε + 3β (×1), t2 = ε − β (×3).
    site = make_site()
    f = 0.25
    m = ClusterModel.around(site, "hybrid", s_fraction=f)
    H = m.hamiltonian()
    eps_s, eps_p = -13.55, -6.52  # Harrison (1980) Solid State Table, Si (REFERENCES [2nd])
    eps = f * eps_s + (1 - f) * eps_p
    # β from independent Slater–Koster (rotated integrals) and Harrison's formula at the pair distance
    v = m.vectors
    R = v[1] - v[0]
    d = np.linalg.norm(R)
    import test_tb_slater_koster as t

    saved = dict(t.V)
    t.V.update({c: ETA[c] * HBAR2_OVER_ME / d ** 2 for c in ETA})
    E = _rot(R / d)[:4, :4]
    t.V.clear()
    t.V.update(saved)
    hi = np.r_[np.sqrt(f), -np.sqrt(1 - f) * v[0] / np.linalg.norm(v[0])]
    hj = np.r_[np.sqrt(f), -np.sqrt(1 - f) * v[1] / np.linalg.norm(v[1])]
    beta = hi @ E @ hj
    np.testing.assert_allclose(np.diag(H), eps, atol=1e-12)  # matrix elements, not only eigenvalues
    np.testing.assert_allclose(H[0, 1], beta, atol=1e-12)
    w = np.linalg.eigvalsh(H)
    assert beta < 0
    np.testing.assert_allclose(w, sorted([eps + 3 * beta] + [eps - beta] * 3), atol=1e-12)
    lv = m.solve()
    assert lv.index[0] == 1  # 4 electrons (Si: 4 valence / 4 neighbours each): a1² t2², HOMO t2


def test_octahedral_six_hybrids_closed_form():
    # Derived (REFERENCES style [derived]): six hybrids on ±x, ±y, ±z with cis coupling β and trans γ:
    # a1g = ε + 4β + γ, eg = ε − 2β + γ (×2), t1u = ε − γ (×3).
    site = make_site("NaCl", "rocksalt", a=5.64, remove=1)  # remove Cl: six Na neighbours
    assert len(site.first_shell) == 6 and site.point_group == "Oh"
    m = ClusterModel.around(site, "hybrid", term_values="lda-sr")
    H = m.hamiltonian()
    v = m.vectors
    d2 = np.linalg.norm(v[:, None] - v[None], axis=-1)
    cis = np.isclose(d2, np.sqrt(2) * np.linalg.norm(v[0]), rtol=1e-6)
    trans = np.isclose(d2, 2 * np.linalg.norm(v[0]), rtol=1e-6)
    beta, gamma, eps = H[cis][0], H[trans][0], H[0, 0]
    np.testing.assert_allclose(H[cis], beta, atol=1e-12)
    np.testing.assert_allclose(H[trans], gamma, atol=1e-12)
    expect = sorted([eps + 4 * beta + gamma] + [eps - 2 * beta + gamma] * 2 + [eps - gamma] * 3)
    np.testing.assert_allclose(np.linalg.eigvalsh(H), expect, atol=1e-12)
    from orbtool.tb.symmetry import label_levels

    lv = m.solve()
    labels = label_levels(lv.energies[0], lv.vectors[0], m.vectors, "Oh", m.operations, 1, True)
    E = lv.energies[0]
    for e, lab in zip(E, labels):
        if np.isclose(e, eps + 4 * beta + gamma):
            assert lab == "a1g"
        elif np.isclose(e, eps - gamma):
            assert lab == "t1u"
        elif np.isclose(e, eps - 2 * beta + gamma):
            assert lab == "eg"
    assert lv.index[0] == 0  # one electron (Na: 1 valence / 6): the a1g F-centre-like level


def test_harrison_si_couplings():
    # Harrison (1980) / Froyen & Harrison, PRB 20, 2420 (1979): V = η ħ²/(m d²), Si d = 2.35 Å.
    # [derived] with ħ²/m = 7.619964 eV Å²: ssσ −1.932, spσ +2.539, ppσ +4.471, ppπ −1.118 eV.
    expected = {"ss_sigma": -1.932, "sp_sigma": 2.539, "pp_sigma": 4.471, "pp_pi": -1.118}
    for ch, val in expected.items():
        assert harrison_coupling(ch, 2.35) == pytest.approx(val, abs=2e-3)
    assert HBAR2_OVER_ME == pytest.approx(7.619964, abs=1e-5)  # CODATA via ASE (REFERENCES constants)
    # a model at d0 = 2.35 Å uses exactly these prefactors
    m = ClusterModel.around(make_site(), "sp", d0=2.35)
    for ch, val in expected.items():
        assert m.law.prefactor(ch) == pytest.approx(val, abs=2e-3)


def test_bad_inputs():
    site = make_site()
    from types import SimpleNamespace

    empty = SimpleNamespace(position=np.zeros(3), defect=None, first_shell=(), second_shell=(),
                            point_group="C1", operations=np.eye(3)[None])
    with pytest.raises(ModelError, match="no first shell"):
        ClusterModel.around(empty)
    with pytest.raises(ModelError, match="orbitals must be"):
        ClusterModel.around(site, "spdf")
    with pytest.raises(ModelError, match="no term values for element"):
        ClusterModel.around(make_site("W", "bcc", a=3.16), "sp", term_values="harrison1980")
    with pytest.raises(ModelError, match="needs d-state radii"):
        ClusterModel.around(site, "spd", onsite={"Si": (-13.55, -6.52, -2.0)})
    assert skm.n_orbitals(2) == 9


def test_model_from_the_vacancy_locator():
    # The geometry engine's VacancySite drives the model; the Si vacancy's four hybrids split into
    # a1 + t2 in Td (Coulson & Kearsley 1957; G. D. Watkins' one-electron vacancy model).
    from ase.build import bulk

    from orbtool.analysis import locate_vacancy

    host = bulk("Si", "diamond", a=5.431, cubic=True).repeat(2)
    defect = host.copy()
    del defect[0]
    site = locate_vacancy(host, defect)
    m = ClusterModel.around(site, "hybrid")
    assert site.point_group == "Td" and "breathing" in m.modes
    from orbtool.tb.symmetry import label_levels

    lv = m.solve()
    labels = label_levels(lv.energies[0], lv.vectors[0], m.vectors, site.point_group, m.operations, 1, True)
    assert sorted(labels) == ["a1", "t2", "t2", "t2"]
    # predict(geometry=...) recomputes the vectors from the edited Atoms by minimum image
    inward = m.vectors_from(site.breathe(-0.05))
    np.testing.assert_allclose(np.linalg.norm(inward, axis=1), 0.95 * np.linalg.norm(m.vectors, axis=1), rtol=1e-6)
