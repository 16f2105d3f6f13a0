"""Geometry-dependent, parameter-independent pieces of a cluster Hamiltonian (internal).

A :class:`Compiled` object caches, for a batch of geometries, everything that does not change when
the fit parameters change, so that H(θ) is a few array multiplications and the cost of a slider move
is one small batched ``eigh``.

Parameter dependence (orbtool convention):
    H_ii   = ε_{l(i)}(element) + shift_element
    H_ij   = coupling_scale · Σ_k g_k(d_ij; n or q) · A_k,ij        (i, j on different atoms)
where A_k holds the Slater–Koster angular factors times the prefactors V(d0) of the channels of
radial class k (k = 0: s/p channels, exponent n; k = 1: sd/pd, exponent 1.75 n; k = 2: dd, 2.5 n —
Harrison's d^-2, d^-3.5, d^-5 when n = 2). For the exponential law every class uses the same q.
"""

from __future__ import annotations

import numpy as np

from .slater_koster import CHANNELS, n_orbitals, sk_block

RADIAL_CLASS = {c: (0 if "d" not in c.split("_")[0] else (2 if c.startswith("dd") else 1)) for c in CHANNELS}
EXPONENT_FACTOR = np.array([1.0, 1.75, 2.5])


class Compiled:
    """Cached angular factors, distances and indices for G geometries of one cluster.

    Parameters
    ----------
    vectors : ndarray (G, natom, 3)
        Site→atom vectors (Å) of the cluster atoms.
    lmax : int
        0, 1 or 2 (orbitals per atom (lmax+1)²).
    pairs : ndarray (npair, 2)
        Coupled atom pairs (i < j).
    prefactors : callable (i, j) -> (dict V_forward, dict V_reverse)
        Channel prefactors V(d0) in eV for the pair (lower-l orbital on i / on j).
    """

    def __init__(self, vectors, lmax, pairs, prefactors):
        v = np.asarray(vectors, dtype=float)
        if v.ndim == 2:
            v = v[None]
        self.G, self.natom, _ = v.shape
        self.lmax = lmax
        self.no = n_orbitals(lmax)
        self.norb = self.natom * self.no
        self.pairs = np.asarray(pairs, dtype=int).reshape(-1, 2)
        i, j = self.pairs.T
        R = v[:, j] - v[:, i]  # (G, npair, 3) from atom i (left) to atom j (right)
        d = np.linalg.norm(R, axis=-1)
        c = R / d[..., None]
        self.pair_distance = d
        npair = len(self.pairs)
        # angular x prefactor blocks per radial class: (3, G, npair, no, no)
        blocks = np.zeros((3, self.G, npair, self.no, self.no))
        pref = [prefactors(a, b) for a, b in self.pairs]
        for ch in CHANNELS:
            k = RADIAL_CLASS[ch]
            vf = np.array([p[0].get(ch, 0.0) for p in pref])
            vr = np.array([p[1].get(ch, 0.0) for p in pref])
            if not (vf.any() or vr.any()):
                continue
            one_f = {ch: np.tile(vf, self.G)}
            one_r = {ch: np.tile(vr, self.G)}
            blk = sk_block(c.reshape(-1, 3), one_f, lmax, lmax, V_reverse=one_r)
            blocks[k] += blk.reshape(self.G, npair, self.no, self.no)
        self.classes = [k for k in range(3) if np.any(blocks[k])]
        self.blocks = blocks

    def radial(self, law, n=None, q=None):
        """(3, G, npair) radial factors g_k(d) for the current n or q."""
        out = np.empty((3,) + self.pair_distance.shape)
        for k in range(3):
            if law.kind == "exp":
                out[k] = law.radial(self.pair_distance, q=q)
            else:
                nn = law.n if n is None else n
                out[k] = law.radial(self.pair_distance, n=nn * EXPONENT_FACTOR[k])
        return out

    def offdiag(self, law, n=None, q=None) -> np.ndarray:
        """Full (G, norb, norb) inter-atomic part for coupling_scale = 1."""
        return self._assemble(self.radial(law, n, q))

    def offdiag_log_derivative(self, law, n=None, q=None) -> np.ndarray:
        """∂H_off/∂n (or ∂/∂q) for coupling_scale = 1, same shape as :meth:`offdiag`."""
        g = self.radial(law, n, q) * law.log_derivative(self.pair_distance)[None]
        if law.kind != "exp":
            g = g * EXPONENT_FACTOR[:, None, None]
        return self._assemble(g)

    def _assemble(self, g) -> np.ndarray:
        """(G, norb, norb) matrix from per-channel radial factors g (k, G, npair): each pair's
        Slater–Koster block at (i, j) and its transpose at (j, i) (H is real symmetric)."""
        blk = np.einsum("kgp,kgpab->gpab", g, self.blocks)
        H = np.zeros((self.G, self.natom, self.no, self.natom, self.no))
        i, j = self.pairs.T
        H[:, i, :, j, :] = np.swapaxes(blk, 0, 1)
        H[:, j, :, i, :] = np.swapaxes(np.swapaxes(blk, 2, 3), 0, 1)
        return H.reshape(self.G, self.norb, self.norb)
