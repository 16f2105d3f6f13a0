"""Consistency checks of orbtool's own text and NPZ layouts (issue 18): values that read fine but
would silently move a level (a repeated column, negative DOS, a channel on an atom the structure
does not have)."""

from __future__ import annotations

import numpy as np

from ..errors import InputFormatError, warn

__all__ = ["check_dos_signs", "structure_for_channels", "show_array", "NEGATIVE_DOS_TOLERANCE"]


def show_array(a: np.ndarray) -> str:
    """Short description of a small array for a message."""
    text = repr(a.tolist()) if a.size <= 4 else f"{a.size} values"
    return f"{text} ({a.dtype}, shape {a.shape})"


#: negative DOS beyond this fraction of a column's largest value is refused (small negative
#: wiggles come from tetrahedron-method corrections and are kept — common practice)
NEGATIVE_DOS_TOLERANCE = 0.01


def check_dos_signs(data, labels, path, first_line):
    """A density of states is non-negative: refuse a column with values below
    −NEGATIVE_DOS_TOLERANCE × its largest magnitude, naming the column and the line."""
    for j in range(1, data.shape[1]):
        col = data[:, j]
        scale = float(np.abs(col).max()) if col.size else 0.0
        bad = np.flatnonzero(col < -NEGATIVE_DOS_TOLERANCE * scale)
        if bad.size:
            r = int(bad[0])
            raise InputFormatError(path, first_line + r, f"column {j + 1} {labels[j]!r} has {bad.size} negative "
                                   f"value(s) (first {col[r]:.6g}); a density of states is non-negative",
                                   field=labels[j])


def structure_for_channels(path, labels, chans, rows, line, meta):
    """The structure beside the file (CONTCAR/POSCAR), checked against the channels: an atom index
    outside the cell is an error naming the column; an element that disagrees is a warning."""
    from .doscar import find_structure_beside
    atoms, found = find_structure_beside(path)
    if atoms is None:
        return None
    symbols = atoms.get_chemical_symbols()
    meta["structure"] = f"atoms from {found.name}"
    for c, j in zip(chans, rows):
        if c.atom >= len(atoms):
            raise InputFormatError(path, line, f"column {j + 1} {labels[j]!r} names atom {c.atom}, but "
                                   f"{found.name} beside the file has {len(atoms)} atoms (0..{len(atoms) - 1})",
                                   field=labels[j])
    wrong = [(j, c) for c, j in zip(chans, rows) if c.atom >= 0 and c.element != "X" and c.element != symbols[c.atom]]
    if wrong:
        j, c = wrong[0]
        warn(f"{path}: column {j + 1} {labels[j]!r} says atom {c.atom} is {c.element}, but {found.name} has "
             f"{symbols[c.atom]} there ({len(wrong)} such column(s)); check that the PDOS belongs to this "
             "structure", meta)
    return atoms
