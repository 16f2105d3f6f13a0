"""What loaded data can and cannot give: one call for the app's Loader, the CLI and scripts.

``capabilities(obj, host=None)`` takes a :class:`~orbtool.case.DefectCase`, a single
:class:`~orbtool.grid.Grid`, an ``ase.Atoms``, a :class:`~orbtool.spectra.ProjectedDOS` /
:class:`~orbtool.spectra.BandProjections`, or a path (file or folder, read as
:func:`orbtool.io.load_case` would), and says which analyses the data support and, for each one
they do not, what is missing — so a view never stays blank without a reason.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

__all__ = ["Capabilities", "capabilities"]

#: analyses in the order a user meets them, with the data each needs
ANALYSES = {
    "structure view": "a structure",
    "vacancy site and neighbour shells": "the defect structure and the host structure",
    "band edges": "host band energies with occupations, or a host DOS with a Fermi level",
    "in-gap levels": "defect-cell band energies with occupations and the host band edges",
    "orbital character of a level": "band projections on atoms and orbitals",
    "alignment to the host scale": "potential grids or PDOS of both cells",
    "state density view and localisation": "a grid of the state (density or orbital)",
    "PDOS moments": "a projected DOS",
    "tight-binding fit": "in-gap levels and the vacancy site",
}


@dataclass(frozen=True)
class Capabilities:
    """Which analyses some data support.

    Attributes
    ----------
    kind : str
        What was given (``"case"``, ``"grid"``, ``"structure"``, ``"pdos"``, ``"projections"``).
    can : tuple of str
        Analyses the data support.
    cannot : dict
        Analysis → what is missing.
    notes : tuple of str
        Units conventions and other things worth knowing (e.g. how a grid's values were read).
    """

    kind: str
    can: tuple
    cannot: dict = field(default_factory=dict)
    notes: tuple = ()

    def summary(self) -> str:
        lines = [f"{self.kind}: can give " + (", ".join(self.can) if self.can else "nothing yet")]
        lines += [f"  cannot give {k}: needs {v}" for k, v in self.cannot.items()]
        lines += [f"  note: {n}" for n in self.notes]
        return "\n".join(lines)


def _case_flags(case) -> dict:
    host_bands = case.host_projections is not None and case.host_projections.occupations is not None
    host_dos = case.host_pdos is not None and case.host_pdos.fermi is not None
    proj = case.projections
    edges = host_bands or host_dos
    has = {
        "structure view": True,
        "vacancy site and neighbour shells": case.host is not None,
        "band edges": edges,
        "in-gap levels": proj is not None and proj.occupations is not None and edges,
        "orbital character of a level": proj is not None and len(proj.orbitals) > 0,
        "alignment to the host scale": ("potential" in case.grids and "potential" in case.host_grids)
        or (case.defect_pdos is not None and case.host_pdos is not None),
        "state density view and localisation": "state" in case.grids,
        "PDOS moments": case.defect_pdos is not None,
    }
    has["tight-binding fit"] = has["in-gap levels"] and has["vacancy site and neighbour shells"]
    return has


def capabilities(obj, host=None) -> Capabilities:
    """What ``obj`` (a case, grid, structure, PDOS, projections or a path) can and cannot give."""
    from ..case import DefectCase
    from ..grid import Grid
    from ..spectra import BandProjections, ProjectedDOS
    notes = []
    if isinstance(obj, (str, Path)):
        from .assemble import load_case
        obj = load_case(obj, host=host)
    if isinstance(obj, DefectCase):
        kind, has = "case", _case_flags(obj)
        for role, g in list(obj.grids.items()) + [(f"host {r}", g) for r, g in obj.host_grids.items()]:
            if g.meta.get("unit_convention_reason"):
                notes.append(f"grid '{role}': {g.meta['unit_convention_reason']}")
    else:
        has = {k: False for k in ANALYSES}
        if isinstance(obj, Grid):
            kind = "grid"
            has["structure view"] = obj.atoms is not None
            has["state density view and localisation"] = obj.unit in ("e/Å^3", "Å^-3/2")
            if obj.meta.get("unit_convention_reason"):
                notes.append(obj.meta["unit_convention_reason"])
        elif hasattr(obj, "get_positions"):
            kind = "structure"
            has["structure view"] = True
            has["vacancy site and neighbour shells"] = host is not None
        elif isinstance(obj, ProjectedDOS):
            kind = "pdos"
            has["PDOS moments"] = True
            has["band edges"] = obj.fermi is not None
        elif isinstance(obj, BandProjections):
            kind = "projections"
            has["band edges"] = obj.occupations is not None
            has["orbital character of a level"] = len(obj.orbitals) > 0
            has["structure view"] = obj.atoms is not None
        else:
            from ..errors import InputFormatError
            raise InputFormatError(None, None, f"cannot judge a {type(obj).__name__}", field="obj")
    can = tuple(k for k in ANALYSES if has.get(k))
    cannot = {k: v for k, v in ANALYSES.items() if not has.get(k)}
    return Capabilities(kind=kind, can=can, cannot=cannot, notes=tuple(notes))
