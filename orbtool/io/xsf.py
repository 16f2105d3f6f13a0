"""XCrySDen structure files with ``DATAGRID_3D`` blocks.

Layout (XCrySDen documentation, "XSF format"): optional ``CRYSTAL``/``PRIMVEC``/
``PRIMCOORD`` (or ``ATOMS``) sections, then ``BEGIN_BLOCK_DATAGRID_3D``, a
comment, and one or more ``BEGIN_DATAGRID_3D_<name>`` (or ``DATAGRID_3D_<name>``)
sub-blocks: counts ``nx ny nz``, origin, three spanning vectors (Å), the
values with x fastest, ``END_DATAGRID_3D``. It is a *general* grid: point i
sits at i/(n−1) of a spanning vector, so periodic data repeat the first plane
at the end. orbtool drops such a duplicate plane (cell = span); when the last
plane is not a copy, all points are kept and the cell is stretched to
span·n/(n−1) so the spacing is unchanged (noted in ``meta``).
"""

from __future__ import annotations

import re

import numpy as np
from ase import Atoms
from ase.data import atomic_numbers

from ..errors import InputFormatError
from ..grid import Grid
from ._bulk import HeaderReader, check_declared_size, next_line, progress_bar
from ._files import check_memory, compression_of, open_binary
from ._numbers import to_float, to_int

__all__ = ["read_xsf"]


def _vec(line, hr, what):
    t = line.split()
    if len(t) < 3:
        raise InputFormatError(hr.path, hr.line, f"{what}: expected three numbers", field=what)
    return [to_float(x, hr.path, hr.line, what) for x in t[:3]]


def _atom_line(line, hr):
    t = line.split()
    if len(t) < 4:
        raise InputFormatError(hr.path, hr.line, "atom line: expected 'Z x y z'", field="atoms")
    z = t[0]
    if z.isdigit():
        num = int(z)
    elif z.capitalize() in atomic_numbers:
        num = atomic_numbers[z.capitalize()]
    else:
        raise InputFormatError(hr.path, hr.line, f"atom line: unknown element {z!r}", field="atoms")
    return num, [to_float(x, hr.path, hr.line, "atom position") for x in t[1:4]]


def read_xsf(path, quantity: str = "auto", progress: bool = True, max_bytes: int | None = None) -> list[Grid]:
    """Read every ``DATAGRID_3D`` of an XSF file (values kept as written).

    ``quantity`` only labels the unit (``"density"`` → e/Å³, ``"orbital"`` → Å^-3/2,
    ``"potential"`` → eV, ``"raw"``/``"auto"`` → ``"arb"``): XSF carries no unit. ``max_bytes`` is the
    memory budget for the declared grid counts (default ``$ORBTOOL_MAX_BYTES`` or 1 GiB), checked
    before any value is read.
    """
    unit = {"density": "e/Å^3", "orbital": "Å^-3/2", "potential": "eV"}.get(quantity, "arb")
    comp = compression_of(path) is not None
    cell = None
    numbers, positions = [], []
    grids = []
    with open_binary(path) as fh:
        hr = HeaderReader(fh, path)
        line = None
        # sections before the data
        while True:
            try:
                line = hr.next("a DATAGRID_3D block")
            except InputFormatError:
                raise InputFormatError(path, None, "no DATAGRID_3D block in the file", field="DATAGRID_3D") from None
            key = line.strip().upper()
            if key.startswith("PRIMVEC"):
                cell = [_vec(hr.next(f"lattice vector {i + 1}"), hr, "PRIMVEC") for i in range(3)]
            elif key.startswith("PRIMCOORD"):
                nat = to_int((hr.next("the atom count").split() or ["?"])[0], path, hr.line, "atom count")
                if nat < 1:
                    raise InputFormatError(path, hr.line, f"atom count must be positive, got {nat}", field="atoms")
                check_declared_size(path, nat * 4, "atom count", hr.line, comp)
                numbers, positions = [], []
                for _ in range(nat):
                    n, p = _atom_line(hr.next("an atom line"), hr)
                    numbers.append(n)
                    positions.append(p)
            elif key == "ATOMS":
                while True:
                    nxt = hr.pending.split(b"\n", 1)[0].split()
                    if not nxt or not (nxt[0].isdigit() or nxt[0].decode("latin-1").capitalize() in atomic_numbers):
                        break
                    n, p = _atom_line(hr.next("an atom line"), hr)
                    numbers.append(n)
                    positions.append(p)
            elif key.startswith("BEGIN_BLOCK_DATAGRID_3D") or key.startswith("BEGIN_BLOCK_DATAGRID3D"):
                hr.next("the block comment")
                break
        atoms = None
        if numbers:
            atoms = Atoms(numbers=numbers, positions=positions, cell=cell, pbc=cell is not None)
        bar = progress_bar(path, progress, comp)
        try:
            reader = None
            while True:
                line = hr.next("a DATAGRID_3D sub-block") if reader is None else next_line(reader)
                if line is None:
                    raise InputFormatError(path, None, "file ended before END_BLOCK_DATAGRID_3D",
                                           field="DATAGRID_3D")
                key = line.strip()
                if not key:
                    continue
                if key.upper().startswith("END_BLOCK_DATAGRID"):
                    break
                if not (key.upper().startswith("BEGIN_DATAGRID_3D") or key.upper().startswith("DATAGRID_3D")):
                    where = hr.line if reader is None else reader.line - 1
                    raise InputFormatError(path, where, f"expected BEGIN_DATAGRID_3D_<name>, found {key[:40]!r}",
                                           field="DATAGRID_3D")
                name = re.sub(r"^(BEGIN_)?DATAGRID_3D_?", "", key, flags=re.IGNORECASE) or "grid"
                if reader is not None:  # hand the remaining bytes back to a line reader
                    hr.pending, hr.line = reader.pending, reader.line - 1
                counts = [to_int(t, path, hr.line + 1, "grid counts") for t in hr.next("the grid counts").split()]
                if len(counts) != 3 or min(counts) < 2:
                    raise InputFormatError(path, hr.line, f"expected three grid counts >= 2, got {counts}",
                                           field="grid counts")
                origin = np.array(_vec(hr.next("the origin"), hr, "origin"))
                span = np.array([_vec(hr.next(f"spanning vector {i + 1}"), hr, "spanning vector") for i in range(3)])
                total = counts[0] * counts[1] * counts[2]
                check_declared_size(path, total, "grid", hr.line, comp)
                check_memory(path, total * 8, "grid", hr.line, max_bytes=max_bytes)
                full = np.empty(counts, order="F")
                reader = hr.values(bar)
                reader.fill(full.reshape(-1, order="F"), f"grid {name}")
                end = next_line(reader)
                while end is not None and not end.strip():
                    end = next_line(reader)
                if end is None or not end.strip().upper().startswith("END_DATAGRID"):
                    raise InputFormatError(path, reader.line - 1, f"expected END_DATAGRID_3D after {total:,d} "
                                           f"values, found {(end or 'end of file').strip()[:40]!r}",
                                           field="grid values")
                grids.append(_to_grid(full, origin, span, atoms, unit, path, name))
        finally:
            if bar is not None:
                bar.close()
    if not grids:
        raise InputFormatError(path, None, "the DATAGRID_3D block holds no grid", field="DATAGRID_3D")
    return grids


def _to_grid(full, origin, span, atoms, unit, path, name):
    scale = 1e-12 * max(float(np.abs(full).max()), 1e-300)
    periodic = all(np.allclose(np.take(full, 0, axis=ax), np.take(full, -1, axis=ax), rtol=1e-6, atol=scale)
                   for ax in range(3))
    if periodic:
        vals = full[:-1, :-1, :-1]
        cell = span
        note = "dropped the periodic duplicate planes"
    else:
        n = np.array(full.shape, dtype=float)
        vals = full
        cell = span * (n / (n - 1))[:, None]
        note = "last planes are not periodic copies: kept all points, cell = span·n/(n−1)"
    return Grid(values=vals, cell=cell, origin=origin, atoms=atoms, unit=unit, source=str(path), name=name,
                pbc=True, meta={"format": "xsf", "span": span.tolist(), "note": note})
