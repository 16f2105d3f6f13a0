"""Small validation helpers shared by the data objects (internal)."""

from __future__ import annotations

import numpy as np

from .errors import InputFormatError


def as_array(value, name: str, *, ndim: int | None = None, shape=None, dtype=float,
             finite: bool = True, source=None) -> np.ndarray:
    """Convert ``value`` to a read-only numpy array and check it.

    Raises :class:`InputFormatError` (with ``source`` as its path) naming the
    field and what was expected.
    """
    try:
        arr = np.asarray(value, dtype=dtype)
    except (TypeError, ValueError) as exc:
        raise InputFormatError(source, None, f"{name} must be numeric ({exc})", field=name) from None
    if ndim is not None and arr.ndim != ndim:
        raise InputFormatError(source, None, f"{name} must have {ndim} dimensions, got shape {arr.shape}",
                               field=name)
    if shape is not None:
        want = tuple(shape)
        if len(want) != arr.ndim or any(w is not None and w != s for w, s in zip(want, arr.shape)):
            pretty = "(" + ", ".join("*" if w is None else str(w) for w in want) + ")"
            raise InputFormatError(source, None, f"{name} must have shape {pretty}, got {arr.shape}",
                                   field=name)
    if finite and arr.dtype.kind in "fc" and arr.size and not np.isfinite(arr).all():
        bad = int(np.count_nonzero(~np.isfinite(arr)))
        raise InputFormatError(source, None, f"{name} contains {bad} non-finite value(s) (NaN or inf)",
                               field=name)
    arr = arr.view()
    arr.flags.writeable = False
    return arr


def check_cell(cell, source=None, name: str = "cell") -> np.ndarray:
    """A (3, 3) cell in Å, rows are lattice vectors, right-handed, non-degenerate."""
    cell = as_array(cell, name, shape=(3, 3), source=source)
    vol = float(np.linalg.det(cell))
    if not vol > 1e-12:
        raise InputFormatError(source, None,
                               f"{name} must be right-handed with positive volume, got volume {vol:.6g} Å^3",
                               field=name)
    return cell


def occupation_warning(occ, nspin: int, path, meta: dict) -> None:
    """Warn when every band of a spin-paired run (``nspin`` 1) has occupation exactly 1.0: a
    spin-paired band holds 0–2 electrons, so this points at a wrong spin setting or an edited file."""
    from .errors import warn
    if occ is None or nspin != 1:
        return
    occ = np.asarray(occ)
    if occ.size > 1 and np.all(occ == 1.0):
        warn(f"{path}: every band has occupation 1.0 in a spin-paired run (occupations there run 0 to 2): "
             "check the spin setting of the run; filled and empty bands cannot be told apart", meta)
