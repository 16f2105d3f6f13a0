"""The plane-wave code's volumetric files: CHGCAR, PARCHG, CHG, AECCAR, ELFCAR, LOCPOT.

Layout (VASP manual, "CHGCAR" and "LOCPOT" pages): a POSCAR-style structure,
a blank line, the grid counts ``n1 n2 n3``, then n1·n2·n3 values written with
the first index fastest (Fortran order), five (CHGCAR) or ten (CHG) per line.
Charge densities are stored as ρ·V_cell, so they are divided by the cell
volume here to give e/Å³; LOCPOT holds the local potential energy of an
electron in eV and ELFCAR the dimensionless ELF, neither divided. After a
block, CHGCAR files hold ``augmentation occupancies i n`` blocks (skipped); a
spin-polarised file then repeats the counts line and a second block (the
magnetisation density ρ↑−ρ↓), a non-collinear one three more (m_x, m_y, m_z).
"""

from __future__ import annotations

import io
import re
from pathlib import Path

import numpy as np

from ..errors import InputFormatError, warn
from ..grid import Grid
from ._bulk import HeaderReader, check_declared_size, next_line, progress_bar
from ._files import check_memory, compression_of, open_binary, strip_compression
from ._numbers import to_int

__all__ = ["read_chgcar", "read_poscar_header"]

_MAX_BLOCKS = 4


def read_poscar_header(hr: HeaderReader, path):
    """Read a POSCAR-style structure from ``hr``; returns ``ase.Atoms``.

    The lines are collected by counting (scale, lattice, species, counts, optional
    selective-dynamics line, coordinate type, one line per atom) and handed to ASE's
    POSCAR reader, so the structure is exactly what ASE reads.
    """
    from ase.io.vasp import read_vasp

    lines = [hr.next("the comment line"), hr.next("the scale factor")]
    first = hr.line - 1
    for i in range(3):
        lines.append(hr.next(f"lattice vector {i + 1}"))
        if len(lines[-1].split()) < 3:
            raise InputFormatError(path, hr.line, "expected three numbers for a lattice vector",
                                   field="lattice")
    lines.append(hr.next("species names or counts"))
    toks = lines[-1].split()
    if not toks:
        raise InputFormatError(path, hr.line, "expected species names or atom counts", field="species")
    if not toks[0].lstrip("-").isdigit():
        lines.append(hr.next("atom counts"))
        toks = lines[-1].split()
    counts = [to_int(t, path, hr.line, "atom counts") for t in toks]
    if not counts or min(counts) < 0 or sum(counts) == 0:
        raise InputFormatError(path, hr.line, f"atom counts must be non-negative with a positive sum, got {toks}",
                               field="atom counts")
    nat = sum(counts)
    check_declared_size(path, nat * 6, "atom counts", hr.line, compression_of(path) is not None)
    lines.append(hr.next("the coordinate type"))
    if lines[-1].strip()[:1] in ("s", "S"):
        lines.append(hr.next("the coordinate type"))
    if lines[-1].strip()[:1].lower() not in ("d", "c", "k"):
        raise InputFormatError(path, hr.line, f"expected 'Direct' or 'Cartesian', found {lines[-1].strip()!r}",
                               field="coordinate type")
    for i in range(nat):
        lines.append(hr.next(f"position {i + 1} of {nat}"))
        if len(lines[-1].split()) < 3:
            raise InputFormatError(path, hr.line, f"expected three coordinates for atom {i + 1}", field="positions")
    try:
        atoms = read_vasp(io.StringIO("\n".join(lines) + "\n"))
    except Exception as exc:  # ASE raises many kinds on malformed headers
        raise InputFormatError(path, first, f"structure header not readable ({type(exc).__name__}: {exc})",
                               field="structure") from None
    try:
        volume = float(abs(np.linalg.det(atoms.cell.array)))
    except (ValueError, np.linalg.LinAlgError):
        volume = 0.0
    if not volume > 0 or atoms.cell.rank < 3:
        raise InputFormatError(path, first + 1, "cell has no positive volume", field="lattice")
    return atoms


def _kind_of(path, quantity):
    name = strip_compression(Path(path).name).upper()
    if quantity != "auto":
        return quantity, "given by the caller"
    if "LOCPOT" in name:
        return "potential", "file name contains LOCPOT"
    if "ELFCAR" in name:
        return "raw", "file name contains ELFCAR (dimensionless)"
    return "density", "charge-density layout (values are ρ·V)"


def read_chgcar(path, quantity: str = "auto", progress: bool = True, max_bytes: int | None = None) -> list[Grid]:
    """Read every grid block of a CHGCAR-family file.

    Parameters
    ----------
    path : file (optionally compressed)
    quantity : {"auto", "density", "potential", "orbital", "raw"}
        ``"density"`` divides by the cell volume (e/Å³); ``"potential"`` keeps eV; ``"raw"``
        keeps the stored numbers. ``"auto"`` chooses from the file name (LOCPOT → potential).
    progress : show a progress bar on slow reads
    max_bytes : int, optional
        Memory budget in bytes for the declared grid counts (default ``$ORBTOOL_MAX_BYTES`` or
        1 GiB), checked before any value is read or decompressed.

    Returns
    -------
    list of Grid
        ``total`` and, when present, ``magnetisation`` (collinear) or ``mx``, ``my``, ``mz``.
    """
    q, why = _kind_of(path, quantity)
    comp = compression_of(path) is not None
    grids = []
    with open_binary(path) as fh:
        hr = HeaderReader(fh, path)
        atoms = read_poscar_header(hr, path)
        line = hr.next("the grid counts")
        if not line.strip():
            line = hr.next("the grid counts")
        toks = line.split()
        if len(toks) != 3:
            raise InputFormatError(path, hr.line, f"expected three grid counts, found {line.strip()!r}",
                                   field="grid counts")
        dims = tuple(to_int(t, path, hr.line, "grid counts") for t in toks)
        if min(dims) < 1:
            raise InputFormatError(path, hr.line, f"grid counts must be positive, got {dims}", field="grid counts")
        total = dims[0] * dims[1] * dims[2]
        check_declared_size(path, total, "grid", hr.line, comp)
        volume = float(abs(np.linalg.det(atoms.cell.array)))
        bar = progress_bar(path, progress, comp)
        try:
            reader = hr.values(bar)
            notes = []
            while True:
                check_memory(path, (len(grids) + 1) * total * 8, "grid", hr.line, max_bytes=max_bytes)
                out = np.empty(dims, order="F")  # the file's order: first index fastest
                reader.fill(out.reshape(-1, order="F"), f"grid block {len(grids) + 1}")
                grids.append(out)
                nxt = _skip_to_next_block(reader, dims, atoms, path, notes)
                if not nxt or len(grids) == _MAX_BLOCKS:
                    break
        finally:
            if bar is not None:
                bar.close()
    if len(grids) == 3:
        raise InputFormatError(path, None, "found 3 grid blocks; expected 1, 2 (spin) or 4 (non-collinear)",
                               field="grid blocks")
    names = {1: ["total"], 2: ["total", "magnetisation"], 4: ["total", "mx", "my", "mz"]}[len(grids)]
    if q == "potential" and len(grids) == 2:
        names = ["potential", "potential (second spin block)"]
    unit = {"density": "e/Å^3", "potential": "eV", "orbital": "Å^-3/2", "raw": "arb"}[q]
    factor = 1.0 / volume if q == "density" else 1.0
    out = []
    for name, vals in zip(names, grids):
        if factor != 1.0:
            vals *= factor
        meta = {"format": "chgcar", "quantity": q, "quantity_reason": why, "divided_by_volume": factor != 1.0,
                "cell_volume": volume, "notes": notes}
        if name == "total" and not np.any(vals):
            warn(f"{path}: every value of the {name} grid is zero (an empty band-decomposed density, or the "
                 "wrong band or energy window?); nothing can be learned from it", meta)
        out.append(Grid(values=vals, cell=atoms.cell.array, origin=np.zeros(3), atoms=atoms, unit=unit,
                        source=str(path), name=name, pbc=True, meta=meta))
    return out


_AUG = re.compile(r"\s*augmentation occupancies\s+(\d+)\s+(\d+)\s*$")


def _skip_to_next_block(reader, dims, atoms, path, notes) -> bool:
    """Skip augmentation blocks and the moment line after a grid block.

    Returns True if another grid block (its counts line just consumed) follows.
    """
    stray = 0
    start = None
    while True:
        line = next_line(reader)
        if line is None:
            if stray > len(atoms):
                raise InputFormatError(path, start, f"{stray} numbers after the grid block: more values than "
                                       f"the {dims[0] * dims[1] * dims[2]:,d} declared", field="grid values")
            return False
        toks = line.split()
        if not toks:
            continue
        m = _AUG.match(line)
        if m:
            n = int(m.group(2))
            if n > 10_000:
                raise InputFormatError(path, reader.line - 1, f"implausible augmentation block size {n}",
                                       field="augmentation")
            reader.fill(np.empty(n), "augmentation occupancies")
            continue
        if len(toks) == 3 and all(t.isdigit() for t in toks):
            got = tuple(int(t) for t in toks)
            if got != dims:
                raise InputFormatError(path, reader.line - 1, f"second block has grid counts {got}, the first "
                                       f"{dims}", field="grid counts")
            return True
        try:
            [float(t) for t in toks]
        except ValueError:
            if strip_compression(Path(path).name).upper() in ("CHG",) and stray == 0:
                # CHG files of a run with several ionic steps repeat structure + grid per image
                notes.append(f"line {reader.line - 1}: another image follows; only the first was read")
                return False
            raise InputFormatError(path, reader.line - 1, f"unexpected line after a grid block: "
                                   f"{line.strip()[:40]!r} (expected augmentation occupancies, "
                                   "grid counts or the end of the file)", field="grid values") from None
        if start is None:
            start = reader.line - 1
        stray += len(toks)
