"""Structures (via ASE) and total energies from the plane-wave code's outputs."""

from __future__ import annotations

import re
from pathlib import Path

from ..errors import InputFormatError
from ._files import as_path, open_binary, read_text, strip_compression

__all__ = ["read_structure", "read_energy"]


def read_structure(path, format: str | None = None, index=-1):
    """``ase.io.read`` with orbtool's error handling.

    POSCAR/CONTCAR names (also compressed) select ASE's ``vasp`` reader; anything ASE reads is
    accepted. Any failure becomes :class:`InputFormatError` naming the file.

    Returns
    -------
    ase.Atoms (positions Å)
    """
    import ase.io

    p = as_path(path)
    if not p.is_file():
        raise InputFormatError(p, None, "file does not exist" if not p.exists() else "expected a file")
    name = strip_compression(p.name).upper()
    if format is None and ("POSCAR" in name or "CONTCAR" in name):
        format = "vasp"
    try:
        if format == "vasp":
            with open_binary(p) as fh:
                import io
                raw = fh.read().decode("utf-8", errors="strict")
            _check_poscar_counts(raw, p)
            atoms = ase.io.read(io.StringIO(raw), format="vasp")
        else:
            atoms = ase.io.read(str(p), format=format, index=index)
    except InputFormatError:
        raise
    except Exception as exc:  # ASE raises many exception types on malformed input
        raise InputFormatError(p, None, f"not a readable structure ({type(exc).__name__}: {exc})") from None
    if isinstance(atoms, list):
        if not atoms:
            raise InputFormatError(p, None, "no structure in the file")
        atoms = atoms[-1]
    if len(atoms) == 0:
        raise InputFormatError(p, None, "the structure has no atoms")
    return atoms


def _check_poscar_counts(text: str, path) -> None:
    """Refuse a POSCAR whose atom counts exceed the coordinate lines that follow, before ASE
    allocates arrays of the declared size (VASP manual, "POSCAR": counts on line 6, or line 7
    after an element-name line; then optional 'Selective dynamics', the coordinate mode, one
    line per atom)."""
    lines = text.splitlines()
    for i in (5, 6):
        tok = lines[i].split() if i < len(lines) else []
        if tok and all(t.isdigit() for t in tok):
            total = sum(int(t) for t in tok)
            j = i + 1
            if j < len(lines) and lines[j].strip()[:1] in ("s", "S"):
                j += 1
            left = max(len(lines) - j - 1, 0)
            if total > left:
                raise InputFormatError(path, i + 1, f"atom counts add up to {total:,d} but only {left:,d} lines "
                                       "follow the coordinate-mode line", field="atom counts")
            return


_OSZ = re.compile(r"^\s*\d+\s+F=\s*(\S+)\s+E0=\s*(\S+)")
_OUT = re.compile(r"energy\s+without\s+entropy\s*=\s*(\S+)\s+energy\(sigma->0\)\s*=\s*(\S+)")


def _num(tok, path, line, what):
    try:
        v = float(tok.replace("D", "E"))
    except ValueError:
        raise InputFormatError(path, line, f"{what}: expected a number, found {tok!r}", field=what) from None
    if v != v or abs(v) == float("inf"):
        raise InputFormatError(path, line, f"{what} is not finite", field=what)
    return v


def _last_energy(path, pattern, field: str, missing: str) -> float:
    """Value (eV) of the last line matching ``pattern`` (energy in group 2)."""
    last = None
    for i, line in enumerate(read_text(path).splitlines(), start=1):
        m = pattern.search(line)
        if m:
            last = _num(m.group(2), path, i, field)
    if last is None:
        raise InputFormatError(path, None, missing, field=field)
    return last


def read_oszicar_energy(path) -> float:
    """Final ``E0=`` (energy extrapolated to σ → 0, eV) of an OSZICAR."""
    return _last_energy(path, _OSZ, "E0", "no ionic step line ('N F= ... E0= ...') found")


def read_outcar_energy(path) -> float:
    """Final ``energy(sigma->0)`` (eV) of an OUTCAR."""
    return _last_energy(path, _OUT, "energy(sigma->0)", "no 'energy(sigma->0) =' line found")


def read_energy(path) -> float:
    """Final total energy (eV) from an OUTCAR (``energy(sigma->0)``) or OSZICAR (``E0=``),
    recognised by content."""
    from .registry import guess_format, reader_of

    p = Path(path)
    fmt = guess_format(p, "energy")
    return reader_of(fmt)(p)


def read_poscar(path):
    """Registry entry for POSCAR/CONTCAR structures."""
    return read_structure(path, format="vasp")
