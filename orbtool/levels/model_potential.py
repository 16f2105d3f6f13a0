"""Electrostatic potential of periodic point charges in a dielectric (Ewald form).

The potential at ``r`` of charges ``q_j`` at ``r_j`` repeated on the lattice,
with a neutralising background and zero cell average, screened by the
dielectric tensor ``ε``, is

.. math::

   \\phi(\\mathbf r) = \\sum_j q_j \\Big[ \\sum_{\\mathbf R}
        \\frac{\\operatorname{erfc}(\\eta d)}{\\sqrt{\\det\\varepsilon}\\, d}
      + \\frac{4\\pi}{V}\\sum_{\\mathbf G\\neq0}
        \\frac{e^{-\\mathbf G\\cdot\\varepsilon\\mathbf G/4\\eta^2}}{\\mathbf G\\cdot\\varepsilon\\mathbf G}
        \\cos\\mathbf G\\cdot(\\mathbf r-\\mathbf r_j) - \\frac{\\pi}{V\\eta^2}\\Big]

(times e/(4πε₀) = 14.3996 V·Å), ``d = sqrt((r − r_j + R)·ε⁻¹·(r − r_j + R))``.
At a charge's own site its bare ``1/d`` term is left out (the Madelung site
potential), which replaces that term's erfc by ``−2η/√(π det ε)``, so that
``E = ½ Σ_i q_i φ(r_i)`` is the Ewald energy of :mod:`orbtool.levels.ewald`.
Used to subtract the model potential of the defect charge before the
potential alignment (C. Freysoldt, J. Neugebauer and C. G. Van de Walle,
Phys. Rev. Lett. 102, 016402 (2009)).
"""

from __future__ import annotations

import math

import numpy as np
from scipy.special import erfc

from .._validate import as_array, check_cell
from ..errors import ModelError
from ..grid import Grid
from ..units import COULOMB
from .ewald import _CHUNK, _cheapest_eta, _image_range, _int_ranges, dielectric_tensor

__all__ = ["ewald_potential", "point_charge_potential_grid"]


def _setup(cell, dielectric):
    eps = dielectric_tensor(dielectric)
    eps_inv = np.linalg.inv(eps)
    return eps, eps_inv, float(np.linalg.det(eps)), np.linalg.eigvalsh(eps), float(np.linalg.det(cell))


def _recip_coefficients(cell, eps, eta, x, lam):
    """Box of integer G indices and the Gaussian-screened kernel on it (0 outside the cutoff)."""
    recip = 2.0 * math.pi * np.linalg.inv(cell).T
    gcut = 2.0 * eta * x / math.sqrt(lam.min())
    mmax = np.ceil(gcut * np.linalg.norm(cell, axis=1) / (2 * math.pi)).astype(int)
    g = _int_ranges(mmax) @ recip
    k2 = np.einsum("ga,ab,gb->g", g, eps, g)
    keep = (k2 > 1e-20) & (k2 / (4 * eta ** 2) < (x + 1.0) ** 2)
    kernel = np.zeros(len(k2))
    kernel[keep] = np.exp(-k2[keep] / (4 * eta ** 2)) / k2[keep]
    return mmax, g, kernel


def ewald_potential(cell, positions, charges, points, dielectric=1.0, *, eta: float | None = None,
                    accuracy: float = 1e-13) -> np.ndarray:
    """Electrostatic potential of periodic point charges at arbitrary points, V.

    Parameters
    ----------
    cell : array_like (3, 3)
        Lattice vectors (rows), Å.
    positions : array_like (n, 3)
        Charge positions, Å.
    charges : array_like (n,)
        Charges, e.
    points : array_like (m, 3)
        Where to evaluate, Å. A point on a charge gets that charge's site
        (Madelung) potential, without its own singular term.
    dielectric : float or array_like (3, 3)
        Relative permittivity (scalar or tensor).

    Returns
    -------
    ndarray (m,)
        Potential in volts (eV per unit positive charge); cell average zero.
    """
    cell = check_cell(cell, None)
    pos = as_array(positions, "positions", ndim=2, shape=(None, 3))
    q = as_array(charges, "charges", ndim=1)
    pts = as_array(points, "points", ndim=2, shape=(None, 3))
    if len(q) != len(pos):
        raise ModelError(f"charges: got {len(q)} values for {len(pos)} positions")
    eps, eps_inv, det_eps, lam, vol = _setup(cell, dielectric)
    x = math.sqrt(-math.log(accuracy)) + 0.5
    recip = 2.0 * math.pi * np.linalg.inv(cell).T
    if eta is None:
        eta = _cheapest_eta(cell, recip, lam, max(len(q), len(pts)), x, det_eps, vol)
    chol = np.linalg.cholesky(eps_inv)
    lat = _int_ranges(_image_range(x / eta * math.sqrt(lam.max()), recip)) @ cell @ chol
    inv_cell = np.linalg.inv(cell)
    out = np.zeros(len(pts))
    dmax2 = ((x + 1.0) / eta) ** 2
    step = max(1, _CHUNK // (len(lat) * max(len(q), 1)))
    for s in range(0, len(pts), step):
        f = (pts[s:s + step, None, :] - pos[None, :, :]) @ inv_cell
        v = ((f - np.round(f)) @ cell @ chol)[:, :, None, :] + lat[None, None, :, :]  # (p, n, R, 3)
        d2 = np.einsum("pnra,pnra->pnr", v, v)
        near = (d2 > 1e-20) & (d2 < dmax2)
        d = np.sqrt(np.where(near, d2, 1.0))
        real = np.where(near, erfc(eta * d) / d, 0.0).sum(axis=2)  # (p, n)
        on_site = (d2 <= 1e-20).any(axis=2)
        real = real - np.where(on_site, 2.0 * eta / math.sqrt(math.pi), 0.0)
        out[s:s + step] = real @ q / math.sqrt(det_eps)
    _, g, kernel = _recip_coefficients(cell, eps, eta, x, lam)
    g, kernel = g[kernel > 0], kernel[kernel > 0]
    sf = q @ np.exp(1j * pos @ g.T)  # S(G)
    step = max(1, _CHUNK // max(len(g), 1))
    for s in range(0, len(pts), step):
        ph = np.exp(1j * pts[s:s + step] @ g.T)  # (p, G)
        out[s:s + step] += 4.0 * math.pi / vol * (ph * np.conj(sf)).real @ kernel
    out -= math.pi * float(q.sum()) / (vol * eta ** 2)
    return COULOMB * out


def point_charge_potential_grid(grid: Grid, center, charge: float, dielectric) -> np.ndarray:
    """Potential energy of an electron (eV) on ``grid``'s points due to a periodic point charge.

    ``−e φ`` of the charge ``charge`` (e) at ``center`` (Å) on the lattice of
    ``grid.cell``, its neutralising background and screening ``dielectric``;
    zero cell average, the same sign convention as local-potential files.
    Vectorised on the grid: the real-space part per image over separable
    axis offsets, the reciprocal part by three successive contractions of
    ``exp(2πi m_k f_k)`` along the grid axes. The value at a grid point on
    the charge is its site potential (no singular term).
    """
    cell = grid.cell
    eps, eps_inv, det_eps, lam, vol = _setup(cell, dielectric)
    x = math.sqrt(-math.log(1e-13)) + 0.5
    recip = 2.0 * math.pi * np.linalg.inv(cell).T
    widths = 2.0 * math.pi / np.linalg.norm(recip, axis=1)
    eta = x * math.sqrt(lam.max()) / (0.5 * widths.min())  # real-space reach: half the thinnest width
    c_frac = (np.asarray(center, dtype=float) - grid.origin) @ np.linalg.inv(cell)
    base = [((fi - c) + 0.5) % 1.0 - 0.5 for fi, c in zip(grid.fractional_axes(), c_frac)]
    metric = cell @ eps_inv @ cell.T
    nmax = _image_range(x / eta * math.sqrt(lam.max()), recip)
    shape = grid.shape
    real = np.zeros(shape)
    dmax2 = ((x + 1.0) / eta) ** 2
    for n in _int_ranges(nmax):
        u = [(base[k] + n[k]).reshape([-1 if i == k else 1 for i in range(3)]) for k in range(3)]
        d2 = sum(metric[k, l] * u[k] * u[l] for k in range(3) for l in range(3))
        near = (d2 > 1e-20) & (d2 < dmax2)
        d = np.sqrt(np.where(near, d2, 1.0))
        real += np.where(near, erfc(eta * d) / d, 0.0)
        real -= np.where(d2 <= 1e-20, 2.0 * eta / math.sqrt(math.pi), 0.0)
    real /= math.sqrt(det_eps)
    mmax, g, kernel = _recip_coefficients(cell, eps, eta, x, lam)
    # cos G·(r − c) = Re Π_k exp(2πi m_k (f_k − c_k)) with f_k − c_k = base_k (mod 1)
    coef = (4.0 * math.pi / vol * kernel).reshape([2 * m + 1 for m in mmax]).astype(complex)
    axes = [np.exp(2j * math.pi * np.outer(base[k], np.arange(-mmax[k], mmax[k] + 1))) for k in range(3)]
    t = np.tensordot(coef, axes[2], axes=([2], [1]))  # (a, b, k3)
    t = np.tensordot(t, axes[1], axes=([1], [1]))  # (a, k3, k2)
    t = np.tensordot(axes[0], t, axes=([1], [0]))  # (k1, k3, k2)
    recip_part = np.transpose(t, (0, 2, 1)).real
    phi = real + recip_part - math.pi / (vol * eta ** 2)
    return -COULOMB * float(charge) * phi
