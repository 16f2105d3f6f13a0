"""Moments of projected densities of states, and how the vacancy changes them.

For an orbital |i⟩ with local DOS n_i(E), the power moments are
μ_n = ∫ Eⁿ n_i(E) dE = ⟨i|Hⁿ|i⟩ (F. Cyrot-Lackmann, Adv. Phys. 16, 393 (1967);
J. Phys. Chem. Solids 29, 1235 (1968); F. Ducastelle & F. Cyrot-Lackmann,
J. Phys. Chem. Solids 31, 1295 (1970) [citation from memory]). Normalised to one state, the first
moment is the on-site energy ε_i and the second central moment is the sum of
squared hoppings Σ_j |H_ij|². Removing an atom removes its hoppings: the
drop in a neighbour's second moment measures the lost Σ|t|², the change of
its first moment the shift of the dangling orbital.

These identities hold for the whole band of the channel; a window that cuts
off part of the channel's weight gives window-restricted moments (the window
is reported with every number).

Host vs defect comparison around a vacancy (which needs the site and the
energy alignment) is :func:`orbtool.analysis.shell_moments.neighbour_moments`,
one layer up: this module depends on no other analysis step but recursion.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..errors import InputFormatError
from ..spectra import ProjectedDOS
from ._records import Record
from .recursion import Recursion

__all__ = ["Moments", "dos_moments", "channel_moments", "pdos_moments", "MomentRow", "MomentComparison"]

_L_NAMES = "spdf"


@dataclass(frozen=True, eq=False)
class Moments(Record):
    """Moments of one DOS curve over an energy window.

    Attributes
    ----------
    weight : float
        μ₀ = ∫ n dE over the window, states.
    centre : float
        First moment μ₁/μ₀, eV.
    variance : float
        Second central moment, eV².
    skewness : float
        Third central moment / variance^{3/2} (dimensionless).
    kurtosis : float
        Fourth central moment / variance² (dimensionless; 3 for a Gaussian,
        not the excess kurtosis).
    raw : ndarray (5,)
        Normalised power moments ⟨Eⁿ⟩, n = 0…4, eVⁿ.
    central : ndarray (5,)
        Normalised central moments ⟨(E − centre)ⁿ⟩, eVⁿ.
    window : tuple (emin, emax)
        Energy window, eV.
    label : str
        What the curve is.
    """

    weight: float
    centre: float
    variance: float
    skewness: float
    kurtosis: float
    raw: np.ndarray
    central: np.ndarray
    window: tuple
    label: str = ""

    @property
    def width(self) -> float:
        """√variance, eV."""
        return float(np.sqrt(max(self.variance, 0.0)))

    def summary(self) -> str:
        return (f"{self.label or 'DOS'} over {self.window[0]:.3f} … {self.window[1]:.3f} eV: "
                f"weight {self.weight:.4f}, centre {self.centre:.4f} eV, width {self.width:.4f} eV, "
                f"skewness {self.skewness:.3f}, kurtosis {self.kurtosis:.3f}")


def _window_mask(energies: np.ndarray, window, source=None) -> tuple[np.ndarray, tuple]:
    lo, hi = float(energies[0]), float(energies[-1])
    if window is None:
        return np.ones(energies.size, bool), (lo, hi)
    try:
        wlo, whi = (float(w) for w in window)
    except (TypeError, ValueError):
        raise InputFormatError(source, None, f"window must be (emin, emax) in eV, got {window!r}",
                               field="window") from None
    tol = 1e-9 * max(1.0, abs(lo), abs(hi))
    if not whi > wlo or wlo < lo - tol or whi > hi + tol:
        raise InputFormatError(source, None, f"window {wlo:.4f} … {whi:.4f} eV lies outside the data "
                               f"({lo:.4f} … {hi:.4f} eV)", field="window")
    m = (energies >= wlo) & (energies <= whi)
    if m.sum() < 3:
        raise InputFormatError(source, None, "fewer than 3 energy points inside the window", field="window")
    return m, (wlo, whi)


def dos_moments(energies, dos, window=None, label: str = "", source=None) -> Moments:
    """Moments 0–4 of a sampled DOS curve (trapezoid rule).

    Parameters
    ----------
    energies : array (nE,)
        Increasing energies, eV.
    dos : array (nE,)
        DOS, states/eV.
    window : (emin, emax), optional
        Must lie inside the data, eV.
    """
    e = np.asarray(energies, dtype=float)
    d = np.asarray(dos, dtype=float)
    if e.ndim != 1 or d.shape != e.shape:
        raise InputFormatError(source, None, f"energies {e.shape} and dos {d.shape} must be equal 1-D arrays",
                               field="dos")
    m, win = _window_mask(e, window, source)
    e, d = e[m], d[m]
    w0 = float(np.trapezoid(d, e))
    if not w0 > 0:
        raise InputFormatError(source, None, f"{label or 'the DOS'} has no weight in {win[0]:.3f} … {win[1]:.3f} eV",
                               field="window")
    c = float(np.trapezoid(d * e, e)) / w0
    x = e - c
    raw = np.array([float(np.trapezoid(d * e**n, e)) / w0 for n in range(5)])
    central = np.array([float(np.trapezoid(d * x**n, e)) / w0 for n in range(5)])
    var = central[2]
    skew = central[3] / var**1.5 if var > 0 else float("nan")
    kurt = central[4] / var**2 if var > 0 else float("nan")
    return Moments(weight=w0, centre=c, variance=float(var), skewness=float(skew), kurtosis=float(kurt),
                   raw=raw, central=central, window=win, label=label)


def channel_moments(pdos: ProjectedDOS, window=None, *, shift: float = 0.0, **criteria) -> Moments:
    """Moments of the PDOS channels matching ``criteria`` (see
    :meth:`orbtool.spectra.ProjectedDOS.mask`), with energies moved by ``shift``
    (eV, e.g. an alignment onto the host scale) before the window is applied."""
    if not isinstance(pdos, ProjectedDOS):
        raise InputFormatError(None, None, f"expected a ProjectedDOS, got {type(pdos).__name__}", field="pdos")
    try:
        curve = pdos.select(**criteria)
    except KeyError as exc:
        raise InputFormatError(pdos.source, None, str(exc.args[0]), field="channels") from None
    label = ", ".join(f"{k}={v}" for k, v in criteria.items())
    return dos_moments(pdos.energies + shift, curve, window, label=label, source=pdos.source)


@dataclass(frozen=True, eq=False)
class MomentRow(Record):
    """One channel of one neighbour, in the host and in the defect cell."""

    atom: int
    host_atom: int
    element: str
    orbital: str
    spin: int
    host: Moments
    defect: Moments
    host_recursion: Recursion | None = None
    defect_recursion: Recursion | None = None

    @property
    def centre_shift(self) -> float:
        """Defect − host first moment, eV (the dangling-orbital shift)."""
        return self.defect.centre - self.host.centre

    @property
    def variance_change(self) -> float:
        """Defect − host second central moment, eV² (minus the lost Σ|t|²)."""
        return self.defect.variance - self.host.variance


@dataclass(frozen=True, eq=False)
class MomentComparison:
    """Moments of the vacancy neighbours' channels, host vs defect cell."""

    rows: tuple
    window: tuple
    shift: float
    provenance: tuple = field(default_factory=tuple)

    def to_dict(self) -> dict:
        """Plain numbers for tables and JSON: window, shift, one dict per row
        and the means of the centre shift and variance change over rows (eV, eV²)."""
        rows = [{"atom": r.atom, "host_atom": r.host_atom, "element": r.element, "orbital": r.orbital,
                 "spin": r.spin, "host_weight": r.host.weight, "defect_weight": r.defect.weight,
                 "host_centre": r.host.centre, "defect_centre": r.defect.centre, "centre_shift": r.centre_shift,
                 "host_variance": r.host.variance, "defect_variance": r.defect.variance,
                 "variance_change": r.variance_change} for r in self.rows]
        return {"window": list(self.window), "shift": self.shift, "rows": rows,
                "mean_centre_shift": float(np.mean([r["centre_shift"] for r in rows])),
                "mean_variance_change": float(np.mean([r["variance_change"] for r in rows])),
                "provenance": list(self.provenance)}

    def summary(self) -> str:
        lines = [f"PDOS moments of the vacancy neighbours over {self.window[0]:.3f} … {self.window[1]:.3f} eV "
                 f"(host scale; defect energies shifted by {self.shift:+.4f} eV)",
                 "  atom  elem orb spin   centre host  Δcentre   width host  Δvariance  lost Σ|t|²",
                 "                          /eV        /eV        /eV        /eV²       /eV²"]
        for r in self.rows:
            lines.append(f"  {r.atom:4d}  {r.element:<4} {r.orbital:<3} {r.spin:4d}  {r.host.centre:10.4f}  "
                         f"{r.centre_shift:+8.4f}  {r.host.width:10.4f}  {r.variance_change:+9.4f}  "
                         f"{-r.variance_change:9.4f}")
        lines += [f"  note: {p}" for p in self.provenance]
        return "\n".join(lines)


#: alias of :func:`channel_moments`
pdos_moments = channel_moments
