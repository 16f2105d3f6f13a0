"""Band edges of the host and the defect's in-gap states with their character.

* :func:`band_edges` — VBM, CBM and gap (spin-resolved) from band energies
  and occupations, or from a projected/total DOS with a stated threshold.
* :func:`in_gap_states` — every band of the defect cell whose k-averaged
  energy, put on the host scale by :func:`~orbtool.analysis.alignment.align`,
  lies inside (VBM + tol, CBM − tol), with its occupation, dispersion over k
  and its weights on atoms, orbitals and neighbour shells.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..errors import InputFormatError, OrbtoolError
from ._records import Record
from .alignment import Alignment, align, resolve_site
from .edges import BandEdges, NoGapError, band_edges, band_localisation

__all__ = ["NoGapError", "BandEdges", "band_edges", "band_localisation", "DefectState", "in_gap_states", "Alignment",
           "align"]

_L_NAMES = "spdf"


# ---------------------------------------------------------------- in-gap states
@dataclass(frozen=True, eq=False)
class DefectState(Record):
    """One band of the defect cell inside the host gap.

    Attributes
    ----------
    energy : float
        k-weighted mean band energy on the defect cell's own scale, eV.
    energy_aligned : float
        The same on the host scale (``energy + alignment shift``), eV.
    above_vbm, below_cbm : float
        ``energy_aligned − VBM`` and ``CBM − energy_aligned``, eV.
    band, spin : int
        0-based band index and spin channel in the projections.
    occupation, max_occupation : float
        k-weighted electrons in the band, and what it can hold.
    dispersion : float
        Max − min band energy over the k-points, eV (large values mean the
        defect interacts with its periodic images).
    atom_weights : ndarray (natom,)
        k-weighted projection on each atom, normalised to 1.
    orbital_weights : dict
        ``{"s", "p", "d"}`` (and ``"f"`` if present) → normalised weight.
    atom_orbital : ndarray (natom, norb)
        Normalised weights per atom and orbital column.
    orbital_names : tuple of str
        Names of the orbital columns.
    shell_fractions : dict
        ``{1: first shell, 2: second shell, "rest": everything else}``
        (empty without a site).
    edges : BandEdges
    provenance : tuple of str
    """

    energy: float
    energy_aligned: float
    above_vbm: float
    below_cbm: float
    band: int
    spin: int
    occupation: float
    max_occupation: float
    dispersion: float
    atom_weights: np.ndarray
    orbital_weights: dict
    atom_orbital: np.ndarray
    orbital_names: tuple
    shell_fractions: dict
    edges: BandEdges
    provenance: tuple = field(default_factory=tuple)

    @property
    def orbital_resolved(self) -> dict:
        """Weight per orbital column (lm where the projections have it)."""
        return {n: float(w) for n, w in zip(self.orbital_names, self.atom_orbital.sum(axis=0))}

    def top_atoms(self, n: int = 5) -> list[tuple[int, float]]:
        """The ``n`` atoms with the largest weight, as (index, weight)."""
        order = np.argsort(-self.atom_weights, kind="stable")[:n]
        return [(int(i), float(self.atom_weights[i])) for i in order]

    def summary(self) -> str:
        spin = "" if self.max_occupation == 2.0 else (" spin up" if self.spin == 0 else " spin down")
        lines = [f"In-gap state: band {self.band}{spin}",
                 f"  energy          {self.energy:.4f} eV (defect cell)   {self.energy_aligned:.4f} eV (host scale)",
                 f"  position        VBM + {self.above_vbm:.4f} eV  /  CBM − {self.below_cbm:.4f} eV "
                 f"(gap {self.edges.gap:.4f} eV)",
                 f"  occupation      {self.occupation:.3f} of {self.max_occupation:g}",
                 f"  dispersion      {self.dispersion:.4f} eV over k",
                 "  orbitals        " + "  ".join(f"{k} {v:.3f}" for k, v in self.orbital_weights.items())]
        if self.shell_fractions:
            sf = self.shell_fractions
            lines.append(f"  shells          first {sf[1]:.3f}  second {sf[2]:.3f}  rest {sf['rest']:.3f}")
        lines.append("  atoms           " + "  ".join(f"#{i} {w:.3f}" for i, w in self.top_atoms()))
        lines += [f"  note: {p}" for p in self.provenance]
        return "\n".join(lines)


def _shell_indices(site, shell):
    shells = getattr(site, "shells", None)
    if shells:
        return [int(nb.index) for nb in shells[shell - 1]] if len(shells) >= shell else []
    attr = "first_shell" if shell == 1 else "second_shell"
    return [int(nb.index) for nb in getattr(site, attr, ())]


def in_gap_states(case, site=None, *, edges: BandEdges | None = None, alignment=None, tol: float = 0.05,
                  threshold: float | None = None, dispersion_warning: float = 0.1) -> list[DefectState]:
    """Bands of the defect cell inside the host gap, with their character.

    Parameters
    ----------
    case : DefectCase
        Needs ``projections`` (defect cell, with occupations) and
        ``host_projections`` or ``host_pdos`` for the band edges.
    site : VacancySite, optional
        For shell fractions and alignment; located from the structures when
        omitted (if the case has a host structure).
    edges : BandEdges, optional
        Host band edges (default from ``host_projections``, else ``host_pdos``).
    alignment : Alignment or float, optional
        Shift onto the host scale (default :func:`align`; 0 with a note when
        no reference is available).
    tol : float
        A state must lie more than ``tol`` (eV) inside the gap.
    threshold : float, optional
        DOS threshold for edges from ``host_pdos`` (states/eV).
    dispersion_warning : float
        Dispersion (eV) above which a note warns that the supercell is small.

    Returns
    -------
    list of DefectState
        Sorted by aligned energy; empty when no band lies in the gap.
    """
    proj = case.projections
    if proj is None:
        raise InputFormatError(case.source, None, "in-gap states need the defect cell's band projections "
                               "(case.projections)", field="projections")
    if proj.occupations is None:
        raise InputFormatError(proj.source, None, "in-gap states need band occupations in the defect cell's "
                               "projections (a file that records them, e.g. with occupations per band)",
                               field="occupations")
    notes = []
    if edges is None:
        if case.host_projections is not None:
            edges = band_edges(case.host_projections)
        elif case.host_pdos is not None:
            edges = band_edges(case.host_pdos, threshold=threshold)
        else:
            raise InputFormatError(case.source, None, "band edges of the host are needed: attach host_projections "
                                   "(band energies with occupations) or host_pdos", field="host_projections")
    try:
        site = resolve_site(case, site)
    except OrbtoolError as exc:
        notes.append(f"no vacancy site ({exc}); shell fractions left out")
        site = None
    has_shells = site is not None and any(hasattr(site, a) for a in ("shells", "first_shell"))
    if site is not None and not has_shells:
        notes.append("the site carries no neighbour shells; shell fractions left out")
    if alignment is None:
        try:
            alignment = align(case, site=site) if site is not None else None
        except OrbtoolError as exc:
            notes.append(f"alignment failed ({exc})")
            alignment = None
        if alignment is None:
            notes.append("energies NOT aligned: defect and host scales assumed equal")
            alignment = 0.0
    shift = float(getattr(alignment, "shift", alignment))
    if hasattr(alignment, "method"):
        notes.append(f"aligned by {shift:+.4f} eV: {alignment.method}")
    elif not any(n.startswith("energies NOT aligned") for n in notes):
        notes.append(f"alignment shift {shift:+.4f} eV given by the caller")
    notes.append(f"band edges: {edges.method}")

    kw = proj.kweights
    mean = np.einsum("k,skb->sb", kw, proj.energies)
    aligned = mean + shift
    inside = (aligned > edges.vbm + tol) & (aligned < edges.cbm - tol)
    ls = proj.orbital_ls()
    first = _shell_indices(site, 1) if has_shells else []
    second = _shell_indices(site, 2) if has_shells else []
    if any(i < 0 or i >= proj.natoms for i in first + second):
        top = max(first + second)
        raise InputFormatError(proj.source, None, f"the site's neighbour indices (up to {top}) do not fit the "
                               f"{proj.natoms} atoms of the projections: site and projections belong to different "
                               "structures", field="site")
    out = []
    for s, b in zip(*np.nonzero(inside)):
        s, b = int(s), int(b)
        ao = proj.character(b, s)
        atom_w = ao.sum(axis=1)
        orb_w = {"s": 0.0, "p": 0.0, "d": 0.0}
        for L in sorted(set(ls.tolist())):
            if L >= 0:
                orb_w[_L_NAMES[L]] = float(ao[:, ls == L].sum())
        shells = {}
        if has_shells:
            f1, f2 = float(atom_w[first].sum()), float(atom_w[second].sum())
            shells = {1: f1, 2: f2, "rest": 1.0 - f1 - f2}
        ek = proj.energies[s, :, b]
        disp = float(ek.max() - ek.min())
        own = list(notes)
        if disp > dispersion_warning:
            own.append(f"dispersion {disp:.3f} eV > {dispersion_warning} eV: the state interacts with its periodic "
                       "images; a larger supercell is advisable")
        out.append(DefectState(energy=float(mean[s, b]), energy_aligned=float(aligned[s, b]),
                               above_vbm=float(aligned[s, b] - edges.vbm), below_cbm=float(edges.cbm - aligned[s, b]),
                               band=b, spin=s, occupation=proj.band_occupation(b, s),
                               max_occupation=proj.max_occupation, dispersion=disp, atom_weights=atom_w,
                               orbital_weights=orb_w, atom_orbital=ao, orbital_names=tuple(proj.orbitals),
                               shell_fractions=shells, edges=edges, provenance=tuple(own)))
    out.sort(key=lambda st: (st.energy_aligned, st.spin))
    return out
