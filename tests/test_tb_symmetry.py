"""Character tables (Cotton, Chemical Applications of Group Theory, 3rd ed., Appendix IIA; typed from
memory) checked by the great orthogonality theorem and by textbook orbital decompositions."""

import numpy as np
import pytest
from tb_standin import cubic_operations

from orbtool.tb.symmetry import CHARACTER_TABLES, _d_matrix, class_columns, decompose

OPS = cubic_operations()


def _subgroup(pred):
    return np.array([R for R in OPS if pred(R)])




def _td():
    # Td: proper rotations of the cube that are even permutations... simpler: ops mapping the tetrahedron
    tet = np.array([[1, 1, 1], [1, -1, -1], [-1, 1, -1], [-1, -1, 1]], float)
    return _subgroup(lambda R: np.all(np.min(np.linalg.norm((tet @ R.T)[:, None] - tet[None], axis=-1), 1) < 1e-9))


GROUPS = {
    "Oh": OPS,
    "Td": _td(),
    "D4h": _subgroup(lambda R: abs(R[2, 2]) == 1),
    "D3d": _subgroup(lambda R: np.allclose(np.abs(R @ np.ones(3)), 1) and abs(np.sum(R @ np.ones(3))) == 3),
    "C3v": np.array([R for R in _td() if np.allclose(R @ np.ones(3), 1)]),
    "D2d": np.array([R for R in _td() if abs(R[2, 2]) == 1]),
    "C2v": np.array([R for R in _td() if R[2, 2] == 1]),
    "Cs": np.array([np.eye(3), np.diag([1.0, 1.0, -1.0])]),
    "C1": np.eye(3)[None],
}
# textbook decompositions (Cotton, Appendix IIA, "linear functions / quadratic functions" columns)
P_EXPECT = {"Oh": {"T1u": 1}, "Td": {"T2": 1}, "D4h": {"A2u": 1, "Eu": 1}, "D3d": {"A2u": 1, "Eu": 1},
            "C3v": {"A1": 1, "E": 1}, "D2d": {"B2": 1, "E": 1}, "C2v": {"A1": 1, "B1": 1, "B2": 1},
            "Cs": {"A'": 2, "A''": 1}, "C1": {"A": 3}}
D_EXPECT = {"Oh": {"Eg": 1, "T2g": 1}, "Td": {"E": 1, "T2": 1}, "D3d": {"A1g": 1, "Eg": 2},
            "C3v": {"A1": 1, "E": 2}, "Cs": {"A'": 3, "A''": 2}, "C1": {"A": 5}}


@pytest.mark.parametrize("group", sorted(CHARACTER_TABLES))
def test_orthogonality(group):
    cols, table = CHARACTER_TABLES[group]
    sizes = np.array([s for _, s in cols])
    order = sizes.sum()
    X = np.array(list(table.values()), float)
    np.testing.assert_allclose((X * sizes) @ X.T, order * np.eye(len(X)))  # great orthogonality theorem
    assert len(X) == len(cols)  # number of irreps = number of classes
    assert len(GROUPS[group]) == order


@pytest.mark.parametrize("group", sorted(CHARACTER_TABLES))
def test_p_and_d_decompositions(group):
    ops = GROUPS[group]
    classes, cols = class_columns(group, ops)
    chars_p = [(c, float(np.trace(ops[c[0]])), k) for c, k in zip(classes, cols)]
    got = {k: round(v) for k, v in decompose(group, chars_p, classes).items() if round(v)}
    assert got == P_EXPECT[group]
    chars_d = [(c, float(np.trace(_d_matrix(ops[c[0]]))), k) for c, k in zip(classes, cols)]
    got_d = {k: round(v) for k, v in decompose(group, chars_d, classes).items() if abs(v) > 1e-9}
    assert all(abs(v - round(v)) < 1e-9 for v in decompose(group, chars_d, classes).values())
    if group in D_EXPECT:
        assert got_d == D_EXPECT[group]
    else:
        assert sum(v * (2 if k.startswith("E") else 1) for k, v in got_d.items()) == 5


def test_tetragonal_vacancy_labels_follow_the_c2_prime_convention():
    # Six hybrids of an octahedral vacancy elongated along z (D4h): equatorial a1g + b1g + eu, axial
    # a1g + a2u. With the C2' axes through the equatorial atoms (Cotton's x, y axes) the x²−y²-like
    # equatorial combination is B1g (Cotton, Appendix IIA, D4h: x² − y² → B1g).
    from types import SimpleNamespace

    from tb_standin import make_site

    from orbtool.tb import ClusterModel
    from orbtool.tb.symmetry import label_levels

    site = make_site("NaCl", "rocksalt", a=5.64, remove=1)
    first = []
    for n in site.first_shell:
        v = n.vector * np.array([1.0, 1.0, 1.08])
        first.append(SimpleNamespace(index=n.index, element=n.element, vector=v))
    ops = GROUPS["D4h"][::-1].copy()  # an operation order for which first-come column matching gives b2g
    tet = SimpleNamespace(position=site.position, defect=None, first_shell=tuple(first), second_shell=(),
                          point_group="D4h", operations=ops)
    m = ClusterModel.around(tet, "hybrid", term_values="lda-sr")
    lv = m.solve()
    labels = label_levels(lv.energies[0], lv.vectors[0], m.vectors, "D4h", ops, 1, True,
                          first_vectors=m.vectors)
    assert sorted(labels) == ["a1g", "a1g", "a2u", "b1g", "eu", "eu"]
