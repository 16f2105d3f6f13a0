"""A case straight from ASE calculators in memory (no files written).

Only ASE's standard calculator interface is used, duck-typed, so any calculator that offers it
works (GPAW, the VASP and Quantum ESPRESSO readers, and the ``SinglePointDFTCalculator`` that
``ase.io.read`` attaches to a code's output log):

* ``get_eigenvalues(kpt, spin)`` (eV), ``get_occupation_numbers(kpt, spin)`` (electrons),
  ``get_fermi_level()`` (eV), ``get_number_of_spins()``, ``get_ibz_k_points()``,
  ``get_k_point_weights()`` — the band energies and occupations of :class:`BandProjections`;
* ``get_pseudo_density()`` (e/Å³), ``get_electrostatic_potential()`` (eV, potential energy of an
  electron, as GPAW defines it) and ``get_pseudo_wave_function(band, kpt, spin)`` (Å^-3/2),
  where offered, for the ``density``, ``potential`` and ``state`` grids;
* ``get_potential_energy()`` (eV).

ASE's interface has no orbital projections; the projections built here carry energies and
occupations with no orbital columns (``orbitals == ()``), and ``projections=`` adds a file's (or
an object's) weights when their band energies agree. Occupations that some calculators report
multiplied by the k-point weight are recognised (every state ≤ its k-point's weight × the
maximum occupation, with more than one k-point) and divided back.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..case import DefectCase
from ..errors import InputFormatError
from ..grid import Grid
from ..spectra import BandProjections
from ._calc_bands import _call, offers_eigenvalues, projections_from_calculator  # noqa: F401 (re-exported)

__all__ = ["case_from_calculator", "projections_from_calculator", "grids_from_calculator", "offers_eigenvalues"]


def _atoms_and_calc(obj, who):
    """(atoms, calculator) from an Atoms with a calculator or a calculator with atoms."""
    if obj is None:
        return None, None
    if hasattr(obj, "get_positions"):
        return obj, getattr(obj, "calc", None)
    if hasattr(obj, "get_eigenvalues"):
        atoms = getattr(obj, "atoms", None)
        if atoms is None and hasattr(obj, "get_atoms"):
            atoms = obj.get_atoms()
        if atoms is None:
            raise InputFormatError(None, None, f"the {who} calculator holds no atoms", field=who)
        return atoms, obj
    raise InputFormatError(None, None, f"{who} must be an ase.Atoms with a calculator, a calculator, or a path; "
                           f"got {type(obj).__name__}", field=who)


def grids_from_calculator(calc, atoms, *, state_bands=None, spin: int = 0, source: str | None = None) -> dict:
    """The grids a calculator offers: ``density`` (pseudo density, e/Å³), ``potential``
    (electrostatic potential energy of an electron, eV) and, for ``state_bands``, ``state``
    (Σ |ψ̃_n|² over those bands at the first k-point, 1/Å³)."""
    src = source or f"<{type(calc).__name__}>"
    out = {}
    cell = np.asarray(atoms.get_cell(), float)
    conv = {"unit_convention": "angstrom", "unit_convention_reason": "ASE calculator interface: Å-based values"}
    rho = _call(calc, "get_pseudo_density")
    if rho is not None and np.ndim(rho) == 3:
        out["density"] = Grid(values=np.asarray(rho, float), cell=cell, atoms=atoms, unit="e/Å^3", source=src,
                              name="pseudo density", meta={"format": "ase-calculator", **conv})
    v = _call(calc, "get_electrostatic_potential")
    if v is not None and np.ndim(v) == 3:
        out["potential"] = Grid(values=np.asarray(v, float), cell=cell, atoms=atoms, unit="eV", source=src,
                                name="electrostatic potential", meta={"format": "ase-calculator", **conv})
    if state_bands:
        psi = [_call(calc, "get_pseudo_wave_function", band=int(n), kpt=0, spin=spin) for n in state_bands]
        if all(p is not None and np.ndim(p) == 3 for p in psi):
            dens = sum(np.abs(np.asarray(p)) ** 2 for p in psi)
            out["state"] = Grid(values=dens, cell=cell, atoms=atoms, unit="e/Å^3", source=src,
                                name=f"bands {', '.join(str(int(n)) for n in state_bands)}",
                                meta={"format": "ase-calculator", "quantity": "state", **conv})
    return out


def _merge_projections(base, extra) -> BandProjections:
    """Projections given by the caller (file or object) in place of the calculator's energies-only ones."""
    from .api import read_projections
    other = read_projections(extra) if isinstance(extra, (str, Path)) else extra
    if not isinstance(other, BandProjections):
        raise InputFormatError(None, None, "projections must be a BandProjections or a file", field="projections")
    return other


def _side(obj, who, grids, units, state_bands):
    """(atoms, projections, grids, energy, notes, edges) for one side (defect or host)."""
    if isinstance(obj, (str, Path)):
        from .assemble import scan_run
        run = scan_run(obj, grids=grids, units=units)
        proj = run.projections
        if proj is None and run.calculator is not None:
            proj = projections_from_calculator(run.calculator, run.structure, source=str(obj))
            run.notes.append("band energies and occupations from the engine output's calculator")
        return run.structure, proj, run.grids, run.energy, run.notes, run.edges, run.pdos
    atoms, calc = _atoms_and_calc(obj, who)
    if calc is None or not offers_eigenvalues(calc):
        return atoms, None, {}, None, ["structure given as Atoms (no calculator attached)"], None, None
    name = type(calc).__name__
    proj = projections_from_calculator(calc, atoms, source=f"<{name} ({who})>")
    g = grids_from_calculator(calc, atoms, state_bands=state_bands, source=f"<{name} ({who})>") if grids else {}
    energy = _call(calc, "get_potential_energy")
    notes = [f"band energies and occupations from the {name} calculator in memory "
             f"({proj.nkpoints} k-point(s), {proj.nbands} bands, {proj.nspin} spin(s))"]
    notes += [f"grid '{r}' from the calculator ({gr.name})" for r, gr in g.items()]
    return atoms, proj, g, None if energy is None else float(energy), notes, None, None


def case_from_calculator(host, defect, *, charge: int = 0, name: str | None = None, labels: dict | None = None,
                         projections=None, host_projections=None, grids: bool = True, units: str = "auto",
                         state_bands=None, edges=None) -> DefectCase:
    """A :class:`DefectCase` from calculators in memory (or a mix of calculators and paths).

    Parameters
    ----------
    host, defect : ase.Atoms with a calculator, an ASE calculator, or a path
        The pristine and the defect supercell. A path (folder or file) is read by
        :func:`orbtool.io.load_case`'s scanner; ``host`` may be None or bare Atoms.
    charge, name, labels
        As for :func:`orbtool.io.load_case`.
    projections, host_projections : BandProjections or path, optional
        Orbital projections to use instead of the calculator's energies-only projections.
    grids : bool
        Ask the calculators for grids (density, potential, state).
    units : str
        Unit convention for cube files read from paths (see :func:`orbtool.io.read_grids`).
    state_bands : sequence of int, optional
        0-based bands of the defect multiplet whose Σ|ψ̃|² becomes the ``state`` grid.
    edges : path, mapping or float, optional
        The host's true band edges (see :mod:`orbtool.io.edges`).
    """
    from .assemble import attach_edges
    d_atoms, d_proj, d_grids, d_energy, d_notes, _, d_pdos = _side(defect, "defect", grids, units, state_bands)
    if d_atoms is None:
        raise InputFormatError(None, None, "the defect side holds no structure", field="defect")
    h_atoms, h_proj, h_grids, h_energy, h_notes, h_edges, h_pdos = _side(host, "host", grids, units, None)
    if projections is not None:
        d_proj = _merge_projections(d_proj, projections)
        d_notes.append("orbital projections given by the caller")
    if host_projections is not None:
        h_proj = _merge_projections(h_proj, host_projections)
        h_notes.append("host orbital projections given by the caller")
    prov = [f"defect: {n}" for n in d_notes] + [f"host: {n}" for n in h_notes]
    h_proj, h_pdos, edge_notes = attach_edges(h_proj, h_pdos, edges, h_edges)
    prov += edge_notes
    return DefectCase(name=name or "calculator", defect=d_atoms, host=h_atoms, charge=charge, defect_pdos=d_pdos,
                      host_pdos=h_pdos, projections=d_proj, host_projections=h_proj, grids=d_grids,
                      host_grids=h_grids, total_energy=d_energy, host_total_energy=h_energy,
                      labels=dict(labels or {}), provenance=tuple(prov), source="ASE calculator")
