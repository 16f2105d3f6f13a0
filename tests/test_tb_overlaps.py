"""Element-aware couplings: valence-orbital overlaps against pyscf's integrals, Wolfsberg–Helmholz signs."""

import numpy as np
import pytest

from orbtool.tb import ClusterModel
from orbtool.tb.overlaps import _table, overlaps, wolfsberg_helmholz


def _pyscf_overlap(a, b, d):
    gto = pytest.importorskip("pyscf.gto")
    tab = _table()

    def shells(el):
        return [[l] + [[e, c] for e, c in zip(tab[el][n]["exponents"], tab[el][n]["coefficients"])]
                for l, n in ((0, "s"), (1, "p"))]

    mol = gto.Mole()
    mol.atom = [[a, (0, 0, 0)], ["Ghost-" + b, (0, 0, d)]]
    mol.basis = {a: shells(a), "Ghost-" + b: shells(b)}
    mol.unit, mol.spin = "Angstrom", gto.charge(a) % 2
    mol.build(verbose=0)
    return mol.intor("int1e_ovlp")  # order: s_A, p_A (x y z), s_B, p_B (x y z)


@pytest.mark.parametrize("a,b,d", [("Li", "Li", 2.85), ("Na", "Na", 2.85), ("Zn", "S", 2.34), ("Cd", "S", 2.52)])
def test_overlaps_equal_pyscf_integrals(a, b, d):
    """The Gaussian-product overlaps equal pyscf's int1e_ovlp for the same contracted functions."""
    S = _pyscf_overlap(a, b, d)
    o = overlaps(a, b, d)
    np.testing.assert_allclose(o["ss_sigma"], S[0, 4], atol=1e-8)
    np.testing.assert_allclose(o["sp_sigma"], S[0, 7], atol=1e-8)    # <s_A|p_z,B>, z from A to B
    np.testing.assert_allclose(o["ps_sigma"], -S[3, 4], atol=1e-8)   # sp_sigma of the reversed pair
    np.testing.assert_allclose(o["pp_sigma"], S[3, 7], atol=1e-8)
    np.testing.assert_allclose(o["pp_pi"], S[1, 5], atol=1e-8)
    np.testing.assert_allclose(S[0, 0], 1.0, atol=1e-8)                # pyscf normalises as orbtool does


def test_heavier_cation_orbitals_overlap_more_and_couplings_have_harrison_signs():
    # Na 3s is more diffuse than Li 2s: at the same distance its s–s overlap is larger
    assert overlaps("Na", "Na", 2.85)["ss_sigma"] > overlaps("Li", "Li", 2.85)["ss_sigma"]
    fwd, rev = wolfsberg_helmholz("Zn", "S", 2.34, (-8.40, -3.38), (-20.80, -10.27))
    # physical signs of Slater–Koster couplings (shared references): ssσ < 0, spσ > 0, ppσ > 0, ppπ < 0
    assert fwd["ss_sigma"] < 0 < fwd["sp_sigma"] and fwd["pp_sigma"] > 0 > fwd["pp_pi"] and rev["sp_sigma"] > 0


def test_cluster_with_overlap_couplings_and_swap():
    from ase.build import bulk

    from orbtool.analysis import locate_vacancy

    host = bulk("ZnS", "zincblende", a=5.41).repeat(3)
    defect = host.copy()
    del defect[1]
    site = locate_vacancy(host, defect)
    m = ClusterModel.around(site, "sp", scaling="overlap")
    H = m.hamiltonian()
    np.testing.assert_allclose(H, H.T, atol=1e-12)
    assert "Wolfsberg" in m.law.describe()
