"""Assemble a :class:`~orbtool.case.DefectCase` from run folders by recognising
the files inside by content (not only by name)."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

from ..case import DefectCase
from ..errors import InputFormatError
from ._files import strip_compression
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


def _classify(f: Path) -> str | None:
    """Format name of ``f`` judged by content first, then name; None if not recognised."""
    name = strip_compression(f.name)
    upper = name.upper()
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
    for fmt_name in order:
        if get_format(fmt_name).matches_name(f.name):
            return fmt_name
    return None


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


def scan_run(folder, *, grids: bool = True) -> RunData:
    """Read everything orbtool recognises in one run folder.

    Structure: CONTCAR (relaxed) is preferred over POSCAR, then vasprun.xml. DOS from a DOSCAR
    (or orbtool PDOS), band projections from a PROCAR, grids from CHGCAR-family, cube and XSF
    files (role by name: LOCPOT → ``potential``, PARCHG/state/band → ``state``, CHGCAR →
    ``density``), total energy from OUTCAR (``energy(sigma->0)``) or OSZICAR (``E0``).
    """
    from .api import read_grid, read_pdos, read_projections
    from .structure import read_energy, read_structure

    folder = Path(folder)
    if not folder.is_dir():
        raise InputFormatError(folder, None, "expected a run folder" if folder.exists() else "folder does not exist")
    run = RunData(folder)
    found: dict[str, list[Path]] = {}
    for f in sorted(folder.iterdir()):
        if not f.is_file() or f.name.startswith("."):
            continue
        kind = _classify(f)
        if kind is None:
            run.notes.append(f"skipped {f.name}: not a recognised file")
            continue
        found.setdefault(kind, []).append(f)
    structs = found.get("poscar", [])
    structs.sort(key=lambda p: (0 if "CONTCAR" in p.name.upper() else 1, p.name))
    for f in structs + found.get("vasprun", []):
        try:
            run.structure = read_structure(f)
            run.notes.append(f"structure from {f.name}" + (" (relaxed)" if "CONTCAR" in f.name.upper() else ""))
            break
        except InputFormatError as exc:
            run.notes.append(f"skipped {f.name}: {exc.reason}")
    atoms = run.structure
    for f in found.get("doscar", []) + found.get("orbtool-pdos", []):
        kw = {"atoms": atoms} if "DOSCAR" in f.name.upper() and atoms is not None else {}
        run.pdos = read_pdos(f, **kw)
        run.notes.append(f"projected DOS from {f.name}")
        break
    for f in found.get("procar", []) + found.get("orbtool-projections", []):
        kw = {"atoms": atoms} if "PROCAR" in f.name.upper() and atoms is not None else {}
        run.projections = read_projections(f, **kw)
        run.notes.append(f"band projections from {f.name}")
        break
    if grids:
        for fmt in ("chgcar", "cube", "xsf"):
            for f in found.get(fmt, []):
                role, why = _grid_role(f, fmt)
                if role in run.grids:
                    run.notes.append(f"skipped {f.name}: a '{role}' grid was already read")
                    continue
                run.grids[role] = read_grid(f, format=fmt)
                run.notes.append(f"grid '{role}' from {why}")
    for f in found.get("outcar", []) + found.get("oszicar", []):
        try:
            run.energy = read_energy(f)
            run.notes.append(f"total energy {run.energy:.6f} eV from {f.name}")
            break
        except InputFormatError as exc:
            run.notes.append(f"no energy from {f.name}: {exc.reason}")
    if run.structure is None and (run.pdos is not None and run.pdos.atoms is not None):
        run.structure = run.pdos.atoms
    return run


def load_case(defect_folder, host=None, charge: int = 0, name: str | None = None, labels: dict | None = None,
              *, grids: bool = True, _host_run: RunData | None = None) -> DefectCase:
    """Build a :class:`DefectCase` from a defect run folder (and optionally its host's).

    Parameters
    ----------
    defect_folder : path
        Folder of the defect supercell run (POSCAR/CONTCAR, DOSCAR, PROCAR, PARCHG(.gz),
        LOCPOT(.gz), OSZICAR/OUTCAR, cube/XSF files, orbtool formats...).
    host : path or ase.Atoms, optional
        Folder of the pristine supercell run, or just its structure.
    charge : int
        Charge state q of the defect cell.
    name : str, optional
        Case label; the folder name by default.
    labels : dict, optional
        Free labels (motif, cation, anion, vacancy, defect, variant, ...).
    grids : bool
        Read volumetric files (set False to skip large grids).

    Returns
    -------
    DefectCase whose ``provenance`` lists what was read from where and what was guessed.
    """
    d = scan_run(defect_folder, grids=grids)
    if d.structure is None:
        raise InputFormatError(defect_folder, None, "no structure (POSCAR, CONTCAR or vasprun.xml) found; "
                               "notes: " + "; ".join(d.notes or ["folder is empty"]))
    prov = [f"defect: {n}" for n in d.notes]
    h = _host_run
    host_atoms = None
    if h is None and host is not None:
        if hasattr(host, "get_positions"):
            host_atoms = host
            prov.append("host: structure given as Atoms")
        else:
            h = scan_run(host, grids=grids)
    if h is not None:
        host_atoms = h.structure
        prov += [f"host: {n}" for n in h.notes]
        if host_atoms is None:
            raise InputFormatError(host, None, "no host structure found; notes: " + "; ".join(h.notes))
    if host_atoms is not None and len(host_atoms) <= len(d.structure):
        prov.append(f"host has {len(host_atoms)} atoms, defect {len(d.structure)}: not fewer, so not a simple "
                    "vacancy (check the pairing)")
    return DefectCase(name=name or Path(defect_folder).resolve().name, defect=d.structure, host=host_atoms,
                      charge=charge, defect_pdos=d.pdos, host_pdos=h.pdos if h else None,
                      projections=d.projections, host_projections=h.projections if h else None,
                      grids=d.grids, host_grids=h.grids if h else {}, total_energy=d.energy,
                      host_total_energy=h.energy if h else None, labels=dict(labels or {}),
                      provenance=tuple(prov), source=str(defect_folder))
