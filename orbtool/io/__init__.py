"""Reading and writing: DFT output files in, orbtool data objects out.

One module per format family, a registry (:mod:`orbtool.io.registry`) that
maps format names to readers with content sniffing, a binary cache for
grids, and the assemblers :func:`load_case` and :func:`load_family`.
Units are converted here, once: Å, eV, electrons/Å³ downstream.
"""

from __future__ import annotations

from .api import read_grid, read_grids, read_pdos, read_projections, write_grid, write_pdos, write_projections
from .cache import clear_cache
from .registry import FORMATS

__all__ = ["read_grid", "read_grids", "read_pdos", "read_projections", "write_grid", "write_pdos",
           "write_projections", "clear_cache", "FORMATS"]
