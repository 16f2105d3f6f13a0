"""Assemble a :class:`~orbtool.case.DefectCase` from run folders by recognising
the files inside by content (not only by name)."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

from ..case import DefectCase
from ..errors import InputFormatError
from ._files import read_head, strip_compression
from .registry import _head_lines, get_format

__all__ = ["load_case", "scan_run"]


@dataclass
class RunData:
    """What one run folder holds (internal; built by :func:`scan_run`)."""

    folder: Path
    structure: object = None
    pdos: object = None
    projections: object = None
    grids: dict = field(default_factory=dict)
    energy: float | None = None
    notes: list = field(default_factory=list)
    calculator: object = None
    edges: object = None


# ASE formats that are a code's output (a log or results file): used for the structure only when no
# structure file is present; they may also carry a calculator with eigenvalues and occupations
_NOT_STRUCTURES = {"json", "db", "cube", "xsf", "npz", "vasp-xdatcar"}


def _is_log(fmt: str) -> bool:
    return "out" in fmt or fmt in {"vasp-xml", "gpw", "ulm", "castep-castep", "traj"}


def _ase_format(f: Path) -> str | None:
    """ASE's name for the format of ``f`` judged by content (no guessing from the name), or None."""
    try:
        from ase.io.formats import filetype
        fmt = filetype(str(f), guess=False)
    except Exception:  # ASE raises several types for files it does not know
        return None
    return None if fmt in _NOT_STRUCTURES else fmt


def _has_eigenvalues(calc) -> bool:
    from ._calc_bands import offers_eigenvalues
    return offers_eigenvalues(calc)


def _npz_kind(f: Path) -> str | None:
    import zipfile
    try:
        with zipfile.ZipFile(f) as z:
            if "orbtool_kind.npy" not in z.namelist():
                return None
        import numpy as np
        with np.load(f, allow_pickle=False) as npz:
            return str(npz["orbtool_kind"])
    except Exception:  # not a zip / not ours: not recognised
        return None


def _classify(f: Path) -> str | None:
    """Format name of ``f`` judged by content first, then name; None if not recognised.

    orbtool's own formats and the plane-wave family first; ``npz:<kind>`` for orbtool NPZ
    archives; ``band-edges`` for a band-structure JSON (:func:`orbtool.io.edges.read_band_edges`);
    ``ase:<format>`` for anything else ASE recognises by content (extxyz, CIF, xyz, code outputs).
    """
    name = strip_compression(f.name)
    upper = name.upper()
    if read_head(f, 4).startswith(b"PK"):
        kind = _npz_kind(f)
        return f"npz:{kind}" if kind else None
    lines = _head_lines(f)
    order = ("doscar", "procar", "chgcar", "cube", "xsf", "outcar", "oszicar", "orbtool-pdos",
             "orbtool-projections")
    for fmt_name in order:
        fmt = get_format(fmt_name)
        if lines and fmt.sniff is not None and fmt.sniff(f.name, lines):
            return fmt_name
    if lines and get_format("poscar").sniff(f.name, lines) or "POSCAR" in upper or "CONTCAR" in upper:
        return "poscar"
    if upper.startswith("VASPRUN") and upper.endswith(".XML"):
        return "vasprun"
    if upper.endswith(".JSON"):
        from .edges import looks_like_band_edges
        return "band-edges" if looks_like_band_edges(f) else None
    for fmt_name in order:
        if get_format(fmt_name).matches_name(f.name):
            return fmt_name
    fmt = _ase_format(f)
    return f"ase:{fmt}" if fmt else None


_GRID_QUANTITY = {"potential": "potential", "density": "density", "state": "auto"}


def _grid_role(f: Path, fmt: str) -> tuple[str, str]:
    up = strip_compression(f.name).upper()
    if "LOCPOT" in up or "POT" in up:
        return "potential", f"{f.name}: local potential (name)"
    if "PARCHG" in up or any(w in up for w in ("STATE", "BAND", "WFC", "ORBITAL", "PSI")):
        return "state", f"{f.name}: density/orbital of a chosen state (name)"
    if fmt == "chgcar" and ("CHGCAR" in up or up == "CHG"):
        return "density", f"{f.name}: total charge density (name)"
    if any(w in up for w in ("DENSITY", "RHO", "CHARGE", "CHGCAR")):
        return "density", f"{f.name}: total charge density (name)"
    return "state", f"{f.name}: grid of unknown role, guessed to be the in-gap state"


def _files_of(folder: Path) -> list[Path]:
    if folder.is_file():
        return [folder]
    return [f for f in sorted(folder.iterdir()) if f.is_file() and not f.name.startswith(".")]


def _structure_order(found) -> list[Path]:
    """Structure candidates, best first: CONTCAR, POSCAR, plain structure files ASE reads (extxyz,
    CIF, xyz, ...), vasprun.xml and other code outputs."""
    structs = sorted(found.get("poscar", []), key=lambda p: (0 if "CONTCAR" in p.name.upper() else 1, p.name))
    plain = [f for k, fs in sorted(found.items()) if k.startswith("ase:") and not _is_log(k[4:]) for f in fs]
    logs = [f for k, fs in sorted(found.items()) if k.startswith("ase:") and _is_log(k[4:]) for f in fs]
    return structs + plain + found.get("vasprun", []) + logs


def scan_run(folder, *, grids: bool = True, units: str = "auto") -> RunData:
    """Read everything orbtool recognises in one run folder (or one file).

    Structure: CONTCAR (relaxed) is preferred over POSCAR, then any structure file ASE reads by
    content (extxyz, CIF, xyz, ...), then code outputs ASE reads (vasprun.xml, GPAW/QE/... logs),
    then the atoms carried by a grid file (cube, XSF) or an NPZ. DOS from a DOSCAR, orbtool PDOS
    or NPZ; band projections from a PROCAR, orbtool text or NPZ; grids from CHGCAR-family, cube,
    XSF and NPZ files (role by name: LOCPOT/pot → ``potential``, PARCHG/state/band → ``state``,
    CHGCAR/density → ``density``); total energy from OUTCAR (``energy(sigma->0)``) or OSZICAR
    (``E0``); a band-structure JSON (``vbm``/``cbm``) as the host's true band edges. ``units``
    is passed to the cube reader (see :func:`orbtool.io.read_grids`).
    """
    from .api import read_grid, read_pdos, read_projections
    from .structure import read_energy, read_structure

    folder = Path(folder)
    if not folder.exists():
        raise InputFormatError(folder, None, "folder or file does not exist")
    run = RunData(folder)
    found: dict[str, list[Path]] = {}
    for f in _files_of(folder):
        kind = _classify(f)
        if kind is None:
            run.notes.append(f"skipped {f.name}: not a recognised file")
            continue
        found.setdefault(kind, []).append(f)
    chosen = None
    for f in _structure_order(found):
        try:
            atoms = read_structure(f)
        except InputFormatError as exc:
            run.notes.append(f"skipped {f.name}: {exc.reason}")
            continue
        run.structure, chosen = atoms, f
        run.notes.append(f"structure from {f.name}" + (" (relaxed)" if "CONTCAR" in f.name.upper() else ""))
        calc = getattr(atoms, "calc", None)
        if calc is not None and _has_eigenvalues(calc):
            run.calculator = calc
            run.notes.append(f"{f.name} also carries the engine's eigenvalues ({type(calc).__name__})")
        break
    if run.structure is not None and run.calculator is None and not any(
            k in found for k in ("procar", "orbtool-projections", "npz:projections")):
        _eigenvalues_from_a_log(run, found, chosen)
    atoms = run.structure
    for f in found.get("doscar", []) + found.get("orbtool-pdos", []) + found.get("npz:pdos", []):
        kw = {"atoms": atoms} if "DOSCAR" in f.name.upper() and atoms is not None else {}
        run.pdos = read_pdos(f, **kw)
        run.notes.append(f"projected DOS from {f.name}")
        break
    for f in found.get("procar", []) + found.get("orbtool-projections", []) + found.get("npz:projections", []):
        kw = {"atoms": atoms} if "PROCAR" in f.name.upper() and atoms is not None else {}
        run.projections = read_projections(f, **kw)
        run.notes.append(f"band projections from {f.name}")
        break
    if grids:
        for fmt in ("chgcar", "cube", "xsf", "npz:grid"):
            for f in found.get(fmt, []):
                role, why = _grid_role(f, fmt)
                if role in run.grids:
                    run.notes.append(f"skipped {f.name}: a '{role}' grid was already read")
                    continue
                opts = {} if fmt == "npz:grid" else {"quantity": _GRID_QUANTITY[role]}
                if fmt == "cube":
                    opts["units"] = units
                g = read_grid(f, format="npz" if fmt == "npz:grid" else fmt, **opts)
                run.grids[role] = g
                conv = g.meta.get("unit_convention_reason")
                run.notes.append(f"grid '{role}' from {why}" + (f"; units: {conv}" if conv else ""))
    for f in found.get("outcar", []) + found.get("oszicar", []):
        try:
            run.energy = read_energy(f)
            run.notes.append(f"total energy {run.energy:.6f} eV from {f.name}")
            break
        except InputFormatError as exc:
            run.notes.append(f"no energy from {f.name}: {exc.reason}")
    if run.energy is None and run.calculator is not None:
        try:
            run.energy = float(run.calculator.get_potential_energy())
            run.notes.append(f"total energy {run.energy:.6f} eV from the engine output's calculator")
        except Exception:  # the output may hold no energy; nothing to record
            pass
    for f in found.get("band-edges", []):
        from .edges import read_band_edges
        run.edges = read_band_edges(f)
        run.notes.append(f"true band edges from {f.name}: VBM {run.edges.vbm:.4f} eV, CBM {run.edges.cbm:.4f} eV")
        break
    _fallback_structure(run)
    return run


def _fallback_structure(run: RunData) -> None:
    """Atoms carried by a grid, the PDOS or the projections when no structure file was found."""
    if run.structure is not None:
        return
    for what, obj in [(f"grid '{r}'", g) for r, g in run.grids.items()] + [("projected DOS", run.pdos),
                                                                        ("band projections", run.projections)]:
        atoms = getattr(obj, "atoms", None)
        if atoms is not None and len(atoms) and (atoms.get_atomic_numbers() > 0).all():
            run.structure = atoms
            src = Path(obj.source).name if getattr(obj, "source", None) else "memory"
            run.notes.append(f"structure from the atoms of the {what} ({src})")
            return


def attach_edges(host_proj, host_pdos, edges, found=None):
    """Record the host's true band edges (``edges=`` from the user, else a band-structure file found
    with the host) in the host projections' / PDOS's ``meta["true_band_edges"]``, where
    :func:`orbtool.analysis.band_edges` finds them. Returns (host_proj, host_pdos, notes)."""
    from .edges import edges_from_user
    ref = edges_from_user(edges) if edges is not None else found
    if ref is None:
        return host_proj, host_pdos, []
    notes = [f"host: {ref['method']}"]
    if host_proj is None and host_pdos is None:
        notes.append("host: true band edges given, but no host eigenvalues or DOS to attach them to; "
                     "pass them to band_edges(reference=...)")
        return host_proj, host_pdos, notes
    from dataclasses import replace
    if host_proj is not None:
        host_proj = replace(host_proj, meta={**host_proj.meta, "true_band_edges": ref})
    if host_pdos is not None:
        host_pdos = replace(host_pdos, meta={**host_pdos.meta, "true_band_edges": ref})
    return host_proj, host_pdos, notes


def _run_of(obj, grids, units, who):
    """A RunData from a folder, a single file, or Atoms (with or without a calculator)."""
    if obj is None:
        return None
    if hasattr(obj, "get_positions"):
        run = RunData(Path("."), structure=obj)
        calc = getattr(obj, "calc", None)
        run.notes.append("structure given as Atoms")
        if calc is not None and _has_eigenvalues(calc):
            run.calculator = calc
            run.notes.append(f"the Atoms carry a {type(calc).__name__} calculator")
        return run
    if not isinstance(obj, (str, Path)):
        raise InputFormatError(None, None, f"{who} must be a folder, a file or ase.Atoms, got {type(obj).__name__}",
                               field=who)
    return scan_run(obj, grids=grids, units=units)


def _eigenvalues_from_a_log(run: RunData, found, chosen) -> None:
    """No projection file and a structure file without eigenvalues (extxyz, CIF, POSCAR): take them from
    a code output in the same folder (GPAW's text log, vasprun.xml, ...) whose atoms are the structure's."""
    import numpy as np

    from .structure import read_structure
    for f in _structure_order(found):
        if f == chosen:
            continue
        try:
            atoms = read_structure(f)
        except InputFormatError:
            continue
        calc = getattr(atoms, "calc", None)
        if calc is None or not _has_eigenvalues(calc):
            continue
        same = (len(atoms) == len(run.structure)
                and atoms.get_chemical_symbols() == run.structure.get_chemical_symbols()
                and np.allclose(atoms.get_positions(), run.structure.get_positions(), atol=1e-3))
        if not same:
            run.notes.append(f"{f.name} carries eigenvalues but not the atoms of the structure file: not used")
            continue
        run.calculator = calc
        run.notes.append(f"band energies and occupations from {f.name} ({type(calc).__name__}), whose atoms are "
                         "the structure file's")
        return


def _calculator_projections(run: RunData, who: str):
    if run.projections is None and run.calculator is not None:
        from ._calc_bands import projections_from_calculator
        try:
            run.projections = projections_from_calculator(run.calculator, run.structure, source=str(run.folder))
            run.notes.append("band energies and occupations from the engine output's calculator "
                             "(no orbital projections)")
        except InputFormatError as exc:
            run.notes.append(f"no band energies from the calculator: {exc.reason}")


def load_case(defect_folder, host=None, charge: int = 0, name: str | None = None, labels: dict | None = None,
              *, grids: bool = True, units: str = "auto", edges=None,
              _host_run: RunData | None = None) -> DefectCase:
    """Build a :class:`DefectCase` from a defect run folder (and optionally its host's).

    Parameters
    ----------
    defect_folder : path
        Folder of the defect supercell run, or a single file (POSCAR/CONTCAR, extxyz, CIF, any
        structure or code output ASE reads, DOSCAR, PROCAR, PARCHG(.gz), LOCPOT(.gz), OSZICAR/
        OUTCAR, cube/XSF files, orbtool text and NPZ files...). Without a structure file, the
        atoms of a grid (cube, XSF) or NPZ are used.
    host : path or ase.Atoms, optional
        Folder or file of the pristine supercell run, or its structure (Atoms; a calculator
        attached to them supplies band energies and occupations).
    charge : int
        Charge state q of the defect cell.
    name : str, optional
        Case label; the folder name by default.
    labels : dict, optional
        Free labels (motif, cation, anion, vacancy, defect, variant, ...).
    grids : bool
        Read volumetric files (set False to skip large grids).
    units : {"auto", "bohr", "angstrom"}
        Value convention of cube files (see :func:`orbtool.io.read_grids`); the choice made for
        each grid is in its ``meta`` and in the case's provenance.
    edges : path, mapping or float, optional
        The host's true band edges: a band-structure JSON (:mod:`orbtool.io.edges`), a mapping
        with ``vbm`` and ``cbm`` (eV) or the true gap (eV). A band-structure JSON in the host
        folder is used when not given.

    Returns
    -------
    DefectCase whose ``provenance`` lists what was read from where and what was guessed.
    """
    d = scan_run(defect_folder, grids=grids, units=units)
    if d.structure is None:
        raise InputFormatError(defect_folder, None, "no structure (POSCAR, CONTCAR or vasprun.xml) found, nor "
                               "any other structure file ASE reads (extxyz, CIF, xyz, a code output) or a "
                               "cube/XSF/NPZ with atoms; notes: " + "; ".join(d.notes or ["folder is empty"]))
    _calculator_projections(d, "defect")
    prov = [f"defect: {n}" for n in d.notes]
    h = _host_run if _host_run is not None else _run_of(host, grids, units, "host")
    host_atoms = None
    if h is not None:
        _calculator_projections(h, "host")
        host_atoms = h.structure
        prov += [f"host: {n}" for n in h.notes]
        if host_atoms is None:
            raise InputFormatError(host, None, "no host structure found; notes: " + "; ".join(h.notes))
    if host_atoms is not None and len(host_atoms) <= len(d.structure):
        prov.append(f"host has {len(host_atoms)} atoms, defect {len(d.structure)}: not fewer, so not a simple "
                    "vacancy (check the pairing)")
    h_proj, h_pdos, notes = attach_edges(h.projections if h else None, h.pdos if h else None, edges,
                                         h.edges if h else None)
    prov += notes
    return DefectCase(name=name or Path(defect_folder).resolve().name, defect=d.structure, host=host_atoms,
                      charge=charge, defect_pdos=d.pdos, host_pdos=h_pdos,
                      projections=d.projections, host_projections=h_proj,
                      grids=d.grids, host_grids=h.grids if h else {}, total_energy=d.energy,
                      host_total_energy=h.energy if h else None, labels=dict(labels or {}),
                      provenance=tuple(prov), source=str(defect_folder))
