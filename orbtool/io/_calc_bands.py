"""Band energies and occupations read from an ASE calculator through its standard interface.

The low half of :mod:`orbtool.io.calculator`: :func:`orbtool.io.load_case` uses it for a code's
output log that carries a calculator, and :mod:`orbtool.io.calculator` (which builds whole cases on
:mod:`orbtool.io.assemble`) re-exports it.
"""

from __future__ import annotations

import numpy as np

from ..errors import InputFormatError
from ..spectra import BandProjections

__all__ = ["offers_eigenvalues", "projections_from_calculator"]


def _call(calc, name, *args, **kw):
    fn = getattr(calc, name, None)
    if fn is None:
        return None
    try:
        return fn(*args, **kw)
    except Exception:  # calculators raise NotImplementedError, PropertyNotImplementedError, ... when absent
        return None


def offers_eigenvalues(calc) -> bool:
    """True if ``calc`` answers ``get_eigenvalues(kpt=0, spin=0)`` (a structure file's energy-only
    calculator does not)."""
    e = _call(calc, "get_eigenvalues", kpt=0, spin=0)
    return e is not None and np.size(e) > 0


def projections_from_calculator(calc, atoms=None, *, source: str | None = None) -> BandProjections:
    """Band energies (eV) and occupations (electrons) of every k-point and spin of ``calc``.

    Raises :class:`InputFormatError` when the calculator offers no eigenvalues.
    """
    src = source or f"<{type(calc).__name__}>"
    atoms = atoms if atoms is not None else getattr(calc, "atoms", None)
    nspin = int(_call(calc, "get_number_of_spins") or 1)
    kpts = _call(calc, "get_ibz_k_points")
    kpts = np.zeros((1, 3)) if kpts is None or len(kpts) == 0 else np.asarray(kpts, float).reshape(-1, 3)
    nk = len(kpts)
    kw = _call(calc, "get_k_point_weights")
    kw = np.full(nk, 1.0 / nk) if kw is None or len(kw) != nk else np.asarray(kw, float)
    energies, occ = [], []
    for s in range(nspin):
        e_s, f_s = [], []
        for k in range(nk):
            e = _call(calc, "get_eigenvalues", kpt=k, spin=s)
            if e is None:
                raise InputFormatError(src, None, f"the calculator offers no eigenvalues (k-point {k}, spin {s})",
                                       field="eigenvalues")
            e_s.append(np.asarray(e, float))
            f = _call(calc, "get_occupation_numbers", kpt=k, spin=s)
            f_s.append(None if f is None else np.asarray(f, float))
        energies.append(e_s)
        occ.append(f_s)
    nb = min(len(e) for es in energies for e in es)
    e = np.array([[x[:nb] for x in es] for es in energies])
    notes = []
    if any(f is None for fs in occ for f in fs):
        o = None
        notes.append("the calculator offers no occupations")
    else:
        o = np.array([[x[:nb] for x in fs] for fs in occ])
        top = 2.0 if nspin == 1 else 1.0
        wk = kw / kw.sum()
        if nk > 1 and np.all(o <= wk[None, :, None] * top + 1e-6):
            o = o / wk[None, :, None]
            notes.append("occupations were multiplied by the k-point weights; divided back")
        o = np.clip(o, 0.0, top)
    fermi = _call(calc, "get_fermi_level")
    natoms = len(atoms) if atoms is not None else 0
    weights = np.zeros((nspin, nk, nb, natoms, 0))
    meta = {"format": "ase-calculator", "calculator": type(calc).__name__,
            "note": "no orbital projections in ASE's calculator interface"}
    if notes:
        meta["notes"] = notes
    return BandProjections(kpoints=kpts, kweights=kw, energies=e, occupations=o, weights=weights, orbitals=(),
                           atoms=atoms, fermi=None if fermi is None else float(np.atleast_1d(fermi)[0]),
                           source=src, meta=meta)
