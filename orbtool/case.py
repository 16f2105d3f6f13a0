"""One defect calculation with everything attached (:class:`DefectCase`) and
a chemical family of them (:class:`Family`)."""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from typing import Any, Iterator

from .errors import InputFormatError
from .grid import Grid
from .spectra import BandProjections, ProjectedDOS

__all__ = ["DefectCase", "Family"]


def _check_atoms(atoms, name, source):
    if atoms is not None and not hasattr(atoms, "get_positions"):
        raise InputFormatError(source, None, f"{name} must be an ase.Atoms object", field=name)


#: largest |charge| a point-defect case may carry (electrons; common practice: a charge state stays within the
#: valence of the atoms removed or added, a few electrons — 10 is a generous bound); manifests use the same bound
MAX_ABS_CHARGE = 10


@dataclass(frozen=True, eq=False)
class DefectCase:
    """A supercell with a defect, its pristine host, and the data read for both.

    Attributes
    ----------
    name : str
        Label of the case (unique within a family).
    defect : ase.Atoms
        Relaxed defect supercell (positions Å).
    host : ase.Atoms or None
        Pristine supercell of the same size (positions Å).
    charge : int
        Charge state q of the defect cell (electrons removed = +q).
    defect_pdos, host_pdos : ProjectedDOS or None
        Projected DOS of the defect and host cells (states/eV).
    projections, host_projections : BandProjections or None
        Band-resolved projections (energies eV, occupations, weights).
    grids : dict[str, Grid]
        Volumetric data of the defect cell by role: ``"state"`` (the in-gap
        state, density or signed orbital), ``"density"`` (total charge),
        ``"potential"`` (local electrostatic potential, eV), ...
    host_grids : dict[str, Grid]
        The same for the host (``"potential"`` for alignment).
    total_energy, host_total_energy : float or None
        Total energies of the defect and host cells, eV.
    labels : dict[str, str]
        Free labels used to group and compare: ``motif``, ``cation``,
        ``anion``, ``vacancy`` (e.g. ``"V_anion"``), ``variant`` ...
    provenance : tuple[str, ...]
        What was found where and what was guessed while assembling the case.
    source : str or None
        Folder (or manifest) the case came from.
    """

    name: str
    defect: Any
    host: Any = None
    charge: int = 0
    defect_pdos: ProjectedDOS | None = None
    host_pdos: ProjectedDOS | None = None
    projections: BandProjections | None = None
    host_projections: BandProjections | None = None
    grids: dict = field(default_factory=dict)
    host_grids: dict = field(default_factory=dict)
    total_energy: float | None = None
    host_total_energy: float | None = None
    labels: dict = field(default_factory=dict)
    provenance: tuple = ()
    source: str | None = None

    def __post_init__(self):
        src = self.source
        if not isinstance(self.name, str) or not self.name:
            raise InputFormatError(src, None, "a case needs a non-empty name", field="name")
        if self.defect is None:
            raise InputFormatError(src, None, "a case needs the defect structure", field="defect")
        _check_atoms(self.defect, "defect", src)
        _check_atoms(self.host, "host", src)
        try:
            q = int(self.charge)
        except (TypeError, ValueError):
            raise InputFormatError(src, None, f"charge must be an integer, got {self.charge!r}",
                                   field="charge") from None
        if q != self.charge:
            raise InputFormatError(src, None, f"charge must be an integer, got {self.charge!r}", field="charge")
        if abs(q) > MAX_ABS_CHARGE:
            raise InputFormatError(src, None, f"charge {q:+d}: a point defect's charge state must lie within "
                                   f"±{MAX_ABS_CHARGE} electrons (a typo?)", field="charge")
        object.__setattr__(self, "charge", q)
        for key, kind in (("defect_pdos", ProjectedDOS), ("host_pdos", ProjectedDOS),
                          ("projections", BandProjections), ("host_projections", BandProjections)):
            v = getattr(self, key)
            if v is not None and not isinstance(v, kind):
                raise InputFormatError(src, None, f"{key} must be a {kind.__name__}", field=key)
        for key in ("grids", "host_grids"):
            for role, g in getattr(self, key).items():
                if not isinstance(g, Grid):
                    raise InputFormatError(src, None, f"{key}[{role!r}] must be a Grid", field=key)
        object.__setattr__(self, "provenance", tuple(self.provenance))
        object.__setattr__(self, "labels", dict(self.labels))

    def replace(self, **changes) -> "DefectCase":
        """A copy with some fields changed (the case itself is immutable)."""
        return replace(self, **changes)

    def summary(self) -> str:
        """What the case holds, one line per item."""
        lines = [f"DefectCase {self.name!r} (q = {self.charge:+d})"]
        lines.append(f"  defect cell   {len(self.defect)} atoms {self.defect.get_chemical_formula()}")
        if self.host is not None:
            lines.append(f"  host cell     {len(self.host)} atoms {self.host.get_chemical_formula()}")
        for key in ("defect_pdos", "host_pdos", "projections", "host_projections"):
            v = getattr(self, key)
            if v is not None:
                lines.append(f"  {key:<13} {v.source or '<memory>'}")
        for role, g in self.grids.items():
            lines.append(f"  grid {role:<8} {'x'.join(map(str, g.shape))} {g.unit} ({g.source or '<memory>'})")
        for role, g in self.host_grids.items():
            lines.append(f"  host grid {role:<3} {'x'.join(map(str, g.shape))} {g.unit}")
        if self.total_energy is not None:
            lines.append(f"  E_tot defect  {self.total_energy:.6f} eV")
        if self.host_total_energy is not None:
            lines.append(f"  E_tot host    {self.host_total_energy:.6f} eV")
        if self.labels:
            lines.append("  labels        " + ", ".join(f"{k}={v}" for k, v in self.labels.items()))
        for p in self.provenance:
            lines.append(f"  note: {p}")
        return "\n".join(lines)


@dataclass(frozen=True, eq=False)
class Family:
    """A chemical family: several :class:`DefectCase` objects compared together.

    Attributes
    ----------
    cases : tuple of DefectCase
        The cases, names unique.
    name : str
        Family label.
    references : dict
        Shared inputs: chemical potentials (eV per atom) under ``"mu"``,
        formation enthalpy under ``"dH"``, band edges, dielectric constants...
    source : str or None
        Manifest the family was read from.
    meta : dict
        Free-form provenance.
    """

    cases: tuple
    name: str = "family"
    references: dict = field(default_factory=dict)
    source: str | None = None
    meta: dict = field(default_factory=dict)

    def __post_init__(self):
        cases = tuple(self.cases)
        names = [c.name for c in cases]
        dup = sorted({n for n in names if names.count(n) > 1})
        if dup:
            raise InputFormatError(self.source, None, f"duplicate case names: {', '.join(dup)}", field="cases")
        for c in cases:
            if not isinstance(c, DefectCase):
                raise InputFormatError(self.source, None, "every family member must be a DefectCase",
                                       field="cases")
        object.__setattr__(self, "cases", cases)

    def __len__(self) -> int:
        return len(self.cases)

    def __iter__(self) -> Iterator[DefectCase]:
        return iter(self.cases)

    def __getitem__(self, key) -> DefectCase:
        if isinstance(key, str):
            for c in self.cases:
                if c.name == key:
                    return c
            raise KeyError(f"no case named {key!r}; cases are {[c.name for c in self.cases]}")
        return self.cases[key]

    @property
    def names(self) -> list[str]:
        return [c.name for c in self.cases]

    def where(self, **labels) -> "Family":
        """The sub-family whose labels match all ``labels``."""
        keep = tuple(c for c in self.cases if all(c.labels.get(k) == v for k, v in labels.items()))
        return replace(self, cases=keep)

    def label_values(self, key: str) -> list:
        """Distinct values of one label, in order of first appearance."""
        seen = []
        for c in self.cases:
            v = c.labels.get(key)
            if v not in seen:
                seen.append(v)
        return seen

    def elements(self) -> set[str]:
        """Every chemical element present in any defect or host cell."""
        out: set[str] = set()
        for c in self.cases:
            out.update(c.defect.get_chemical_symbols())
            if c.host is not None:
                out.update(c.host.get_chemical_symbols())
        return out
