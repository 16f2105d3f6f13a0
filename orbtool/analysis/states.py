"""Band edges of the host and the defect's in-gap states with their character.

* :func:`band_edges` — VBM, CBM and gap (spin-resolved) from band energies
  and occupations, or from a projected/total DOS with a stated threshold.
* :func:`in_gap_states` — every level of the defect cell whose k-averaged
  energy, put on the host scale by :func:`~orbtool.analysis.alignment.align`,
  lies inside (VBM + tol, CBM − tol), with its occupation, dispersion over k
  and its weights on atoms, orbitals and neighbour shells.

A degenerate multiplet is one level: its bands (degenerate at Γ) are grouped
and every weight is taken from the sum of their projectors, Σ_b |⟨φ|ψ_b⟩|²,
which does not depend on the basis the eigensolver chose inside the degenerate
subspace (any orthogonal rotation leaves it unchanged); where a band is
degenerate with others at another k-point it contributes its fair share of
that block. One eigenvector of a multiplet is never used alone.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field

import numpy as np

from ..errors import InputFormatError, OrbtoolError
from ._records import Record
from .alignment import Alignment, align, resolve_site
from .edges import LOCALISATION_FACTOR, BandEdges, NoGapError, band_edges, band_localisation, localised_states

__all__ = ["NoGapError", "BandEdges", "band_edges", "band_localisation", "DefectState", "GapStates", "in_gap_states",
           "multiplets", "Alignment", "align"]

_L_NAMES = "spdf"


# ---------------------------------------------------------------- in-gap states
@dataclass(frozen=True, eq=False)
class DefectState(Record):
    """One level of the defect cell inside the host gap: a band, or a whole
    degenerate multiplet of bands (then every weight is that of the sum of
    the multiplet's projectors).

    Attributes
    ----------
    energy : float
        k-weighted mean band energy on the defect cell's own scale (mean over
        the multiplet's bands), eV.
    energy_aligned : float
        The same on the host scale (``energy + alignment shift``), eV.
    above_vbm, below_cbm : float
        ``energy_aligned − VBM`` and ``CBM − energy_aligned``, eV.
    band, spin : int
        0-based index of the multiplet's lowest band, and spin channel.
    occupation, max_occupation : float
        k-weighted electrons in the whole multiplet, and what one band can hold
        (the multiplet holds ``degeneracy × max_occupation``).
    dispersion : float
        Max − min over the k-points of the band energy (of the multiplet's
        mean energy for a multiplet), eV (large values mean the
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
    bands : tuple of int
        Every band of the multiplet (0-based); ``(band,)`` for a single band.
    localisation : dict
        The verdict of :func:`~orbtool.analysis.edges.band_localisation` (``localised``,
        ``first_shell_share``, ``uniform_share``, ``participation``, ``criterion``); empty when
        it could not be judged (no site with neighbour shells).
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
    bands: tuple = ()
    localisation: dict = field(default_factory=dict)

    def __post_init__(self):
        if not self.bands:
            object.__setattr__(self, "bands", (int(self.band),))

    @property
    def degeneracy(self) -> int:
        """Number of bands in the multiplet."""
        return len(self.bands)

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
        which = (f"band {self.band}" if self.degeneracy == 1 else
                 f"{self.degeneracy}-fold multiplet, bands {', '.join(str(b) for b in self.bands)}")
        lines = [f"In-gap state: {which}{spin}",
                 f"  energy          {self.energy:.4f} eV (defect cell)   {self.energy_aligned:.4f} eV (host scale)",
                 f"  position        VBM + {self.above_vbm:.4f} eV  /  CBM − {self.below_cbm:.4f} eV "
                 f"(gap {self.edges.gap:.4f} eV)",
                 f"  occupation      {self.occupation:.3f} of {self.degeneracy * self.max_occupation:g}",
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


def _blocks(e, degeneracy):
    """Consecutive runs of bands closer than ``degeneracy`` (eV) in ascending energies ``e`` (nb,)."""
    groups, cur = [], [0]
    for b in range(1, len(e)):
        if abs(e[b] - e[b - 1]) < degeneracy:
            cur.append(b)
        else:
            groups.append(tuple(cur))
            cur = [b]
    groups.append(tuple(cur))
    return groups


def multiplets(energies, degeneracy: float = 1e-3, kpoints=None) -> list[tuple[int, ...]]:
    """Group bands into degenerate multiplets (the levels of the defect cell).

    Parameters
    ----------
    energies : array_like (nk, nb)
        Band energies of one spin channel, ascending at every k, eV.
    degeneracy : float
        Bands closer than this (eV) are degenerate.
    kpoints : array_like (nk, 3), optional
        The multiplets are those at Γ (the full point-group symmetry of the site) when Γ is among
        them, else at the first k-point. At other k-points a supercell's levels split and may touch
        other bands; there the weights are shared fairly (see :func:`in_gap_states`).

    Returns
    -------
    list of tuple of int
        Consecutive band indices, every band in exactly one group.
    """
    e = np.atleast_2d(np.asarray(energies, float))
    if e.shape[1] == 0:
        return []
    ref = 0
    if kpoints is not None:
        k = np.asarray(kpoints, float)
        gamma = np.flatnonzero(np.all(np.abs(k - np.round(k)) < 1e-9, axis=1))
        ref = int(gamma[0]) if len(gamma) else 0
    return _blocks(e[ref], degeneracy)


def _fair_weights(weights, energies, bands, degeneracy):
    """Σ over ``bands`` of the projections at each k, where a band degenerate (at that k) with others
    contributes the mean over its whole degenerate block: invariant under any rotation of the eigenvectors
    inside a degenerate subspace, and the shares of all bands still add up to the total.

    weights (nk, nb, natom, norb), energies (nk, nb) → (nk, natom, norb)."""
    out = np.zeros((weights.shape[0],) + weights.shape[2:])
    wanted = set(bands)
    for k in range(weights.shape[0]):
        for blk in _blocks(energies[k], degeneracy):
            m = len(wanted.intersection(blk))
            if m:
                out[k] += weights[k, list(blk)].sum(axis=0) * (m / len(blk))
    return out


class GapStates(list):
    """The in-gap levels (a list of :class:`DefectState`, sorted by aligned energy) with what was
    left out.

    Attributes
    ----------
    dropped : list of (DefectState, dict)
        Levels inside the gap that are not localised at the vacancy (folded host states), each with
        the verdict of :func:`~orbtool.analysis.edges.band_localisation` saying why.
    notes : tuple of str
        One note per dropped level (with its numbers), and the warnings of the alignment and of the
        band edges — the same notes every kept level carries in its ``provenance``.
    """

    def __init__(self, states=(), dropped=(), notes=()):
        super().__init__(states)
        self.dropped = list(dropped)
        self.notes = tuple(notes)


def _numbers(v, factor, natoms):
    return (f"first-shell share {v['first_shell_share']:.3f} {'≥' if v['localised'] else '<'} {factor:g} × the "
            f"uniform share {v['uniform_share']:.3f} = {factor * v['uniform_share']:.3f}; spread over "
            f"{v['participation']:.1f} of {natoms} atoms (participation number)")


def _dropped_note(st, v, factor, natoms):
    """Why a level in the gap is not reported as a defect level (with the numbers)."""
    where = (f"band {st.band}" if st.degeneracy == 1 else
             f"the {st.degeneracy}-fold multiplet of bands {', '.join(str(b) for b in st.bands)}")
    return (f"{where} spin {st.spin} at VBM + {st.above_vbm:.3f} eV is NOT reported as a defect level: not localised "
            f"at the vacancy ({_numbers(v, factor, natoms)}): a host band state, folded into the supercell's gap or "
            "brought there by wrong band edges")


def _kept_note(v, factor, natoms):
    if v.get("localised") is None:
        return f"localisation not judged: {v['criterion']}"
    if not v["localised"]:                 # kept on request (localised=False)
        return f"NOT localised at the vacancy, kept on request: {_numbers(v, factor, natoms)}"
    return f"localised at the vacancy: {_numbers(v, factor, natoms)}"


def in_gap_states(case, site=None, *, edges: BandEdges | None = None, alignment=None, tol: float = 0.05,
                  threshold: float | None = None, dispersion_warning: float = 0.1,
                  degeneracy: float = 1e-3, localised: bool = True,
                  localisation_factor: float = LOCALISATION_FACTOR) -> GapStates:
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
    degeneracy : float
        Bands closer than this (eV) at Γ form one multiplet (see
        :func:`multiplets`); the multiplet is one DefectState whose weights come
        from the sum of its projectors. At a k-point where one of its bands is
        degenerate with bands outside it, that band contributes its fair share
        (the mean over the degenerate block), so no weight depends on the
        eigensolver's basis.
    localised : bool
        Report a level only if it is localised at the vacancy (default): criterion of
        :func:`~orbtool.analysis.edges.band_localisation` — its weight on the vacancy's first
        neighbour shell is at least ``localisation_factor`` times the share a state spread evenly
        over all atoms would have there (n_first / n_atoms). Other levels in the gap are host
        band states (e.g. folded into a Γ-only supercell's gap) and are left out, each with a
        note saying why (``GapStates.dropped`` / ``notes``, and in the kept levels' provenance).
        Levels without atom weights, or without a site with shells, cannot be judged and are
        kept, with a note. ``False`` keeps every level in the gap.
    localisation_factor : float
        See ``localised`` (default :data:`~orbtool.analysis.edges.LOCALISATION_FACTOR`, 1.5: a rule of thumb).

    Returns
    -------
    GapStates
        A list of DefectState sorted by aligned energy (empty when no level lies in the gap),
        with ``dropped`` and ``notes``. Every level's provenance holds the alignment's and the
        band edges' warnings.
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
    if edges.sampled is not None:
        v, c = edges.sampled
        notes.append(f"levels referred to the true band edges (VBM {edges.vbm:.4f}, CBM {edges.cbm:.4f} eV, gap "
                     f"{edges.gap:.4f} eV); the supercell's own k-points give VBM {v:.4f}, CBM {c:.4f} eV, gap "
                     f"{c - v:.4f} eV")
    warnings = [f"WARNING (alignment): {w}" for w in getattr(alignment, "warnings", ())]
    warnings += [f"WARNING (band edges): {w}" for w in edges.warnings]

    kw = proj.kweights
    mean = np.einsum("k,skb->sb", kw, proj.energies)
    ls = proj.orbital_ls()
    first = _shell_indices(site, 1) if has_shells else []
    second = _shell_indices(site, 2) if has_shells else []
    if any(i < 0 or i >= proj.natoms for i in first + second):
        top = max(first + second)
        raise InputFormatError(proj.source, None, f"the site's neighbour indices (up to {top}) do not fit the "
                               f"{proj.natoms} atoms of the projections: site and projections belong to different "
                               "structures", field="site")
    out = []
    for s in range(proj.nspin):
        for group in multiplets(proj.energies[s], degeneracy, proj.kpoints):
            bands = list(group)
            e_mean = float(mean[s, bands].mean())
            aligned = e_mean + shift
            if not (edges.vbm + tol < aligned < edges.cbm - tol):
                continue
            out.append(_level(proj, s, bands, e_mean, aligned, shift, edges, ls, first, second, has_shells, notes,
                              dispersion_warning, degeneracy))
    out.sort(key=lambda st: (st.energy_aligned, st.spin))
    return _judged(out, site if has_shells else None, proj.natoms, warnings, localised, localisation_factor)


def _judged(states, site, natoms, warnings, localised, factor) -> GapStates:
    """Keep the localised levels (all when ``localised`` is False or nothing can be judged); every
    kept level's provenance gets its verdict, the notes on the dropped ones and the warnings."""
    if site is None:
        extra = ["localisation not judged: no vacancy site with neighbour shells"] if states else []
        verdicts = [(st, {}) for st in states]
        kept, dropped = verdicts, []
    else:
        kept, dropped = localised_states(states, site, factor=factor)
        if not localised:
            kept, dropped = sorted(kept + dropped, key=lambda sv: (sv[0].energy_aligned, sv[0].spin)), []
        extra = []
    drop_notes = [_dropped_note(st, v, factor, natoms) for st, v in dropped]
    notes = tuple(warnings) + tuple(drop_notes) + tuple(extra)
    out = []
    for st, verdict in kept:
        own = list(st.provenance) + ([_kept_note(verdict, factor, natoms)] if verdict else []) + list(notes)
        out.append(dataclasses.replace(st, provenance=tuple(own), localisation=dict(verdict)))
    return GapStates(out, dropped, notes)


def _level(proj, s, bands, e_mean, aligned, shift, edges, ls, first, second, has_shells, notes, dispersion_warning,
           degeneracy):
    """One DefectState from the bands of a multiplet: weights of the sum of its projectors."""
    fair = _fair_weights(proj.weights[s], proj.energies[s], bands, degeneracy)  # Σ_b over the multiplet, per k
    raw = np.einsum("k,kao->ao", proj.kweights, fair)
    tot = raw.sum()
    ao = raw / tot if tot > 0 else raw
    atom_w = ao.sum(axis=1)
    orb_w = {"s": 0.0, "p": 0.0, "d": 0.0}
    for L in sorted(set(ls.tolist())):
        if L >= 0:
            orb_w[_L_NAMES[L]] = float(ao[:, ls == L].sum())
    shells = {}
    if has_shells:
        f1, f2 = float(atom_w[first].sum()), float(atom_w[second].sum())
        shells = {1: f1, 2: f2, "rest": 1.0 - f1 - f2}
    ek = proj.energies[s][:, bands]
    disp = float(ek.mean(axis=1).max() - ek.mean(axis=1).min())
    own = list(notes)
    if len(bands) > 1:
        own.append(f"{len(bands)}-fold degenerate multiplet (bands {', '.join(str(b) for b in bands)}): weights from "
                   "the sum of its projectors, independent of the eigensolver's basis inside it")
    if disp > dispersion_warning:
        own.append(f"dispersion {disp:.3f} eV > {dispersion_warning} eV: the state interacts with its periodic "
                   "images; a larger supercell is advisable")
    occ = float(sum(proj.band_occupation(b, s) for b in bands))
    return DefectState(energy=e_mean, energy_aligned=float(aligned), above_vbm=float(aligned - edges.vbm),
                       below_cbm=float(edges.cbm - aligned), band=int(bands[0]), spin=int(s), occupation=occ,
                       max_occupation=proj.max_occupation, dispersion=disp, atom_weights=atom_w,
                       orbital_weights=orb_w, atom_orbital=ao, orbital_names=tuple(proj.orbitals),
                       shell_fractions=shells, edges=edges, provenance=tuple(own), bands=tuple(int(b) for b in bands))
