"""Supercell sp3 tight-binding engine used only to *generate* the demo data (model data, not DFT).

Deliberately independent of :mod:`orbtool.tb`, so the library can be tested against it.

Model
-----
* Basis: one s and three p orbitals per atom, order ``s, px, py, pz`` inside the
  generator (the writers re-order to the plane-wave convention ``s, py, pz, px``).
* On-site energies: term values of Harrison's 1980 Solid State Table
  (W. A. Harrison, *Electronic Structure and the Properties of Solids*, 1980).
* Two-centre hoppings V_ll'm = eta_ll'm hbar^2 / (m d^2) with Harrison's *revised*
  coefficients (W. A. Harrison, *Elementary Electronic Structure*, 1999): ssσ -1.32,
  spσ +1.42, ppσ +2.22, ppπ -0.63.  With the 1979/1980 set (S. Froyen & W. A.
  Harrison, Phys. Rev. B 20, 2420 (1979)) the rocksalt IV-VI hosts come out gapless
  (the cation-s/anion-p antibonding state at L rises above the non-bonding cation p
  level), so the demo uses the revised set; both are available here.
* Pairs: nearest neighbours (cation-anion) with the full Harrison value; second
  neighbours (same species, cation-cation and anion-anion) with the same law times
  ``second_scale`` (0.3 in the demo: a model choice, not a published value); nothing
  beyond ``cutoff`` (placed between the second and third shells).
* Angular dependence after J. C. Slater & G. F. Koster, Phys. Rev. 94, 1498 (1954),
  Table I.  (l, m, n) are the direction cosines of the vector from the atom of the
  *left* orbital to the atom of the *right* orbital: E_s,x = l V_spσ, E_x,s = -l V_spσ,
  E_x,x = l^2 V_ppσ + (1 - l^2) V_ppπ, E_x,y = l m (V_ppσ - V_ppπ).
* Bloch sums in the lattice gauge: H_ia,jb(k) = sum_S E_ab(d_ijS) exp(2πi k·S), with
  S the integer cell shift of the bond and k in reduced coordinates.  At time-reversal
  invariant k (2k integer) H(k) is real and is diagonalised as a real symmetric matrix.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from ase.neighborlist import neighbor_list

__all__ = ["HBAR2_OVER_M", "ETA_1980", "ETA_1999", "TERM_VALUES_1980", "ORBITALS", "Bonds",
           "harrison_couplings", "sk_blocks", "find_bonds", "onsite_vector", "hamiltonians", "solve"]

#: hbar^2 / m_e in eV Å^2 (CODATA, as in scipy.constants / ase.units).
HBAR2_OVER_M = 7.619964

#: Harrison's 1979/1980 universal coefficients (dimensionless).
ETA_1980 = {"ss_sigma": -1.40, "sp_sigma": 1.84, "pp_sigma": 3.24, "pp_pi": -0.81}

#: Harrison's revised coefficients (1999), used by the demo.
ETA_1999 = {"ss_sigma": -1.32, "sp_sigma": 1.42, "pp_sigma": 2.22, "pp_pi": -0.63}

#: Term values (eps_s, eps_p) in eV from Harrison's 1980 Solid State Table.
TERM_VALUES_1980 = {
    "S": (-20.80, -10.27),
    "Se": (-20.32, -9.53),
    "Ge": (-14.38, -6.36),
    "Sn": (-12.50, -5.94),
    "Pb": (-12.07, -5.77),
    "Zn": (-8.40, -3.38),
}

#: Orbital order inside the generator.
ORBITALS = ("s", "px", "py", "pz")


def harrison_couplings(d, eta: dict = ETA_1999) -> dict:
    """Two-centre integrals V_ll'm (eV) at distances ``d`` (Å): eta hbar^2/(m d^2) (Harrison 1980)."""
    scale = HBAR2_OVER_M / np.asarray(d, float) ** 2
    return {k: v * scale for k, v in eta.items()}


def sk_blocks(vectors, eta: dict = ETA_1999) -> np.ndarray:
    """Slater–Koster 4x4 blocks ``B[b, a, c] = <a on i|H|c on j>`` (eV), orbitals ``s, px, py, pz``.

    Parameters
    ----------
    vectors : array_like (nb, 3)
        Bond vectors r_j - r_i (Å), from the atom of the left orbital to the atom of the right one.
    eta : dict
        Harrison coefficients ``ss_sigma, sp_sigma, pp_sigma, pp_pi``.

    Notes
    -----
    Slater & Koster, Phys. Rev. 94, 1498 (1954), Table I; Harrison d^-2 scaling.
    """
    v = np.atleast_2d(np.asarray(vectors, float))
    d = np.linalg.norm(v, axis=1)
    c = v / d[:, None]
    V = harrison_couplings(d, eta)
    B = np.empty((len(d), 4, 4))
    B[:, 0, 0] = V["ss_sigma"]
    B[:, 0, 1:] = c * V["sp_sigma"][:, None]           # E_s,x = +l V_spσ
    B[:, 1:, 0] = -c * V["sp_sigma"][:, None]          # E_x,s = -l V_spσ
    B[:, 1:, 1:] = (c[:, :, None] * c[:, None, :] * (V["pp_sigma"] - V["pp_pi"])[:, None, None]
                    + np.eye(3)[None] * V["pp_pi"][:, None, None])
    return B


@dataclass(frozen=True)
class Bonds:
    """Pairs of a periodic cell, both directions present.

    Attributes
    ----------
    i, j : ndarray (nb,) int
        Atom indices (pair from i to j).
    shifts : ndarray (nb, 3) int
        Cell shift S: r_j + S·cell - r_i is the pair vector.
    vectors : ndarray (nb, 3)
        Pair vectors, Å.
    scale : ndarray (nb,)
        Multiplier of the Harrison value (1 for first neighbours, ``second_scale`` otherwise).
    """

    i: np.ndarray
    j: np.ndarray
    shifts: np.ndarray
    vectors: np.ndarray
    scale: np.ndarray

    @property
    def lengths(self) -> np.ndarray:
        return np.linalg.norm(self.vectors, axis=1)

    @property
    def first(self) -> np.ndarray:
        """Mask of first-neighbour (cation–anion) pairs."""
        return self.scale == 1.0


def find_bonds(atoms, cutoff: float, cations, second_scale: float = 0.3) -> Bonds:
    """All pairs closer than ``cutoff`` (Å) via ASE's neighbour list.

    Cation–anion pairs get the Harrison value, same-species pairs ``second_scale`` times it.
    """
    i, j, D, S = neighbor_list("ijDS", atoms, cutoff)
    sym = np.array(atoms.get_chemical_symbols())
    is_cat = np.isin(sym, list(cations))
    scale = np.where(is_cat[i] != is_cat[j], 1.0, float(second_scale))
    return Bonds(i, j, S, D, scale)


def onsite_vector(symbols, terms: dict = TERM_VALUES_1980, shifts=None) -> np.ndarray:
    """Diagonal of H (eV), orbitals ``s, px, py, pz`` of every atom; ``shifts`` (natom,) eV added."""
    eps = np.array([[terms[s][0], terms[s][1], terms[s][1], terms[s][1]] for s in symbols], float)
    if shifts is not None:
        eps = eps + np.asarray(shifts, float)[:, None]
    return eps.ravel()


def hamiltonians(atoms, bonds: Bonds, kpoints, eta: dict = ETA_1999, terms: dict = TERM_VALUES_1980,
                 onsite_shifts=None) -> np.ndarray:
    """Bloch Hamiltonians for many k at once.

    Parameters
    ----------
    atoms : ase.Atoms
    bonds : Bonds
    kpoints : array_like (nk, 3)
        Reduced coordinates (units of the reciprocal vectors of ``atoms.cell``).
    onsite_shifts : array_like (natom,), optional
        Extra on-site energy of every orbital of an atom (eV).

    Returns
    -------
    ndarray (nk, 4N, 4N)
        Real when every k is time-reversal invariant (2k integer), complex otherwise.
    """
    n = len(atoms)
    N = 4 * n
    kf = np.atleast_2d(np.asarray(kpoints, float))
    B = sk_blocks(bonds.vectors, eta) * bonds.scale[:, None, None]          # (nb, 4, 4)
    rows = (4 * bonds.i)[:, None, None] + np.arange(4)[None, :, None]
    cols = (4 * bonds.j)[:, None, None] + np.arange(4)[None, None, :]
    flat = np.broadcast_to(rows * N + cols, B.shape).ravel()
    phase = np.exp(2j * np.pi * kf @ bonds.shifts.T)                          # (nk, nb)
    real = bool(np.all(np.abs(2 * kf - np.round(2 * kf)) < 1e-12))
    H = np.empty((len(kf), N, N), float if real else complex)
    for ik in range(len(kf)):                                                  # few k: loop is fine
        vals = (phase[ik][:, None, None] * B).ravel()
        h = np.bincount(flat, weights=vals.real, minlength=N * N)
        if not real:
            h = h + 1j * np.bincount(flat, weights=vals.imag, minlength=N * N)
        H[ik] = h.reshape(N, N)
    H[:, np.arange(N), np.arange(N)] += onsite_vector(atoms.get_chemical_symbols(), terms, onsite_shifts)
    return H


def solve(H: np.ndarray):
    """Batched eigen-decomposition (ascending eigenvalues per k, eV; eigenvectors in columns)."""
    return np.linalg.eigh(H)
