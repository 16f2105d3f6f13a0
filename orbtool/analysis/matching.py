"""Match the atoms of a defect supercell to those of its pristine host (raw arrays).

The primitive under :func:`orbtool.analysis.geometry.locate_vacancy`. Works
on plain arrays (cells in Å, Cartesian positions in Å, atomic numbers) so it
is easy to test and to time.

Method
------
1. Both structures are compared in fractional coordinates, so a slightly
   strained defect cell is handled; distances are measured in the host cell.
2. A rigid shift between the cells (a code that re-centred the defect cell)
   is found by voting: shifts that carry a few reference atoms of the rarest
   element onto host atoms of the same element are scored by how many defect
   atoms then sit within a small radius of a host atom of the same element.
   Lattice translations of the crystal score equally; the shortest shift is
   kept and equally short, genuinely different shifts are reported.
3. Neighbour candidates come from a ``scipy.spatial.cKDTree`` built on
   fractional coordinates of a Minkowski-reduced cell with periodic
   ``boxsize``; exact Cartesian minimum-image distances are then computed for
   those candidates only.
4. An atom whose nearest host site is clearly nearer than its second nearest,
   and not claimed by another atom, is matched directly. Only the remaining
   ambiguous atoms enter an optimal assignment (the Hungarian method,
   H. W. Kuhn, Naval Res. Logist. Q. 2, 83 (1955), as implemented by
   ``scipy.optimize.linear_sum_assignment``) over their own candidate sites,
   so the cost stays local and the method scales to large cells.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.optimize import linear_sum_assignment
from scipy.spatial import cKDTree

from ..errors import GeometryError
from .periodic import as_pbc, fractional, reduced_cell

__all__ = ["SiteMatch", "match_sites", "check_overlaps", "MIN_SEPARATION"]

#: two atoms closer than this (Å) are one atom written twice, not a structure (the shortest bond in
#: matter, H–H in H2, is 0.74 Å — CRC Handbook of Chemistry and Physics, "Bond lengths")
MIN_SEPARATION = 0.5

_BIG = 1.0e6
_N_CANDIDATES = 8  # neighbour candidates per defect atom


@dataclass(frozen=True, eq=False)
class SiteMatch:
    """Result of :func:`match_sites`.

    Attributes
    ----------
    mapping : (n_defect,) int
        Host index of each defect atom, ``-1`` where no host site was found.
    shift : (3,) float, Å
        Rigid shift, host frame: ``defect ≈ host[mapping] + shift + displacement``.
    shift_fractional : (3,) float
        The same shift in fractional coordinates (apply to either cell).
    displacements : (n_defect, 3) float, Å
        Minimum-image displacement of each matched atom from its host site
        (after removing the shift), host frame; NaN for unmatched atoms.
    distances : (n_defect,) float, Å
        Norms of ``displacements``.
    missing : (k,) int
        Host indices with no partner in the defect cell (vacancies), sorted.
    substituted : (m,) int
        Defect indices whose element differs from their host site's.
    unmatched : (p,) int
        Defect indices without a host site (interstitial-like atoms).
    alternative_shifts : (r, 3) float, Å
        Other rigid shifts that matched equally many atoms and are equally
        short (a genuine ambiguity when they lead to different vacancies).
    """

    mapping: np.ndarray
    shift: np.ndarray
    shift_fractional: np.ndarray
    displacements: np.ndarray
    distances: np.ndarray
    missing: np.ndarray
    substituted: np.ndarray
    unmatched: np.ndarray
    alternative_shifts: np.ndarray


class _Frame:
    """Host cell with a Minkowski-reduced basis, a KD-tree and exact minimum images."""

    def __init__(self, cell, positions, pbc):
        self.cell = np.asarray(cell, float)
        self.pbc = as_pbc(pbc)
        self.positions = np.asarray(positions, float)
        self.rcell, self.op = reduced_cell(self.cell, self.pbc)
        self.lengths = np.linalg.norm(self.rcell, axis=1)
        self.box = np.where(self.pbc, self.lengths, 0.0)
        self.tree = cKDTree(self.scaled(self.positions), boxsize=self.box)
        shifts = np.array(np.meshgrid(*[(-1, 0, 1) if p else (0,) for p in self.pbc], indexing="ij"))
        self.image_vectors = shifts.reshape(3, -1).T @ self.rcell

    def scaled(self, positions):
        """Tree coordinates: reduced fractional coordinates times the reduced lengths (≈ Å)."""
        f = fractional(self.rcell, positions)
        f = np.where(self.pbc, f - np.floor(f), f)
        f = np.where(self.pbc & (f >= 1.0), 0.0, f)  # guard against rounding to exactly 1
        return f * self.lengths

    def mic(self, vectors):
        """Exact shortest images of (..., 3) vectors, Å."""
        vec = np.asarray(vectors, float)
        shape = vec.shape
        vec = vec.reshape(-1, 3)
        f = fractional(self.rcell, vec)
        wrapped = (f - np.where(self.pbc, np.round(f), 0.0)) @ self.rcell
        trial = wrapped[:, None, :] + self.image_vectors[None]
        best = np.argmin(np.einsum("nkx,nkx->nk", trial, trial), axis=1)
        return trial[np.arange(len(vec)), best].reshape(shape)

    def candidates(self, points, k):
        """k nearest host atoms of each point: (indices (n, k), exact min-image vectors (n, k, 3))."""
        k = min(k, len(self.positions))
        _, idx = self.tree.query(self.scaled(points), k=k)
        idx = np.asarray(idx).reshape(len(points), k)
        vec = self.mic(points[:, None, :] - self.positions[idx])
        return idx, vec


def check_overlaps(cell, positions, pbc, name: str, min_separation: float = MIN_SEPARATION) -> None:
    """Raise :class:`GeometryError` when two atoms (periodic images included) are closer than
    ``min_separation`` Å: overlapping atoms, such as an atom pasted twice into a structure file."""
    positions = np.asarray(positions, float).reshape(-1, 3)
    if len(positions) < 2:
        return
    frame = _Frame(cell, positions, pbc)
    idx, vec = frame.candidates(positions, 2)
    d = np.linalg.norm(vec, axis=2)
    own = idx == np.arange(len(positions))[:, None]
    d = np.where(own, np.inf, d)  # the atom itself (its own periodic images are a cell length away)
    close = np.flatnonzero(d.min(axis=1) < min_separation)
    if len(close):
        i = int(close[0])
        j = int(idx[i, np.argmin(d[i])])
        raise GeometryError(f"{name}: atoms {i} and {j} are {d[i].min():.3f} Å apart (closer than "
                            f"{min_separation} Å): overlapping atoms, an atom written twice? Fix the structure file "
                            f"({len(close)} atom(s) affected)")


def _score(frame, points, numbers, host_numbers, radius):
    """How many points sit within ``radius`` (Å, tree metric) of a host atom of the same element."""
    dist, idx = frame.tree.query(frame.scaled(points), k=1, distance_upper_bound=radius)
    ok = np.isfinite(dist)
    ok[ok] &= host_numbers[idx[ok]] == numbers[ok]
    return ok


def _find_shift(frame, yd, zd, zh, radius, rng):
    """Rigid shift (Å, host frame) and equally good alternatives."""
    n = len(yd)
    zero_ok = _score(frame, yd, zd, zh, radius)
    if zero_ok.mean() >= 0.9:
        return np.zeros(3), np.zeros((0, 3))
    counts = {z: int(np.count_nonzero(zd == z)) for z in np.unique(zd)}
    common = [z for z in sorted(counts, key=lambda z: (counts[z], z)) if np.any(zh == z)]
    if not common:
        return np.zeros(3), np.zeros((0, 3))
    ref_z = common[0]
    refs = rng.choice(np.flatnonzero(zd == ref_z), size=min(3, counts[ref_z]), replace=False)
    host_same = np.flatnonzero(zh == ref_z)
    cands = frame.mic((yd[refs][:, None, :] - frame.positions[host_same][None]).reshape(-1, 3))
    # every lattice translation of the crystal gives an equally good shift, so the 256 shortest candidates
    # per reference atom hold a representative unless the primitive cell has > 256 atoms of that element
    keep = np.argsort(np.linalg.norm(cands, axis=1).reshape(len(refs), -1), axis=1)[:, :256]
    cands = cands.reshape(len(refs), -1, 3)[np.arange(len(refs))[:, None], keep].reshape(-1, 3)
    sub = rng.choice(n, size=min(n, 16), replace=False)
    pts = (yd[sub][None, :, :] - cands[:, None, :]).reshape(-1, 3)
    sub_scores = _score(frame, pts, np.tile(zd[sub], len(cands)), zh, radius).reshape(len(cands), -1).sum(1)
    norms = np.linalg.norm(cands, axis=1)
    # best sub-sample score first; among equal scores the shortest shift first
    order = np.lexsort((norms, -sub_scores))
    top: list[int] = []
    for i in order:
        if sub_scores[i] < sub_scores[order[0]] - 3 or len(top) == 12:
            break
        if all(np.linalg.norm(frame.mic(cands[i] - cands[j])) > 0.5 * radius for j in top):
            top.append(int(i))
    probe = rng.choice(n, size=min(n, 400), replace=False)  # a larger sample settles the finalists
    full = np.array([_score(frame, yd[probe] - cands[i], zd[probe], zh, radius).sum() for i in top])
    tied = [top[i] for i in np.flatnonzero(full >= full.max() - max(1, int(0.01 * len(probe))))]
    # refine each tied shift by the mean displacement of the atoms it matches, then compare lengths
    refined = []
    for i in tied:
        idx, vec = frame.candidates(yd[probe] - cands[i], 1)
        refined.append(cands[i] + _robust_mean(vec[:, 0]))
    refined = np.array(refined)
    rn = np.linalg.norm(refined, axis=1)
    order = np.argsort(rn, kind="stable")
    best = refined[order[0]]
    alt = [refined[k] for k in order[1:] if rn[k] - rn[order[0]] < 0.05
           and np.linalg.norm(frame.mic(refined[k] - best)) > radius]  # the same shift found twice is no rival
    return best, np.array(alt).reshape(-1, 3)


def _assign(frame, q, zd, zh, tolerance, forbid, species_penalty):
    """Defect→host mapping for points ``q`` (shift removed), local optimal assignment where ambiguous."""
    n = len(q)
    idx, vec = frame.candidates(q, _N_CANDIDATES)
    dist = np.linalg.norm(vec, axis=2)
    cost = dist**2 + species_penalty * (zh[idx] != zd[:, None])
    cost[dist > 2.0 * tolerance] = np.inf
    if len(forbid):
        cost[np.isin(idx, forbid)] = np.inf
    eff = np.sqrt(cost)
    order = np.argsort(eff, axis=1, kind="stable")
    rows = np.arange(n)
    e1 = eff[rows, order[:, 0]]
    e2 = eff[rows, order[:, 1]] if eff.shape[1] > 1 else np.full(n, np.inf)
    j1 = idx[rows, order[:, 0]]
    finite = np.isfinite(e1)
    claims = np.bincount(j1[finite], minlength=len(zh))
    with np.errstate(invalid="ignore"):  # inf - inf where an atom has no candidate at all
        clear = finite & (e1 < tolerance) & (e2 - e1 > 0.3) & (claims[j1] == 1)
    mapping = np.full(n, -1, dtype=int)
    mapping[clear] = j1[clear]
    amb = np.flatnonzero(~clear)
    if len(amb):
        taken = np.zeros(len(zh), bool)
        taken[mapping[clear]] = True
        sub_idx, sub_cost = idx[amb], cost[amb]
        ok = np.isfinite(sub_cost) & ~taken[sub_idx]
        cols = np.unique(sub_idx[ok])
        if len(cols):
            dense = np.full((len(amb), len(cols)), _BIG)
            r, c = np.nonzero(ok)
            dense[r, np.searchsorted(cols, sub_idx[r, c])] = sub_cost[r, c]
            ri, ci = linear_sum_assignment(dense)
            good = dense[ri, ci] < _BIG
            mapping[amb[ri[good]]] = cols[ci[good]]
    disp = np.full((n, 3), np.nan)
    m = mapping >= 0
    disp[m] = frame.mic(q[m] - frame.positions[mapping[m]])
    return mapping, disp


def _robust_mean(disp):
    """Mean of displacement vectors after dropping outliers.

    Outliers are further from the median than max(0.02 Å, 3 × 1.4826 × the
    median absolute deviation), capped at 0.3 Å (MAD as a robust spread:
    F. R. Hampel, J. Am. Stat. Assoc. 69, 383 (1974)).
    """
    d = disp[np.all(np.isfinite(disp), axis=1)]
    if len(d) == 0:
        return np.zeros(3)
    med = np.median(d, axis=0)
    dev = np.linalg.norm(d - med, axis=1)
    cut = min(0.3, max(0.02, 3.0 * 1.4826 * float(np.median(dev))))
    near = d[dev < cut]
    return near.mean(axis=0) if len(near) else med


def match_sites(host_cell, host_positions, host_numbers, defect_cell, defect_positions, defect_numbers,
                pbc=True, *, tolerance: float = 1.0, forbid=(), shift=None,
                species_penalty: float = 0.5, seed: int = 0) -> SiteMatch:
    """Match defect-cell atoms to host sites under periodic boundaries.

    Parameters
    ----------
    host_cell, defect_cell : (3, 3) arrays, Å (rows are lattice vectors)
    host_positions, defect_positions : (n, 3) arrays, Å Cartesian
    host_numbers, defect_numbers : (n,) int arrays (atomic numbers)
    pbc : bool or (3,) bools
    tolerance : float, Å
        Largest displacement from a host site that still counts as a match
        (pairs up to twice this are considered by the assignment and can be
        reported as badly displaced by the caller).
    forbid : sequence of int
        Host indices that must stay unmatched (forces a chosen vacancy).
    shift : (3,) array or None, Å
        A known rigid shift (host frame); ``None`` finds it.
    species_penalty : float, Å²
        Added to the squared distance when the elements differ, so that an
        atom prefers a same-element site but substitutions are still found.
    seed : int
        Seed of the random choice of reference atoms (results do not depend
        on it in well-posed cases; it only makes runs reproducible).

    Returns
    -------
    SiteMatch
    """
    hc, dc = np.asarray(host_cell, float), np.asarray(defect_cell, float)
    xh = np.asarray(host_positions, float).reshape(-1, 3)
    xd = np.asarray(defect_positions, float).reshape(-1, 3)
    zh = np.asarray(host_numbers, int).reshape(-1)
    zd = np.asarray(defect_numbers, int).reshape(-1)
    check_overlaps(hc, xh, pbc, "host")
    check_overlaps(dc, xd, pbc, "defect")
    frame = _Frame(hc, xh, pbc)
    yd = fractional(dc, xd) @ hc  # defect atoms carried into the host frame by fractional coordinates
    forbid = np.asarray(list(forbid), dtype=int)
    if len(xh) > 1:
        dnn = float(frame.tree.query(frame.scaled(xh), k=2)[0][:, 1].min())
    else:
        dnn = 2.0
    radius = min(0.6, 0.3 * dnn)
    rng = np.random.default_rng(seed)
    if shift is None:
        s, alt = _find_shift(frame, yd, zd, zh, radius, rng)
    else:
        s, alt = np.asarray(shift, float).reshape(3), np.zeros((0, 3))
    for _ in range(2):  # assign, refine the shift from atoms away from the vacancies, assign again
        mapping, disp = _assign(frame, yd - s, zd, zh, tolerance, forbid, species_penalty)
        present = np.zeros(len(xh), bool)
        present[mapping[mapping >= 0]] = True
        far = np.ones(len(yd), bool)
        for v in np.flatnonzero(~present)[:16]:
            near_v = np.linalg.norm(frame.mic(xh - xh[v]), axis=1) < 1.6 * dnn
            far &= ~near_v[np.where(mapping >= 0, mapping, 0)] | (mapping < 0)
        ds = _robust_mean(disp[far] if np.count_nonzero(far) >= 4 else disp)
        s = s + ds
        alt = alt + ds
        if np.linalg.norm(ds) < 1e-6:
            break
    if np.linalg.norm(ds) >= 1e-6:
        disp = disp - ds
    dist = np.linalg.norm(disp, axis=1)
    present = np.zeros(len(xh), bool)
    present[mapping[mapping >= 0]] = True
    m = mapping >= 0
    sub = np.flatnonzero(m & (zh[np.where(m, mapping, 0)] != zd))
    return SiteMatch(mapping=mapping, shift=s, shift_fractional=fractional(hc, s)[0], displacements=disp,
                     distances=dist, missing=np.flatnonzero(~present), substituted=sub,
                     unmatched=np.flatnonzero(~m), alternative_shifts=alt)
