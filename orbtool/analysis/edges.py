"""Band edges of the host: from band energies and occupations (electron count), from a DOS, or
the true edges of a k-resolved calculation / the user, and whether a state is localised.

* :func:`band_edges` — VBM, CBM and gap (spin-resolved); with ``reference=`` (or the
  ``true_band_edges`` that :func:`orbtool.load_case` records) the true edges, the data's own
  kept in ``BandEdges.sampled`` and a warning when the gaps differ.
* :func:`band_localisation` — first-shell share against a uniform spread, inverse participation ratio.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..errors import InputFormatError, OrbtoolError
from ..spectra import BandProjections, ProjectedDOS
from ._records import Record

__all__ = ["NoGapError", "BandEdges", "band_edges", "band_localisation", "localised_states", "LOCALISATION_FACTOR"]

#: a defect level's first-shell share must reach this many times the share of a state spread evenly over
#: the atoms (a rule of thumb). 2 dropped the pyscf F centre of the outward-breathing Li14F12 cluster
#: (``tests/external/data/vac_out5``: share 0.455 against 2 × 6/26 = 0.462), where the first shell is
#: a quarter of the atoms. The pyscf valence bands have shares of 0.00–0.01 there (uniform 0.23); the
#: delocalised levels of the GPAW family's vacancy cells (participation ~30–44 of 53 atoms) 0.003–0.14
#: against a uniform 0.075 — a factor that separates both cleanly does not exist (measured; see
#: tests/test_edges_localised.py and tests/test_band_edges_true.py)
LOCALISATION_FACTOR = 1.5


class NoGapError(OrbtoolError, ValueError):
    """The host has no band gap (a metal, or the data cannot show one), so no
    in-gap level can be defined."""


@dataclass(frozen=True, eq=False)
class BandEdges(Record):
    """Valence-band maximum, conduction-band minimum and gap.

    Attributes
    ----------
    vbm, cbm, gap : float
        eV (host scale); ``gap = cbm − vbm`` over both spins.
    by_spin : dict[int, tuple[float, float]]
        (vbm, cbm) of each spin channel, eV.
    method : str
        How the edges were found (including any threshold).
    provenance : tuple of str
    """

    vbm: float
    cbm: float
    gap: float
    by_spin: dict
    method: str
    provenance: tuple = field(default_factory=tuple)
    sampled: tuple | None = None
    warnings: tuple = field(default_factory=tuple)

    def summary(self) -> str:
        lines = [f"Band edges by {self.method}",
                 f"  VBM {self.vbm:.4f} eV   CBM {self.cbm:.4f} eV   gap {self.gap:.4f} eV"]
        if self.sampled is not None:
            v, c = self.sampled
            lines.append(f"  supercell k-points: VBM {v:.4f} eV   CBM {c:.4f} eV   gap {c - v:.4f} eV")
        lines += [f"  WARNING: {w}" for w in self.warnings]
        if len(self.by_spin) > 1:
            for s, (v, c) in self.by_spin.items():
                lines.append(f"  spin {'up' if s == 0 else 'down'}: VBM {v:.4f}  CBM {c:.4f}  gap {c - v:.4f} eV")
        lines += [f"  note: {p}" for p in self.provenance]
        return "\n".join(lines)


def _edges_from_bands(proj: BandProjections, fermi, occupied, min_gap) -> BandEdges:
    """Edges by counting electrons: the occupations give the number of filled bands per spin,
    N_s = Σ_k w_k Σ_n f_snk / f_max; VBM = highest energy of band N_s − 1, CBM = lowest of band
    N_s over the k-points. Partial occupations from smearing (Fermi–Dirac, Gaussian) move no
    electron across a real gap, so they are not a metal; a fractional count or overlapping bands
    are (common practice: the aufbau count of an insulator's filled bands)."""
    e = proj.energies
    notes = [f"{proj.nkpoints} k-point(s), {proj.nbands} bands"]
    if proj.occupations is None:
        if fermi is None:
            raise InputFormatError(proj.source, None, "band edges need band occupations, which these projections "
                                   "lack: read a file with occupations or pass fermi= (eV)", field="occupations")
        occ = e <= fermi
        how = f"band energies below the given Fermi level {fermi:.4f} eV"
        filled = {s: None for s in range(proj.nspin)}
    else:
        frac = proj.occupations / proj.max_occupation
        partial = (frac > 0.05) & (frac < 0.95)
        counts = np.einsum("k,skb->s", proj.kweights, frac)
        filled = {}
        for s in range(proj.nspin):
            n = float(counts[s])
            if abs(n - round(n)) > 0.05:
                raise NoGapError(f"{proj.source or 'the host projections'}: spin {s} holds {n:.3f} bands' worth of "
                                 "electrons, not a whole number: the host is metallic (or the data miss bands), so "
                                 "no band gap and no in-gap levels can be defined")
            filled[s] = int(round(n))
        occ = frac >= occupied
        how = "band energies and occupations (filled bands counted from the occupations)"
        if partial.any():
            notes.append(f"{int(partial.sum())} state(s) partly occupied (e.g. at {float(e[partial].min()):.4f} eV): "
                         "smearing, not a metal, since the electron count fills whole bands")
    by_spin = {}
    for s in range(proj.nspin):
        nf = filled[s]
        if nf is None:
            if not occ[s].any() or occ[s].all():
                state = "empty" if not occ[s].any() else "full"
                raise InputFormatError(proj.source, None, f"spin {s}: all bands are {state}; both occupied and "
                                       "empty bands are needed for the edges", field="energies")
            by_spin[s] = (float(e[s][occ[s]].max()), float(e[s][~occ[s]].min()))
            continue
        if nf <= 0 or nf >= proj.nbands:
            state = "empty" if nf <= 0 else "full"
            raise InputFormatError(proj.source, None, f"spin {s}: all bands are {state}; both occupied and empty "
                                   "bands are needed for the edges", field="energies")
        es = np.sort(e[s], axis=1)
        by_spin[s] = (float(es[:, nf - 1].max()), float(es[:, nf].min()))
    vbm = max(v for v, _ in by_spin.values())
    cbm = min(c for _, c in by_spin.values())
    if not cbm - vbm > min_gap:
        raise NoGapError(f"{proj.source or 'the host projections'}: CBM {cbm:.4f} eV is not above VBM {vbm:.4f} eV "
                         f"by more than {min_gap} eV: the host is metallic, so no in-gap levels can be defined")
    return BandEdges(vbm=vbm, cbm=cbm, gap=cbm - vbm, by_spin=by_spin, method=how, provenance=tuple(notes))


def _with_reference(edges: BandEdges, ref: dict, tolerance: float) -> BandEdges:
    """The true edges of ``ref`` (a band-structure file or the user), with the sampled ones kept in
    ``sampled`` and a warning when the sampled gap differs by more than ``tolerance`` (eV)."""
    warns, notes = [], list(edges.provenance) + [f"edges of the data themselves: {edges.method}"]
    if ref.get("gap_only"):
        vbm, cbm = edges.vbm, edges.vbm + float(ref["gap"])
    else:
        vbm, cbm = float(ref["vbm"]), float(ref["cbm"])
        if "gamma_vbm" in ref:
            # Γ is sampled by both calculations: its valence-band top fixes the offset between their
            # energy scales (their average potentials differ through the k sampling of the density)
            delta = edges.vbm - float(ref["gamma_vbm"])
            vbm, cbm = vbm + delta, cbm + delta
            notes.append(f"band-structure edges moved by {delta:+.4f} eV onto the data's scale (the Γ valence-band "
                         "top, sampled by both, made to coincide)")
            ref = {**ref, "vbm": vbm, "cbm": cbm}
    gap_s, gap_t = edges.gap, cbm - vbm
    if abs(gap_s - gap_t) > tolerance:
        warns.append(f"the supercell's own gap ({gap_s:.3f} eV at its k-points) differs from the true gap "
                     f"({gap_t:.3f} eV) by {gap_s - gap_t:+.3f} eV: band extrema away from the sampled k-points "
                     "(folding); levels are referred to the true edges")
    if not ref.get("gap_only") and abs(edges.vbm - vbm) > tolerance:
        warns.append(f"the supercell VBM ({edges.vbm:.3f} eV) and the true VBM ({vbm:.3f} eV) differ by "
                     f"{edges.vbm - vbm:+.3f} eV: the band-structure file must be on the pristine supercell's "
                     "energy scale (same code, recipe and potential reference) — or the VBM is not at Γ")
    return BandEdges(vbm=vbm, cbm=cbm, gap=gap_t, by_spin={0: (vbm, cbm)}, method=str(ref.get("method", "given")),
                     provenance=tuple(notes), sampled=(edges.vbm, edges.cbm), warnings=tuple(warns))


def band_localisation(atom_weights, first_shell, *, factor: float = LOCALISATION_FACTOR) -> dict:
    """Is a state localised at the vacancy rather than a (folded) host band?

    Criterion: its share on the first neighbour shell is at least ``factor`` times the share a
    uniformly spread state would have there (n_first / n_atoms). Also reported: the inverse
    participation ratio IPR = Σ_a w_a² / (Σ_a w_a)² over the atoms and the participation number
    1/IPR, the number of atoms effectively carrying the state (R. J. Bell & P. Dean, Discuss.
    Faraday Soc. 50, 55 (1970) [citation from memory]). Comparing a state's weight near the defect
    with a host state's is common practice; the factor (:data:`LOCALISATION_FACTOR`) is a rule of thumb.

    Parameters
    ----------
    atom_weights : (natom,) array
        Projection weight of the state on each atom (any normalisation, ≥ 0).
    first_shell : sequence of int
        Atom indices of the vacancy's first neighbour shell.

    Returns
    -------
    dict with ``localised`` (bool, or None when it cannot be judged: all weights zero, no first shell, or a
    cell so small that ``factor`` × the uniform share reaches 1), ``first_shell_share``,
    ``uniform_share``, ``ipr``, ``participation`` and ``criterion`` (text).
    """
    w = np.clip(np.asarray(atom_weights, float), 0.0, None)
    n = w.size
    first = [int(i) for i in first_shell]
    total = float(w.sum())
    uniform = len(first) / n if n else float("nan")
    crit = f"first-shell share ≥ {factor:g} × uniform share n_first/n_atoms"
    if not total > 0 or not first:
        return {"localised": None, "first_shell_share": float("nan"), "uniform_share": uniform,
                "ipr": float("nan"), "participation": float("nan"),
                "criterion": crit + " (not judged: no atom weights or no first shell)"}
    share = float(w[first].sum()) / total
    if factor * uniform >= 1.0:
        return {"localised": None, "first_shell_share": share, "uniform_share": uniform, "ipr": float("nan"),
                "participation": float("nan"),
                "criterion": crit + f" = {factor * uniform:.3f} (not judged: the first shell holds {len(first)} "
                f"of the cell's {n} atoms, so no share can pass; a larger supercell is needed)"}
    ipr = float((w ** 2).sum()) / total ** 2
    return {"localised": bool(share >= factor * uniform), "first_shell_share": share, "uniform_share": uniform,
            "ipr": ipr, "participation": 1.0 / ipr, "criterion": crit + f" = {factor * uniform:.3f}"}


def _crossing(e, d, i, j, thr):
    """Energy where the DOS crosses thr between samples i and j (linear)."""
    if d[i] == d[j]:
        return float(e[j])
    return float(e[i] + (thr - d[i]) * (e[j] - e[i]) / (d[j] - d[i]))


def _edges_of_curve(e, d, fermi, thr, search, source):
    low = d < thr
    f = int(np.clip(np.searchsorted(e, fermi), 0, e.size - 1))
    start = None
    if low[f]:
        start = f
    else:
        # the Fermi level of an insulator usually sits at the top of the valence band: look up first
        up = np.flatnonzero(low[f:] & (e[f:] <= fermi + search))
        down = np.flatnonzero(low[:f] & (e[:f] >= fermi - search))
        if up.size:
            start = f + int(up[0])
        elif down.size:
            start = int(down[-1])
    if start is None:
        raise NoGapError(f"{source or 'the host PDOS'}: the DOS stays above {thr:.3g} states/eV within "
                         f"{search} eV of the Fermi level {fermi:.4f} eV: no gap (metal, or broadening too large)")
    lo = start
    while lo > 0 and low[lo - 1]:
        lo -= 1
    hi = start
    while hi < e.size - 1 and low[hi + 1]:
        hi += 1
    if lo == 0 or hi == e.size - 1:
        raise NoGapError(f"{source or 'the host PDOS'}: the low-DOS region around the Fermi level reaches the end "
                         "of the energy grid; no band edge found")
    return _crossing(e, d, lo - 1, lo, thr), _crossing(e, d, hi + 1, hi, thr)


def _edges_from_dos(pdos: ProjectedDOS, threshold, fermi, search, min_gap) -> BandEdges:
    fermi = pdos.fermi if fermi is None else float(fermi)
    if fermi is None:
        raise InputFormatError(pdos.source, None, "band edges from a DOS need its Fermi level (pdos.fermi) or "
                               "fermi= (eV)", field="fermi")
    if pdos.total is not None:
        curves, kind = {s: pdos.total[s] for s in range(pdos.nspin)}, "total DOS"
    else:
        m = pdos.mask()
        if not m.any():
            m = pdos.mask(orbitals="tot")
        curves = {s: pdos.values[m & pdos.mask(spin=s)].sum(axis=0) for s in range(pdos.nspin)}
        kind = "sum of the projected DOS"
    peak = max(float(c.max()) for c in curves.values())
    thr = 0.01 * peak if threshold is None else float(threshold)
    if not thr > 0:
        raise InputFormatError(pdos.source, None, "threshold must be positive (states/eV)", field="threshold")
    by_spin = {s: _edges_of_curve(pdos.energies, c, fermi, thr, search, pdos.source) for s, c in curves.items()}
    vbm = max(v for v, _ in by_spin.values())
    cbm = min(c for _, c in by_spin.values())
    if not cbm - vbm > min_gap:
        raise NoGapError(f"{pdos.source or 'the host PDOS'}: no gap wider than {min_gap} eV at threshold "
                         f"{thr:.3g} states/eV")
    how = f"{kind} crossing {thr:.3g} states/eV" + (" (1 % of its peak)" if threshold is None else "")
    return BandEdges(vbm=vbm, cbm=cbm, gap=cbm - vbm, by_spin=by_spin, method=how,
                     provenance=(f"energy step {pdos.step:.4f} eV; broadening narrows the apparent gap",))


def band_edges(data, *, threshold: float | None = None, fermi: float | None = None, occupied: float = 0.5,
               search: float = 1.0, min_gap: float = 1e-3, reference=None, gap_tolerance: float = 0.1) -> BandEdges:
    """VBM, CBM and gap of a (host) calculation.

    Parameters
    ----------
    data : BandProjections or ProjectedDOS
        Band energies with occupations (preferred: exact edges over the
        k-points sampled) or a DOS with a Fermi level.
    threshold : float, optional
        For a DOS: states/eV below which an energy counts as inside the gap
        (default 1 % of the DOS peak; stated in ``method``).
    fermi : float, optional
        Fermi level, eV: replaces missing occupations / the DOS's own value.
    occupied : float
        Fraction of the maximum occupation above which a state is occupied.
    search : float
        For a DOS: how far from the Fermi level (eV) to look for the gap.
    min_gap : float
        Gaps not wider than this (eV) count as none.
    reference : path, mapping, float or BandEdges, optional
        The host's true band edges (a k-resolved calculation on the same energy scale, or the
        user's): a band-structure JSON (:mod:`orbtool.io.edges`), ``{"vbm", "cbm"}`` (eV) or the
        true gap (eV, CBM = the data's VBM + gap). Default: ``data.meta["true_band_edges"]``,
        which :func:`orbtool.load_case` fills from ``edges=`` or a band-structure file. The
        result then holds the true edges, the data's own in ``sampled``, and ``warnings``.
    gap_tolerance : float
        Difference (eV) between the data's gap and the true gap above which a warning is given.

    Raises
    ------
    NoGapError
        Metallic host (partly occupied states, or no low-DOS region).
    """
    if isinstance(data, BandProjections):
        edges = _edges_from_bands(data, fermi, occupied, min_gap)
    elif isinstance(data, ProjectedDOS):
        edges = _edges_from_dos(data, threshold, fermi, search, min_gap)
    else:
        edges = None
    if edges is not None:
        if reference is None:
            reference = data.meta.get("true_band_edges") if isinstance(data.meta, dict) else None
        if reference is None:
            return edges
        if not isinstance(reference, dict) or "method" not in reference:
            from ..io.edges import edges_from_user
            reference = edges_from_user(reference, source=data.source)
        return _with_reference(edges, reference, gap_tolerance)
    raise InputFormatError(None, None, f"band edges need BandProjections or ProjectedDOS, got {type(data).__name__}",
                           field="data")


def localised_states(states, site, *, factor: float = LOCALISATION_FACTOR) -> tuple[list, list]:
    """Split in-gap states into defect levels (localised at the vacancy) and the rest.

    Each state's ``atom_weights`` are judged by :func:`band_localisation` against the site's first
    shell. States without atom weights (e.g. from a calculator offering no projections) cannot be
    judged and are kept, with that said in the returned notes.

    Returns
    -------
    (kept, dropped) : lists of (state, verdict dict); the verdict's ``criterion`` says why.
    """
    shells = getattr(site, "shells", None)
    first = [int(nb.index) for nb in (shells[0] if shells else getattr(site, "first_shell", ()))]
    kept, dropped = [], []
    for st in states:
        verdict = band_localisation(st.atom_weights, first, factor=factor)
        (dropped if verdict["localised"] is False else kept).append((st, verdict))
    return kept, dropped
