"""Band edges of the host from the same Slater–Koster parameters as the vacancy cluster.

A cation swap or a strain moves the host's valence-band maximum as well as the defect level, and the
user reads the level against the edges. :class:`HostBands` builds the nearest-neighbour sp
tight-binding Hamiltonian of the pristine host (every atom, orbitals s, px, py, pz; the on-site
energies, distance law, ``coupling_scale``, exponent and per-element shifts of the cluster model),
in the spirit of the nearest-neighbour sp³ band models of P. Vogl, H. P. Hjalmarson & J. D. Dow,
J. Phys. Chem. Solids 44, 365 (1983) (here without their s* orbital and with Harrison's universal
couplings instead of their fitted ones), and diagonalises it at Γ of the given cell. With the DFT
supercell as the cell, its Γ point holds exactly the k-points the DFT supercell samples, so the model
VBM is the counterpart of the supercell VBM the levels are referred to.

The VBM is the highest of the N_occ = (Σ valence electrons − charge)/2 lowest levels (group
valence counting of the pristine, closed-shell host; common practice). Convention as in
:mod:`orbtool.tb.cluster`: H_ij block from the direction cosines of r_j − r_i (minimum image),
Slater & Koster, Phys. Rev. 94, 1498 (1954), Table I.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np

from ..errors import ModelError
from .elements import valence_electrons
from .slater_koster import sk_block

__all__ = ["HostBands"]

_CHANNELS = ("ss_sigma", "sp_sigma", "pp_sigma", "pp_pi")


@dataclass(frozen=True, eq=False)
class HostBands:
    """Γ-point sp band edges of a host cell on the cluster model's energy scale.

    Attributes
    ----------
    symbols : tuple[str]  element of every host atom (after any swap).
    vectors : ndarray (npair, 3)  bond vectors r_j − r_i (Å) of the nearest-neighbour pairs (i, j), i ≠ j,
        both directions.
    i, j : ndarray (npair,)  atom indices of the pairs.
    onsite : dict element -> (ε_s, ε_p, ...) eV.
    law : DistanceLaw  the cluster model's.
    n_occupied : int  doubly occupied levels.
    """

    symbols: tuple
    vectors: np.ndarray
    i: np.ndarray
    j: np.ndarray
    onsite: dict
    law: object
    n_occupied: int
    as_element: dict = field(default_factory=dict)
    _memo: dict = field(default_factory=dict, repr=False)

    @classmethod
    def of(cls, host, onsite: dict, law, *, extra_onsite=None, cutoff: float = 1.25, charge: int = 0):
        """Host bands for ``host`` (ase.Atoms); bonds shorter than ``cutoff`` × the shortest one."""
        from ase.neighborlist import neighbor_list

        if host is None or len(host) < 2:
            raise ModelError("band edges from the model need the pristine host structure (site.host)")
        d_all = host.get_all_distances(mic=True)
        np.fill_diagonal(d_all, np.inf)
        d1 = float(d_all.min())
        i, j, D = neighbor_list("ijD", host, cutoff * d1)
        table = dict(onsite)
        from .elements import term_values

        for el in set(host.get_chemical_symbols()) - set(table):
            if extra_onsite and el in extra_onsite:
                table[el] = tuple(extra_onsite[el])
            else:
                tv = term_values(el, "lda-sr" if "source" not in (extra_onsite or {}) else extra_onsite["source"])
                table[el] = (tv.s, np.nan if tv.p is None else tv.p, np.nan)
        ne = sum(valence_electrons(s) for s in host.get_chemical_symbols()) - charge
        if ne % 2:
            raise ModelError(f"the host holds an odd number of valence electrons ({ne}): no closed-shell VBM")
        return cls(tuple(host.get_chemical_symbols()), D, i, j, table, law, ne // 2)

    def swapped(self, swap: dict, scale: float = 1.0, onsite: dict | None = None) -> "HostBands":
        """The same host with elements replaced (``swap`` old -> new; the on-site energies of ``onsite`` are
        keyed by the old names, as in the cluster, so fitted shifts stay attached) and every bond scaled
        by ``scale`` (a host of another lattice constant)."""
        table = dict(self.onsite)
        table.update(onsite or {})
        return replace(self, vectors=self.vectors * float(scale), onsite=table, as_element={**self.as_element, **swap},
                       _memo={})

    def levels(self, coupling_scale, n, shifts: dict) -> np.ndarray:
        """(B, 4·natom) eigenvalues (eV) for batches of ``coupling_scale`` and ``n`` (or q) and per-element
        ``shifts`` {element: (B,) eV} (elements without a shift: 0)."""
        cs = np.atleast_1d(np.asarray(coupling_scale, dtype=float))
        nn = np.atleast_1d(np.asarray(n, dtype=float))
        B = max(cs.size, nn.size, *(np.atleast_1d(v).size for v in shifts.values())) if shifts else max(cs.size,
                                                                                                         nn.size)
        natom = len(self.symbols)
        d = np.linalg.norm(self.vectors, axis=1)
        cos = self.vectors / d[:, None]
        base = sk_block(cos, self._prefactors(d), 1, 1, V_reverse=self._prefactors(d, reverse=True))
        uniq, inv = np.unique(np.broadcast_to(nn, (B,)), return_inverse=True)
        H = np.zeros((B, natom, 4, natom, 4))
        for k, x in enumerate(uniq):
            g = self.law.radial(d, q=x) if self.law.kind == "exp" else self.law.radial(d, n=x)
            Hk = np.zeros((natom, 4, natom, 4))
            np.add.at(Hk, (self.i, slice(None), self.j, slice(None)), base * g[:, None, None])
            H[inv == k] = Hk
        H = H * np.broadcast_to(cs, (B,))[:, None, None, None, None]
        H = H.reshape(B, 4 * natom, 4 * natom)
        H = 0.5 * (H + np.swapaxes(H, 1, 2))
        eps = np.array([[self.onsite[s][0]] + [self.onsite[s][1]] * 3 for s in self.symbols]).reshape(-1)
        diag = np.broadcast_to(eps, (B, eps.size)).copy()
        for el, v in shifts.items():
            mask = np.repeat(np.array([s == el for s in self.symbols]), 4)
            diag[:, mask] += np.broadcast_to(np.asarray(v, dtype=float), (B,))[:, None]
        k = np.arange(4 * natom)
        H[:, k, k] += diag
        return np.linalg.eigvalsh(H)

    def _prefactors(self, d, reverse=False) -> dict:
        """Per-bond channel values at d0 (eV): Harrison's universal ones, or Wolfsberg–Helmholz ones
        (law "overlap") per element pair at the bond's length, scaled by (d/d0)^n like the cluster's."""
        if self.law.kind != "overlap":
            return {ch: np.full(len(d), self.law.prefactor(ch)) for ch in _CHANNELS}
        from .overlaps import wolfsberg_helmholz

        out = {ch: np.empty(len(d)) for ch in _CHANNELS}
        memo = {}
        for k, (a, b, dk) in enumerate(zip(self.i, self.j, d)):
            key = (self.symbols[a], self.symbols[b], round(float(dk), 5))
            if key not in memo:
                ea, eb = (self.as_element.get(s, s) for s in key[:2])
                fwd, rev = wolfsberg_helmholz(ea, eb, key[2], self.onsite[key[0]], self.onsite[key[1]])
                memo[key] = rev if reverse else fwd
            for ch in _CHANNELS:
                out[ch][k] = memo[key][ch] * (dk / self.law.d0) ** self.law.n
        return out

    def edges(self, coupling_scale, n, shifts: dict) -> tuple:
        """(VBM, CBM) arrays (B,) in eV on the model scale."""
        names = sorted(shifts)
        cols = [coupling_scale, n] + [shifts[k] for k in names]
        B = max(np.asarray(c).size for c in cols)
        X = np.stack([np.broadcast_to(np.asarray(c, dtype=float).reshape(-1), (B,)) for c in cols], axis=1)
        out = np.empty((B, 2))
        todo = [b for b in range(B) if tuple(X[b]) not in self._memo]
        if todo:  # the edges depend on few parameters: evaluate each distinct set once
            T = X[todo]
            E = self.levels(T[:, 0], T[:, 1], {k: T[:, 2 + i] for i, k in enumerate(names)})
            if len(self._memo) > 256:
                self._memo.clear()
            for b, e in zip(todo, E):
                self._memo[tuple(X[b])] = (e[self.n_occupied - 1], e[self.n_occupied])
        for b in range(B):
            out[b] = self._memo[tuple(X[b])]
        return out[:, 0], out[:, 1]


def model_vbm(model, params: dict, bands=None):
    """The host VBM (B,) of ``model`` (eV) for a parameter dict of the cluster (``coupling_scale``,
    ``n`` or ``q``, ``shift_<element>``), or 0 when the model refers levels to a constant VBM."""
    bands = model.host_bands if bands is None else bands
    if bands is None:
        return 0.0
    x = params["q"] if model.law.kind == "exp" else params["n"]
    shifts = {el: params[f"shift_{el}"] for el in model.species if f"shift_{el}" in params}
    return bands.edges(params["coupling_scale"], x, shifts)[0]
