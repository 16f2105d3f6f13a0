"""Continued-fraction (recursion) coefficients of a local density of states.

The diagonal Green function of an orbital |0⟩ is the continued fraction

    G₀₀(z) = μ₀ / (z − a₀ − b₁² / (z − a₁ − b₂² / (z − a₂ − …)))

(R. Haydock, V. Heine & M. J. Kelly, J. Phys. C 5, 2845 (1972)); a_n and b_n
are the three-term recurrence coefficients of the polynomials orthogonal with
respect to the LDOS n(E). They are **not** computed from Hankel determinants
of the raw power moments, which lose all digits after a few levels. Two
stable routes are offered:

* ``"lanczos"`` — the discretised Stieltjes procedure: Lanczos on the
  diagonal matrix of quadrature nodes with starting vector √(weights), with
  full re-orthogonalisation (W. Gautschi, SIAM J. Sci. Stat. Comput. 3, 289
  (1982); W. B. Gragg & W. J. Harrod, Numer. Math. 44, 317 (1984)) [citations from memory];
* ``"chebyshev"`` — the modified Chebyshev algorithm from modified moments
  ν_l = ∫p_l(t) n dE of monic Chebyshev polynomials on the window
  (R. A. Sack & A. F. Donovan, Numer. Math. 18, 465 (1972); J. C. Wheeler,
  Rocky Mountain J. Math. 4, 287 (1974); W. Gautschi, *Orthogonal
  Polynomials: Computation and Approximation* (2004), Algorithm 2.1) [citations from memory].

The rebuilt LDOS closes the fraction with the square-root terminator of a
constant tail a_n = a∞, b_n = b∞ (Haydock, Heine & Kelly 1972).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..errors import InputFormatError
from ._records import Record

__all__ = ["Recursion", "recursion_coefficients"]


@dataclass(frozen=True, eq=False)
class Recursion(Record):
    """Continued-fraction coefficients of one LDOS.

    Attributes
    ----------
    a : ndarray (n,)
        Diagonal coefficients a₀ … a_{n−1}, eV.
    b : ndarray (n − 1,)
        Off-diagonal coefficients b₁ … b_{n−1}, eV (≥ 0).
    weight : float
        μ₀ = ∫ n(E) dE over the window, states.
    method : str
        ``"lanczos"`` or ``"chebyshev"``.
    window : tuple (emin, emax)
        Energies the LDOS was taken over, eV.
    provenance : tuple of str
    """

    a: np.ndarray
    b: np.ndarray
    weight: float
    method: str
    window: tuple
    provenance: tuple = field(default_factory=tuple)

    @property
    def levels(self) -> int:
        return int(self.a.size)

    def greens(self, z, terminator: str = "sqrt") -> np.ndarray:
        """G₀₀(z) from the continued fraction, 1/eV (×μ₀).

        Parameters
        ----------
        z : complex array
            Energies with a positive imaginary part, eV.
        terminator : {"sqrt", "none"}
            Close with the constant-tail square root (using the last a and b)
            or simply stop (a sum of poles).
        """
        z = np.asarray(z, dtype=complex)
        if terminator == "sqrt" and self.b.size:
            ai, bi = self.a[-1], self.b[-1]
            s = np.sqrt((z - ai) ** 2 - 4 * bi * bi)
            # retarded branch: Im t < 0 for Im z > 0
            s = np.where((s.imag * (z - ai).imag) < 0, -s, s)
            s = np.where(np.abs(s) == 0, 0, s)
            tail = (z - ai - s) / (2 * bi * bi)
        elif terminator in ("sqrt", "none"):
            tail = np.zeros_like(z)
        else:
            raise InputFormatError(None, None, f"terminator must be 'sqrt' or 'none', got {terminator!r}",
                                   field="terminator")
        g = tail
        b_tail = self.b[-1] ** 2 if (terminator == "sqrt" and self.b.size) else 0.0
        for n in range(self.a.size - 1, -1, -1):
            bb = self.b[n] ** 2 if n < self.b.size else b_tail      # coupling of level n to level n + 1
            denom = z - self.a[n] - bb * g
            g = 1.0 / denom
        return self.weight * g

    def ldos(self, energies, broadening: float = 0.0, terminator: str = "sqrt") -> np.ndarray:
        """LDOS rebuilt from the fraction, −Im G(E + iη)/π, states/eV.

        ``broadening`` η (eV) must be > 0 when ``terminator="none"``.
        """
        e = np.asarray(energies, dtype=float)
        eta = max(float(broadening), 1e-12)
        return -self.greens(e + 1j * eta, terminator=terminator).imag / np.pi

    def rebuild_error(self, energies, dos, broadening: float = 0.0, terminator: str = "sqrt") -> dict:
        """How well the fraction rebuilds a sampled LDOS over this window.

        Returns ``{"max": max |Δn|, "rms": rms Δn, "relative": max |Δn| / max n}``
        (states/eV except the last) on the energies inside :attr:`window`.
        """
        e = np.asarray(energies, dtype=float)
        d = np.asarray(dos, dtype=float)
        m = (e >= self.window[0]) & (e <= self.window[1])
        if m.sum() < 1 or d.shape != e.shape:
            raise InputFormatError(None, None, "energies and dos must be equal arrays overlapping the window",
                                   field="dos")
        diff = self.ldos(e[m], broadening, terminator) - d[m]
        top = float(np.abs(d[m]).max())
        return {"max": float(np.abs(diff).max()), "rms": float(np.sqrt(np.mean(diff**2))),
                "relative": float(np.abs(diff).max() / top) if top > 0 else float("nan")}

    def summary(self) -> str:
        lines = [f"Recursion coefficients ({self.method}), window {self.window[0]:.3f} … {self.window[1]:.3f} eV,"
                 f" weight {self.weight:.5g} states",
                 "   n        a_n/eV        b_n/eV"]
        for n in range(self.a.size):
            bn = f"{self.b[n - 1]:12.6f}" if n >= 1 else "           -"
            lines.append(f"  {n:2d}  {self.a[n]:12.6f}  {bn}")
        lines += [f"  note: {p}" for p in self.provenance]
        return "\n".join(lines)


def _quadrature(energies, dos, window, discrete):
    e = np.asarray(energies, dtype=float).ravel()
    d = np.asarray(dos, dtype=float).ravel()
    if e.size != d.size or e.size < 2:
        raise InputFormatError(None, None, f"energies ({e.size}) and dos ({d.size}) must be equal-length arrays "
                               "of at least 2 values", field="dos")
    if not (np.isfinite(e).all() and np.isfinite(d).all()):
        raise InputFormatError(None, None, "energies and dos must be finite", field="dos")
    if window is None:
        lo, hi = float(e.min()), float(e.max())
    else:
        lo, hi = (float(w) for w in window)
        span = (e.min(), e.max())
        tol = 1e-9 * max(1.0, abs(span[0]), abs(span[1]))
        if not hi > lo or lo < span[0] - tol or hi > span[1] + tol:
            raise InputFormatError(None, None, f"window {lo:.4f} … {hi:.4f} eV lies outside the data "
                                   f"({span[0]:.4f} … {span[1]:.4f} eV)", field="window")
    m = (e >= lo) & (e <= hi)
    if discrete:
        x, w = e[m], d[m]
    else:
        if not np.all(np.diff(e) > 0):
            raise InputFormatError(None, None, "energies of a sampled LDOS must increase", field="energies")
        x = e[m]
        if x.size < 3:
            raise InputFormatError(None, None, "fewer than 3 energy points inside the window", field="window")
        dx = np.diff(x)
        w = np.zeros_like(x)                        # trapezoid weights
        w[:-1] += dx / 2
        w[1:] += dx / 2
        w = w * d[m]
    if np.any(w < -1e-12 * np.abs(w).max()):
        raise InputFormatError(None, None, "the LDOS must be non-negative inside the window", field="dos")
    w = np.clip(w, 0.0, None)
    if not w.sum() > 0:
        raise InputFormatError(None, None, "the LDOS has no weight inside the window", field="dos")
    return x, w, (lo, hi)


def _lanczos(x, w, n):
    """Discretised Stieltjes by Lanczos on diag(x), full re-orthogonalisation."""
    q = np.sqrt(w / w.sum())
    Q = np.zeros((n, x.size))
    a = np.zeros(n)
    b = np.zeros(max(n - 1, 0))
    prev, bprev = np.zeros_like(q), 0.0
    for k in range(n):
        Q[k] = q
        r = x * q
        a[k] = q @ r
        r = r - a[k] * q - bprev * prev
        r -= Q[:k + 1].T @ (Q[:k + 1] @ r)           # re-orthogonalise (twice is enough)
        r -= Q[:k + 1].T @ (Q[:k + 1] @ r)
        if k == n - 1:
            break
        bk = float(np.linalg.norm(r))
        if bk <= 1e-13 * max(1.0, np.abs(x).max()):
            return a[:k + 1], b[:k], k + 1
        b[k] = bk
        prev, bprev, q = q, bk, r / bk
    return a, b, n


def _modified_chebyshev(x, w, n, lo, hi):
    """Gautschi (2004) Algorithm 2.1 with monic Chebyshev polynomials on [lo, hi]."""
    c, hw = 0.5 * (hi + lo), 0.5 * (hi - lo)
    t = (x - c) / hw
    L = 2 * n
    # reference recurrence p_{l+1} = (t − α_l) p_l − β_l p_{l−1}: monic Chebyshev T
    alpha_ref = np.zeros(L)
    beta_ref = np.full(L, 0.25)
    beta_ref[0] = np.pi
    beta_ref[1] = 0.5
    nu = np.zeros(L)
    p_prev, p = np.zeros_like(t), np.ones_like(t)
    for l in range(L):
        nu[l] = w @ p
        p_prev, p = p, (t - alpha_ref[l]) * p - (beta_ref[l] if l else 0.0) * p_prev
    alpha = np.zeros(n)
    beta = np.zeros(n)
    alpha[0] = alpha_ref[0] + nu[1] / nu[0]
    beta[0] = nu[0]
    sig_prev = np.zeros(L + 1)                 # σ_{k−2, l}
    sig = np.zeros(L + 1)
    sig[:L] = nu                                # σ_{k−1, l} with k = 1
    kept = n
    for k in range(1, n):
        new = np.zeros(L + 1)
        l = np.arange(k, L - k)
        new[l] = (sig[l + 1] - (alpha[k - 1] - alpha_ref[l]) * sig[l] - beta[k - 1] * sig_prev[l]
                  + beta_ref[l] * sig[l - 1])
        if not new[k] > 0 or not np.isfinite(new[k]):
            kept = k
            break
        alpha[k] = alpha_ref[k] + new[k + 1] / new[k] - sig[k] / sig[k - 1]
        beta[k] = new[k] / sig[k - 1]
        sig_prev, sig = sig, new
    alpha, beta = alpha[:kept], beta[:kept]
    return c + hw * alpha, hw * np.sqrt(beta[1:]), kept


def recursion_coefficients(energies, dos, levels: int = 10, *, window=None, method: str = "lanczos",
                           discrete: bool = False) -> Recursion:
    """Continued-fraction coefficients a_n, b_n of an LDOS.

    Parameters
    ----------
    energies : array (nE,)
        Energies, eV (increasing when ``discrete`` is False).
    dos : array (nE,)
        LDOS samples (states/eV), or, with ``discrete=True``, the weights of a
        stick spectrum (states) at ``energies`` (e.g. |⟨0|k⟩|² at the
        eigenvalues of a finite cluster).
    levels : int
        Number of a_n to return (b has one fewer).
    window : (emin, emax), optional
        Energies to use, eV; must lie inside the data.
    method : {"lanczos", "chebyshev"}
        Discretised Stieltjes/Lanczos or the modified Chebyshev algorithm.
    discrete : bool
        Treat ``dos`` as stick weights rather than a sampled density.

    Returns
    -------
    Recursion
        With fewer levels than asked when the measure has fewer points or
        the modified moments lose positivity (noted in ``provenance``).
    """
    if int(levels) != levels or levels < 1:
        raise InputFormatError(None, None, f"levels must be a positive integer, got {levels!r}", field="levels")
    x, w, win = _quadrature(energies, dos, window, discrete)
    notes = [("stick spectrum" if discrete else "trapezoid quadrature of the sampled LDOS") +
             f", {x.size} nodes"]
    if method == "lanczos":
        a, b, got = _lanczos(x, w, int(levels))
    elif method == "chebyshev":
        a, b, got = _modified_chebyshev(x, w, int(levels), *win)
    else:
        raise InputFormatError(None, None, f"method must be 'lanczos' or 'chebyshev', got {method!r}",
                               field="method")
    if got < levels:
        notes.append(f"only {got} levels could be computed (the measure is exhausted or the modified moments "
                     "lost positivity)")
    return Recursion(a=a, b=b, weight=float(w.sum()), method=method, window=win, provenance=tuple(notes))
