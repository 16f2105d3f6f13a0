"""Symmetry-adapted displacement patterns of a vacancy's first neighbour shell.

The 3n displacements of the n first-shell atoms carry a representation of the
site's point group, D(g) = P(g) ⊗ R(g) (P permutes atoms, R rotates the
vector). We split off the *breathing* pattern (every atom moving along its own
radial direction, all by the same amount), the three rigid translations of the
shell (which move the cage off-centre) and the three rigid rotations about the
site (which change no distance at all), and decompose the remaining internal
space into irreducible blocks.

Decomposition without character tables: for a generic symmetric matrix A the
group average M = Σ_g D(g) A D(g)ᵀ commutes with every D(g), so by Schur's
lemma its eigenspaces are invariant subspaces and, generically, irreducible
(the "commutant" or "random symmetric average" construction; J.-P. Serre,
*Linear Representations of Finite Groups*, Springer 1977, §2.6 for the
projection onto isotypic components this refines). Each block is labelled by
its dimension (A/B one-dimensional, E two, T three, G four, H five), parity
g/u under inversion when the group has it, and 1/2 from the character of the
principal rotation (T1/T2 from the four-fold operation of cubic groups), in
the usual Mulliken style (R. S. Mulliken, J. Chem. Phys. 23, 1997 (1955)).
The labels are descriptive; blocks are exact invariant subspaces.

In a tetrahedral vacancy (Td) the internal modes are E (the tetragonal
pairing/Jahn–Teller distortion towards D2d) and T2 (trigonal/orthorhombic);
in an octahedral one (Oh) they are Eg (tetragonal Jahn–Teller), T2g, T1u and
T2u — the standard vacancy-distortion modes of G. D. Watkins (e.g. in
*Deep Centers in Semiconductors*, ed. S. T. Pantelides, Gordon and Breach 1986).
"""

from __future__ import annotations

import numpy as np

from .pointgroup import operation_order, rotation_axis

__all__ = ["representation", "rigid_patterns", "symmetry_adapted_modes"]


def representation(operations, permutations) -> np.ndarray:
    """Matrices D(g) (nop, 3n, 3n) acting on flattened displacements u (n, 3).

    ``(D u)[p[i]] = R u[i]``: atom i's displacement, rotated, lands on the
    atom the operation sends i to.
    """
    ops = np.asarray(operations, float)
    perms = np.asarray(permutations, int)
    nop, n = perms.shape
    d = np.zeros((nop, n, 3, n, 3))
    g = np.repeat(np.arange(nop), n)
    i = np.tile(np.arange(n), nop)
    d[g, perms.reshape(-1), :, i, :] = np.repeat(ops, n, axis=0)
    return d.reshape(nop, 3 * n, 3 * n)


def rigid_patterns(vectors) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Breathing (n, 3), translations (3, n, 3) and rotations (3, n, 3) of a shell.

    Breathing is the unit-norm uniform radial pattern r̂_i/√n; translations
    are x̂, ŷ, ẑ on every atom; rotations are ω × r_i for ω = x̂, ŷ, ẑ.
    """
    v = np.asarray(vectors, float).reshape(-1, 3)
    n = len(v)
    rhat = v / np.linalg.norm(v, axis=1, keepdims=True)
    breathing = rhat / np.sqrt(n)
    trans = np.repeat(np.eye(3)[:, None, :], n, axis=1)
    rot = np.cross(np.eye(3)[:, None, :], v[None, :, :])
    return breathing, trans, rot


def _orthonormal(columns, tol=1e-8):
    """Orthonormal basis (as columns) of the span of ``columns`` (m, k)."""
    if columns.shape[1] == 0:
        return columns
    u, s, _ = np.linalg.svd(columns, full_matrices=False)
    return u[:, s > tol * max(1.0, s.max())]


def _label(chars, dim, ops, orders):
    """Mulliken-style label of a block from its characters (nop,)."""
    dets = np.linalg.det(ops)
    inv = np.flatnonzero(np.abs(ops + np.eye(3)).max(axis=(1, 2)) < 1e-3)
    rel = np.flatnonzero(dets > 0) if len(inv) else np.arange(len(ops))
    par = ""
    if len(inv):
        par = "g" if chars[inv[0]] > 0 else "u"
    letter = {1: "A", 2: "E", 3: "T", 4: "G", 5: "H"}.get(dim, f"X{dim}")
    proper = np.flatnonzero(dets > 0)
    principal = proper[np.argmax(orders[proper])] if len(proper) else 0
    cubic = int(np.count_nonzero((orders == 3) & (dets > 0))) >= 8
    if dim == 1:
        if np.all(chars[rel] > 0.5):
            return "A1" + par
        if cubic or (orders[principal] > 1 and chars[principal] > 0.5):
            return "A2" + par
        return "B" + par
    if dim == 3:
        four = [g for g in rel if orders[g] == 4]
        if four and cubic:
            return ("T1" if chars[four[0]] > 0 else "T2") + par
    return letter + par


def _principal_axis(ops, orders):
    """Principal axis: a four-fold (C4 or S4) axis in cubic groups, else the highest-order proper axis."""
    dets = np.linalg.det(ops)
    cubic = np.count_nonzero((orders == 3) & (dets > 0)) >= 8
    if cubic and np.any(orders == 4):
        g = int(np.flatnonzero(orders == 4)[0])
    elif cubic:
        g = int(np.flatnonzero((orders == 2) & (dets > 0))[0])
    else:
        proper = np.flatnonzero(dets > 0)
        g = int(proper[np.argmax(orders[proper])])
        if orders[g] == 1:
            return None
    return rotation_axis(ops[g])


def _axial_subgroup(ops, orders):
    """Indices of the operations that map the principal axis onto ±itself."""
    axis = _principal_axis(ops, orders)
    if axis is None:
        return np.arange(len(ops))
    return np.flatnonzero(np.abs(np.abs(np.einsum("gij,j->gi", ops, axis) @ axis) - 1.0) < 1e-6)


def _random_symmetric(rng, n):
    """A seeded random symmetric matrix (n, n) in the Cartesian displacement coordinates (drawn there, not
    in a basis an eigensolver returned, so that it is the same on every machine)."""
    a = rng.normal(size=(n, n))
    return a + a.T


def _pivoted_basis(proj, tol=1e-9):
    """Orthonormal basis of the range of the projector ``proj`` (m, m) by greedy pivoting on its columns:
    the projection of the Cartesian unit displacement with the largest weight first (ties to the lower
    index), then the next in what is left. It depends on the subspace only, never on a basis of it."""
    q = np.array(proj, dtype=float)
    rank = int(round(np.trace(q)))
    out = []
    for _ in range(rank):
        d = np.diag(q)
        j = int(np.argmax(d >= d.max() - tol))
        v = q[:, j] / np.sqrt(d[j])
        out.append(v)
        q = q - np.outer(v, v)
    return np.column_stack(out)


def _canonical_basis(b, dsub, rng):
    """Basis of a block adapted to the axial subgroup: most symmetric patterns first, signs fixed.

    Inside a degenerate block (E, T, ...) any rotation of the basis is as
    good; reducing by the operations that keep the principal axis makes the
    first pattern the one that keeps most of them (for Td and Oh: E.1 is the
    tetragonal distortion along the four-fold axis, D2d or D4h). Where a
    part of the block stays degenerate under that subgroup, its basis comes
    from the part's projector by :func:`_pivoted_basis`. Every step uses the
    block's projector b bᵀ, not the basis ``b`` an eigensolver returned, so
    the patterns are the same whatever the LAPACK kernel.
    """
    dim = b.shape[1]
    pb = b @ b.T
    if dim > 1:
        a = pb @ _random_symmetric(rng, len(b)) @ pb
        avg = (dsub @ a @ dsub.transpose(0, 2, 1)).sum(axis=0)  # commutes with the subgroup, lives in the block
        w, vec = np.linalg.eigh(b.T @ avg @ b)
        scale = max(1.0, float(np.abs(w).max()))
        parts, cur = [], [0]
        for k in range(1, dim):
            if w[k] - w[k - 1] < 1e-8 * scale:
                cur.append(k)
            else:
                parts.append(cur)
                cur = [k]
        parts.append(cur)
        cols = []
        for part in parts:
            sub = b @ vec[:, part]
            cols.append(sub if len(part) == 1 else _pivoted_basis(sub @ sub.T))
        b = np.column_stack(cols)
        fixed = np.array([np.count_nonzero(np.abs(dsub @ b[:, k] - b[:, k]).max(axis=1) < 1e-6)
                          for k in range(dim)])
        b = b[:, np.argsort(-fixed, kind="stable")]
    big = np.argmax(np.abs(b) > np.abs(b).max(axis=0) - 1e-9, axis=0)
    return b * np.sign(b[big, np.arange(dim)])


def symmetry_adapted_modes(vectors, operations, permutations, seed: int = 20261201):
    """Breathing pattern and irreducible blocks of internal first-shell displacements.

    Parameters
    ----------
    vectors : (n, 3) array, Å
        Ideal (host) vectors from the site to the first-shell atoms.
    operations : (nop, 3, 3) array
        Point-group operations of the ideal shell (Cartesian, about the site).
    permutations : (nop, n) int
        How each operation permutes the shell atoms.
    seed : int
        Seed of the generic symmetric matrices, drawn in the Cartesian
        displacement coordinates. The blocks and their patterns do not
        depend on the machine (only projectors onto eigenspaces are used,
        never one eigenvector of a degenerate eigenspace); where an
        irreducible representation occurs twice, how its two copies are
        split depends on the seed.

    Returns
    -------
    breathing : (n, 3) array
        Unit-norm uniform radial pattern.
    blocks : list of (label, basis)
        ``basis`` is (dim, n, 3), orthonormal patterns spanning one irreducible
        block of the internal (non-breathing, non-rigid) displacements.
        Repeated labels get a suffix ``#2``, ``#3``.
    """
    v = np.asarray(vectors, float).reshape(-1, 3)
    n = len(v)
    ops = np.asarray(operations, float)
    breathing, trans, rot = rigid_patterns(v)
    fixed = _orthonormal(np.column_stack([breathing.reshape(-1), trans.reshape(3, -1).T, rot.reshape(3, -1).T]))
    # orthonormal complement of the fixed patterns
    u, s, _ = np.linalg.svd(fixed, full_matrices=True)
    q = u[:, fixed.shape[1]:]
    if q.shape[1] == 0:
        return breathing, []
    dmat = representation(ops, permutations)
    rng = np.random.default_rng(seed)
    pq = q @ q.T  # projector onto the internal displacements (independent of the basis q)
    a = pq @ _random_symmetric(rng, 3 * n) @ pq
    m = (dmat @ a @ dmat.transpose(0, 2, 1)).sum(axis=0)
    w, vec = np.linalg.eigh(q.T @ m @ q)
    basis = q @ vec
    scale = max(1.0, np.abs(w).max())
    groups: list[list[int]] = [[0]]
    for k in range(1, len(w)):
        if w[k] - w[k - 1] < 1e-6 * scale:
            groups[-1].append(k)
        else:
            groups.append([k])
    # merge neighbouring groups until each spans an invariant subspace (guards against noise)
    blocks, pending = [], []
    for grp in groups:
        pending += grp
        b = basis[:, pending]
        leak = max(np.abs(dm @ b - b @ (b.T @ dm @ b)).max() for dm in dmat)
        if leak < 1e-5:
            blocks.append(b)
            pending = []
    if pending:
        blocks.append(basis[:, pending])
    orders = np.array([operation_order(r) for r in ops])
    out, seen = [], {}
    labelled = []
    axial = _axial_subgroup(ops, orders)
    for b in blocks:
        chars = np.einsum("ik,gik->g", b, dmat @ b)
        labelled.append((_label(chars, b.shape[1], ops, orders), _canonical_basis(b, dmat[axial], rng)))
    labelled.sort(key=lambda t: (t[1].shape[1], t[0]))
    for lab, b in labelled:
        seen[lab] = seen.get(lab, 0) + 1
        name = lab if seen[lab] == 1 else f"{lab}#{seen[lab]}"
        out.append((name, b.T.reshape(-1, n, 3)))
    return breathing, out
