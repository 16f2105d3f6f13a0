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

__all__ = ["Alignment", "align", "align_routes", "resolve_site", "far_atoms", "host_indices"]


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
    routes: tuple = field(default_factory=tuple)
    warnings: tuple = field(default_factory=tuple)

    def summary(self) -> str:
        lines = [f"Alignment shift {self.shift:+.4f} eV (± {self.spread:.4f} eV spread) by {self.method}"]
        for r in self.routes:
            lines.append(f"  route {r['route']:<18} {r['shift']:+.4f} eV  spread {r['spread']:.4f} eV  "
                         f"({r['n_atoms']} far atoms)")
        lines += [f"  WARNING: {w}" for w in self.warnings]
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


def _potential_pair(case):
    """The defect and host potential grids, checked to belong together (same grid and cell, eV)."""
    vd, vh = case.grids["potential"], case.host_grids["potential"]
    for g, who in ((vd, "defect"), (vh, "host")):
        if g.unit not in ("eV", "arb"):
            raise InputFormatError(g.source, None, f"the {who} potential grid has unit {g.unit!r}; eV expected",
                                   field="unit")
    if vd.shape != vh.shape or not np.allclose(vd.cell, vh.cell, atol=1e-3):
        raise GeometryError(f"potential grids of defect ({vd.source or '<memory>'}, {vd.shape}) and host "
                            f"({vh.source or '<memory>'}, {vh.shape}) do not belong together: same grid and "
                            "cell needed")
    return vd, vh


def _potential_shift(case, centre, far_fraction, region):
    vd, vh = _potential_pair(case)
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


#: routes in order of preference for the reported shift: the engine's own per-atom potentials, the
#: potential grid, a semicore band, the valence band (measured on the GPAW ZnS V_S pair: the first
#: three agree within 2 meV, the valence-band centroid is 0.26 eV off — the defect perturbs the top of
#: the valence band even on far atoms; core-like references are common practice for that reason)
ROUTE_ORDER = ("atomic-potentials", "potential-atoms", "pdos-semicore", "pdos-valence")
DISAGREEMENT = 0.1


def align_routes(case, site=None, *, count: int | None = None, atomic_potentials=None, radius: float = 1.0,
                 disagreement: float = DISAGREEMENT) -> Alignment:
    """Every independent alignment route the case allows, used together.

    Routes (see :mod:`orbtool.analysis.align_routes` for each and for the PDOS window rule):
    ``potential-atoms`` (potential grids of both cells), ``pdos-valence`` and ``pdos-semicore``
    (PDOS of both cells; semicore where the far atoms have an isolated deep band),
    ``atomic-potentials`` (per-atom potentials of both cells from the engine, given as
    ``atomic_potentials=(host, defect)``). Each gives a mean over the ``count`` atoms farthest
    from the vacancy and its spread; the reported shift is that of the first available route in
    :data:`ROUTE_ORDER`, and a warning is given when routes disagree by more than
    ``disagreement`` eV (0.1 eV: common practice for a converged alignment).

    Returns
    -------
    Alignment with ``routes`` (one dict per route: route, shift, spread, n_atoms, window) and
    ``warnings``.
    """
    from . import align_routes as ar
    if case.host is None:
        raise InputFormatError(case.source, None, "alignment needs the host structure (case.host)", field="host")
    site = resolve_site(case, site)
    centre = site_position(site)
    far_d = far_atoms(case.defect, centre, count)
    far_h = host_indices(site, case.defect, case.host, far_d)
    routes, notes = [], [f"far atoms (defect cell) {far_d.tolist()} ↔ host {far_h.tolist()}"]
    if atomic_potentials is not None:
        vh, vd = atomic_potentials
        sh, sp, _ = ar.atomic_potentials_route(vh, vd, far_h, far_d)
        routes.append({"route": "atomic-potentials", "shift": sh, "spread": sp, "n_atoms": len(far_d),
                       "window": None})
    if "potential" in case.grids and "potential" in case.host_grids:
        vd, vh = _potential_pair(case)
        sh, sp, _ = ar.potential_atoms_route(vh, vd, case.host, case.defect, far_h, far_d, radius)
        routes.append({"route": "potential-atoms", "shift": sh, "spread": sp, "n_atoms": len(far_d),
                       "window": None, "radius": radius})
    if case.host_pdos is not None and case.defect_pdos is not None:
        _pdos_routes(case, far_h, far_d, routes, notes)
    if not routes:
        raise OrbtoolError(f"case {case.name!r}: cannot align the defect cell to the host: needs potential grids of "
                           "both cells, the PDOS of both cells, or per-atom potentials")
    routes.sort(key=lambda r: ROUTE_ORDER.index(r["route"]))
    best = routes[0]
    warns = []
    shifts = [r["shift"] for r in routes]
    if max(shifts) - min(shifts) > disagreement:
        warns.append("alignment routes disagree by %.3f eV (> %.2f eV): " % (max(shifts) - min(shifts), disagreement)
                     + ", ".join(f"{r['route']} {r['shift']:+.3f}" for r in routes))
    for r in routes:
        if r["window"] is not None:
            notes.append(f"{r['route']} window {r['window'][0]:.3f} … {r['window'][1]:.3f} eV (host scale)")
    method = f"{best['route']} (of {len(routes)} route(s): " + ", ".join(r["route"] for r in routes) + ")"
    return Alignment(shift=float(best["shift"]), method=method, provenance=tuple(notes), spread=float(best["spread"]),
                     routes=tuple(routes), warnings=tuple(warns))


def _pdos_routes(case, far_h, far_d, routes, notes):
    """The valence and (where present) semicore PDOS routes, each band found by the same rule in
    each cell (see :mod:`orbtool.analysis.align_routes`)."""
    from . import align_routes as ar
    hp, dp = case.host_pdos, case.defect_pdos
    try:
        val = ar.valence_window(hp, far_h)
    except InputFormatError as exc:
        notes.append(f"PDOS routes not used: {exc.reason}")
        return
    start = ar.spectral_offset(hp, dp, far_h, far_d)
    notes.append(f"far-atom spectra superpose at an offset of {start:+.3f} eV (starting point)")
    semi = ar.semicore_window(hp, far_h, val)
    todo = [("pdos-valence", val)]
    if semi is not None:
        todo.insert(0, ("pdos-semicore", semi))
    else:
        notes.append("no isolated deep band of the far atoms in the host PDOS: no semicore route")
    for name, wh in todo:
        sh, sp, n = ar.pdos_route(hp, dp, far_h, far_d, wh, start)
        routes.append({"route": name, "shift": sh, "spread": sp, "n_atoms": len(far_d), "window": wh})
        notes += [f"{name}: {x}" for x in n]


def align(case, site=None, *, method: str = "auto", far_fraction: float = 0.25, region: str = "sphere",
          count: int | None = None, l: int | None = None, window=None) -> Alignment:
    """Offset that puts the defect cell's energies on the host's scale.

    Parameters
    ----------
    case : DefectCase
    site : VacancySite or (3,) position, optional
        Located from the structures when omitted.
    method : {"auto", "routes", "potential", "pdos"}
        ``"routes"``: every route the data allow, used together (:func:`align_routes`: potential
        at the far atoms, PDOS valence and semicore centroids with the stated window rule), the
        shift of the preferred one. ``"auto"``: the shift of ``"potential"`` if both cells have
        a potential grid, else of ``"pdos"``, cross-checked against every route of
        :func:`align_routes` (all in ``routes`` with their spreads; a warning in ``warnings``
        and in ``method`` when any two disagree by more than 0.1 eV).
        ``"potential"``: mean of V_host − V_defect over the points farthest
        from the site (needs ``case.grids["potential"]`` and
        ``case.host_grids["potential"]`` on the same grid). ``"pdos"``:
        difference of the PDOS centroids of the atoms farthest from the
        vacancy (needs ``host_pdos`` and ``defect_pdos``); give ``window``
        (host scale, eV) and ``l`` to use a deep, core-like channel, default
        the whole occupied range.
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
    if method == "routes":
        return align_routes(case, site, count=count)
    if method == "auto":
        if has_pot:
            method, check = "potential", True
        elif has_pdos:
            method, check = "pdos", True
        else:
            raise OrbtoolError(f"case {case.name!r}: cannot align the defect cell to the host: needs potential "
                               "grids of both cells (grids['potential'], host_grids['potential']) or the PDOS of "
                               "both cells (defect_pdos, host_pdos)")
    else:
        check = False
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
        raise InputFormatError(None, None, f"method must be 'auto', 'routes', 'potential' or 'pdos', got {method!r}",
                               field="method")
    routes, warns = (), ()
    if check:
        routes, warns, extra = _cross_check(case, site, count, method, shift, spread)
        notes = list(notes) + extra
        if warns:
            how += " [WARNING: " + "; ".join(warns) + "]"
    return Alignment(shift=float(shift), method=how, provenance=tuple(notes), spread=spread, routes=routes,
                     warnings=warns)


def _cross_check(case, site, count, method, shift, spread):
    """The independent routes of :func:`align_routes` next to the default one, and a warning when
    any two disagree by more than :data:`DISAGREEMENT` eV."""
    try:
        other = align_routes(case, site, count=count)
    except OrbtoolError as exc:
        return (), (), [f"no independent cross-check of the alignment ({exc})"]
    mine = {"route": "potential-region" if method == "potential" else "pdos-occupied", "shift": float(shift),
            "spread": float(spread), "n_atoms": 0, "window": None}
    routes = (mine,) + tuple(other.routes)
    shifts = [r["shift"] for r in routes]
    warns = ()
    if max(shifts) - min(shifts) > DISAGREEMENT:
        warns = (f"alignment routes disagree by {max(shifts) - min(shifts):.3f} eV (> {DISAGREEMENT} eV): "
                 + ", ".join(f"{r['route']} {r['shift']:+.3f}" for r in routes),)
    return routes, warns, list(other.provenance)
