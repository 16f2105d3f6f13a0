"""Host vs defect PDOS moments of the vacancy's neighbour shells (moments theorem).

The vacancy removes hoppings: a first-shell neighbour's second central moment drops by the lost
Σ|t|² and its first moment moves with the dangling orbital (F. Cyrot-Lackmann, Adv. Phys. 16, 393
(1967); J. Phys. Chem. Solids 29, 1235 (1968)). Sits above :mod:`~orbtool.analysis.moments` (the
numerics) and :mod:`~orbtool.analysis.alignment` (the common energy scale), so imports point down.
"""

from __future__ import annotations

import numpy as np

from ..errors import InputFormatError, OrbtoolError
from .alignment import align, resolve_site
from .moments import _L_NAMES, MomentComparison, MomentRow, channel_moments
from .recursion import recursion_coefficients

__all__ = ["neighbour_moments", "compare_moments"]


def neighbour_moments(case, site=None, *, window=None, alignment=None, shell: int = 1,
                      levels: int = 0, by: str = "l") -> MomentComparison:
    """PDOS moments of every orbital channel of the vacancy's neighbours,
    in the host and in the defect cell.

    Parameters
    ----------
    case : DefectCase
        Needs ``host_pdos`` and ``defect_pdos`` with per-atom channels.
    site : VacancySite, optional
        Located with :func:`orbtool.analysis.geometry.locate_vacancy` when omitted.
    window : (emin, emax), optional
        Host-scale energies, eV (default: the range both PDOS cover).
    alignment : Alignment or float, optional
        Shift added to the defect energies (default: :func:`orbtool.analysis.alignment.align`).
    shell : int
        Neighbour shell (1 = nearest).
    levels : int
        When > 0, also the recursion coefficients of each channel.
    by : {"l", "orbital"}
        Group channels by angular momentum (s, p, d) or keep every orbital
        column of the PDOS (lm where the file has it).
    """
    for key in ("host_pdos", "defect_pdos"):
        if getattr(case, key, None) is None:
            raise InputFormatError(getattr(case, "source", None), None,
                                   f"moments need {key} (a projected DOS of the {key.split('_')[0]} cell)",
                                   field=key)
    site = resolve_site(case, site)
    notes = []
    if alignment is None:
        try:
            alignment = align(case, site=site)
        except OrbtoolError as exc:
            notes.append(f"no alignment ({exc}); defect energies used as they are")
            alignment = 0.0
    shift = float(getattr(alignment, "shift", alignment))
    if hasattr(alignment, "method"):
        notes.append(f"alignment {shift:+.4f} eV by {alignment.method}")
    hp, dp = case.host_pdos, case.defect_pdos
    common = (max(hp.energies[0], dp.energies[0] + shift), min(hp.energies[-1], dp.energies[-1] + shift))
    if window is None:
        window = common
    try:
        lo, hi = (float(w) for w in window)
    except (TypeError, ValueError):
        raise InputFormatError(None, None, f"window must be (emin, emax) in eV, got {window!r}",
                               field="window") from None
    tol = 1e-9 * max(1.0, abs(common[0]), abs(common[1]))
    if not hi > lo or lo < common[0] - tol or hi > common[1] + tol:
        raise InputFormatError(dp.source, None, f"window {lo:.4f} … {hi:.4f} eV (host scale) lies outside the "
                               f"range both PDOS cover after alignment ({common[0]:.4f} … {common[1]:.4f} eV)",
                               field="window")
    if by not in ("l", "orbital"):
        raise InputFormatError(None, None, f"by must be 'l' or 'orbital', got {by!r}", field="by")
    shells = getattr(site, "shells", None)
    neighbours = shells[shell - 1] if shells else (site.first_shell if shell == 1 else site.second_shell)
    rows = []
    for nb in neighbours:
        hidx = getattr(nb, "host_index", None)
        if hidx is None:
            raise InputFormatError(None, None, "the site's neighbours carry no host_index", field="site")
        if by == "l":
            groups = [({"l": L}, _L_NAMES[L])
                      for L in sorted({c.l for c in dp.channels if c.atom == nb.index and c.l >= 0})]
        else:
            names = sorted({c.orbital for c in dp.channels if c.atom == nb.index and c.orbital != "tot"})
            groups = [({"orbitals": o}, o) for o in names]
        for crit, name in groups:
            for s in range(dp.nspin):
                if not hp.mask(atoms=int(hidx), spin=s, **crit).any():
                    continue                   # channel absent in the host
                if not (np.any(hp.select(atoms=int(hidx), spin=s, **crit))
                        or np.any(dp.select(atoms=int(nb.index), spin=s, **crit))):
                    note = f"{name} channels are empty in both cells (not in the basis): skipped"
                    if note not in notes:
                        notes.append(note)
                    continue
                h = channel_moments(hp, window, atoms=int(hidx), spin=s, **crit)
                d = channel_moments(dp, window, shift=shift, atoms=int(nb.index), spin=s, **crit)
                hr = dr = None
                if levels:
                    hr = recursion_coefficients(hp.energies, hp.select(atoms=int(hidx), spin=s, **crit),
                                                levels, window=window)
                    dr = recursion_coefficients(dp.energies + shift, dp.select(atoms=int(nb.index), spin=s, **crit),
                                                levels, window=window)
                rows.append(MomentRow(atom=int(nb.index), host_atom=int(hidx), element=str(nb.element),
                                      orbital=name, spin=s, host=h, defect=d,
                                      host_recursion=hr, defect_recursion=dr))
    if not rows:
        raise InputFormatError(dp.source, None, f"no PDOS channel found for the shell-{shell} neighbours "
                               "in both cells", field="channels")
    notes.append("Δvariance = −(lost Σ|t|²) holds for complete bands (moments theorem); windows cut it")
    return MomentComparison(rows=tuple(rows), window=tuple(float(w) for w in window), shift=shift,
                            provenance=tuple(notes))


#: alias of :func:`neighbour_moments`
compare_moments = neighbour_moments
