"""Array-level kernels that split a periodic grid among atoms (internal).

Two primitives work on raw arrays (values, cell, origin, positions) so they
are easy to test and to time; :mod:`orbtool.analysis.density` wraps them for
:class:`~orbtool.grid.Grid` objects.

* :func:`sphere_sums` integrates the field inside a sphere about every atom.
  Every atom of a given radius shares one integer stencil of grid offsets;
  the sub-voxel position of the atom only changes which stencil points fall
  inside, so the work is one gather per stencil point and atom, done in
  chunks of atoms (no loop over grid points).
* :func:`nearest_atom_sums` integrates the field over each atom's
  nearest-atom (Voronoi) cell. Blocks of 2^L × 2^L × 2^L points are given to
  one atom at once when no other atom can be nearer to any of their points;
  only blocks cut by a cell face are split (an octree descent), so the
  distance arithmetic is spent near the faces only.

Both use the grid convention of :class:`orbtool.grid.Grid`: point (i, j, k)
sits at ``origin + i/n1 a1 + j/n2 a2 + k/n3 a3``. Periodic images are taken
from the 27 neighbouring cells (the same assumption as
:meth:`orbtool.grid.Grid.minimum_image_distance`).
"""

from __future__ import annotations

import numpy as np
from scipy.spatial import cKDTree

__all__ = ["sphere_sums", "nearest_atom_sums"]

_SHIFTS = np.array([(i, j, k) for i in (-1, 0, 1) for j in (-1, 0, 1) for k in (-1, 0, 1)], dtype=float)


def _voxel(cell: np.ndarray, shape) -> np.ndarray:
    return np.asarray(cell, float) / np.asarray(shape, float)[:, None]


def sphere_sums(values: np.ndarray, cell: np.ndarray, origin: np.ndarray, positions: np.ndarray,
                radii: np.ndarray, chunk_points: int = 4_000_000) -> np.ndarray:
    """Sum of ``values`` over the grid points within ``radii[a]`` of atom ``a``.

    Parameters
    ----------
    values : ndarray (n1, n2, n3)
        Field on the grid (any unit).
    cell, origin : ndarray (3, 3), (3,)
        Lattice vectors (rows) spanned by the grid and the position of point 0, Å.
    positions : ndarray (natom, 3)
        Cartesian atom positions, Å.
    radii : ndarray (natom,)
        Sphere radius of each atom, Å (0 gives an empty sphere).

    Returns
    -------
    ndarray (natom,)
        Plain sums of values (multiply by the voxel volume for an integral).
        Overlapping spheres each count the shared points.
    """
    shape = np.asarray(values.shape)
    voxel = _voxel(cell, shape)
    inv_vox = np.linalg.inv(voxel)
    flat = values.reshape(-1)
    cont = (np.asarray(positions, float) - origin) @ inv_vox          # continuous index coordinates
    base = np.rint(cont).astype(np.int64)
    dvec = (base - cont) @ voxel                                        # atom -> nearest point, Å
    half_diag = _half_diagonal(voxel, 2)
    spacing = 1.0 / np.linalg.norm(inv_vox, axis=0)                    # distance between index planes, Å
    radii = np.asarray(radii, float)
    out = np.zeros(len(cont))
    itype = np.int32 if flat.size < 2**31 else np.int64
    strides = np.array([shape[1] * shape[2], shape[2], 1], dtype=np.int64)
    for r in np.unique(radii):
        if r <= 0:
            continue
        reach = np.ceil((r + half_diag) / spacing).astype(int)
        if np.any(2 * reach + 1 > shape):
            raise ValueError(f"sphere radius {r:.3f} Å does not fit in the cell (the sphere would meet "
                             "its own periodic image); use smaller radii")
        ax = [np.arange(-m, m + 1) for m in reach]
        offs = np.stack(np.meshgrid(*ax, indexing="ij"), -1).reshape(-1, 3)
        ov = offs @ voxel                                                 # stencil vectors, Å
        oo = np.einsum("pi,pi->p", ov, ov)
        keep = oo <= (r + half_diag) ** 2
        # points within r − half_diag of the nearest grid point are inside whatever the atom's
        # sub-voxel offset (|δ| ≤ half_diag): summed without a distance test; only the shell is tested
        sure = oo[keep] <= max(r - half_diag, 0.0) ** 2
        order = np.concatenate([np.flatnonzero(sure), np.flatnonzero(~sure)])
        offs, ov, oo = offs[keep][order], ov[keep][order], oo[keep][order]
        n_sure = int(sure.sum())
        ov_s, oo_s = ov[n_sure:], oo[n_sure:]
        cols = offs + reach                                               # column in the per-axis tables
        lin_o = (offs @ strides).astype(itype)                           # flat offsets when nothing wraps
        of_r = radii == r
        inner = np.all((base - reach >= 0) & (base + reach < shape), axis=1)
        step = max(1, chunk_points // len(offs))
        for atoms, wraps in ((np.flatnonzero(of_r & inner), False), (np.flatnonzero(of_r & ~inner), True)):
            for lo in range(0, len(atoms), step):
                sel = atoms[lo:lo + step]
                if not wraps:
                    lin = (base[sel] @ strides).astype(itype)[:, None] + lin_o[None, :]
                else:
                    lin = None
                    for axis in range(3):
                        table = (((base[sel, axis, None] + ax[axis][None, :]) % shape[axis])
                                 * strides[axis]).astype(itype)
                        part = table[:, cols[:, axis]]
                        lin = part if lin is None else lin + part
                vals = flat[lin]
                # |o + δ|² = |o|² + 2 o·δ + |δ|², with δ the atom-to-point vector (BLAS for the middle term)
                d2 = oo_s[None, :] + 2.0 * (dvec[sel] @ ov_s.T) + np.einsum("ci,ci->c", dvec[sel], dvec[sel])[:, None]
                out[sel] = vals[:, :n_sure].sum(axis=1) + np.where(d2 <= r * r, vals[:, n_sure:], 0.0).sum(axis=1)
    return out


def _pyramid(values: np.ndarray, levels: int) -> list[np.ndarray]:
    """Sums over 2^l blocks for l = 0..levels (level 0 is the array itself)."""
    out = [values]
    v = values
    for _ in range(levels):
        v = v[:, :, 0::2] + v[:, :, 1::2]
        v = v[:, 0::2, :] + v[:, 1::2, :]
        v = v[0::2] + v[1::2]
        out.append(np.ascontiguousarray(v))
    return out


def nearest_atom_sums(values: np.ndarray, cell: np.ndarray, origin: np.ndarray, positions: np.ndarray,
                      levels: int | None = None, k_start: int = 12) -> np.ndarray:
    """Sum of ``values`` over each atom's nearest-atom (Voronoi) cell, periodic.

    A block of points with centre c and bounding-sphere radius h belongs
    wholly to the atom a nearest to c unless some atom b of another owner has
    d_b − d_a ≤ 2h (triangle inequality); such atoms stay candidates and the
    block is split into 8 children that inherit only those candidates. At
    single points the nearest candidate wins (ties go to the first found).

    Parameters
    ----------
    values, cell, origin, positions
        As in :func:`sphere_sums`.
    levels : int, optional
        Depth of the block descent (top blocks are 2^levels points on a side).
        Chosen from the grid size when omitted.
    k_start : int
        Candidates taken from the tree for the top blocks before falling back
        to a ball search where that is not enough.

    Returns
    -------
    ndarray (natom,)
        Plain sums of values in each cell.
    """
    shape0 = np.asarray(values.shape)
    voxel = _voxel(cell, shape0)
    nat = len(positions)
    if levels is None:
        levels = int(np.clip(np.floor(np.log2(max(1, shape0.min() / 8))), 0, 4))
    top = 2 ** levels
    padded = -(-shape0 // top) * top
    if np.any(padded != shape0):
        # zero padding: the extra points lie just beyond the cell and carry no weight
        v = np.zeros(padded, dtype=float)
        v[:shape0[0], :shape0[1], :shape0[2]] = values
    else:
        v = np.asarray(values, dtype=float)
    sums = _pyramid(v, levels)

    frac = ((np.asarray(positions, float) - origin) @ np.linalg.inv(cell)) % 1.0
    img = ((frac[None, :, :] + _SHIFTS[:, None, :]).reshape(-1, 3)) @ cell   # relative to origin
    owner = np.tile(np.arange(nat), len(_SHIFTS))
    tree = cKDTree(img)
    # one far-away dummy image (owner ``nat``) pads candidate lists of unequal length
    dummy = len(img)
    img = np.vstack([img, np.full((1, 3), 1e6 * (1.0 + np.abs(cell).max()))])
    owner = np.append(owner, nat)
    proj = img @ voxel.T                 # v_i·a, so that p·a = x·proj_a for p = x @ voxel
    norm2 = np.einsum("ai,ai->a", img, img)

    nb = padded // top
    idx = np.stack(np.meshgrid(*[np.arange(m) for m in nb], indexing="ij"), -1).reshape(-1, 3)
    h = _half_diagonal(voxel, top)
    centres = (idx * top + (top - 1) / 2.0) @ voxel
    k = min(k_start, dummy)
    dist, cand = tree.query(centres, k=k)
    cand = np.asarray(cand, dtype=np.int64).reshape(len(centres), k)
    dist = np.asarray(dist).reshape(len(centres), k)
    short = dist[:, -1] <= dist[:, 0] + 2 * h
    if k < dummy and short.any():
        # the candidate list may be truncated: widen it with a ball search for those blocks
        rows = np.flatnonzero(short)
        balls = tree.query_ball_point(centres[rows], dist[rows, 0] + 2 * h + 1e-9)
        width = max(len(b) for b in balls)
        wide = np.full((len(rows), width), dummy, dtype=np.int64)
        for i, b in enumerate(balls):
            wide[i, :len(b)] = b
        groups = {k: [(idx[~short], cand[~short])], width: [(idx[rows], wide)]}
    else:
        groups = {k: [(idx, cand)]}

    out = np.zeros(nat + 1)
    children = np.array([(i, j, kk) for i in (0, 1) for j in (0, 1) for kk in (0, 1)], dtype=np.int64)
    for level in range(levels, -1, -1):
        size = 2 ** level
        half = (size - 1) / 2.0
        blk = sums[level]
        bflat = blk.reshape(-1)
        bstr = np.array([blk.shape[1] * blk.shape[2], blk.shape[2], 1], dtype=np.int64)
        next_groups: dict[int, list] = {}
        for parts in groups.values():
            gidx = np.concatenate([p[0] for p in parts])
            gcand = np.concatenate([p[1] for p in parts])
            x = gidx * size + half                                            # index coordinates of centres
            pc = proj[gcand]                                                  # (n, w, 3)
            score = norm2[gcand] - 2.0 * np.einsum("nwi,ni->nw", pc, x)      # d² − |p|²
            near = np.argmin(score, axis=1)
            rows = np.arange(len(gidx))
            a = gcand[rows, near]
            lin = (gidx[:, 0] * bstr[0] + gidx[:, 1] * bstr[1]) + gidx[:, 2]
            if level == 0 or gcand.shape[1] == 1:
                out += np.bincount(owner[a], weights=bflat[lin], minlength=nat + 1)
                continue
            # b can own a point of the block only if the block reaches the a|b bisecting plane:
            # (d_b² − d_a²)/2 ≤ max over the block of (p − c)·(b − a) = half Σ_i |v_i·(b − a)|
            reach = half * np.abs(pc - proj[a][:, None, :]).sum(axis=2)
            keep = 0.5 * (score - score[rows, near][:, None]) <= reach + 1e-12
            other = keep & (owner[gcand] != owner[a][:, None])
            pure = ~other.any(axis=1)
            out += np.bincount(owner[a[pure]], weights=bflat[lin[pure]], minlength=nat + 1)
            split = ~pure
            if not split.any():
                continue
            kc, cs, ic = keep[split], gcand[split], gidx[split]
            count = kc.sum(axis=1)
            for c in np.unique(count):
                m = count == c
                cc = cs[m][kc[m]].reshape(-1, c)
                if level <= _FINISH_LEVEL:
                    out += _finish_points(ic[m], cc, proj, norm2, owner, sums[0], 2 ** level, nat + 1)
                    continue
                child = (ic[m][:, None, :] * 2 + children[None, :, :]).reshape(-1, 3)
                next_groups.setdefault(int(c), []).append((child, np.repeat(cc, 8, axis=0)))
        groups = next_groups
        if not groups:
            break
    return out[:nat]


#: blocks still split at this level (4×4×4 points) are finished point by point
_FINISH_LEVEL = 2


def _finish_points(blocks, cand, proj, norm2, owner, values, size, nbin):
    """Nearest-candidate assignment of the size³ points of each block.

    The score of candidate j at point x = size·I + o splits into a per-block
    part |a_j|² − 2(size·I)·proj_j and a per-offset part −2 o·proj_j, so the
    points are handled without repeating the candidate lists.
    """
    r = np.arange(size)
    children = np.stack(np.meshgrid(r, r, r, indexing="ij"), -1).reshape(-1, 3)
    npt = len(children)
    pc = proj[cand]                                                   # (n, c, 3)
    base = size * blocks
    score = norm2[cand] - 2.0 * np.einsum("nci,ni->nc", pc, base.astype(float))
    n, c = cand.shape
    # one matrix product for all (block, candidate) rows: (n·c, 3) @ (3, npt)
    score8 = score[:, :, None] - 2.0 * (pc.reshape(n * c, 3) @ children.T.astype(float)).reshape(n, c, npt)
    if c == 2:
        second = score8[:, 1, :] < score8[:, 0, :]
        label = np.where(second, owner[cand[:, 1]][:, None], owner[cand[:, 0]][:, None])
    else:
        best = np.argmin(score8, axis=1)                                # (n, npt)
        label = owner[np.take_along_axis(cand, best, axis=1)]
    n2, n3 = values.shape[1], values.shape[2]
    lin0 = (base[:, 0] * n2 + base[:, 1]) * n3 + base[:, 2]
    offl = (children[:, 0] * n2 + children[:, 1]) * n3 + children[:, 2]
    vals = values.reshape(-1)[lin0[:, None] + offl[None, :]]
    return np.bincount(label.ravel(), weights=vals.ravel(), minlength=nbin)


def _half_diagonal(voxel: np.ndarray, size: int) -> float:
    """Largest distance from the centre of a size³ block of points to one of its points, Å."""
    half = (size - 1) / 2.0
    corners = np.array([(i, j, k) for i in (-half, half) for j in (-half, half) for k in (-half, half)])
    return float(np.linalg.norm(corners @ voxel, axis=1).max())
