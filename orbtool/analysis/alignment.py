"""Putting the defect cell's energies on the host's scale.

Eigenvalues of two periodic calculations share no absolute zero: the
average electrostatic potential of each cell is set to zero separately, and
removing an atom changes it. A reference that the defect does not disturb
fixes the offset: the electrostatic potential far from the defect, or the
projected DOS of atoms far from it (a deep, core-like channel or the valence
centroid). Both follow the potential-alignment idea of S. B. Zhang &
J. E. Northrup, Phys. Rev. Lett. 67, 2339 (1991) and C. G. Van de Walle &
J. Neugebauer, J. Appl. Phys. 95, 3851 (2004) [citation from memory]; see C. Freysoldt et al.,
Rev. Mod. Phys. 86, 253 (2014), Sec. IV for the caveats.

Convention: ``shift`` is **added** to defect-cell energies to put them on
the host scale, E_host-scale = E_defect + shift.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..errors import GeometryError, InputFormatError, OrbtoolError
from ._records import Record
from .density import site_position

__all__ = ["Alignment", "align", "resolve_site", "far_atoms", "host_indices"]


@dataclass(frozen=True, eq=False)
class Alignment(Record):
    """Offset between the defect cell's and the host's energy scales.

    Attributes
    ----------
    shift : float
        eV, added to defect-cell energies to put them on the host scale.
    method : str
        How it was obtained (reference used, region, window).
    provenance : tuple of str
        Details: the spread of the reference, atoms used, iterations.
    spread : float
        Standard deviation of the point-wise (or atom-wise) differences over
        the reference region, eV: a rough uncertainty of ``shift``.
    """

    shift: float
    method: str
    provenance: tuple = field(default_factory=tuple)
    spread: float = float("nan")

    def summary(self) -> str:
        lines = [f"Alignment shift {self.shift:+.4f} eV (± {self.spread:.4f} eV spread) by {self.method}"]
        lines += [f"  note: {p}" for p in self.provenance]
        return "\n".join(lines)


def resolve_site(case, site=None):
    """The vacancy site: ``site`` if given, else located from ``case.host``
    and ``case.defect`` by :func:`orbtool.analysis.geometry.locate_vacancy`."""
    if site is not None:
        return site
    if getattr(case, "host", None) is None:
        raise GeometryError(f"case {getattr(case, 'name', '?')!r}: no vacancy site given and no host structure "
                            "to locate it from; pass site= or attach the host")
    try:
        from .geometry import locate_vacancy
    except ImportError as exc:                     # pragma: no cover - geometry lands separately
        raise OrbtoolError(f"cannot locate the vacancy automatically ({exc}); pass site=") from None
    return locate_vacancy(case.host, case.defect)


def _mic_distances(points: np.ndarray, centre: np.ndarray, atoms) -> np.ndarray:
    from ase.geometry import get_distances

    _, d = get_distances(points, [centre], cell=atoms.get_cell(), pbc=atoms.get_pbc())
    return d[:, 0]


def far_atoms(atoms, centre, count: int | None = None) -> np.ndarray:
    """Indices of the ``count`` atoms farthest from ``centre`` (minimum image),
    default one eighth of the cell (at least 2)."""
    pos = atoms.get_positions()
    d = _mic_distances(pos, np.asarray(centre, float), atoms)
    n = count if count is not None else max(2, len(atoms) // 8)
    n = int(min(max(1, n), len(atoms)))
    return np.argsort(-d, kind="stable")[:n]


def host_indices(site, defect, host, indices) -> np.ndarray:
    """Host-cell index of defect-cell atoms: from ``site.mapping`` when the
    site has one, else the nearest host atom (minimum image)."""
    mapping = getattr(site, "mapping", None)
    idx = np.asarray(indices, dtype=int)
    if mapping is not None:
        return np.asarray(mapping, dtype=int)[idx]
    from ase.geometry import get_distances

    _, d = get_distances(defect.get_positions()[idx], host.get_positions(), cell=host.get_cell(),
                         pbc=host.get_pbc())
    return np.argmin(d, axis=1)


def _potential_shift(case, centre, far_fraction, region):
    vd, vh = case.grids["potential"], case.host_grids["potential"]
    for g, who in ((vd, "defect"), (vh, "host")):
        if g.unit not in ("eV", "arb"):
            raise InputFormatError(g.source, None, f"the {who} potential grid has unit {g.unit!r}; eV expected",
                                   field="unit")
    if vd.shape != vh.shape or not np.allclose(vd.cell, vh.cell, atol=1e-3):
        raise GeometryError(f"potential grids of defect ({vd.source or '<memory>'}, {vd.shape}) and host "
                            f"({vh.source or '<memory>'}, {vh.shape}) do not belong together: same grid and "
                            "cell needed")
    if not 0 < far_fraction <= 1:
        raise InputFormatError(None, None, f"far_fraction must be in (0, 1], got {far_fraction}", field="far_fraction")
    if region == "sphere":
        d = vd.minimum_image_distance(centre)
        cut = float(np.quantile(d, 1.0 - far_fraction))
        far = d >= cut
        diff = vh.values[far] - vd.values[far]
        return (float(diff.mean()), f"electrostatic potential averaged over the points farther than {cut:.2f} Å "
                f"from the site ({far_fraction:.0%} of the cell)", float(diff.std()))
    if region != "planar":
        raise InputFormatError(None, None, f"region must be 'sphere' or 'planar', got {region!r}", field="region")
    # planar average: the slab of lattice planes farthest from the site along the longest lattice vector
    axis = int(np.argmax(np.linalg.norm(vd.cell, axis=1)))
    c_frac = ((centre - vd.origin) @ np.linalg.inv(vd.cell))[axis]
    off = np.abs(((vd.fractional_axes()[axis] - c_frac + 0.5) % 1.0) - 0.5)
    planes = off >= 0.5 - far_fraction / 2 - 1e-12
    if not planes.any():
        planes = off == off.max()
    other = tuple(i for i in range(3) if i != axis)
    profile = (vh.values - vd.values).mean(axis=other)          # planar average along the axis
    vals = profile[planes]
    return (float(vals.mean()), f"planar-averaged electrostatic potential in the {int(planes.sum())} lattice "
            f"plane(s) farthest from the site along a{axis + 1}", float(vals.std()))


def _centroid(pdos, atoms, l, window, shift=0.0):
    from .moments import dos_moments

    crit = {"atoms": [int(a) for a in atoms]}
    if l is not None:
        crit["l"] = l
    try:
        curve = pdos.select(**crit)
    except KeyError:
        raise InputFormatError(pdos.source, None, f"no PDOS channel for the far atoms {crit['atoms']}"
                               + (f" with l={l}" if l is not None else ""), field="channels") from None
    return dos_moments(pdos.energies + shift, curve, window, source=pdos.source).centre


def _pdos_shift(case, site, centre, count, l, window):
    hp, dp = case.host_pdos, case.defect_pdos
    if case.host is None:
        raise InputFormatError(case.source, None, "PDOS alignment needs the host structure (case.host)", field="host")
    far_d = far_atoms(case.defect, centre, count)
    far_h = host_indices(site, case.defect, case.host, far_d)
    if window is None:
        top = hp.fermi if hp.fermi is not None else hp.energies[-1]
        window = (float(hp.energies[0]), float(top))
    lo, hi = (float(w) for w in window)
    c_h = _centroid(hp, far_h, l, (lo, hi))
    shift, notes = 0.0, []
    span = (dp.energies[0], dp.energies[-1])
    for it in range(50):
        # the defect window follows the current shift: same states, defect scale
        wlo, whi = max(lo - shift, span[0]), min(hi - shift, span[1])
        c_d = _centroid(dp, far_d, l, (wlo, whi))
        new = c_h - c_d
        if abs(new - shift) < 1e-7:
            shift = new
            break
        shift = new
    else:
        notes.append("centroid iteration did not settle within 50 steps")
    notes.append(f"far atoms (defect cell) {far_d.tolist()} ↔ host {far_h.tolist()}; {it + 1} iteration(s)")
    per_atom = []
    for a_d, a_h in zip(far_d, far_h):
        try:
            per_atom.append(_centroid(hp, [a_h], l, (lo, hi))
                            - _centroid(dp, [a_d], l, (max(lo - shift, span[0]), min(hi - shift, span[1]))))
        except InputFormatError:
            pass
    spread = float(np.std(per_atom)) if per_atom else float("nan")
    what = "all orbitals" if l is None else f"l={l}"
    return shift, (f"PDOS centroid ({what}) of the {len(far_d)} atoms farthest from the vacancy over "
                   f"{lo:.3f} … {hi:.3f} eV (host scale)"), spread, notes


def align(case, site=None, *, method: str = "auto", far_fraction: float = 0.25, region: str = "sphere",
          count: int | None = None, l: int | None = None, window=None) -> Alignment:
    """Offset that puts the defect cell's energies on the host's scale.

    Parameters
    ----------
    case : DefectCase
    site : VacancySite or (3,) position, optional
        Located from the structures when omitted.
    method : {"auto", "potential", "pdos"}
        ``"potential"``: mean of V_host − V_defect over the points farthest
        from the site (needs ``case.grids["potential"]`` and
        ``case.host_grids["potential"]`` on the same grid). ``"pdos"``:
        difference of the PDOS centroids of the atoms farthest from the
        vacancy (needs ``host_pdos`` and ``defect_pdos``); give ``window``
        (host scale, eV) and ``l`` to use a deep, core-like channel, default
        the whole occupied range. ``"auto"`` takes the first available.
    far_fraction : float
        Share of the cell (farthest from the site) averaged for the
        potential route.
    region : {"sphere", "planar"}
        Potential route: average over the points farthest from the site, or
        the planar average over the slab of lattice planes farthest from the
        site along the longest lattice vector.
    count : int, optional
        Number of far atoms for the PDOS route (default one eighth of the cell).
    l : int, optional
        Angular momentum of the PDOS channel to use.
    window : (emin, emax), optional
        Energies (host scale, eV) over which the PDOS centroid is taken.

    Returns
    -------
    Alignment
    """
    has_pot = "potential" in getattr(case, "grids", {}) and "potential" in getattr(case, "host_grids", {})
    has_pdos = case.host_pdos is not None and case.defect_pdos is not None
    if method == "auto":
        if has_pot:
            method = "potential"
        elif has_pdos:
            method = "pdos"
        else:
            raise OrbtoolError(f"case {case.name!r}: cannot align the defect cell to the host: needs potential "
                               "grids of both cells (grids['potential'], host_grids['potential']) or the PDOS of "
                               "both cells (defect_pdos, host_pdos)")
    site = resolve_site(case, site)
    centre = site_position(site)
    if method == "potential":
        if not has_pot:
            raise InputFormatError(case.source, None, "method='potential' needs grids['potential'] and "
                                   "host_grids['potential']", field="grids")
        shift, how, spread = _potential_shift(case, centre, far_fraction, region)
        notes = []
    elif method == "pdos":
        if not has_pdos:
            raise InputFormatError(case.source, None, "method='pdos' needs defect_pdos and host_pdos",
                                   field="defect_pdos")
        shift, how, spread, notes = _pdos_shift(case, site, centre, count, l, window)
    else:
        raise InputFormatError(None, None, f"method must be 'auto', 'potential' or 'pdos', got {method!r}",
                               field="method")
    return Alignment(shift=float(shift), method=how, provenance=tuple(notes), spread=spread)
