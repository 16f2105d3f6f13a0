"""orbtool — why is this vacancy level deep?

Read DFT outputs of defect supercells, find the vacancy and its neighbour
shells, characterise the in-gap state, fit a Slater–Koster model of the
dangling orbitals and ask what structure or chemistry would make it shallow.

Only light modules are imported here; readers, analysis, widgets and
plotting are imported on first use (``orbtool.read_grid`` triggers
``orbtool.io``), so ``import orbtool`` stays fast.
"""

from __future__ import annotations

import importlib

from .errors import FitError, GeometryError, InputFormatError, ModelError, OrbtoolError, SessionError

__version__ = "0.1.0"

# public name -> module that defines it (imported lazily)
_LAZY = {
    "Grid": "orbtool.grid",
    "ProjectedDOS": "orbtool.spectra",
    "BandProjections": "orbtool.spectra",
    "Channel": "orbtool.spectra",
    "DefectCase": "orbtool.case",
    "Family": "orbtool.case",
    "read_grid": "orbtool.io",
    "read_grids": "orbtool.io",
    "read_pdos": "orbtool.io",
    "read_projections": "orbtool.io",
    "read_structure": "orbtool.io",
    "write_grid": "orbtool.io",
    "write_pdos": "orbtool.io",
    "write_projections": "orbtool.io",
    "load_case": "orbtool.io",
    "load_family": "orbtool.io",
    "case_from_calculator": "orbtool.io.calculator",
    "read_energy": "orbtool.io",
    "save_session": "orbtool.session",
    "analyze_family": "orbtool.batch",
    "analyze_case": "orbtool.family",
    "locate_vacancy": "orbtool.analysis",
    "in_gap_states": "orbtool.analysis",
    "formation_energies": "orbtool.levels",
    "stability_region": "orbtool.levels",
    "charge_correction": "orbtool.levels",
    "DefectLevels": "orbtool.levels",
    "Semiconductor": "orbtool.levels",
    "TrapRecombination": "orbtool.levels",
    "load_session": "orbtool.session",
}
_SUBMODULES = {"io", "analysis", "tb", "levels", "views", "widgets", "figures", "report", "units",
               "grid", "spectra", "case", "errors", "demo", "session", "family", "cli",
               "pipeline", "mechanism", "style", "outputs"}

__all__ = sorted(_LAZY) + ["OrbtoolError", "InputFormatError", "GeometryError", "FitError",
                           "ModelError", "SessionError", "__version__"]


def __getattr__(name: str):
    if name in _LAZY:
        value = getattr(importlib.import_module(_LAZY[name]), name)
        globals()[name] = value
        return value
    if name in _SUBMODULES:
        return importlib.import_module(f"orbtool.{name}")
    raise AttributeError(f"module 'orbtool' has no attribute {name!r}")


def __dir__():
    return sorted(set(globals()) | set(_LAZY) | _SUBMODULES)
