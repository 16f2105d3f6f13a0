"""Projected DOS files of the open-source plane-wave suite's projection tool (projwfc).

Layout (projwfc documentation, ``INPUT_PROJWFC``, "filpdos"): one file per atom
and atomic wavefunction, named ``<prefix>.pdos_atm#N(El)_wfc#M(l)``, with a
header line ``# E (eV) ldos(E) pdos(E) ...`` and rows ``E ldos pdos_1 …
pdos_{2l+1}`` (m-resolved, in the order pz px py for p and dz2 dxz dyz dx2-y2
dxy for d); spin-polarised files have ``ldosup ldosdw`` then ``pdosup pdosdw``
per m. ``<prefix>.pdos_tot`` holds the total (``E dos pdos`` or ``E dosup dosdw
pdosup pdosdw``). Energies are in eV. Several wavefunctions of the same l on
one atom (semicore and valence) are summed into one channel per orbital.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np

from ..errors import InputFormatError
from ..spectra import ProjectedDOS
from ._files import read_text, strip_compression
from ._numbers import table

__all__ = ["read_qe_pdos"]

_NAME = re.compile(r"\.pdos_atm#(\d+)\((\w+)\)_wfc#(\d+)\((\w+)\)$")
# real spherical harmonics in projwfc's order
_M_NAMES = {"s": ["s"], "p": ["pz", "px", "py"], "d": ["dz2", "dxz", "dyz", "dx2-y2", "dxy"],
            "f": ["f0", "f1", "f-1", "f2", "f-2", "f3", "f-3"]}


def _read_block(path):
    lines = read_text(path).splitlines()
    if not lines or not lines[0].lstrip().startswith("#"):
        raise InputFormatError(path, 1, "expected a header line starting with '# E (eV)'", field="header")
    header = lines[0]
    body = lines[1:]
    while body and not body[-1].strip():
        body.pop()
    if len(body) < 2:
        raise InputFormatError(path, 2, "fewer than two energy rows", field="rows")
    return header, table(body, path, 2, len(body[0].split()), "PDOS rows")


def read_qe_pdos(path) -> ProjectedDOS:
    """Read a folder of ``*.pdos_atm#N(El)_wfc#M(l)`` files (or one such file).

    Returns a :class:`ProjectedDOS` with m-resolved channels per atom (0-based atom index from
    ``atm#N``), the total from ``*.pdos_tot`` when present, energies eV, DOS states/eV.
    """
    p = Path(path)
    files = [f for f in sorted(p.iterdir())] if p.is_dir() else [p]
    parts = []
    for f in files:
        m = _NAME.search(strip_compression(f.name))
        if m:
            parts.append((int(m.group(1)) - 1, m.group(2), int(m.group(3)), m.group(4), f))
    if not parts:
        raise InputFormatError(p, None, "no '*.pdos_atm#N(El)_wfc#M(l)' files found")
    prefixes = {f.name[: f.name.index(".pdos_atm#")] for *_, f in parts}
    if len(prefixes) > 1:
        raise InputFormatError(p, None, f"files of several runs in one folder (prefixes {sorted(prefixes)}); "
                               "pass one file or separate the runs")
    energies = None
    nspin = None
    acc: dict[tuple, np.ndarray] = {}
    elements = {}
    for atom, el, wfc, lname, f in sorted(parts):
        if lname not in _M_NAMES:
            raise InputFormatError(f, None, f"unsupported wavefunction label {lname!r} (spin-orbit j-resolved "
                                   "files are not supported); expected s, p, d or f", field="file name")
        header, data = _read_block(f)
        nm = len(_M_NAMES[lname])
        spin = "ldosup" in header.replace(" ", "").lower() or data.shape[1] == 1 + 2 + 2 * nm
        ns = 2 if spin else 1
        if data.shape[1] != 1 + ns + ns * nm:
            raise InputFormatError(f, 2, f"expected {1 + ns + ns * nm} columns for l={lname} "
                                   f"({'spin' if spin else 'no spin'}), found {data.shape[1]}", field="rows")
        if nspin is None:
            nspin, energies = ns, data[:, 0]
        elif ns != nspin:
            raise InputFormatError(f, 1, "spin-polarised and unpolarised files mixed in one folder",
                                   field="spin")
        elif data.shape[0] != energies.size or not np.allclose(data[:, 0], energies, atol=1e-6):
            raise InputFormatError(f, 2, "energy grid differs from the other files", field="energies")
        if elements.setdefault(atom, el) != el:
            raise InputFormatError(f, None, f"atom {atom + 1} is {elements[atom]} in other files but {el} here",
                                   field="file name")
        cols = data[:, 1 + ns:].reshape(-1, nm, ns)
        for j, orb in enumerate(_M_NAMES[lname]):
            for s in range(ns):
                key = (atom, el, orb, s)
                acc[key] = acc.get(key, 0) + cols[:, j, s]
    total = None
    folder = p if p.is_dir() else p.parent
    tot_files = [f for f in folder.iterdir() if strip_compression(f.name).endswith(".pdos_tot")
                 and f.name.startswith(next(iter(prefixes)))]
    if tot_files:
        _, tdata = _read_block(tot_files[0])
        if tdata.shape[0] == energies.size and tdata.shape[1] >= 1 + nspin:
            total = tdata[:, 1:1 + nspin].T
    order = sorted(acc)
    return ProjectedDOS(energies=energies, values=np.array([acc[k] for k in order]), channels=tuple(order),
                        total=total, fermi=None, nspin=nspin, source=str(p),
                        meta={"format": "qe-pdos", "files": len(parts), "resolution": "lm",
                              "fermi": "not in pdos files; take it from the scf output"})
