"""Gaussian cube files: reader and writer.

Layout (Gaussian ``cubegen`` documentation, "Cube" format): two comment lines;
``natoms ox oy oz [nval]``; three lines ``n_i vx vy vz`` (voxel step vectors);
``|natoms|`` lines ``Z charge x y z``; for a negative ``natoms`` (orbital cubes)
a line ``nmo mo_1 mo_2 ...``; then the values with x outermost, z innermost and
the orbital (or value) index fastest. A positive count means Bohr, a negative
one Å for that axis. Values are in atomic units (e/Bohr³ for densities,
Bohr^-3/2 for orbitals) when the axes are in Bohr.
"""

from __future__ import annotations

import numpy as np
from ase import Atoms

from ..errors import InputFormatError
from ..grid import Grid
from ..units import BOHR, HARTREE
from ._bulk import HeaderReader, check_declared_size, progress_bar
from ._files import check_memory, compression_of, open_binary
from ._numbers import to_float, to_int

__all__ = ["read_cube", "write_cube"]

# quantity -> (unit, factor turning atomic units into orbtool units)
_CONVERT = {
    "density": ("e/Å^3", BOHR ** -3),
    "orbital": ("Å^-3/2", BOHR ** -1.5),
    # electrostatic potential φ (hartree/e) -> potential energy of an electron, -φ in eV
    "potential": ("eV", -HARTREE),
    "raw": ("arb", 1.0),
}


def _numbers(line: str, n: int, hr: HeaderReader, what: str, ints: int = 1) -> list:
    tok = line.split()
    if len(tok) < n:
        raise InputFormatError(hr.path, hr.line, f"{what}: expected {n} numbers, found {len(tok)}", field=what)
    return [to_int(t, hr.path, hr.line, what) if i < ints else to_float(t, hr.path, hr.line, what)
            for i, t in enumerate(tok[:n])]


def _guess_quantity(comments: str, is_mo: bool) -> tuple[str, str]:
    low = comments.lower()
    if is_mo:
        return "orbital", "negative atom count: orbital cube"
    if "orbital" in low or "mo=" in low or "mo " in low:
        return "orbital", "comment lines mention an orbital"
    if "potential" in low or "esp" in low.split():
        return "potential", "comment lines mention a potential"
    if "density" in low:
        return "density", "comment lines mention a density"
    return "", ""


def read_cube(path, quantity: str = "auto", progress: bool = True, units: str = "auto",
              expected=None) -> list[Grid]:
    """Read every grid of a Gaussian cube file.

    Parameters
    ----------
    path : file (optionally compressed)
    quantity : {"auto", "density", "state", "orbital", "potential", "raw"}
        ``"auto"`` reads the comment lines and the atom-count sign, and otherwise takes a field
        with significant negative values as an orbital and a non-negative one as a density.
        ``"state"`` is the density of one state or multiplet (Σ|ψ|², unit 1/Å³).
    progress : show a progress bar on slow reads
    units : {"auto", "bohr", "angstrom"}
        Convention of the values of a cube with a bohr header: ``"bohr"`` the format's atomic
        units (e/bohr³, bohr^-3/2, hartree/e), ``"angstrom"`` values already per Å³ / Å^-3/2 /
        eV (what ``ase.io.write`` stores), ``"auto"`` decides from what the data must satisfy
        (:mod:`orbtool.io.conventions`). The choice and its reason go to ``Grid.meta``.
    expected : float or sequence, optional
        What the integral must be (electrons or bands), when known, for ``units="auto"``.

    Returns
    -------
    list of Grid
        One per orbital of a multi-orbital cube (or per value of an ``nval > 1`` cube),
        values converted to Å-based units (see :mod:`orbtool.units`).
    """
    comp = compression_of(path) is not None
    with open_binary(path) as fh:
        hr = HeaderReader(fh, path)
        comments = hr.next("the first comment line") + "\n" + hr.next("the second comment line")
        line = hr.next("the line 'natoms ox oy oz'")
        tok = line.split()
        if len(tok) not in (4, 5):
            raise InputFormatError(path, hr.line, f"expected 'natoms ox oy oz [nval]', found {len(tok)} fields",
                                   field="atom count and origin")
        natoms = to_int(tok[0], path, hr.line, "atom count")
        origin = np.array([to_float(t, path, hr.line, "origin") for t in tok[1:4]])
        nval = to_int(tok[4], path, hr.line, "values per point") if len(tok) == 5 else 1
        if natoms == 0 or nval < 1:
            raise InputFormatError(path, hr.line, f"atom count must be non-zero and values per point positive, "
                                   f"got {natoms} and {nval}", field="atom count")
        counts, steps, signs = [], [], []
        for axis in range(3):
            n, *v = _numbers(hr.next(f"grid axis {axis + 1}"), 4, hr, f"grid axis {axis + 1}")
            if n == 0:
                raise InputFormatError(path, hr.line, f"grid count of axis {axis + 1} is zero", field="grid counts")
            counts.append(abs(n))
            signs.append(n > 0)
            steps.append(v)
        if len(set(signs)) != 1:
            raise InputFormatError(path, hr.line - 2, "grid counts mix positive (Bohr) and negative (Å) signs",
                                   field="grid counts")
        length = BOHR if signs[0] else 1.0
        steps = np.array(steps) * length
        origin = origin * length
        nat = abs(natoms)
        check_declared_size(path, nat * 5, "atom count", 3, comp)
        numbers = np.empty(nat, dtype=int)
        positions = np.empty((nat, 3))
        for i in range(nat):
            z, *rest = _numbers(hr.next(f"atom line {i + 1} of {nat}"), 5, hr, "atom line")
            if not 0 <= z <= 118:
                raise InputFormatError(path, hr.line, f"atomic number must be 0..118, got {z}", field="atom line")
            numbers[i] = z
            positions[i] = rest[1:]
        positions *= length
        labels = None
        nper = nval
        if natoms < 0:
            first_mo_line = hr.line + 1
            ids = hr.next("the orbital list line").split()
            nmo = to_int(ids[0], path, hr.line, "orbital count") if ids else 0
            if nmo < 1:
                raise InputFormatError(path, hr.line, f"orbital count must be positive, got {nmo}",
                                       field="orbital list")
            ids = ids[1:]
            while len(ids) < nmo:  # Gaussian wraps the list over lines of ten
                ids += hr.next("the rest of the orbital list").split()
            if len(ids) != nmo:
                raise InputFormatError(path, first_mo_line, f"orbital list: expected {nmo} indices, found {len(ids)}",
                                       field="orbital list")
            labels = [f"orbital {to_int(t, path, hr.line, 'orbital index')}" for t in ids]
            nper = nmo * nval
        total = counts[0] * counts[1] * counts[2] * nper
        check_declared_size(path, total, "grid", hr.line + 1, comp)
        check_memory(path, total * 8, "grid", hr.line)  # memory budget from the declared counts (issue 18)
        flat = np.empty(total, dtype=np.float64)
        bar = progress_bar(path, progress, comp)
        try:
            reader = hr.values(bar)
            reader.fill(flat, "grid values")
            if not reader.at_end():
                raise InputFormatError(path, reader.line, f"more values than the {total:,d} declared "
                                       f"({'×'.join(map(str, counts))}×{nper})", field="grid values")
        finally:
            if bar is not None:
                bar.close()
    cell = steps * np.array(counts)[:, None]
    atoms = Atoms(numbers=numbers, positions=positions, cell=cell, pbc=True)
    data = flat.reshape(*counts, nper)
    if quantity == "auto":
        q, why = _guess_quantity(comments, natoms < 0)
        if not q:
            lo, hi = float(data.min()), float(np.abs(data).max())
            q, why = (("orbital", "values change sign") if lo < -1e-3 * hi else
                      ("density", "values are non-negative"))
    else:
        q, why = quantity, "given by the caller"
    unit, factor = _CONVERT["density" if q == "state" else q]
    conv = {"convention": "raw", "reason": "values kept as written (quantity='raw')"}
    if not signs[0] and q != "raw":
        factor = 1.0  # Å axes: values taken as already Å-based (no atomic-unit conversion)
        why += "; Å axes so values taken as Å-based"
        conv = {"convention": "angstrom", "reason": "Å axes (negative grid counts): values taken as Å-based"}
    elif q != "raw":
        conv = _unit_convention(data, steps, q, atoms, comments, units, expected, path)
        if conv["convention"] == "angstrom":
            factor = 1.0
    names = labels or (["value"] if nper == 1 else [f"value {i + 1}" for i in range(nper)])
    if labels and nval > 1:
        names = [f"{lab} value {j + 1}" for lab in labels for j in range(nval)]
    grids = []
    for k in range(nper):
        vals = data[..., k] if nper > 1 else data[..., 0]
        if factor != 1.0:
            vals = vals * factor if nper > 1 else np.multiply(vals, factor, out=vals)
        elif nper > 1:
            vals = np.ascontiguousarray(vals)
        meta = {"format": "cube", "quantity": q, "quantity_reason": why, "comments": comments,
                "length_unit": "bohr" if signs[0] else "angstrom", "conversion_factor": factor,
                "unit_convention": conv["convention"], "unit_convention_reason": conv["reason"]}
        for key in ("integral_if_angstrom", "integral_if_bohr", "evidence"):
            if key in conv:
                meta[f"unit_{key}"] = conv[key]
        grids.append(Grid(values=vals, cell=cell, origin=origin, atoms=atoms, unit=unit, source=str(path),
                          name=names[k], pbc=True, meta=meta))
    return grids


def _unit_convention(data, steps, q, atoms, comments, units, expected, path) -> dict:
    """Values per bohr³ (cube format) or per Å³ (ASE's writer): given, or decided from the integral."""
    from .conventions import UNIT_CONVENTIONS, decide_convention
    if units not in UNIT_CONVENTIONS:
        raise InputFormatError(path, None, f"units must be one of {UNIT_CONVENTIONS}, got {units!r}", field="units")
    if units != "auto":
        what = "values per Å³ / Å^-3/2 / eV (ASE's convention)" if units == "angstrom" else \
            "values in atomic units (the cube format's convention)"
        return {"convention": units, "reason": f"given by the caller (units={units!r}): {what}"}
    dv = abs(float(np.linalg.det(steps)))                 # voxel volume, Å³
    first = data[..., 0]
    if q == "orbital":
        integral = float(np.einsum("ijk,ijk->", first, first)) * dv
    else:
        integral = float(first.sum(dtype=np.float64)) * dv
    kind = q
    if q == "density" and expected is None:
        # a non-negative field: a total density or the density of a state; try the total first
        res = decide_convention(integral, "density", atoms=atoms, comments=comments, source=path)
        if res["evidence"] == "integral":
            return res
        kind = "state"
    return decide_convention(integral, kind, atoms=atoms, comments=comments, expected=expected, source=path)


def write_cube(path, grid: Grid) -> "Path":  # noqa: F821
    """Write ``grid`` as a Gaussian cube file: Bohr axes, values in atomic units
    (densities e/Bohr³, orbitals Bohr^-3/2, potentials as φ in hartree/e, ``arb`` unchanged).

    Returns the path written.
    """
    from pathlib import Path
    q = {"e/Å^3": "density", "Å^-3/2": "orbital", "eV": "potential", "arb": "raw"}[grid.unit]
    factor = 1.0 / _CONVERT[q][1]
    atoms = grid.atoms
    n1, n2, n3 = grid.shape
    steps = grid.voxel_vectors / BOHR
    path = Path(path)
    with open(path, "w", encoding="ascii", errors="replace") as fh:
        fh.write(f"orbtool cube: {grid.name or 'grid'} ({q} in atomic units)\n")
        fh.write("OUTER LOOP: X, MIDDLE LOOP: Y, INNER LOOP: Z\n")
        nat = 0 if atoms is None else len(atoms)
        o = grid.origin / BOHR
        # a cube needs at least one atom line: a dummy atom (Z = 0) stands in for none
        fh.write(f"{max(nat, 1):5d} {o[0]:14.8f} {o[1]:14.8f} {o[2]:14.8f}\n")
        for n, v in zip((n1, n2, n3), steps):
            fh.write(f"{n:5d} {v[0]:14.8f} {v[1]:14.8f} {v[2]:14.8f}\n")
        if nat:
            for z, p in zip(atoms.get_atomic_numbers(), atoms.get_positions() / BOHR):
                fh.write(f"{z:5d} {float(z):14.8f} {p[0]:14.8f} {p[1]:14.8f} {p[2]:14.8f}\n")
        else:
            fh.write(f"{0:5d} {0.0:14.8f} {o[0]:14.8f} {o[1]:14.8f} {o[2]:14.8f}\n")
        row = (" %16.9e" * 6 + "\n") * (n3 // 6) + ((" %16.9e" * (n3 % 6) + "\n") if n3 % 6 else "")
        flat = (np.asarray(grid.values, dtype=float) * factor).reshape(n1 * n2, n3)
        rows_per_block = max(1, 200_000 // n3)
        block = row * rows_per_block
        for k in range(0, n1 * n2, rows_per_block):
            part = flat[k:k + rows_per_block]
            fh.write((block if len(part) == rows_per_block else row * len(part)) % tuple(part.ravel()))
    return path
