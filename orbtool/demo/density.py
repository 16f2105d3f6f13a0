"""Real-space density of a tight-binding state from Slater-type orbitals (demo data only).

psi(r) = sum_atoms sum_orbitals c_ia phi_ia(r - R_a), with phi = N r^(n*-1) exp(-zeta r) Y(r),
real s and p angular parts, exponents from Slater's rules (J. C. Slater, Phys. Rev. 36, 57
(1930)): zeta = Z_eff / n*.  The tight-binding basis is orthogonal while the Slater orbitals on
neighbouring atoms overlap, so the sampled density is rescaled to the exact electron count
(2 per band, both spins); the raw integral is returned so it can be reported.
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["SLATER", "BOHR", "slater_exponent", "state_density"]

BOHR = 0.529177210903  # Å (CODATA)

#: (n*, Z_eff) for the valence ns/np shell by Slater's rules.
#: S: 16 - (5*0.35 + 8*0.85 + 2) = 5.45, n* = 3; Ge: 32 - (3*0.35 + 18*0.85 + 10) = 5.65, n* = 3.7;
#: Sn: 50 - (3*0.35 + 18*0.85 + 28) = 5.65, n* = 4.0.
SLATER = {"S": (3.0, 5.45), "Ge": (3.7, 5.65), "Sn": (4.0, 5.65)}


def slater_exponent(symbol: str) -> tuple[float, float]:
    """(n*, zeta in 1/Å) of the valence s/p Slater orbital of ``symbol``."""
    n, z = SLATER[symbol]
    return n, z / n / BOHR


def _radial(r, n, zeta):
    norm = math.sqrt((2 * zeta) ** (2 * n + 1) / math.gamma(2 * n + 1))
    return norm * r ** (n - 1) * np.exp(-zeta * r)


def state_density(atoms, coeffs, shape, min_weight: float = 1e-6, chunk: int = 8):
    """Density (electrons/Å^3) of one or more real orbitals sampled on a periodic grid.

    Parameters
    ----------
    atoms : ase.Atoms
        Cell and atoms (Å).
    coeffs : ndarray (natom, 4, nstate)
        Real coefficients on ``s, px, py, pz`` of every atom (Γ-point eigenvectors).
    shape : tuple of 3 int
        Grid points along the three cell vectors (grid point (i,j,k) at (i/n1, j/n2, k/n3)).
    min_weight : float
        Atoms whose summed weight over the states is below this are skipped.

    Returns
    -------
    density : ndarray ``shape``
        2 * sum_states |psi|^2 rescaled so that it integrates to 2 * nstate electrons.
    raw : float
        The integral before rescaling (electrons).

    Notes
    -----
    Each atom contributes at its minimum image to every grid point, which is exact while the
    orbitals have decayed at half the cell length.
    """
    cell = atoms.cell.array
    axes = [np.arange(n) / n for n in shape]
    frac = np.stack(np.meshgrid(*axes, indexing="ij"), axis=-1).reshape(-1, 3)
    coeffs = np.asarray(coeffs, float)
    nstate = coeffs.shape[2]
    keep = np.flatnonzero(np.sum(coeffs ** 2, axis=(1, 2)) > min_weight)
    psi = np.zeros((len(frac), nstate))
    sym = atoms.get_chemical_symbols()
    spos = atoms.get_scaled_positions()
    for start in range(0, len(keep), chunk):            # chunks of atoms, vectorised over the grid
        idx = keep[start:start + chunk]
        df = frac[None, :, :] - spos[idx][:, None, :]
        df -= np.round(df)
        d = df @ cell                                      # (m, G, 3) Å
        r = np.linalg.norm(d, axis=2)
        rs = np.where(r > 1e-12, r, 1e-12)
        for a_pos, a in enumerate(idx):
            n, zeta = slater_exponent(sym[a])
            rad = _radial(r[a_pos], n, zeta)
            ang = np.concatenate([np.full((len(frac), 1), 1 / math.sqrt(4 * math.pi)),
                                  math.sqrt(3 / (4 * math.pi)) * d[a_pos] / rs[a_pos][:, None]], axis=1)
            psi += (rad[:, None] * ang) @ coeffs[a]       # (G, 4) @ (4, nstate)
    rho = 2.0 * np.sum(psi ** 2, axis=1)
    dv = atoms.get_volume() / len(frac)
    raw = float(rho.sum() * dv)
    rho *= 2.0 * nstate / raw
    return rho.reshape(shape), raw
