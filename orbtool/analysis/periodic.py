"""Periodic-cell primitives on raw arrays (cell, positions, pbc).

These are the array-level building blocks under :mod:`orbtool.analysis.geometry`:
they take plain numpy arrays so they are easy to test against a reference
(``ase.neighborlist``, ``ase.geometry.find_mic``) and to vectorise.

Conventions
-----------
* ``cell`` is (3, 3) in Å with lattice vectors as rows; ``positions`` are
  Cartesian Å, ``(n, 3)``.
* Periodic images are named by integer cell shifts ``S`` (3,): the image of
  atom ``j`` is ``positions[j] + S @ cell``. A vector from a centre ``c`` to
  that image is ``positions[j] + S @ cell - c``. This is the same convention
  as ASE's neighbour list, so bond directions are unambiguous even in cells
  smaller than twice the cutoff.
* Along a non-periodic axis (``pbc[k]`` false) no shift is ever applied.
"""

from __future__ import annotations

import itertools

import numpy as np
from ase.geometry import minkowski_reduce

__all__ = ["as_pbc", "fractional", "reduced_cell", "minimum_image", "site_neighbours"]


def as_pbc(pbc) -> np.ndarray:
    """Three booleans from a scalar or a length-3 sequence."""
    arr = np.zeros(3, dtype=bool)
    arr[:] = np.asarray(pbc, dtype=bool)
    return arr


def fractional(cell, positions) -> np.ndarray:
    """Fractional coordinates (not wrapped) of Cartesian ``positions`` (Å)."""
    return np.asarray(positions, float).reshape(-1, 3) @ np.linalg.inv(np.asarray(cell, float))


def reduced_cell(cell, pbc=True) -> tuple[np.ndarray, np.ndarray]:
    """A Minkowski-reduced basis of the same lattice.

    Returns ``(rcell, op)`` with ``rcell = op @ cell`` and ``op`` an integer
    unimodular matrix. In a reduced basis the nearest periodic image of a
    wrapped vector lies among the 27 neighbouring cells, which makes
    :func:`minimum_image` exact for any cell shape (H. Minkowski's reduction;
    see also the discussion in ASE's ``ase.geometry.minkowski_reduction``).
    """
    rcell, op = minkowski_reduce(np.asarray(cell, float), as_pbc(pbc))
    return np.asarray(rcell, float), np.asarray(op, int)


_NEIGHBOUR_SHIFTS = np.array(list(itertools.product((-1, 0, 1), repeat=3)), dtype=int)


def minimum_image(cell, vectors, pbc=True) -> tuple[np.ndarray, np.ndarray]:
    """Shortest periodic images of difference vectors.

    Parameters
    ----------
    cell : (3, 3) array, Å
    vectors : (..., 3) array, Å
        Difference vectors (e.g. ``positions[j] - centre``).
    pbc : bool or (3,) bools

    Returns
    -------
    mic : (..., 3) array, Å
        ``vectors + shifts @ cell``, the shortest image of each vector.
    shifts : (..., 3) int array
        The integer cell shifts (in the basis of ``cell``) that were added.
    """
    cell = np.asarray(cell, float)
    vec = np.asarray(vectors, float)
    shape = vec.shape
    vec = vec.reshape(-1, 3)
    pbc = as_pbc(pbc)
    if not pbc.any() or vec.shape[0] == 0:
        return vec.reshape(shape).copy(), np.zeros(shape, dtype=int)
    rcell, op = reduced_cell(cell, pbc)
    f = fractional(rcell, vec)
    base = np.where(pbc, -np.round(f), 0.0)
    wrapped = (f + base) @ rcell
    cand = _NEIGHBOUR_SHIFTS[np.all((_NEIGHBOUR_SHIFTS == 0) | pbc, axis=1)]
    trial = wrapped[:, None, :] + (cand @ rcell)[None, :, :]
    best = np.argmin(np.einsum("nkx,nkx->nk", trial, trial), axis=1)
    rshift = base.astype(int) + cand[best]
    mic = trial[np.arange(len(vec)), best]
    shifts = rshift @ op  # reduced-basis shift -> shift in the basis of `cell`
    return mic.reshape(shape), shifts.reshape(shape)


def site_neighbours(cell, positions, pbc, centre, cutoff: float, *, exclude_zero: bool = True):
    """All atoms (every periodic image) within ``cutoff`` of a point.

    Parameters
    ----------
    cell : (3, 3) array, Å
    positions : (n, 3) array, Å (need not be wrapped into the cell)
    pbc : bool or (3,) bools
    centre : (3,) array, Å
        The point (e.g. a vacancy site or an atom position).
    cutoff : float, Å
    exclude_zero : bool
        Drop entries at distance < 1e-8 Å (the centre atom itself).

    Returns
    -------
    indices : (m,) int
    shifts : (m, 3) int
        Integer cell shifts: ``vectors = positions[indices] + shifts @ cell - centre``.
    vectors : (m, 3) Å
    distances : (m,) Å
        Sorted by increasing distance (ties by index).
    """
    cell = np.asarray(cell, float)
    pos = np.asarray(positions, float).reshape(-1, 3)
    centre = np.asarray(centre, float).reshape(3)
    pbc = as_pbc(pbc)
    if not cutoff > 0:
        raise ValueError(f"cutoff must be positive, got {cutoff!r} Å")
    f = fractional(cell, pos - centre)
    base = np.where(pbc, -np.round(f), 0.0).astype(int)
    f0 = f + base
    # |f0_k + m_k| <= cutoff / spacing_k, spacing_k = 1/|b_k| (b_k: reciprocal rows without 2*pi)
    recip = np.linalg.inv(cell).T
    reach = cutoff * np.linalg.norm(recip, axis=1)
    nmax = np.where(pbc, np.floor(reach + 0.5).astype(int), 0)
    ranges = [np.arange(-k, k + 1) for k in nmax]
    extra = np.stack(np.meshgrid(*ranges, indexing="ij"), axis=-1).reshape(-1, 3)
    vec0 = f0 @ cell
    out_i, out_s, out_v = [], [], []
    chunk = max(1, 2_000_000 // max(1, len(extra)))
    for start in range(0, len(pos), chunk):  # chunks of atoms bound the memory for very large cutoffs
        v = vec0[start:start + chunk, None, :] + (extra @ cell)[None, :, :]
        d2 = np.einsum("nkx,nkx->nk", v, v)
        keep = d2 <= cutoff * cutoff
        if exclude_zero:
            keep &= d2 > 1e-16
        ii, kk = np.nonzero(keep)
        out_i.append(ii + start)
        out_s.append(base[ii + start] + extra[kk])
        out_v.append(v[ii, kk])
    idx = np.concatenate(out_i) if out_i else np.zeros(0, int)
    shifts = np.concatenate(out_s) if out_s else np.zeros((0, 3), int)
    vecs = np.concatenate(out_v) if out_v else np.zeros((0, 3))
    dist = np.linalg.norm(vecs, axis=1)
    order = np.lexsort((idx, np.round(dist, 10)))
    return idx[order], shifts[order].astype(int), vecs[order], dist[order]
