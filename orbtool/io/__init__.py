"""Reading and writing: DFT output files in, orbtool data objects out.

One module per format family, a registry (:mod:`orbtool.io.registry`) that
maps format names to readers with content sniffing, a binary cache for
grids, and the assemblers :func:`load_case` (run folders → DefectCase) and
:func:`load_family` (TOML manifest → Family). Units are converted here,
once: Å, eV, electrons/Å³ downstream.
"""

from __future__ import annotations

from .api import read_grid, read_grids, read_pdos, read_projections, write_grid, write_pdos, write_projections
from .assemble import load_case
from .cache import cache_dir, clear_cache
from .capabilities import Capabilities, capabilities
from .edges import read_band_edges
from .manifest import load_family
from .registry import FORMATS
from .structure import read_energy, read_structure

__all__ = ["read_grid", "read_grids", "read_pdos", "read_projections", "read_structure", "read_energy",
           "write_grid", "write_pdos", "write_projections", "load_case", "load_family", "clear_cache",
           "cache_dir", "FORMATS", "capabilities", "Capabilities", "read_band_edges", "case_from_calculator"]


def __getattr__(name: str):
    if name == "case_from_calculator":  # imported on first use (builds on the assembler)
        from .calculator import case_from_calculator
        return case_from_calculator
    raise AttributeError(f"module 'orbtool.io' has no attribute {name!r}")
