"""Which unit convention the values of a grid file follow, decided from what the data must satisfy.

A Gaussian cube file gives its axes in bohr and, by the format's own convention (Gaussian's
``cubegen`` documentation), its values in atomic units: e/bohr³ for a density, bohr^-3/2 for an
orbital, hartree/e for a potential. ASE's ``ase.io.write(..., data=...)`` writes the same bohr
header but stores the array it is given unchanged — and ASE's calculators hand out densities per
Å³, orbitals in Å^-3/2 and potentials in eV. Both kinds of file look alike; read with the wrong
convention a density is off by a factor bohr⁻³ = 6.748.

The decision uses physics, not the file's comment line, wherever the physics can decide
(common practice of checking a density's integral against the electron count):

* a total electron density integrates to the electron count of the atoms present: every element
  contributes its electrons outside one of its possible cores (noble-gas or noble-gas + filled
  d/f shells: the valence, semicore and all-electron counts plane-wave and Gaussian-basis codes
  use), the cell may carry a small net charge; 15 % tolerance, because a uniform grid samples an
  all-electron nuclear cusp badly (the pyscf Li₁₄F₁₃⁺ density of ``tests/external`` integrates to
  177.8 on its grid for 158 electrons, the engine's own sum);
* the density of one state or of a degenerate multiplet (Σ|ψ|² over its bands) integrates to the
  number of bands, 1 to 3 (the largest irreducible representation of the cubic point groups is
  three-dimensional); a signed orbital has ∫ψ² = 1. PAW pseudo wave functions are normalised with
  the overlap operator, not to 1 (P. E. Blöchl, Phys. Rev. B 50, 17953 (1994)), hence a 25 %
  tolerance.

Only when both or neither reading satisfies the condition does the writer decide (a file written
by ASE: ASE's convention; otherwise the cube format's own), and the reason says so.
"""

from __future__ import annotations

import itertools

import numpy as np

from ..errors import InputFormatError
from ..units import BOHR

__all__ = ["UNIT_CONVENTIONS", "electron_counts", "decide_convention", "ASE_COMMENT"]

#: accepted values of ``units=``: decide, the cube format's atomic units, Å-based values, keep numbers
UNIT_CONVENTIONS = ("auto", "bohr", "angstrom")
ASE_COMMENT = "Cube file from ASE"

# cores: noble gases and noble gas + filled d (and 4f) shells; the electrons outside one of them are a
# valence count some code uses (Zn: 2 = 4s², 12 = 3d¹⁰4s², 20 = + 3s²3p⁶, 30 = all electrons)
_CORES = (0, 2, 10, 18, 28, 36, 46, 54, 68, 78, 86)
DENSITY_TOLERANCE = 0.15
STATE_TOLERANCE = 0.25
STATE_COUNTS = (1, 2, 3)


def _element_counts(z: int) -> list[int]:
    cores = [c for c in _CORES if c < z]
    return sorted({z - c for c in cores[-3:]} | {z})


def electron_counts(atoms, max_charge: int = 3) -> np.ndarray:
    """Electron counts a total density of ``atoms`` may integrate to (sorted, unique).

    Each element contributes, per atom, the electrons outside one of its three outermost
    possible cores (valence, semicore, deeper) or all its electrons; the cell may be charged by
    up to ``max_charge`` electrons either way.
    """
    numbers = np.asarray(atoms.get_atomic_numbers(), dtype=int)
    numbers = numbers[numbers > 0]
    if numbers.size == 0:
        return np.zeros(0)
    zs, n = np.unique(numbers, return_counts=True)
    options = [[c * k for c in _element_counts(int(z))] for z, k in zip(zs, n)]
    totals = {sum(combo) for combo in itertools.product(*options)}
    out = {t + q for t in totals for q in range(-max_charge, max_charge + 1) if t + q > 0}
    return np.array(sorted(out), dtype=float)


def _nearest(value: float, counts) -> tuple[float, float]:
    """(nearest count, relative deviation |value/count − 1|)."""
    counts = np.asarray(counts, float)
    if counts.size == 0 or not value > 0:
        return float("nan"), float("inf")
    rel = np.abs(value / counts - 1.0)
    i = int(np.argmin(rel))
    return float(counts[i]), float(rel[i])


def decide_convention(integral_as_angstrom: float, quantity: str, *, atoms=None, comments: str = "",
                      expected=None, source=None) -> dict:
    """Choose between per-Å³ (ASE's) and per-bohr³ (the cube format's) values.

    Parameters
    ----------
    integral_as_angstrom : float
        ∫ of the field (density) or of its square (orbital) over the cell with the values taken as
        Å-based, i.e. Σ values × voxel volume in Å³. Read as atomic units the same file gives
        ``integral_as_angstrom × bohr⁻³``.
    quantity : {"density", "state", "orbital", "potential"}
        ``"density"``: total electron density; ``"state"``: |ψ|² of one state or Σ over a
        multiplet; ``"orbital"``: a signed orbital.
    atoms : ase.Atoms, optional
        The atoms in the file (for the electron count of a total density).
    comments : str
        The file's comment lines (only for the writer fallback).
    expected : float or sequence of float, optional
        What the integral must be (electrons, or number of bands) when the caller knows it.

    Returns
    -------
    dict with ``convention`` (``"angstrom"`` or ``"bohr"``), ``reason``, ``integral_if_angstrom``,
    ``integral_if_bohr`` and ``evidence`` (``"integral"`` or ``"writer"``).
    """
    ia = float(integral_as_angstrom)
    ib = ia * BOHR ** -3
    writer = "angstrom" if comments.startswith(ASE_COMMENT) else "bohr"
    who = "ASE (values as its calculators give them: per Å³, Å^-3/2, eV)" if writer == "angstrom" else \
        "the cube format's atomic units (per bohr³, bohr^-3/2, hartree)"
    out = {"integral_if_angstrom": ia, "integral_if_bohr": ib}
    if quantity == "potential":
        out.update(convention=writer, evidence="writer",
                   reason=f"a potential carries no integral to check; convention of the writer: {who}")
        return out
    if expected is not None:
        counts, tol = np.atleast_1d(np.asarray(expected, float)), STATE_TOLERANCE
        what = "the expected value " + "/".join(f"{c:g}" for c in counts)
    elif quantity == "density":
        if atoms is None or len(atoms) == 0:
            counts = np.zeros(0)
        else:
            counts = electron_counts(atoms)
        tol, what = DENSITY_TOLERANCE, "an electron count of the atoms present (valence, semicore or all electrons)"
    elif quantity in ("state", "orbital"):
        counts, tol = np.array(STATE_COUNTS, float), STATE_TOLERANCE
        what = "1–3 (one state or a multiplet of up to three bands)"
    else:
        raise InputFormatError(source, None, f"unknown quantity {quantity!r} for unit detection", field="quantity")
    na, ra = _nearest(ia, counts)
    nb, rb = _nearest(ib, counts)
    ok_a, ok_b = ra <= tol, rb <= tol
    detail = f"∫ = {ia:.4g} per Å³ reading, {ib:.4g} per bohr³ reading; expected {what} (± {tol:.0%})"
    if ok_a != ok_b:
        conv = "angstrom" if ok_a else "bohr"
        hit = na if ok_a else nb
        out.update(convention=conv, evidence="integral",
                   reason=f"detected from the integral: {detail}; the {'per-Å³' if ok_a else 'per-bohr³'} reading "
                          f"gives {hit:g}")
    else:
        why = "both readings fit" if ok_a else "neither reading fits"
        out.update(convention=writer, evidence="writer",
                   reason=f"the integral cannot decide ({why}: {detail}); assumed the convention of the writer: {who}")
    return out
