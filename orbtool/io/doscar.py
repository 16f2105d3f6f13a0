"""The plane-wave code's DOS file (DOSCAR): total and per-atom projected DOS.

Layout (VASP manual, "DOSCAR" page): line 1 ``NIONS NIONS JOBPAR NCDIJ``
(JOBPAR = 1 when per-atom blocks follow); lines 2–5 cell volume and lattice
lengths, temperature, ``CAR``, system name; line 6 ``EMAX EMIN NEDOS EFERMI
weight``; NEDOS rows of the total DOS (``E DOS intDOS`` or, spin-polarised,
``E up down int_up int_down``); then per atom the line-6 header again and
NEDOS rows ``E`` + one column per orbital (per spin interleaved up/down):
l-resolved ``s p d [f]`` or lm-resolved ``s py pz px dxy dyz dz2 dxz dx2-y2
[f-3 … f3]``. Non-collinear files hold four components per orbital (total,
m_x, m_y, m_z); only the total is kept. Elements come from a POSCAR/CONTCAR
beside the file when one is there.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np

from ..errors import InputFormatError
from ..spectra import ProjectedDOS
from ._files import read_text
from ._numbers import floats, table, to_float, to_int

__all__ = ["read_doscar", "find_structure_beside"]

_L = ["s", "p", "d", "f"]
_LM = ["s", "py", "pz", "px", "dxy", "dyz", "dz2", "dxz", "dx2-y2", "f-3", "f-2", "f-1", "f0", "f1", "f2", "f3"]


def find_structure_beside(path):
    """An ``ase.Atoms`` read from CONTCAR or POSCAR (optionally compressed) in the folder of
    ``path``, with the file used, or (None, None)."""
    folder = Path(path).parent
    for stem in ("CONTCAR", "POSCAR"):
        for suffix in ("", ".gz", ".bz2", ".xz"):
            f = folder / (stem + suffix)
            if f.is_file() and f.stat().st_size > 0:
                from .structure import read_structure
                try:
                    return read_structure(f), f
                except InputFormatError:
                    continue
    return None, None


# Fortran writes double-precision exponents with D (1.0D-03) and drops the E when a three-digit
# exponent does not fit the field (0.1234-100 means 0.1234E-100)
_FORTRAN_D = re.compile(r"(?<=[0-9.])[dD](?=[+-]?[0-9])")
_NO_E = re.compile(r"(?<=[0-9.])([+-][0-9]{2,3})(?=\s|$)", re.MULTILINE)


def _fortran_exponents(lines: list[str], start: int) -> list[str]:
    """``lines`` with Fortran exponent spellings from index ``start`` on rewritten as ``E``."""
    text = "\n".join(lines[start:])
    new = _NO_E.sub(r"E\1", _FORTRAN_D.sub("E", text))
    return lines if new == text else lines[:start] + new.split("\n")


def _layout(ncol: int, spin: bool, path, line):
    """(orbital names, spins per orbital, components per orbital) of a per-atom block."""
    sets = (_L[:3], _L, _LM[:9], _LM)
    if spin:
        options = [(len(n) * 2, n, 2, 1) for n in sets]
    else:  # collinear first: 16 columns is lm-resolved spdf, not non-collinear spdf
        options = [(len(n), n, 1, 1) for n in sets] + [(len(n) * 4, n, 1, 4) for n in sets]
    for n, names, ns, comp in options:
        if n == ncol:
            return names, ns, comp
    kind = "spin-polarised" if spin else "non-spin-polarised"
    raise InputFormatError(path, line, f"a per-atom block with {ncol} orbital columns does not fit a {kind} "
                           "DOSCAR (the total block decides the spin; mixed spin blocks?)", field="atom block")


def _atom_block(lines, head, a, nedos, energies, path, width):
    """Rows of atom ``a`` whose header line is ``lines[head]``, checked line by line."""
    if len(lines[head].split()) < 4:
        raise InputFormatError(path, head + 1, f"expected the header line of atom {a + 1}", field="atom block")
    if head + 1 + nedos > len(lines):
        raise InputFormatError(path, len(lines), f"file ended inside the block of atom {a + 1}", field="atom block")
    nc = len(lines[head + 1].split())
    if width is not None and nc != width:
        raise InputFormatError(path, head + 2, f"atom {a + 1} block has {nc} columns, earlier atoms {width}",
                               field="atom block")
    block = table(lines[head + 1:head + 1 + nedos], path, head + 2, nc, f"atom {a + 1} DOS")
    if not np.allclose(block[:, 0], energies, rtol=0, atol=1e-6 * max(1.0, float(np.abs(energies).max()))):
        raise InputFormatError(path, head + 2, f"atom {a + 1} energies differ from the total DOS energies",
                               field="atom block")
    return block


def _atom_blocks_fast(lines, pos, nions, nedos, energies, path):
    """All atom blocks parsed in one call, or None if anything looks off (then the careful path runs)."""
    end = pos + nions * (nedos + 1)
    if end > len(lines) or any(len(lines[pos + a * (nedos + 1)].split()) < 4 for a in range(nions)):
        return None
    rows = [ln for a in range(nions) for ln in lines[pos + a * (nedos + 1) + 1:pos + (a + 1) * (nedos + 1)]]
    width = len(rows[0].split())
    try:
        arr = floats(rows, path, pos + 2, "atom DOS")
    except InputFormatError:
        return None
    if width < 2 or arr.size != len(rows) * width:
        return None
    arr = arr.reshape(nions, nedos, width)
    if not np.allclose(arr[:, :, 0], energies, rtol=0, atol=1e-6 * max(1.0, float(np.abs(energies).max()))):
        return None
    return list(arr)


def read_doscar(path, atoms=None) -> ProjectedDOS:
    """Read a DOSCAR into a :class:`ProjectedDOS` (energies eV, DOS states/eV).

    Parameters
    ----------
    path : file (optionally compressed)
    atoms : ase.Atoms, optional
        The structure, for element names; by default a CONTCAR/POSCAR beside the file.
    """
    lines = read_text(path).splitlines()
    try:
        return _parse(lines, path, atoms)
    except InputFormatError:  # retry with Fortran exponent spellings rewritten (costs nothing otherwise)
        fixed = _fortran_exponents(lines, 5)
        if fixed is lines:
            raise
        return _parse(fixed, path, atoms)


def _parse(lines, path, atoms) -> ProjectedDOS:
    if len(lines) < 7:
        raise InputFormatError(path, len(lines) + 1 if lines else None,
                               "file ended inside the 6-line header (is this a DOSCAR?)")
    t = lines[0].split()
    if len(t) < 3:
        raise InputFormatError(path, 1, "expected 'NIONS NIONS JOBPAR NCDIJ'", field="header")
    nions = to_int(t[0], path, 1, "ion count")
    partial = to_int(t[2], path, 1, "JOBPAR") == 1
    if nions < 1:
        raise InputFormatError(path, 1, f"ion count must be positive, got {nions}", field="ion count")
    head = lines[5].split()
    if len(head) < 4:
        raise InputFormatError(path, 6, "expected 'EMAX EMIN NEDOS EFERMI weight'", field="header")
    nedos = to_int(head[2], path, 6, "NEDOS")
    fermi = to_float(head[3], path, 6, "Fermi energy")
    if nedos < 2:
        raise InputFormatError(path, 6, f"NEDOS must be at least 2, got {nedos}", field="NEDOS")
    if len(lines) < 6 + nedos:
        raise InputFormatError(path, len(lines), f"file ended inside the total DOS ({nedos} rows expected)",
                               field="total DOS")
    first = lines[6].split()
    ncol = len(first)
    if ncol not in (3, 5):
        raise InputFormatError(path, 7, f"total DOS rows need 3 (no spin) or 5 (spin) columns, found {ncol}",
                               field="total DOS")
    spin = ncol == 5
    nspin = 2 if spin else 1
    tot = table(lines[6:6 + nedos], path, 7, ncol, "total DOS")
    energies = tot[:, 0]
    total = tot[:, 1:1 + nspin].T
    note = None
    if atoms is None:
        atoms, found = find_structure_beside(path)
        note = f"elements from {found.name}" if found is not None else "no POSCAR/CONTCAR beside the file: " \
            "elements unknown (X)"
    if atoms is not None and len(atoms) != nions:
        raise InputFormatError(path, 1, f"DOSCAR has {nions} ions but the structure has {len(atoms)} atoms",
                               field="ion count")
    symbols = atoms.get_chemical_symbols() if atoms is not None else None
    channels, values = [], []
    pos = 6 + nedos
    rest = [ln for ln in lines[pos:] if ln.strip()]
    layout = None
    if partial or rest:
        blocks = _atom_blocks_fast(lines, pos, nions, nedos, energies, path)
        if blocks is None:  # the careful path finds and names the problem
            blocks = []
            for a in range(nions):
                if pos + a * (nedos + 1) >= len(lines):
                    raise InputFormatError(path, len(lines), f"file ended before the block of atom {a + 1} of "
                                           f"{nions}", field="atom block")
                blocks.append(_atom_block(lines, pos + a * (nedos + 1), a, nedos, energies, path,
                                          blocks[0].shape[1] if blocks else None))
        layout = _layout(blocks[0].shape[1] - 1, spin, path, pos + 2)
        names, ns, comp = layout
        for a, block in enumerate(blocks):
            cols = block[:, 1:].reshape(nedos, len(names), comp * ns)
            for o, name in enumerate(names):
                for s in range(ns):
                    channels.append((a, symbols[a] if symbols else "X", name, s))
                    values.append(cols[:, o, s * comp if comp == 4 else s])
        pos += nions * (nedos + 1)
        while pos < len(lines) and not lines[pos].strip():
            pos += 1
        if pos < len(lines):
            raise InputFormatError(path, pos + 1, f"unexpected content after the {nions} atom blocks",
                                   field="atom block")
    if np.any(np.diff(energies) <= 0):
        raise InputFormatError(path, 7, "total DOS energies are not strictly increasing", field="total DOS")
    meta = {"format": "doscar", "resolution": "none" if layout is None else
            ("lm" if len(layout[0]) > 4 else "l"), "noncollinear": bool(layout and layout[2] == 4)}
    if note:
        meta["structure"] = note
    vals = np.array(values) if values else np.empty((0, nedos))
    return ProjectedDOS(energies=energies, values=vals, channels=tuple(channels), total=total, fermi=fermi,
                        nspin=nspin, atoms=atoms, source=str(path), meta=meta)
