"""Writers for the demo run folders in the plane-wave family layouts users already have.

POSCAR (via ASE), DOSCAR (lm-decomposed per atom), PROCAR ("lm decomposed"), CHGCAR-layout
grids (PARCHG) and OSZICAR.  Spin-degenerate (ISPIN=1 style): DOS and occupations count both
spins.  Gzip output is byte-for-byte deterministic (``mtime=0``, no file name in the header).
"""

from __future__ import annotations

import gzip
import io
import math
from pathlib import Path

import numpy as np
from ase.io import write as ase_write

__all__ = ["PLANEWAVE_ORDER", "write_poscar", "write_doscar", "write_procar", "write_chgcar", "write_oszicar",
           "broadened_dos", "write_text"]

#: Generator orbital order is s, px, py, pz; files use s, py, pz, px then d (zeros here).
PLANEWAVE_ORDER = [0, 2, 3, 1]
LM_NAMES = ("s", "py", "pz", "px", "dxy", "dyz", "dz2", "dxz", "dx2")


def write_text(path, text: str) -> None:
    """Write ``text``; gzip it (deterministically) when ``path`` ends with ``.gz``."""
    path = Path(path)
    data = text.encode("ascii")
    if path.suffix == ".gz":
        with open(path, "wb") as raw, gzip.GzipFile(filename="", mode="wb", fileobj=raw, mtime=0,
                                                    compresslevel=6) as gz:
            gz.write(data)
    else:
        path.write_bytes(data)


def poscar_text(atoms, comment: str) -> str:
    buf = io.StringIO()
    ase_write(buf, atoms, format="vasp", direct=True)
    first, rest = buf.getvalue().split("\n", 1)           # ASE puts the formula on the comment line
    return comment.replace("\n", " ") + "\n" + rest


def write_poscar(path, atoms, comment: str) -> None:
    """POSCAR with direct coordinates; ``comment`` becomes the first line."""
    write_text(path, poscar_text(atoms, comment))


def broadened_dos(eps, weights, proj, egrid, sigma):
    """Gaussian-broadened total and per-atom lm DOS (states/eV, both spins).

    Parameters
    ----------
    eps : (nk, nb) eV;  weights : (nk,);  proj : (nk, nb, natom, 4) |c|^2 (s, px, py, pz)
    egrid : (nE,) eV;  sigma : Gaussian standard deviation, eV (values beyond 6 sigma are zero).

    Returns
    -------
    total (nE,), partial (natom, nE, 4) in file order s, py, pz, px.
    """
    x = (egrid[:, None] - eps.ravel()[None, :]) / sigma
    g = np.where(np.abs(x) < 6, np.exp(-0.5 * x ** 2), 0.0) / (sigma * math.sqrt(2 * math.pi))
    wk = 2.0 * np.repeat(np.asarray(weights, float), eps.shape[1])            # spin factor 2
    total = g @ wk
    nk, nb, nat, no = proj.shape
    part = g @ (wk[:, None] * proj.reshape(nk * nb, nat * no))
    part = part.reshape(len(egrid), nat, no).transpose(1, 0, 2)[:, :, PLANEWAVE_ORDER]
    return total, part


def write_doscar(path, atoms, eps, weights, proj, egrid, sigma, fermi, system: str) -> None:
    """DOSCAR: 5 header lines, the "Emax Emin NEDOS Efermi 1.0" line, total block
    (energy, DOS, integrated DOS), then per atom the same line and (energy, s, py, pz, px, d x5)."""
    total, part = broadened_dos(eps, weights, proj, egrid, sigma)
    de = egrid[1] - egrid[0]
    integ = np.concatenate([[0.0], np.cumsum(0.5 * (total[1:] + total[:-1]) * de)])
    n = len(atoms)
    cell = atoms.cell.lengths() * 1e-10
    head = [f"{n:4d}{n:4d}{1:4d}{0:4d}",
            f"  {atoms.get_volume():.7E}  {cell[0]:.7E}  {cell[1]:.7E}  {cell[2]:.7E}  0.5000000E-15",
            "  1.0000000000000E-004",
            "  CAR ",
            f" {system}"]
    eline = f"{egrid[-1]:15.8f}{egrid[0]:15.8f}{len(egrid):6d}{fermi:15.8f}{1.0:15.8f}"
    out = io.StringIO()
    out.write("\n".join(head) + "\n" + eline + "\n")
    np.savetxt(out, np.column_stack([egrid, total, integ]), fmt=["%11.3f", "%11.4E", "%11.4E"], delimiter=" ")
    ne = len(egrid)
    rows = np.column_stack([np.tile(egrid, n), part.reshape(n * ne, 4), np.zeros((n * ne, 5))])
    buf = io.StringIO()
    np.savetxt(buf, rows, fmt=["%11.3f"] + ["%11.4E"] * 9, delimiter=" ")      # one call, then split per atom
    lines = buf.getvalue().splitlines()
    for a in range(n):
        out.write(eline + "\n" + "\n".join(lines[a * ne:(a + 1) * ne]) + "\n")
    write_text(path, out.getvalue())


def write_procar(path, kpoints, kweights, eps, occ, proj) -> None:
    """PROCAR in the "lm decomposed" layout, ISPIN=1 (occupations 0..2).

    ``proj`` (nk, nb, natom, 4) in generator order; written as s py pz px, d columns zero, tot.
    """
    nk, nb, nat, _ = proj.shape
    out = io.StringIO()
    out.write("PROCAR lm decomposed\n")
    out.write(f"# of k-points: {nk:4d}         # of bands: {nb:4d}         # of ions: {nat:4d}\n\n")
    cols = "ion" + "".join(f"{c:>7s}" for c in LM_NAMES) + "    tot\n"
    ions = np.arange(1, nat + 1)
    for ik in range(nk):
        k = kpoints[ik]
        out.write(f" k-point {ik + 1:4d} :    {k[0]:.8f} {k[1]:.8f} {k[2]:.8f}     weight = {kweights[ik]:.8f}\n\n")
        p = proj[ik][:, :, PLANEWAVE_ORDER]                                   # (nb, nat, 4)
        table = np.concatenate([p, np.zeros((nb, nat, 5)), p.sum(axis=2, keepdims=True)], axis=2)
        rows = np.column_stack([np.tile(ions, nb), table.reshape(nb * nat, 10)])
        buf = io.StringIO()
        np.savetxt(buf, rows, fmt=["%5d"] + ["%6.3f"] * 10, delimiter=" ")  # one call per k point
        lines = buf.getvalue().splitlines()
        buf = io.StringIO()
        np.savetxt(buf, table.sum(axis=1), fmt="%6.3f", delimiter=" ")
        tots = buf.getvalue().splitlines()
        for ib in range(nb):
            out.write(f"band {ib + 1:4d} # energy {eps[ik, ib]:14.8f} # occ. {occ[ik, ib]:12.8f}\n\n")
            out.write(cols + "\n".join(lines[ib * nat:(ib + 1) * nat]) + "\ntot   " + tots[ib] + "\n\n")
        out.write("\n")
    write_text(path, out.getvalue())


def write_chgcar(path, atoms, density, comment: str) -> None:
    """CHGCAR layout: POSCAR block, blank line, grid dimensions, density × cell volume
    (electrons), x fastest, 5 values per line.  ``density`` (n1, n2, n3) in electrons/Å^3."""
    out = io.StringIO()
    out.write(poscar_text(atoms, comment))
    out.write("\n" + "".join(f"{n:5d}" for n in density.shape) + "\n")
    vals = (np.asarray(density) * atoms.get_volume()).ravel(order="F")
    full = len(vals) // 5 * 5
    np.savetxt(out, vals[:full].reshape(-1, 5), fmt="%.5E", delimiter=" ")
    if full < len(vals):
        out.write(" ".join(f"{v:.5E}" for v in vals[full:]) + "\n")
    write_text(path, out.getvalue())


def _fortran_e(x: float, digits: int = 8) -> str:
    """Fortran-style ``-.12345678E+04``."""
    if x == 0:
        return "0." + "0" * digits + "E+00"
    e = math.floor(math.log10(abs(x))) + 1
    m = abs(x) / 10 ** e
    if round(m, digits) >= 1.0:
        m, e = m / 10, e + 1
    return f"{'-' if x < 0 else ' '}.{round(m * 10 ** digits):0{digits}d}E{e:+03d}"


def write_oszicar(path, history) -> None:
    """OSZICAR with one ionic line per step: ``n F= ... E0= ...  d E =...``; the last line is final."""
    lines, prev = [], None
    for n, (_, F, E0) in enumerate(history, start=1):
        dE = 0.0 if prev is None else F - prev
        prev = F
        lines.append(f"{n:4d} F= {_fortran_e(F)} E0= {_fortran_e(E0)}  d E ={_fortran_e(dE, 6)}")
    write_text(path, "\n".join(lines) + "\n")
