"""Two-centre (Slater–Koster) hopping blocks for s, p and d orbitals.

The energy integrals are the closed forms of J. C. Slater & G. F. Koster, Phys. Rev. 94, 1498 (1954),
Table I, evaluated for many bonds at once.

Conventions (orbtool-wide)
--------------------------
* Orbital order on an atom: ``s; px, py, pz; dxy, dyz, dzx, dx2-y2, d3z2-r2`` (index 0..8).
* A block ``E[b, mu, nu] = <mu on atom A | H | nu on atom B>`` for bond ``b`` whose direction cosines
  ``(l, m, n)`` are those of the vector **from atom A (left orbital) to atom B (right orbital)**.
* ``V`` values are named ``"ss_sigma", "sp_sigma", "sd_sigma", "pp_sigma", "pp_pi", "pd_sigma",
  "pd_pi", "dd_sigma", "dd_pi", "dd_delta"``; for mixed pairs the lower-l orbital sits on the left atom
  (``sp_sigma`` = s on A, p on B). Physical signs: ssσ < 0, spσ > 0, ppσ > 0, ppπ < 0.
* Blocks with the higher-l orbital on the left come from parity, E_{νμ}(R) = E_{μν}(−R) =
  (−1)^{l_μ+l_ν} E_{μν}(R) with the integrals of the reversed pair; e.g. E_{x,s} = −l V_spσ.
  Eigenvalues alone cannot detect a wrong s–p sign (flipping every p orbital leaves them unchanged),
  so orbtool's tests check these matrix elements directly.
"""

from __future__ import annotations

import numpy as np

__all__ = ["ORBITAL_NAMES", "CHANNELS", "orbital_slice", "n_orbitals", "sk_block", "direction_cosines"]

ORBITAL_NAMES = ("s", "px", "py", "pz", "dxy", "dyz", "dzx", "dx2-y2", "d3z2-r2")
#: Every two-centre integral name, in a fixed order (used for channel arrays).
CHANNELS = ("ss_sigma", "sp_sigma", "sd_sigma", "pp_sigma", "pp_pi", "pd_sigma", "pd_pi",
            "dd_sigma", "dd_pi", "dd_delta")
_SHELLS = {"s": (0,), "p": (0, 1), "d": (0, 1, 2)}
_L_SLICE = {0: slice(0, 1), 1: slice(1, 4), 2: slice(4, 9)}
_S3 = np.sqrt(3.0)


def n_orbitals(lmax: int) -> int:
    """Number of orbitals per atom for an s (0), sp (1) or spd (2) basis."""
    return (lmax + 1) ** 2


def orbital_slice(l: int) -> slice:
    """Index range of the shell with angular momentum ``l`` in orbtool's orbital order."""
    return _L_SLICE[l]


def direction_cosines(vectors) -> tuple[np.ndarray, np.ndarray]:
    """Unit vectors and lengths of bond vectors.

    Parameters
    ----------
    vectors : array_like, shape (..., 3)
        Bond vectors (Å) from the left atom to the right atom.

    Returns
    -------
    cosines : ndarray (..., 3)
        Direction cosines (l, m, n).
    lengths : ndarray (...)
        Bond lengths (Å).
    """
    v = np.asarray(vectors, dtype=float)
    d = np.linalg.norm(v, axis=-1)
    with np.errstate(invalid="ignore", divide="ignore"):
        c = v / d[..., None]
    return c, d


def _ss(V):
    return V["ss_sigma"][:, None, None]


def _sp(c, V):
    return (c * V["sp_sigma"][:, None])[:, None, :]


def _sd(c, V):
    l, m, n = c.T
    v = V["sd_sigma"]
    out = np.stack([_S3 * l * m, _S3 * m * n, _S3 * n * l, 0.5 * _S3 * (l * l - m * m),
                    n * n - 0.5 * (l * l + m * m)], axis=-1) * v[:, None]
    return out[:, None, :]


def _pp(c, V):
    s, p = V["pp_sigma"], V["pp_pi"]
    outer = c[:, :, None] * c[:, None, :]
    return outer * (s - p)[:, None, None] + np.eye(3)[None] * p[:, None, None]


def _pd(c, V):
    l, m, n = c.T
    s, p = V["pd_sigma"], V["pd_pi"]
    q = n * n - 0.5 * (l * l + m * m)
    lm2 = l * l - m * m
    B = np.empty((len(l), 3, 5))
    # rows x, y, z; columns xy, yz, zx, x2-y2, 3z2-r2 (Slater & Koster Table I and cyclic permutations)
    B[:, 0, 0] = _S3 * l * l * m * s + m * (1 - 2 * l * l) * p
    B[:, 0, 1] = _S3 * l * m * n * s - 2 * l * m * n * p
    B[:, 0, 2] = _S3 * l * l * n * s + n * (1 - 2 * l * l) * p
    B[:, 1, 0] = _S3 * m * m * l * s + l * (1 - 2 * m * m) * p
    B[:, 1, 1] = _S3 * m * m * n * s + n * (1 - 2 * m * m) * p
    B[:, 1, 2] = _S3 * l * m * n * s - 2 * l * m * n * p
    B[:, 2, 0] = _S3 * l * m * n * s - 2 * l * m * n * p
    B[:, 2, 1] = _S3 * n * n * m * s + m * (1 - 2 * n * n) * p
    B[:, 2, 2] = _S3 * n * n * l * s + l * (1 - 2 * n * n) * p
    B[:, 0, 3] = 0.5 * _S3 * l * lm2 * s + l * (1 - lm2) * p
    B[:, 1, 3] = 0.5 * _S3 * m * lm2 * s - m * (1 + lm2) * p
    B[:, 2, 3] = 0.5 * _S3 * n * lm2 * s - n * lm2 * p
    B[:, 0, 4] = l * q * s - _S3 * l * n * n * p
    B[:, 1, 4] = m * q * s - _S3 * m * n * n * p
    B[:, 2, 4] = n * q * s + _S3 * n * (l * l + m * m) * p
    return B


def _dd(c, V):
    l, m, n = c.T
    s, p, d = V["dd_sigma"], V["dd_pi"], V["dd_delta"]
    l2, m2, n2 = l * l, m * m, n * n
    lm2 = l2 - m2
    q = n2 - 0.5 * (l2 + m2)
    B = np.empty((len(l), 5, 5))

    def t2g(a, b, c_, a2, b2, c2):  # (xy,xy), (xy,yz), (xy,zx) pattern for axes (a,b,c)
        diag = 3 * a2 * b2 * s + (a2 + b2 - 4 * a2 * b2) * p + (c2 + a2 * b2) * d
        ab_bc = 3 * a * b2 * c_ * s + a * c_ * (1 - 4 * b2) * p + a * c_ * (b2 - 1) * d
        ab_ca = 3 * a2 * b * c_ * s + b * c_ * (1 - 4 * a2) * p + b * c_ * (a2 - 1) * d
        return diag, ab_bc, ab_ca

    # indices: 0 xy, 1 yz, 2 zx
    B[:, 0, 0], B[:, 0, 1], B[:, 0, 2] = t2g(l, m, n, l2, m2, n2)
    B[:, 1, 1], B[:, 1, 2], B[:, 1, 0] = t2g(m, n, l, m2, n2, l2)
    B[:, 2, 2], B[:, 2, 0], B[:, 2, 1] = t2g(n, l, m, n2, l2, m2)
    B[:, 0, 3] = 1.5 * l * m * lm2 * s + 2 * l * m * (m2 - l2) * p + 0.5 * l * m * lm2 * d
    B[:, 1, 3] = 1.5 * m * n * lm2 * s - m * n * (1 + 2 * lm2) * p + m * n * (1 + 0.5 * lm2) * d
    B[:, 2, 3] = 1.5 * n * l * lm2 * s + n * l * (1 - 2 * lm2) * p - n * l * (1 - 0.5 * lm2) * d
    B[:, 0, 4] = _S3 * l * m * q * s - 2 * _S3 * l * m * n2 * p + 0.5 * _S3 * l * m * (1 + n2) * d
    B[:, 1, 4] = _S3 * m * n * q * s + _S3 * m * n * (l2 + m2 - n2) * p - 0.5 * _S3 * m * n * (l2 + m2) * d
    B[:, 2, 4] = _S3 * l * n * q * s + _S3 * l * n * (l2 + m2 - n2) * p - 0.5 * _S3 * l * n * (l2 + m2) * d
    B[:, 3, 3] = 0.75 * lm2 ** 2 * s + (l2 + m2 - lm2 ** 2) * p + (n2 + 0.25 * lm2 ** 2) * d
    B[:, 3, 4] = 0.5 * _S3 * lm2 * q * s + _S3 * n2 * (m2 - l2) * p + 0.25 * _S3 * (1 + n2) * lm2 * d
    B[:, 4, 4] = q * q * s + 3 * n2 * (l2 + m2) * p + 0.75 * (l2 + m2) ** 2 * d
    # the d-d block is symmetric in (mu, nu): E_{nu mu}(R) = E_{mu nu}(-R) = E_{mu nu}(R) for even l+l'
    iu = np.triu_indices(5, 1)
    B[:, iu[1], iu[0]] = B[:, iu[0], iu[1]]
    return B


def _get(V, name, nb):
    v = V.get(name)
    if v is None:
        return np.zeros(nb)
    return np.broadcast_to(np.asarray(v, dtype=float), (nb,))


def sk_block(cosines, V, lmax_left: int = 1, lmax_right: int | None = None, V_reverse=None) -> np.ndarray:
    """Hopping blocks between the orbitals of atom A (left) and atom B (right) for many bonds.

    Parameters
    ----------
    cosines : array_like (nbond, 3)
        Direction cosines of the vectors from A to B.
    V : mapping str -> array_like (nbond,) or float
        Two-centre integrals (eV) with the lower-l orbital on A (names in :data:`CHANNELS`).
        Missing names count as zero.
    lmax_left, lmax_right : int
        Highest angular momentum on A and on B (0 = s, 1 = sp, 2 = spd).
    V_reverse : mapping, optional
        Integrals for the pairs whose lower-l orbital sits on B (e.g. ``sp_sigma`` of s on B with
        p on A). Defaults to ``V`` (same integrals both ways, as in Harrison's universal scheme).

    Returns
    -------
    ndarray (nbond, (lmax_left+1)**2, (lmax_right+1)**2)
        ``E[b, mu, nu] = <mu_A | H | nu_B>`` in eV, Slater & Koster (1954) Table I.
    """
    c = np.atleast_2d(np.asarray(cosines, dtype=float))
    nb = len(c)
    lmax_right = lmax_left if lmax_right is None else lmax_right
    Vf = {k: _get(V, k, nb) for k in CHANNELS}
    Vr = Vf if V_reverse is None else {k: _get(V_reverse, k, nb) for k in CHANNELS}
    out = np.zeros((nb, n_orbitals(lmax_left), n_orbitals(lmax_right)))
    blocks = {(0, 0): lambda v: _ss(v), (0, 1): lambda v: _sp(c, v), (0, 2): lambda v: _sd(c, v),
              (1, 1): lambda v: _pp(c, v), (1, 2): lambda v: _pd(c, v), (2, 2): lambda v: _dd(c, v)}
    for la in range(lmax_left + 1):
        for lb in range(lmax_right + 1):
            if la <= lb:
                blk = blocks[(la, lb)](Vf)
            else:  # higher l on the left: transpose of the (lb, la) block of the reversed pair, times parity
                blk = (-1) ** (la + lb) * np.swapaxes(blocks[(lb, la)](Vr), 1, 2)
            out[:, _L_SLICE[la], _L_SLICE[lb]] = blk
    return out
