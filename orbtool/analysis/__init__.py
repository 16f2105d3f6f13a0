"""Analysis of defect cells: vacancy geometry, band edges and in-gap states,
density partition, PDOS moments and recursion.

Names are imported on first use so that ``import orbtool.analysis`` is cheap.
"""

from __future__ import annotations

import importlib

_LAZY = {
    # geometry
    "locate_vacancy": "geometry", "VacancySite": "vacancy_site", "Neighbour": "vacancy_site",
    "MissingAtom": "vacancy_site", "Substitution": "vacancy_site", "cluster_shells": "geometry",
    "find_point_group": "pointgroup", "PointGroup": "pointgroup", "match_sites": "matching",
    "SiteMatch": "matching", "site_neighbours": "periodic", "minimum_image": "periodic",
    "symmetry_adapted_modes": "distortions",
    # states
    "band_edges": "edges", "in_gap_states": "states", "multiplets": "states", "BandEdges": "edges",
    "DefectState": "states", "band_localisation": "edges",
    "align": "alignment", "Alignment": "alignment",
    # density
    "partition_spheres": "density", "partition_voronoi": "density", "localisation": "density",
    "NoGapError": "edges",
    "partition": "density", "Partition": "density", "Localisation": "density",
    "compare_routes": "character", "RouteComparison": "character",
    "choose_defect_state": "character", "defect_state": "character", "STATE_RULE": "character",
    # moments and recursion
    "pdos_moments": "moments", "compare_moments": "shell_moments", "recursion_coefficients": "recursion",
    "dos_moments": "moments", "channel_moments": "moments", "neighbour_moments": "shell_moments",
    "MomentComparison": "moments", "Recursion": "recursion",
}

__all__ = sorted(_LAZY)


def __getattr__(name: str):
    mod = _LAZY.get(name)
    if mod is None:
        raise AttributeError(f"module 'orbtool.analysis' has no attribute {name!r}")
    value = getattr(importlib.import_module(f"orbtool.analysis.{mod}"), name)  # the table is the only truth
    globals()[name] = value
    return value


def __dir__():
    return sorted(set(globals()) | set(_LAZY))
