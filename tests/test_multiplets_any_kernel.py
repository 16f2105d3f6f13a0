"""Degenerate multiplets are one object on the model side: nothing orbtool reports depends on the basis an
eigensolver returns inside a degenerate subspace.

Another BLAS/LAPACK kernel (AVX-512 vs AVX2, MKL vs OpenBLAS) may return any orthonormal basis of a degenerate
eigenspace; CI cannot change the kernel, so these tests stand in for one: they rotate the eigenvectors inside
every degenerate block by a random orthogonal matrix (what another kernel could return — a theorem of linear
algebra: the eigenvectors of a degenerate eigenvalue are defined up to a unitary rotation, e.g. G. H. Golub &
C. F. Van Loan, *Matrix Computations*, 4th ed., §8.1) and assert that every reported quantity — level, label,
weights, characters, the chosen multiplet, the distortion patterns — is unchanged. Each test also shows that
the rotation does change a one-vector quantity, so it would catch a return of the one-vector rule.
"""

from __future__ import annotations

import numpy as np
import pytest
from ase.build import bulk

from orbtool.analysis import locate_vacancy
from orbtool.tb import ClusterModel, _evaluate

# (formula, structure, lattice constant Å — from memory, only the geometry's symmetry matters here)
HOSTS = {"Td": ("ZnS", "zincblende", 5.41), "Oh": ("NaCl", "rocksalt", 5.64), "Oh8": ("CsCl", "cesiumchloride", 4.12)}


def _site(key):
    formula, crystal, a = HOSTS[key]
    host = bulk(formula, crystal, a=a, cubic=True).repeat(2 if crystal != "cesiumchloride" else 3)
    anion = formula[-2:] if formula[-2:].istitle() and len(formula) > 3 else formula[-1]
    idx = [i for i, s in enumerate(host.get_chemical_symbols()) if s == anion]
    defect = host.copy()
    del defect[idx[len(idx) // 2]]
    return locate_vacancy(host, defect)


def rotating_eigh(seed, tol=1e-9):
    """numpy.linalg.eigh, then every degenerate block of eigenvectors rotated by a random orthogonal matrix."""
    rng = np.random.default_rng(seed)

    def eigh(H):
        E, V = np.linalg.eigh(H)
        V = V.copy()
        for b in np.ndindex(E.shape[:-1]):
            e = E[b]
            start = 0
            for k in range(1, len(e) + 1):
                if k == len(e) or e[k] - e[k - 1] > tol * max(1.0, abs(e[k])):
                    if k - start > 1:
                        q, _ = np.linalg.qr(rng.normal(size=(k - start, k - start)))
                        V[b][..., start:k] = V[b][..., start:k] @ q
                    start = k
        return E, V
    return eigh


def _report(lv):
    return dict(index=int(lv.index[0]), level=float(lv.level[0]), label=lv.label[0], labels=list(lv.labels[0]),
                s=float(lv.s_weight[0]), p=float(lv.p_weight[0]), d=float(lv.d_weight[0]),
                shell1=float(lv.shell1_weight[0]), dangling=float(lv.dangling_weight[0]),
                atoms=np.asarray(lv.atom_weight[0]))


def _same(a, b):
    for k in a:
        if isinstance(a[k], (float, np.ndarray)):
            np.testing.assert_allclose(a[k], b[k], rtol=0, atol=1e-10, err_msg=k)
        else:
            assert a[k] == b[k], k


MODELS = [("Td", "hybrid"), ("Oh", "hybrid"), ("Oh8", "hybrid"), ("Td", "sp"), ("Oh", "sp")]


@pytest.fixture(scope="module")
def models():
    return {(g, o): ClusterModel.around(_site(g), o) for g, o in MODELS}


def _one_vector_dangling(model, lv):
    """Dangling weight of each single eigenvector (what the rule before this one compared)."""
    return model.compile()._dangling(lv.vectors, model.defaults(), 1)[0]


@pytest.mark.parametrize("key", MODELS, ids=lambda k: f"{k[0]}-{k[1]}")
def test_cluster_levels_do_not_depend_on_the_basis_inside_multiplets(models, key, monkeypatch):
    model = models[key]
    ref = _report(model.solve())
    vectors = []
    for seed in range(4):
        monkeypatch.setattr(_evaluate, "_eigh", rotating_eigh(seed))
        lv = model.solve()
        _same(ref, _report(lv))
        vectors.append(lv.vectors[0])
    # the rotation really changed the basis inside the defect multiplet (when it is degenerate)
    members = _evaluate.multiplet_members(model.solve().energies[0], ref["index"])
    if len(members) > 1:
        assert not np.allclose(vectors[0][:, members], vectors[1][:, members], atol=1e-6)
    # these symmetric sites: the defect multiplet is labelled by the site's point group (not '?')
    assert ref["label"] not in ("", "?")


def test_the_one_vector_rule_would_have_depended_on_the_kernel(models, monkeypatch):
    """The sp cluster of a tetrahedral vacancy: the level with the largest dangling weight of ONE eigenvector
    (the rule before) changes with the basis inside the degenerate blocks; the multiplet rule does not."""
    model = models[("Td", "sp")]
    old, new = set(), set()
    for seed in range(12):
        monkeypatch.setattr(_evaluate, "_eigh", rotating_eigh(seed))
        lv = model.solve()
        old.add(int(np.argmax(_one_vector_dangling(model, lv))))
        new.add((int(lv.index[0]), round(float(lv.level[0]), 12)))
    assert len(old) > 1
    assert len(new) == 1


class _RotatingLinalg:
    """numpy.linalg with eigh and svd returning another valid basis inside every degenerate eigen- or
    singular subspace (and inside the null space of a full SVD), as another LAPACK kernel may."""

    def __init__(self, seed):
        self.rng = np.random.default_rng(seed)
        self._eigh = rotating_eigh(seed)

    def __getattr__(self, name):
        return getattr(np.linalg, name)

    def eigh(self, a):
        E, V = self._eigh(np.asarray(a)[None])
        return E[0], V[0]

    def svd(self, a, full_matrices=True, **kw):
        u, s, vt = np.linalg.svd(a, full_matrices=full_matrices, **kw)
        u, vt = u.copy(), vt.copy()
        groups, start = [], 0
        for k in range(1, len(s) + 1):
            if k == len(s) or abs(s[k] - s[k - 1]) > 1e-9 * max(1.0, s[0]):
                if k - start > 1:
                    groups.append(list(range(start, k)))
                start = k
        for g in groups:
            q, _ = np.linalg.qr(self.rng.normal(size=(len(g), len(g))))
            u[:, g] = u[:, g] @ q
            vt[g, :] = q.T @ vt[g, :]
        if full_matrices and u.shape[1] > len(s):   # the null space: any orthonormal basis
            q, _ = np.linalg.qr(self.rng.normal(size=(u.shape[1] - len(s),) * 2))
            u[:, len(s):] = u[:, len(s):] @ q
        return u, s, vt


class _NumpyWith:
    def __init__(self, linalg):
        self.linalg = linalg

    def __getattr__(self, name):
        return getattr(np, name)


@pytest.mark.parametrize("key", ["Td", "Oh", "Oh8"])
def test_distortion_patterns_do_not_depend_on_the_basis(key, monkeypatch):
    """Symmetry-adapted first-shell displacement patterns (E.1 = the tetragonal pattern, T2.1, …): the same
    patterns whatever basis the eigensolver returns inside degenerate subspaces."""
    from orbtool.analysis import distortions
    from orbtool.analysis.pointgroup import find_point_group

    site = _site(key)
    v = np.array([nb.host_vector for nb in site.first_shell])
    pg = find_point_group(v, None, 0.01)
    ref_b, ref = distortions.symmetry_adapted_modes(pg.symmetrized, pg.operations, pg.permutations)
    assert any(len(b) > 1 for _, b in ref)   # degenerate blocks (E, T) are there to be rotated
    for seed in range(3):
        monkeypatch.setattr(distortions, "np", _NumpyWith(_RotatingLinalg(seed)))
        br, blocks = distortions.symmetry_adapted_modes(pg.symmetrized, pg.operations, pg.permutations)
        monkeypatch.setattr(distortions, "np", np)
        np.testing.assert_allclose(br, ref_b, atol=1e-9)
        assert [lab for lab, _ in blocks] == [lab for lab, _ in ref]
        for (lab, b), (_, r) in zip(blocks, ref):
            np.testing.assert_allclose(b, r, atol=1e-7, err_msg=lab)


def test_one_degeneracy_rule_anchored_at_the_first_member():
    """DEGENERATE (0.1 meV) groups levels the way the symmetry labels group them (each multiplet anchored at its
    first member, tb.symmetry.label_levels): a chain of close levels spanning more than the tolerance splits."""
    t = _evaluate.DEGENERATE
    E = np.array([[0.0, 0.5 * t, 0.9 * t, 1.3 * t, 1.0, 1.0 + 0.2 * t],
                  [0.0, 2.0 * t, 4.0 * t, 6.0 * t, 8.0 * t, 10.0 * t]])
    first, last = _evaluate.multiplet_bounds(E)
    assert first.tolist() == [[0, 0, 0, 3, 4, 4], [0, 1, 2, 3, 4, 5]]
    assert last.tolist() == [[2, 2, 2, 3, 5, 5], [0, 1, 2, 3, 4, 5]]
    mean = _evaluate.multiplet_mean(E, first, last)
    assert mean[0, 1] == mean[0, 0] == pytest.approx((0.5 + 0.9) * t / 3)
    assert _evaluate.multiplet_members(E[0], 5).tolist() == [4, 5]
