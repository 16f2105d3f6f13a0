"""Fast, batched evaluation of a compiled cluster: H(θ), levels, defect level and its character.

Parameter values may be scalars or arrays of shape (B,); geometries come in a batch of G (1 or B).
Everything is vectorised: one batched ``numpy.linalg.eigh`` per call.

Degenerate multiplets are one object (the rule of :data:`DEGENERATE`): the defect level is a whole
multiplet, chosen by the multiplet's mean dangling weight; its energy is the multiplet's mean energy
and every weight is that of the sum of its projectors, so nothing depends on the basis the eigensolver
returns inside a degenerate subspace (which differs between BLAS/LAPACK kernels).
"""

from __future__ import annotations

import numpy as np

from ..errors import ModelError
from ._levels import Levels

#: eV. The one degeneracy rule of the model side: in ascending order, a level more than DEGENERATE above
#: the first level of the current multiplet starts a new one (anchored at the first member, as the symmetry
#: labels of :func:`orbtool.tb.symmetry.label_levels` group them; the labeller is passed this value).
#: 0.1 meV lies far above the eigensolver's rounding (~1e-14 eV for these matrices) and above the
#: splitting that coordinates rounded to 1e-5 Å can cause (|dt/dd| δ ≈ 2 eV/Å × 5e-6 Å ≈ 1e-5 eV), and
#: far below any energy orbtool reports (1 meV).
DEGENERATE = 1e-4
#: dangling weights of two multiplets closer than this count as equal (the lower multiplet is taken)
_TIE = 1e-9


def multiplet_bounds(E, tol: float = DEGENERATE):
    """First and last level index (inclusive) of the multiplet each level belongs to.

    Parameters
    ----------
    E : ndarray (B, m) — ascending energies, eV.
    tol : float — see :data:`DEGENERATE`.

    Returns
    -------
    first, last : int ndarrays (B, m)
    """
    E = np.asarray(E, dtype=float)
    B, m = E.shape
    k = np.arange(m)
    brk = np.ones((B, m), dtype=bool)
    brk[:, 1:] = np.diff(E, axis=1) >= tol                   # consecutive chaining
    first = np.maximum.accumulate(np.where(brk, k, 0), axis=1)
    bad = np.flatnonzero((E - np.take_along_axis(E, first, axis=1) >= tol).any(axis=1))
    for b in bad:  # a chain of close levels spans more than tol: anchor at each multiplet's first member
        start = 0
        for j in range(m):
            if E[b, j] - E[b, start] >= tol:
                start = j
            first[b, j] = start
    is_last = np.ones((B, m), dtype=bool)
    is_last[:, :-1] = first[:, 1:] != first[:, :-1]
    last = np.minimum.accumulate(np.where(is_last, k, m - 1)[:, ::-1], axis=1)[:, ::-1]
    return first, last


def multiplet_mean(X, first, last):
    """Mean of X (B, m) over each level's multiplet (every member gets the same value), shape (B, m)."""
    cs = np.concatenate([np.zeros((X.shape[0], 1)), np.cumsum(X, axis=1)], axis=1)
    tot = np.take_along_axis(cs, last + 1, axis=1) - np.take_along_axis(cs, first, axis=1)
    return tot / (last - first + 1)


def multiplet_members(energies, index: int, tol: float = DEGENERATE) -> np.ndarray:
    """Indices of the multiplet that level ``index`` of ``energies`` (m,) belongs to (by :data:`DEGENERATE`)."""
    first, last = multiplet_bounds(np.asarray(energies, dtype=float)[None], tol)
    return np.arange(first[0, index], last[0, index] + 1)


def fixed_level_index(model, m: int):
    """Rank of the defect level when it does not depend on the eigenvectors, else None.

    Integer ``level``: that rank. Hybrid model with "auto"/"homo": the level holding the last of the
    formal electrons (two per level, from the bottom). Full clusters with "auto"/"dangling": None (the
    level with the largest dangling-hybrid weight is picked per evaluation)."""
    lev = model.level
    if isinstance(lev, (int, np.integer)):
        if not -m <= lev < m:
            raise ModelError(f"level {lev} out of range: the cluster has {m} levels")
        return int(lev) % m
    if lev in ("auto", "homo") and model.orbitals == "hybrid":
        ne = model.electrons if model.electrons is not None else 0.0
        return int(np.clip(np.ceil(ne / 2.0) - 1, 0, m - 1))
    if lev in ("auto", "dangling"):
        return None
    raise ModelError(f"level must be 'auto', 'homo' (hybrid), 'dangling' or an integer, got {lev!r}")


class CompiledCluster:
    """A :class:`ClusterModel` with its geometry-dependent parts cached (see ``_compiled``)."""

    def __init__(self, model, compiled, vectors):
        self.model = model
        self.c = compiled
        self.vectors = vectors  # (G, natom, 3)
        self.G = compiled.G
        el = model.elements
        self.species = model.species
        lmax = compiled.lmax
        no = compiled.no
        ls = np.array([0, 1, 1, 1, 2, 2, 2, 2, 2])[:no]
        self.orb_l = np.tile(ls, len(el))
        self.orb_atom = np.repeat(np.arange(len(el)), no)
        self.eps0 = np.array([model.onsite[e][ll] for e in el for ll in ls], dtype=float)
        self.onehot = np.array([[e == s for e in el] for s in self.species], dtype=float)  # (nsp, natom)
        self._hoff_cache: dict = {}
        u = vectors / np.linalg.norm(vectors, axis=-1, keepdims=True)  # (G, natom, 3) site -> atom
        self.hyb_dir = -u  # hybrids point from the atom towards the site
        self.first = model.shell == 1
        if model.orbitals == "hybrid":
            self._hybrid_pieces(lmax)

    # ------------------------------------------------------------------ helpers
    def _hoff(self, x):
        key = round(float(x), 12)
        H = self._hoff_cache.get(key)
        if H is None:
            law = self.model.law
            H = self.c.offdiag(law, q=x) if law.kind == "exp" else self.c.offdiag(law, n=x)
            if len(self._hoff_cache) > 8:
                self._hoff_cache.clear()
            self._hoff_cache[key] = H
        return H

    def _hybrid_pieces(self, lmax):
        """Per-pair s–s, s–p and p–p parts of the hybrid coupling for unit radial factor."""
        A = self.c.blocks[0]  # (G, npair, 4, 4), radial class 0 only (s, p)
        i, j = self.c.pairs.T
        hi, hj = self.hyb_dir[:, i], self.hyb_dir[:, j]  # (G, npair, 3)
        self.B_ss = A[..., 0, 0]
        self.B_sp = np.einsum("gpb,gpb->gp", A[..., 0, 1:], hj) + np.einsum("gpa,gpa->gp", hi, A[..., 1:, 0])
        self.B_pp = np.einsum("gpa,gpab,gpb->gp", hi, A[..., 1:, 1:], hj)

    def _param(self, p, name, B):
        v = np.asarray(p[name], dtype=float)
        return np.broadcast_to(v.reshape(-1), (B,)) if v.size > 1 else np.full(B, float(v.reshape(-1)[0]))

    def _batch(self, p):
        sizes = {np.asarray(v).size for v in p.values()} | {self.G}
        sizes.discard(1)
        if len(sizes) > 1:
            raise ModelError(f"parameter arrays and geometries must share one batch size, got {sorted(sizes)}")
        return sizes.pop() if sizes else 1

    # ------------------------------------------------------------------ Hamiltonian
    def hamiltonian(self, p: dict) -> np.ndarray:
        """H (B, nbasis, nbasis) in eV for parameters ``p`` (scalars or (B,) arrays)."""
        B = self._batch(p)
        scale = self._param(p, "coupling_scale", B)
        xname = "q" if self.model.law.kind == "exp" else "n"
        x = self._param(p, xname, B)
        shifts = np.stack([self._param(p, f"shift_{s}", B) for s in self.species], axis=1)  # (B, nsp)
        atom_shift = shifts @ self.onehot  # (B, natom)
        if self.model.orbitals == "hybrid":
            f = np.clip(self._param(p, "s_fraction", B), 0.0, 1.0)
            return self._hybrid_h(B, scale, x, f, atom_shift)
        ux, inv = np.unique(x, return_inverse=True)
        Hoff = np.stack([self._hoff(v) for v in ux])  # (nx, G, n, n)
        g_idx = np.arange(B) % self.G if self.G > 1 else np.zeros(B, dtype=int)
        H = Hoff[inv, g_idx] * scale[:, None, None]
        diag = self.eps0[None] + atom_shift[:, self.orb_atom]
        H[:, np.arange(H.shape[1]), np.arange(H.shape[1])] += diag
        return H

    def _hybrid_h(self, B, scale, x, f, atom_shift):
        law = self.model.law
        d = self.c.pair_distance  # (G, npair)
        g = law.radial(d, q=x[:, None]) if law.kind == "exp" else law.radial(d, n=x[:, None])  # (B, npair)
        beta = scale[:, None] * g * (f[:, None] * self.B_ss + np.sqrt(f * (1 - f))[:, None] * self.B_sp
                                     + (1 - f)[:, None] * self.B_pp)
        natom = len(self.model.elements)
        eps_s = np.array([self.model.onsite[e][0] for e in self.model.elements])
        eps_p = np.array([self.model.onsite[e][1] for e in self.model.elements])
        H = np.zeros((B, natom, natom))
        i, j = self.c.pairs.T
        H[:, i, j] = beta
        H[:, j, i] = beta
        k = np.arange(natom)
        H[:, k, k] = f[:, None] * eps_s + (1 - f)[:, None] * eps_p + atom_shift
        return H

    # ------------------------------------------------------------------ levels
    def solve(self, p: dict) -> Levels:
        """Diagonalise and pick the defect level (see :class:`ClusterModel` for the rule).

        The defect level is a whole multiplet (:data:`DEGENERATE`): with a fixed rank, the multiplet holding
        that rank; otherwise the multiplet with the largest mean dangling weight (ties within 1e-9 go to the
        lower one). ``index`` is the multiplet's first (lowest) member, ``level`` its mean energy, and the
        weights are those of the sum of its projectors divided by its size."""
        H = self.hamiltonian(p)
        E, V = _eigh(H)
        B, m = E.shape
        W = V ** 2  # (B, nbasis, nlevel)
        model = self.model
        first, last = multiplet_bounds(E)
        if model.orbitals == "hybrid":
            dang = np.ones((B, m))
        else:
            dang = multiplet_mean(self._dangling(V, p, B), first, last)  # per level: its multiplet's mean
        fixed = fixed_level_index(model, m)
        if fixed is not None:
            pick = np.full(B, fixed)
        else:
            pick = np.argmax(dang >= dang.max(axis=1, keepdims=True) - _TIE, axis=1)
        rows = np.arange(B)
        idx = first[rows, pick]
        multiplet = (first == idx[:, None]).astype(float)  # (B, m)
        deg = multiplet.sum(1)
        level = (E * multiplet).sum(1) / deg
        w_orb = np.einsum("bnm,bm->bn", W, multiplet) / deg[:, None]  # (B, nbasis)
        if model.orbitals == "hybrid":
            f = np.clip(self._param(p, "s_fraction", B), 0, 1)
            s_w, p_w, d_w = f, 1 - f, np.zeros(B)
            atom_w = w_orb
        else:
            s_w = w_orb[:, self.orb_l == 0].sum(1)
            p_w = w_orb[:, self.orb_l == 1].sum(1)
            d_w = w_orb[:, self.orb_l == 2].sum(1)
            atom_w = np.zeros((B, len(model.elements)))
            np.add.at(atom_w.T, self.orb_atom, w_orb.T)
        shell1 = atom_w[:, self.first].sum(1)
        dang_w = dang[rows, idx]
        return Levels(E, V, idx, level, s_w, p_w, d_w, shell1, dang_w, atom_w, labeller=self._labeller(E, V))

    def _labeller(self, E, V):
        """Labels of batch entry b from the site's point group (multiplets as a whole; see symmetry.py)."""
        from .symmetry import class_columns, label_levels

        model = self.model

        def labels(b):
            g = b % self.G
            if not hasattr(self, "_classes"):
                try:
                    self._classes = class_columns(model.point_group, model.operations, self.vectors[0][self.first])
                except ValueError:
                    self._classes = None
            if self._classes is None:
                return ["?"] * E.shape[1]
            return label_levels(E[b], V[b], self.vectors[g], model.point_group, model.operations, self.c.lmax,
                                model.orbitals == "hybrid", tol_e=DEGENERATE,
                                classes_cols=self._classes)
        return labels

    def _dangling(self, V, p, B):
        """Weight of each level on the dangling hybrids of the first-shell atoms (s, p part)."""
        f = float(np.clip(self.model.s_fraction, 0, 1))
        no = self.c.no
        natom = len(self.model.elements)
        nfirst = int(self.first.sum())
        coef = np.zeros((self.G, natom, no))
        coef[:, :, 0] = np.sqrt(f)
        if no > 1:
            coef[:, :, 1:4] = np.sqrt(1 - f) * self.hyb_dir
        coef = coef[:, :nfirst].reshape(self.G, nfirst * no)
        Vf = V[:, : nfirst * no].reshape(B, nfirst, no, -1)
        c = coef.reshape(self.G, nfirst, no)
        c = np.broadcast_to(c, (B, nfirst, no)) if self.G == 1 else c
        proj = np.einsum("bao,baom->bam", c, Vf)
        return (proj ** 2).sum(1)


def _eigh(H):
    """Eigenvalues (ascending) and eigenvectors of the batch H; one name so that tests can stand in for
    another LAPACK kernel (a different basis inside degenerate subspaces)."""
    return np.linalg.eigh(H)
