"""The format registry: one declarative entry per file format.

Each :class:`Format` names the module holding its reader/writer (imported
only when used, so an unused format costs nothing), the file-name patterns
it usually has, and a content test working on the first few kilobytes of
the (decompressed) file. Sniffing is separate from parsing: the content
tests are cheap and never raise.
"""

from __future__ import annotations

import fnmatch
import importlib
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

from ..errors import InputFormatError
from ._files import as_path, read_head, strip_compression

__all__ = ["Format", "FORMATS", "formats_for", "get_format", "guess_format", "reader_of", "writer_of"]


@dataclass(frozen=True)
class Format:
    """One file format orbtool can read (and maybe write).

    Attributes
    ----------
    name : str
        Registry name passed as ``format=`` by users.
    kind : str
        What it holds: ``"grid"``, ``"pdos"``, ``"projections"``, ``"structure"`` or ``"energy"``.
    module : str
        Module (relative to :mod:`orbtool.io`) with the functions below.
    reader, writer : str or None
        Function names in ``module``.
    patterns : tuple of str
        Case-insensitive glob patterns of usual file names (compression suffix removed).
    sniff : callable or None
        ``sniff(name, lines) -> bool`` on the base name and the first lines of text.
    folder : bool
        The reader takes a folder (several files) rather than one file.
    """

    name: str
    kind: str
    module: str
    reader: str | None
    writer: str | None = None
    patterns: tuple = ()
    sniff: Callable | None = None
    folder: bool = False

    def matches_name(self, name: str) -> bool:
        low = strip_compression(name).lower()
        return any(fnmatch.fnmatchcase(low, p) for p in self.patterns)


# ---------------------------------------------------------------- content tests
_FLOAT = r"[-+]?(?:\d+\.?\d*|\.\d+)(?:[eEdD][-+]?\d+)?"
_INT = r"[-+]?\d+"


def _is_row(line: str, pattern: str) -> bool:
    return re.fullmatch(r"\s*" + pattern + r"\s*", line) is not None


def _floats(n: int) -> str:
    return r"\s+".join([_FLOAT] * n)


def _sniff_cube(name, lines):
    # two comment lines, then "natoms ox oy oz [nval]" and three "n vx vy vz" lines
    if len(lines) < 7:
        return False
    head = lines[2].split()
    if not (4 <= len(head) <= 5) or not _is_row(lines[2], _INT + r"\s+" + _floats(len(head) - 1)):
        return False
    return all(_is_row(lines[i], _INT + r"\s+" + _floats(3)) for i in (3, 4, 5))


def _poscar_grid_line(lines) -> int | None:
    """Index of the grid-dimension line of a CHGCAR-like file, or None."""
    if len(lines) < 10:
        return None
    if not (_is_row(lines[1], _FLOAT) or _is_row(lines[1], _floats(3))):
        return None
    if not all(_is_row(lines[i], _floats(3)) for i in (2, 3, 4)):
        return None
    i = 5
    if not _is_row(lines[i], r"(?:\d+\s*)+"):
        i += 1  # element-name line (VASP 5 and later)
        if i >= len(lines) or not _is_row(lines[i], r"(?:\d+\s*)+"):
            return None
    nat = sum(int(t) for t in lines[i].split())
    i += 1
    if i < len(lines) and lines[i].strip()[:1] in ("s", "S"):
        i += 1  # selective dynamics
    j = i + 1 + nat
    # a blank line (VASP) or not, then the three grid counts
    for k in (j, j + 1):
        if k < len(lines) and _is_row(lines[k], r"\d+\s+\d+\s+\d+"):
            return k
    return None


def _sniff_chgcar(name, lines):
    return _poscar_grid_line(lines) is not None


def _sniff_poscar(name, lines):
    return len(lines) >= 8 and _poscar_grid_line(lines + [""] * 3) is None and \
        (_is_row(lines[1], _FLOAT) and all(_is_row(lines[i], _floats(3)) for i in (2, 3, 4)))


def _sniff_xsf(name, lines):
    return any("DATAGRID_3D" in ln for ln in lines)


def _sniff_doscar(name, lines):
    return len(lines) >= 6 and _is_row(lines[0], r"\s+".join([_INT] * 4)) and lines[3].strip() == "CAR"


def _sniff_procar(name, lines):
    return bool(lines) and lines[0].startswith("PROCAR")


def _sniff_qe_pdos(name, lines):
    return bool(re.search(r"\.pdos_atm#\d+\(.+\)_wfc#\d+\(.\)", name)) or \
        (bool(lines) and lines[0].lstrip().startswith("# E (eV)") and "pdos" in lines[0])


def _sniff_cp2k_pdos(name, lines):
    return bool(lines) and "Projected DOS for atomic kind" in lines[0]


def _sniff_native(magic):
    return lambda name, lines: bool(lines) and lines[0].startswith(magic)


def _sniff_outcar(name, lines):
    return bool(lines) and lines[0].lstrip().startswith("vasp.")


def _sniff_oszicar(name, lines):
    return any(re.match(r"\s*\d+\s+F=\s*" + _FLOAT + r"\s+E0=", ln) for ln in lines) or \
        (bool(lines) and re.match(r"\s*N\s+E\s+dE\s+d eps", lines[0]) is not None)


FORMATS: tuple[Format, ...] = (
    Format("npz", "any", "native", "read_npz", "write_npz", ("*.npz",)),
    Format("orbtool-pdos", "pdos", "native", "read_pdos_text", "write_pdos_text", ("*.pdos.txt",),
           _sniff_native("# orbtool-pdos")),
    Format("orbtool-projections", "projections", "native", "read_projections_text", "write_projections_text",
           ("*.proj.txt",), _sniff_native("# orbtool-projections")),
    Format("cube", "grid", "cube", "read_cube", "write_cube", ("*.cube", "*.cub"), _sniff_cube),
    Format("xsf", "grid", "xsf", "read_xsf", None, ("*.xsf",), _sniff_xsf),
    Format("chgcar", "grid", "chgcar", "read_chgcar", None,
           ("*chgcar*", "*parchg*", "chg", "chg.*", "*locpot*", "*aeccar*", "*elfcar*"), _sniff_chgcar),
    Format("doscar", "pdos", "doscar", "read_doscar", None, ("*doscar*",), _sniff_doscar),
    Format("qe-pdos", "pdos", "qe_pdos", "read_qe_pdos", None, ("*.pdos_atm#*",), _sniff_qe_pdos, folder=True),
    Format("cp2k-pdos", "pdos", "cp2k_pdos", "read_cp2k_pdos", None, ("*-k*-*.pdos", "*.pdos"),
           _sniff_cp2k_pdos, folder=True),
    Format("procar", "projections", "procar", "read_procar", None, ("*procar*",), _sniff_procar),
    Format("outcar", "energy", "structure", "read_outcar_energy", None, ("*outcar*",), _sniff_outcar),
    Format("oszicar", "energy", "structure", "read_oszicar_energy", None, ("*oszicar*",), _sniff_oszicar),
    Format("poscar", "structure", "structure", "read_poscar", None, ("*poscar*", "*contcar*"), _sniff_poscar),
)


def formats_for(kind: str) -> list[Format]:
    """Registered formats able to produce ``kind``."""
    return [f for f in FORMATS if f.kind in (kind, "any")]


def get_format(name: str, kind: str | None = None) -> Format:
    """Look a format up by name (checking it produces ``kind``)."""
    for f in FORMATS:
        if f.name == name and (kind is None or f.kind in (kind, "any")):
            return f
    known = ", ".join(f.name for f in (formats_for(kind) if kind else FORMATS))
    raise InputFormatError(None, None, f"unknown format {name!r} for {kind or 'reading'}; known: {known}",
                           field="format")


_SNIFF_BYTES = 65536  # enough for the structure header of a ~1000-atom CHGCAR


def _head_lines(path) -> list[str]:
    head = read_head(path, _SNIFF_BYTES)
    if not head or b"\x00" in head[:4096]:
        return []
    text = head.decode("utf-8", errors="replace")
    lines = text.splitlines()
    if not text.endswith("\n") and len(head) == _SNIFF_BYTES:
        lines = lines[:-1]  # the last line may be cut
    return lines


def guess_format(path, kind: str) -> Format:
    """The format of ``path`` for producing ``kind``: by content first, then by name.

    Raises :class:`InputFormatError` listing the formats tried when nothing fits.
    """
    p = as_path(path)
    candidates = formats_for(kind)
    if p.is_dir():
        for f in candidates:
            if f.folder and any(_folder_has(p, f)):
                return f
        raise InputFormatError(p, None, f"no {kind} file recognised in this folder (tried: "
                               + ", ".join(f.name for f in candidates if f.folder) + ")")
    if not p.exists():
        raise InputFormatError(p, None, "file does not exist")
    name = p.name
    if p.suffix.lower() == ".npz" or read_head(p, 4).startswith(b"PK"):
        return get_format("npz")
    lines = _head_lines(p)
    for f in candidates:
        if f.sniff is not None and lines and f.sniff(name, lines):
            return f
    for f in candidates:
        if f.matches_name(name):
            return f
    raise InputFormatError(p, None, f"cannot tell the format of this file as {kind}; pass format= one of "
                           + ", ".join(f.name for f in candidates))


def _folder_has(folder: Path, fmt: Format):
    for child in sorted(folder.iterdir()):
        if child.is_file() and (fmt.matches_name(child.name) or
                                (fmt.sniff is not None and fmt.sniff(child.name, _head_lines(child)[:3]))):
            yield child


def folder_members(folder, fmt: Format) -> list[Path]:
    """Files of ``folder`` that belong to the folder format ``fmt``."""
    return list(_folder_has(Path(folder), fmt))


def _function(fmt: Format, attr: str):
    fname = getattr(fmt, attr)
    if fname is None:
        verb = "read" if attr == "reader" else "written"
        raise InputFormatError(None, None, f"format {fmt.name!r} cannot be {verb} by orbtool", field="format")
    module = importlib.import_module(f"orbtool.io.{fmt.module}")
    return getattr(module, fname)


def reader_of(fmt: Format):
    """The reader function of ``fmt`` (imports its module on first use)."""
    return _function(fmt, "reader")


def writer_of(fmt: Format):
    """The writer function of ``fmt`` (imports its module on first use)."""
    return _function(fmt, "writer")
