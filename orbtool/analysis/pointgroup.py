"""Point group of a set of atoms about a centre (a vacancy site and its neighbours).

:func:`find_point_group` searches every orthogonal operation (proper and
improper rotation about the origin) that maps the labelled point set onto
itself within a distance tolerance and names the group in Schoenflies
notation from the kinds of operation it contains.

Search
------
Pick two non-collinear points *a*, *b*. Any symmetry operation sends them to
points *a'*, *b'* of the same element with |a'| = |a|, |b'| = |b| and
a'·b' = a·b, and is fixed by those images plus the sign of its determinant.
Each candidate is built from the orthonormal frames of (a, b) and (a', b'),
tested on the whole set, and then refined by the best orthogonal fit to the
matched points (the Kabsch solution, W. Kabsch, Acta Cryst. A 32, 922 (1976)).

Naming
------
From the operation types (rotation orders, inversion, mirror planes and their
orientation with respect to the principal axis), following the flow chart of
point-group determination in F. A. Cotton, *Chemical Applications of Group
Theory* (3rd ed., Wiley 1990), ch. 3: cubic groups (T, Td, Th, O, Oh),
icosahedral (I, Ih), axial groups Cn, Cnv, Cnh, S2n, Dn, Dnh, Dnd, and the
low groups C1, Cs, Ci. Linear sets give C∞v / D∞h (with a finite
representative set of operations).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["PointGroup", "find_point_group", "name_point_group", "operation_order", "rotation_axis"]


@dataclass(frozen=True, eq=False)
class PointGroup:
    """Symmetry of a labelled point set about the origin.

    Attributes
    ----------
    symbol : str
        Schoenflies symbol (``"Td"``, ``"C3v"``, ...).
    operations : (nop, 3, 3) float
        Cartesian matrices acting on column vectors (x' = R x), identity first.
    permutations : (nop, n) int
        ``permutations[g, i]`` is the point that operation g sends point i to.
    tolerance : float, Å
        Distance tolerance the search used.
    symmetrized : (n, 3) float, Å
        The points averaged over the group (exactly invariant under
        ``operations``; equal to the input for an ideal set).
    """

    symbol: str
    operations: np.ndarray
    permutations: np.ndarray
    tolerance: float
    symmetrized: np.ndarray

    @property
    def order(self) -> int:
        return len(self.operations)


def _frame(a, b):
    e1 = a / np.linalg.norm(a)
    e2 = b - (b @ e1) * e1
    e2 = e2 / np.linalg.norm(e2)
    return np.column_stack([e1, e2, np.cross(e1, e2)])


def _match(points, labels, images, tol):
    """Permutation p with images[i] ≈ points[p[i]] (same label), or None."""
    d = np.linalg.norm(images[:, None, :] - points[None, :, :], axis=2)
    d[labels[:, None] != labels[None, :]] = np.inf
    p = np.argmin(d, axis=1)
    if d[np.arange(len(p)), p].max() > tol or len(np.unique(p)) != len(p):
        return None
    return p


def _kabsch(x, y, det_sign):
    """Orthogonal R with determinant ``det_sign`` minimising Σ|R x_i − y_i|².

    Batched: ``y`` may be (nop, n, 3) with ``det_sign`` (nop,), giving (nop, 3, 3).
    """
    y = np.asarray(y, float)
    single = y.ndim == 2
    y = y[None] if single else y
    sign = np.broadcast_to(np.asarray(det_sign, float), (len(y),))
    u, _, vt = np.linalg.svd(np.einsum("gni,nj->gij", y, x))
    d = np.ones((len(y), 3))
    d[:, 2] = sign * np.sign(np.linalg.det(u @ vt))
    r = (u * d[:, None, :]) @ vt
    return r[0] if single else r


def _linear_ops(points, labels, tol):
    axis = points[np.argmax(np.linalg.norm(points, axis=1))]
    z = axis / np.linalg.norm(axis)
    x = np.cross(z, [1.0, 0, 0] if abs(z[0]) < 0.9 else [0, 1.0, 0])
    x /= np.linalg.norm(x)
    y = np.cross(z, x)
    rot = lambda u: 2 * np.outer(u, u) - np.eye(3)  # C2 about u
    mir = lambda u: np.eye(3) - 2 * np.outer(u, u)  # mirror with normal u
    trial = [np.eye(3), rot(z), mir(x), mir(y), -np.eye(3), mir(z), rot(x), rot(y)]
    ops, perms = [], []
    for r in trial:
        p = _match(points, labels, points @ r.T, tol)
        if p is not None:
            ops.append(r)
            perms.append(p)
    symbol = "D∞h" if any(np.allclose(r, -np.eye(3)) for r in ops) else "C∞v"
    return symbol, np.array(ops), np.array(perms)


def find_point_group(vectors, labels=None, tolerance: float = 0.1) -> PointGroup:
    """Point group of points (about the origin) with element labels.

    Parameters
    ----------
    vectors : (n, 3) array, Å
        Positions relative to the centre (e.g. neighbour vectors from a vacancy site).
    labels : (n,) sequence or None
        Element symbols, numbers or any hashable tags (e.g. ``(element, shell)``);
        operations only map equal labels onto each other.
    tolerance : float, Å
        Largest distance between an image (under the best-fitting orthogonal
        matrix) and the point it lands on. If the operations found at this
        tolerance do not close into a group (a set near a higher symmetry), the
        tolerance is halved until they do.

    Returns
    -------
    PointGroup
    """
    pts = np.asarray(vectors, float).reshape(-1, 3)
    n = len(pts)
    if labels is None:
        labels = np.zeros(n, int)
    else:
        tags = [repr(x) for x in labels]
        labels = np.unique(np.asarray(tags, dtype=object).astype(str), return_inverse=True)[1].reshape(-1)
    if n == 0 or np.linalg.norm(pts, axis=1).max() < tolerance:
        return PointGroup("Kh", np.eye(3)[None], np.zeros((1, n), int), tolerance, pts)
    if np.linalg.matrix_rank(pts, tol=tolerance) < 2:
        symbol, ops, perms = _linear_ops(pts, labels, tolerance)
        return PointGroup(symbol, ops, perms, tolerance, pts)
    tol = tolerance
    for _ in range(8):
        ops, perms = _search(pts, labels, tol)
        if _closed(perms, np.sign(np.linalg.det(ops))):
            break
        tol *= 0.5
    ideal, ops = _symmetrize(pts, ops, perms)
    return PointGroup(name_point_group(ops), ops, perms, tol, ideal)


def _closed(perms, dets) -> bool:
    """Whether the (permutation, det) pairs are closed under composition."""
    perms = np.asarray(perms, np.int64)
    signs = (np.asarray(dets) > 0).astype(np.int64)[:, None]
    keys = {row.tobytes() for row in np.hstack([perms, signs])}
    comp = perms[:, perms]  # comp[g, h, i] = perms[g][perms[h][i]]
    sign = (signs[:, None, :] == signs[None, :, :]).astype(np.int64)
    rows = np.concatenate([comp, sign], axis=2).reshape(-1, perms.shape[1] + 1)
    return all(row.tobytes() in keys for row in rows)


def _search(pts, labels, tol):
    """Every orthogonal operation mapping the labelled set onto itself within ``tol`` (identity first)."""
    n = len(pts)
    norms = np.linalg.norm(pts, axis=1)
    loose = 3.0 * tol
    cls = np.array([np.count_nonzero((labels == labels[i]) & (np.abs(norms - norms[i]) < tol)) for i in range(n)])
    # anchor a: a point of the smallest label/distance class; b: a clearly non-collinear point, small class
    a = int(np.argmin(cls * 1e6 - norms))
    sin = np.linalg.norm(np.cross(pts[a] / norms[a], pts / np.maximum(norms, 1e-12)[:, None]), axis=1)
    ok = sin > 0.5 if np.any(sin > 0.5) else sin >= sin.max() - 1e-9
    b = int(np.flatnonzero(ok)[np.argmin(cls[ok] * 10.0 - sin[ok])])
    fa = _frame(pts[a], pts[b])
    ca = np.flatnonzero((labels == labels[a]) & (np.abs(norms - norms[a]) < loose))
    cb = np.flatnonzero((labels == labels[b]) & (np.abs(norms - norms[b]) < loose))
    ii, jj = np.meshgrid(ca, cb, indexing="ij")
    ii, jj = ii.ravel(), jj.ravel()
    dots = np.einsum("kx,kx->k", pts[ii], pts[jj])
    keep = (ii != jj) & (np.abs(dots - pts[a] @ pts[b]) <= loose * (norms[a] + norms[b]))
    keep &= np.linalg.norm(np.cross(pts[ii], pts[jj]), axis=1) > 1e-6
    ii, jj = ii[keep], jj[keep]
    e1 = pts[ii] / norms[ii, None]
    e2 = pts[jj] - np.einsum("kx,kx->k", pts[jj], e1)[:, None] * e1
    e2 /= np.linalg.norm(e2, axis=1, keepdims=True)
    e3 = np.cross(e1, e2)
    frames = np.concatenate([np.stack([e1, e2, e3], axis=2), np.stack([e1, e2, -e3], axis=2)])
    signs = np.concatenate([np.ones(len(ii)), -np.ones(len(ii))])
    rots = frames @ fa.T  # (K, 3, 3)
    perms, good = _match_many(pts, labels, rots, loose)
    found: dict = {(tuple(range(n)), 1.0): np.eye(3)}
    if np.any(good):
        # best orthogonal fit for each correspondence, then the strict test
        uniq = {}
        for p, sg in zip(perms[good], signs[good]):
            uniq.setdefault((tuple(p), sg), None)
        keys = list(uniq)
        fit = _kabsch(pts, pts[np.array([k[0] for k in keys])], np.array([k[1] for k in keys]))
        p2, good2 = _match_many(pts, labels, fit, tol)
        if np.any(good2):
            refit = _kabsch(pts, pts[p2[good2]], np.array([k[1] for k in keys])[good2])
            for p, sg, r in zip(p2[good2], np.array([k[1] for k in keys])[good2], refit):
                found.setdefault((tuple(p), float(sg)), r)
    keys = sorted(found, key=lambda k: (k[1] < 0, k[0] != tuple(range(n)), k))
    return np.array([found[k] for k in keys]), np.array([k[0] for k in keys], dtype=int)


def _match_many(points, labels, rots, tol):
    """Batched :func:`_match`: permutations (K, n) and a mask of the rotations that map the set onto itself."""
    n = len(points)
    chunk = max(1, 400_000 // max(1, n * n))
    perms, oks = [], []
    for start in range(0, len(rots), chunk):
        images = np.einsum("kij,nj->kni", rots[start:start + chunk], points)
        d = np.linalg.norm(images[:, :, None, :] - points[None, None, :, :], axis=3)
        d[:, labels[:, None] != labels[None, :]] = np.inf
        p = np.argmin(d, axis=2)
        best = np.take_along_axis(d, p[:, :, None], axis=2)[:, :, 0]
        srt = np.sort(p, axis=1)
        distinct = np.all(np.diff(srt, axis=1) > 0, axis=1) if n > 1 else np.ones(len(p), bool)
        perms.append(p)
        oks.append((best.max(axis=1) <= tol) & distinct)
    if not perms:
        return np.zeros((0, n), int), np.zeros(0, bool)
    return np.concatenate(perms), np.concatenate(oks)


def _symmetrize(pts, ops, perms, rounds: int = 4):
    """Group-averaged points and operations refitted to them.

    With R_g v_i ≈ v_p(i), the average v'_i = (1/|G|) Σ_g R_gᵀ v_{p_g(i)} is
    invariant; refitting each R_g to v' (Kabsch) makes the matrices an exact
    representation up to rounding, which the mode decomposition relies on.
    """
    dets = np.sign(np.linalg.det(ops))
    for _ in range(rounds):
        pts = np.einsum("gji,gnj->ni", ops, pts[perms]) / len(ops)
        ops = _kabsch(pts, pts[perms], dets)
    return pts, ops


def operation_order(r, max_order: int = 60) -> int:
    """Smallest m ≥ 1 with R^m = 1 (0 if none up to ``max_order``)."""
    m = np.eye(3)
    for k in range(1, max_order + 1):
        m = m @ r
        if np.abs(m - np.eye(3)).max() < 1e-3:
            return k
    return 0


def rotation_axis(r) -> np.ndarray:
    """Unit axis of the proper part det(R)·R (eigenvector of eigenvalue +1), its sign fixed (largest component
    positive, ties to the first) so that it does not depend on the eigensolver. Meaningful for rotations other
    than the identity (whose eigenvalue +1 is threefold)."""
    p = np.linalg.det(r) * r
    w, v = np.linalg.eig(p)
    axis = np.real(v[:, np.argmin(np.abs(w - 1.0))])
    axis = axis / np.linalg.norm(axis)
    big = int(np.argmax(np.abs(axis) >= np.abs(axis).max() - 1e-9))
    return axis * np.sign(axis[big])


def name_point_group(ops) -> str:
    """Schoenflies symbol of a finite group of orthogonal 3×3 matrices.

    Follows the determination chart of Cotton, *Chemical Applications of Group
    Theory*, ch. 3: the proper subgroup fixes the family (cubic, icosahedral,
    cyclic or dihedral of order n); inversion, σh (mirror normal along the
    principal axis), σv/σd and S2n then give the full symbol.
    """
    ops = np.asarray(ops, float).reshape(-1, 3, 3)
    dets = np.linalg.det(ops)
    proper = ops[dets > 0]
    improper = ops[dets < 0]
    orders = np.array([operation_order(r) for r in proper])
    has_inv = any(np.abs(r + np.eye(3)).max() < 1e-3 for r in improper)
    mirrors = [r for r in improper if operation_order(r) == 2 and not np.abs(r + np.eye(3)).max() < 1e-3]
    n_c3 = int(np.count_nonzero(orders == 3))
    n_c5 = int(np.count_nonzero(orders == 5))
    if n_c5 >= 24:
        return "Ih" if len(improper) else "I"
    if n_c3 >= 8:
        if len(proper) == 24:
            return "Oh" if len(improper) else "O"
        if not len(improper):
            return "T"
        return "Th" if has_inv else "Td"
    n = int(orders.max()) if len(orders) else 1
    if n == 1:
        if not len(improper):
            return "C1"
        return "Ci" if has_inv else "Cs"
    axis = rotation_axis(proper[int(np.argmax(orders))])
    dihedral = len(proper) == 2 * n
    sigma_h = any(abs(abs(rotation_axis(m) @ axis) - 1.0) < 1e-2 for m in mirrors)
    if not len(improper):
        return f"D{n}" if dihedral else f"C{n}"
    if dihedral:
        return f"D{n}h" if sigma_h else f"D{n}d"
    if sigma_h:
        return f"C{n}h"
    if mirrors:
        return f"C{n}v"
    return f"S{2 * n}"
