"""Irreducible-representation labels of cluster levels from the site's point-group operations.

Character tables (real characters, classes in the usual column order) are those of F. A. Cotton,
*Chemical Applications of Group Theory*, 3rd ed. (Wiley 1990), Appendix IIA — typed from memory and
checked in the tests by the orthogonality theorem and by the textbook decompositions of s, p, d
orbitals at the centre (e.g. p → T1u in Oh, T2 in Td; d → Eg + T2g in Oh).

Classes are recognised from the operations themselves: conjugacy classes are formed by closure, and
each is matched to a column by (kind, size) where kind is E, Cn, i, σ or Sn (n from the rotation
angle). Where two columns share kind and size, orbtool's convention decides: in C2v the σv(xz) column
is the mirror containing more first-shell atoms; in D4h the C2' axes and σv planes are those containing
more first-shell atoms. Labels are lower-case for one-electron levels (a1, t2, ...).
"""

from __future__ import annotations

import numpy as np

from .slater_koster import n_orbitals

__all__ = ["CHARACTER_TABLES", "classify_operation", "conjugacy_classes", "orbital_representation",
           "label_levels", "decompose"]

# columns: (kind, size); rows: irrep -> characters
CHARACTER_TABLES = {
    "C1": ([("E", 1)], {"A": [1]}),
    "Cs": ([("E", 1), ("s", 1)], {"A'": [1, 1], "A''": [1, -1]}),
    "C2v": ([("E", 1), ("C2", 1), ("s", 1), ("s'", 1)],
            {"A1": [1, 1, 1, 1], "A2": [1, 1, -1, -1], "B1": [1, -1, 1, -1], "B2": [1, -1, -1, 1]}),
    "C3v": ([("E", 1), ("C3", 2), ("s", 3)], {"A1": [1, 1, 1], "A2": [1, 1, -1], "E": [2, -1, 0]}),
    "D2d": ([("E", 1), ("S4", 2), ("C2", 1), ("C2", 2), ("s", 2)],
            {"A1": [1, 1, 1, 1, 1], "A2": [1, 1, 1, -1, -1], "B1": [1, -1, 1, 1, -1],
             "B2": [1, -1, 1, -1, 1], "E": [2, 0, -2, 0, 0]}),
    "D3d": ([("E", 1), ("C3", 2), ("C2", 3), ("i", 1), ("S6", 2), ("s", 3)],
            {"A1g": [1, 1, 1, 1, 1, 1], "A2g": [1, 1, -1, 1, 1, -1], "Eg": [2, -1, 0, 2, -1, 0],
             "A1u": [1, 1, 1, -1, -1, -1], "A2u": [1, 1, -1, -1, -1, 1], "Eu": [2, -1, 0, -2, 1, 0]}),
    "Td": ([("E", 1), ("C3", 8), ("C2", 3), ("S4", 6), ("s", 6)],
           {"A1": [1, 1, 1, 1, 1], "A2": [1, 1, 1, -1, -1], "E": [2, -1, 2, 0, 0],
            "T1": [3, 0, -1, 1, -1], "T2": [3, 0, -1, -1, 1]}),
    "D4h": ([("E", 1), ("C4", 2), ("C2", 1), ("C2", 2), ("C2''", 2), ("i", 1), ("S4", 2), ("s", 1),
             ("s", 2), ("s''", 2)],
            {"A1g": [1, 1, 1, 1, 1, 1, 1, 1, 1, 1], "A2g": [1, 1, 1, -1, -1, 1, 1, 1, -1, -1],
             "B1g": [1, -1, 1, 1, -1, 1, -1, 1, 1, -1], "B2g": [1, -1, 1, -1, 1, 1, -1, 1, -1, 1],
             "Eg": [2, 0, -2, 0, 0, 2, 0, -2, 0, 0], "A1u": [1, 1, 1, 1, 1, -1, -1, -1, -1, -1],
             "A2u": [1, 1, 1, -1, -1, -1, -1, -1, 1, 1], "B1u": [1, -1, 1, 1, -1, -1, 1, -1, -1, 1],
             "B2u": [1, -1, 1, -1, 1, -1, 1, -1, 1, -1], "Eu": [2, 0, -2, 0, 0, -2, 0, 2, 0, 0]}),
    "Oh": ([("E", 1), ("C3", 8), ("C2", 6), ("C4", 6), ("C2", 3), ("i", 1), ("S4", 6), ("S6", 8),
            ("s", 3), ("s", 6)],
           {"A1g": [1, 1, 1, 1, 1, 1, 1, 1, 1, 1], "A2g": [1, 1, -1, -1, 1, 1, -1, 1, 1, -1],
            "Eg": [2, -1, 0, 0, 2, 2, 0, -1, 2, 0], "T1g": [3, 0, -1, 1, -1, 3, 1, 0, -1, -1],
            "T2g": [3, 0, 1, -1, -1, 3, -1, 0, -1, 1], "A1u": [1, 1, 1, 1, 1, -1, -1, -1, -1, -1],
            "A2u": [1, 1, -1, -1, 1, -1, 1, -1, -1, 1], "Eu": [2, -1, 0, 0, 2, -2, 0, 1, -2, 0],
            "T1u": [3, 0, -1, 1, -1, -3, -1, 0, 1, 1], "T2u": [3, 0, 1, -1, -1, -3, 1, 0, 1, -1]}),
}


def classify_operation(R, tol: float = 1e-3) -> str:
    """Kind of a 3×3 orthogonal operation: 'E', 'C<n>', 'i', 's' (mirror) or 'S<n>'."""
    R = np.asarray(R, dtype=float)
    det = np.sign(np.linalg.det(R))
    P = R * det
    ang = np.arccos(np.clip((np.trace(P) - 1) / 2, -1, 1))
    if ang < tol:
        return "E" if det > 0 else "i"
    n = int(round(2 * np.pi / ang))
    if det > 0:
        return f"C{n}"
    if n == 2:
        return "s"
    # improper: R = -P, P a rotation by ang; R is S_m with angle (pi + ang)
    m = int(round(2 * np.pi / (np.pi - ang))) if ang < np.pi - tol else 2
    return f"S{m}"


def _find(ops, M, tol):
    d = np.abs(ops - M[None]).reshape(len(ops), -1).max(axis=1)
    k = int(np.argmin(d))
    return k if d[k] < tol else -1


def conjugacy_classes(ops, tol: float = 1e-3) -> list[list[int]]:
    """Partition operation indices into conjugacy classes (ops must form a group)."""
    ops = np.asarray(ops, dtype=float)
    left = set(range(len(ops)))
    classes = []
    while left:
        a = min(left)
        cls = set()
        for g in ops:
            k = _find(ops, g @ ops[a] @ g.T, tol)
            if k >= 0:
                cls.add(k)
        cls.add(a)
        classes.append(sorted(cls))
        left -= cls
    return classes


def _atoms_on(op, kind, vectors, tol=1e-2):
    """How many first-shell atoms ``op`` leaves in place (on a C2 axis / in a mirror plane)."""
    vectors = np.asarray(vectors)
    moved = np.linalg.norm(vectors @ op.T - vectors, axis=1)
    return int((moved < tol * np.linalg.norm(vectors, axis=1)).sum())


def class_columns(group: str, ops, first_vectors=None, tol: float = 1e-3):
    """Map each conjugacy class of ``ops`` to a column of the group's character table.

    Returns (classes, columns) with columns[c] the table column index for class c; raises
    ValueError when the operations do not match the table.
    """
    if group not in CHARACTER_TABLES:
        raise ValueError(f"no character table for point group {group!r}; have {sorted(CHARACTER_TABLES)}")
    cols, _ = CHARACTER_TABLES[group]
    classes = conjugacy_classes(ops, tol)
    kinds = [(classify_operation(ops[c[0]], tol).replace("S2", "i"), len(c)) for c in classes]
    out = [None] * len(classes)
    taken = set()
    for ci, (kind, size) in enumerate(kinds):
        cand = [k for k, (ck, cs) in enumerate(cols) if ck.rstrip("'") == kind and cs == size and k not in taken]
        if not cand:
            raise ValueError(f"operations do not match {group}: class {kind}×{size} not in the table")
        if len(cand) > 1 and first_vectors is not None:
            # same kind and size: the class fixing more first-shell atoms takes the first (unprimed) column
            rivals = [cj for cj, kk in enumerate(kinds) if kk == (kind, size)]
            score = {cj: _atoms_on(ops[classes[cj][0]], kind, first_vectors) for cj in rivals}
            rank = sorted(rivals, key=lambda cj: (-score[cj], cj)).index(ci)
            cand = [cand[min(rank, len(cand) - 1)]] if rank < len(cand) else cand
        out[ci] = cand[0]
        taken.add(cand[0])
    if len(classes) != len(cols):
        raise ValueError(f"{len(classes)} classes found, {group} has {len(cols)}")
    return classes, out


def _d_matrix(R):
    """5×5 representation of R on the real d orbitals (xy, yz, zx, x²−y², 3z²−r²)."""
    s3 = np.sqrt(3.0)
    M = np.zeros((5, 3, 3))
    M[0][0, 1] = M[0][1, 0] = s3 / 2
    M[1][1, 2] = M[1][2, 1] = s3 / 2
    M[2][0, 2] = M[2][2, 0] = s3 / 2
    M[3][0, 0], M[3][1, 1] = s3 / 2, -s3 / 2
    M[4][2, 2], M[4][0, 0], M[4][1, 1] = 1.0, -0.5, -0.5
    rot = np.einsum("ij,mjk,lk->mil", R, M, R)  # R M R^T
    norm = np.einsum("mij,mij->m", M, M)
    return np.einsum("nij,mij->nm", M, rot) / norm[:, None]


def orbital_representation(R, vectors, lmax: int, hybrid: bool = False, tol: float = 1e-2):
    """Matrix of operation R on the cluster basis (None if R does not map the cluster onto itself)."""
    vectors = np.asarray(vectors)
    moved = vectors @ R.T
    dist = np.linalg.norm(moved[:, None] - vectors[None], axis=-1)
    perm = np.argmin(dist, axis=1)
    if np.any(dist[np.arange(len(vectors)), perm] > tol * np.linalg.norm(vectors, axis=1).max()):
        return None
    natom = len(vectors)
    if hybrid:
        U = np.zeros((natom, natom))
        U[perm, np.arange(natom)] = 1.0
        return U
    no = n_orbitals(lmax)
    D = np.zeros((no, no))
    D[0, 0] = 1.0
    if lmax >= 1:
        D[1:4, 1:4] = R
    if lmax >= 2:
        D[4:9, 4:9] = _d_matrix(R)
    U = np.zeros((natom, no, natom, no))
    U[perm, :, np.arange(natom), :] = D[None]
    return U.reshape(natom * no, natom * no)


def decompose(group: str, characters_by_class, classes) -> dict:
    """Irrep multiplicities n_Γ = (1/|G|) Σ_c |c| χ(c) χ_Γ(c) (real tables)."""
    _, table = CHARACTER_TABLES[group]
    order = sum(len(c) for c in classes)
    return {name: float(sum(len(c) * x * row[k] for c, x, k in characters_by_class) / order)
            for name, row in table.items()}


def label_levels(energies, vectors, model_vectors, group: str, ops, lmax: int, hybrid: bool,
                 first_vectors=None, tol_e: float = 1e-4, classes_cols=None) -> list[str]:
    """One irrep label per level (lower case; '?' when symmetry is broken or the group is unknown).

    ``classes_cols`` may pass the cached result of :func:`class_columns`."""
    E = np.asarray(energies)
    out = ["?"] * len(E)
    if classes_cols is None:
        try:
            classes_cols = class_columns(group, ops, first_vectors)
        except ValueError:
            return out
    classes, cols = classes_cols
    reps = [orbital_representation(ops[c[0]], model_vectors, lmax, hybrid) for c in classes]
    if any(r is None for r in reps):
        return out
    V = np.asarray(vectors)
    # χ_level(class) = <v|U|v> for every level at once; a multiplet's character is the sum over its members
    diag = np.stack([np.einsum("im,im->m", V, U @ V) for U in reps])  # (nclass, nlevel)
    _, table = CHARACTER_TABLES[group]
    order = sum(len(c) for c in classes)
    names = list(table)
    X = np.array([[table[nm][k] for k in cols] for nm in names], dtype=float)  # (nirrep, nclass)
    sizes = np.array([len(c) for c in classes], dtype=float)
    start = 0
    while start < len(E):
        stop = start + 1
        while stop < len(E) and abs(E[stop] - E[start]) < tol_e:
            stop += 1
        chi = diag[:, start:stop].sum(1)
        mult = X @ (sizes * chi) / order
        good = [(names[k], m) for k, m in enumerate(mult) if abs(m - round(m)) < 0.1 and round(m) > 0]
        if len(good) == 1 and round(good[0][1]) == 1:
            label = good[0][0].lower()
        elif good:
            label = "+".join(name.lower() for name, m in good)
        else:
            label = "?"
        out[start:stop] = [label] * (stop - start)
        start = stop
    return out
