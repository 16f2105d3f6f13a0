"""Find the vacancy in a defect supercell, its neighbour shells and local symmetry.

Two layers, as elsewhere in orbtool: raw-array primitives
(:func:`orbtool.analysis.matching.match_sites`,
:func:`orbtool.analysis.periodic.site_neighbours` and
:func:`~orbtool.analysis.periodic.minimum_image`,
:func:`orbtool.analysis.pointgroup.find_point_group`,
:func:`orbtool.analysis.distortions.symmetry_adapted_modes`) under the
``ase.Atoms``-level :func:`locate_vacancy`, which returns a
:class:`~orbtool.analysis.vacancy_site.VacancySite` (descriptors, modes,
summary; edits in :mod:`orbtool.analysis.edits`).

Steps: match defect atoms to host sites (rigid shift removed, local optimal
assignment); the unmatched host atoms are the vacancies; shells are clusters
of host distances from the site over every periodic image (integer cell
shifts), each neighbour carrying its relaxed vector (host vector plus its
displacement); the point group is searched on the first shell, checked
against the second.

Example
-------
>>> site = locate_vacancy(host, defect)            # doctest: +SKIP
>>> site.element, site.point_group, len(site.first_shell)
('O', 'Td', 4)
>>> smaller = site.breathe(-0.05)                  # new Atoms, 5 % inward
"""

from __future__ import annotations

from collections import Counter
from dataclasses import replace

import numpy as np

from ..errors import GeometryError
from .matching import SiteMatch, match_sites
from .periodic import fractional, minimum_image, site_neighbours
from .pointgroup import find_point_group
from .vacancy_site import MissingAtom, Neighbour, Substitution, VacancySite

__all__ = ["locate_vacancy", "VacancySite", "Neighbour", "MissingAtom", "Substitution", "cluster_shells"]


def cluster_shells(distances, gap: float = 0.2) -> np.ndarray:
    """Shell number (1-based) of each distance: a new shell starts where sorted distances jump by > ``gap`` Å."""
    d = np.asarray(distances, float)
    if d.size == 0:
        return np.zeros(0, int)
    order = np.argsort(d, kind="stable")
    jumps = np.concatenate([[0], (np.diff(d[order]) > gap).astype(int)])
    out = np.empty(len(d), int)
    out[order] = np.cumsum(jumps) + 1
    return out


def _check_atoms(atoms, name):
    if not all(hasattr(atoms, a) for a in ("get_positions", "get_cell", "get_atomic_numbers", "get_pbc")):
        raise GeometryError(f"{name} must be an ase.Atoms object, got {type(atoms).__name__}")
    if len(atoms) == 0:
        raise GeometryError(f"{name} has no atoms")
    cell = atoms.get_cell().array
    if abs(np.linalg.det(cell)) < 1e-9:
        raise GeometryError(f"{name} has no 3D cell (cell volume 0); set the supercell vectors on the Atoms")
    if not np.all(np.isfinite(atoms.get_positions())):
        raise GeometryError(f"{name} has non-finite positions (NaN or inf)")


def _check_pair(host, defect, max_missing, cell_tolerance):
    hc, dc = host.get_cell().array, defect.get_cell().array
    if not np.array_equal(host.get_pbc(), defect.get_pbc()):
        raise GeometryError(f"host and defect have different periodic boundaries ({host.get_pbc().tolist()} vs "
                            f"{defect.get_pbc().tolist()}); pass cells of the same supercell")
    scale = np.linalg.norm(hc, axis=1).max()
    diff = np.abs(hc - dc).max() / scale
    if diff > cell_tolerance:
        lh, ld = (np.round(np.linalg.norm(c, axis=1), 3).tolist() for c in (hc, dc))
        raise GeometryError(
            f"host and defect cells differ by {diff:.1%} (host lattice vector lengths {lh} Å, defect {ld} Å); pass "
            "the pristine supercell of the same size and orientation as the defect cell (or raise cell_tolerance= "
            "if the defect cell was relaxed at a different volume)")
    nh, nd = len(host), len(defect)
    ch, cd = Counter(host.get_chemical_symbols()), Counter(defect.get_chemical_symbols())
    delta = {e: cd.get(e, 0) - ch.get(e, 0) for e in sorted(set(ch) | set(cd)) if cd.get(e, 0) != ch.get(e, 0)}
    pretty = ", ".join(f"{e} {v:+d}" for e, v in delta.items()) or "none"
    if nd > nh:
        from .matching import check_overlaps  # a duplicated atom is not an interstitial
        check_overlaps(dc, defect.get_positions(), defect.get_pbc(), "defect")
        raise GeometryError(f"the defect cell has {nd - nh} more atom(s) than the host ({pretty}): that is an "
                            "interstitial (or a larger supercell), not a vacancy; locate_vacancy needs a defect cell "
                            "with atoms removed from the host")
    if sum(abs(v) for v in delta.values()) > 2 * max_missing:
        raise GeometryError(f"element counts of host and defect differ by more than a few atoms ({pretty}); are they "
                            f"the same supercell? (raise max_missing={max_missing} for a large vacancy cluster)")


def _resolve_expected(expected, host):
    """expected → ('index', i) | ('element', symbol) | (None, None)."""
    if expected is None:
        return None, None
    n = len(host)
    if isinstance(expected, (int, np.integer)) and not isinstance(expected, bool):
        i = int(expected)
        if not -n <= i < n:
            raise GeometryError(f"expected={i} is not a host atom index (host has {n} atoms)")
        return "index", i % n
    if isinstance(expected, str):
        if expected not in host.get_chemical_symbols():
            raise GeometryError(f"expected={expected!r}: the host has no {expected} atom "
                                f"(elements: {sorted(set(host.get_chemical_symbols()))})")
        return "element", expected
    try:
        pos = np.asarray(expected, float).reshape(3)
    except (TypeError, ValueError):
        raise GeometryError("expected= must be a host atom index (int), an element symbol (str) or a Cartesian "
                            f"position in Å (3 numbers); got {expected!r}") from None
    mic, _ = minimum_image(host.get_cell().array, host.get_positions() - pos, host.get_pbc())
    return "index", int(np.argmin(np.linalg.norm(mic, axis=1)))


def _choose_match(host, defect, kind, value, tolerance) -> tuple[SiteMatch, list]:
    """Match, resolving equally short rigid shifts; returns the match and notes for the site."""
    hc, hp, hz = host.get_cell().array, host.get_positions(), host.get_atomic_numbers()
    dc, dp, dz = defect.get_cell().array, defect.get_positions(), defect.get_atomic_numbers()
    forbid = [value] if kind == "index" else []
    m = match_sites(hc, hp, hz, dc, dp, dz, host.get_pbc(), tolerance=tolerance, forbid=forbid)
    if not len(m.alternative_shifts):
        return m, []
    options = [m] + [match_sites(hc, hp, hz, dc, dp, dz, host.get_pbc(), tolerance=tolerance, forbid=forbid,
                                 shift=s) for s in m.alternative_shifts]
    if kind == "index":
        return min(options, key=lambda o: np.nanmax(o.distances) if len(o.distances) else 0.0), []
    # shifts that differ by a lattice translation of the crystal describe the same structure: the missing
    # atoms sit at the same places and only their host labels differ. Anything else is a real ambiguity.
    ref = hp[m.missing] + m.shift
    same = True
    for o in options[1:]:
        pos = hp[o.missing] + o.shift
        if len(pos) != len(ref):
            same = False
            break
        d = np.linalg.norm(minimum_image(hc, pos[:, None, :] - ref[None, :, :], host.get_pbc())[0], axis=2)
        same &= bool(np.all(d.min(axis=1) < 0.3))
    labels = sorted({int(o.missing[0]) for o in options if len(o.missing)})
    if same:
        return m, [f"the rigid shift between the cells is about half a lattice translation: host atoms "
                   f"{', '.join(map(str, labels[:4]))} name the same site; host atom {int(m.missing[0])} "
                   "(shortest shift) was taken"]
    raise GeometryError(
        f"two equally good candidates: the defect cell is rigidly shifted so that host atoms "
        f"{' and '.join(map(str, labels[:4]))} fit the missing atom equally well (shifts "
        f"{[np.round(o.shift, 3).tolist() for o in options[:4]]} Å); pass expected=<host index>, "
        f"e.g. expected={labels[0]}")


def _check_displacements(m, host, defect, primary, tolerance, ambiguity: bool):
    """Raise if a defect atom sits about as near the vacant site as its own site (two equally good
    candidates, checked when ``ambiguity``) or further than ``tolerance`` from its site."""
    hc, hp = host.get_cell().array, host.get_positions()
    hz, dz = host.get_atomic_numbers(), defect.get_atomic_numbers()
    q = fractional(defect.get_cell().array, defect.get_positions()) @ hc - m.shift
    same = np.flatnonzero((dz == hz[primary]) & (m.mapping >= 0))
    mic, _ = minimum_image(hc, q[same] - hp[primary], host.get_pbc())
    d_v = np.linalg.norm(mic, axis=1)
    d_own = m.distances[same]
    bad = np.flatnonzero(d_v <= 1.25 * d_own + 0.1) if ambiguity else []
    if len(bad):
        i = int(same[bad[np.argmin(d_v[bad])]])
        other = int(m.mapping[i])
        raise GeometryError(
            f"two equally good candidates for the vacancy: defect atom {i} ({defect.get_chemical_symbols()[i]}) sits "
            f"{d_own[same == i][0]:.2f} Å from host site {other} and {d_v[same == i][0]:.2f} Å from host site "
            f"{primary} (a split vacancy?); pass expected={primary} or expected={other} to choose, with "
            f"tolerance= above {max(d_own[same == i][0], d_v[same == i][0]):.2f} Å if that atom really moved so far")
    big = np.flatnonzero(m.distances > tolerance)
    if len(big):
        i = int(big[np.argmax(m.distances[big])])
        raise GeometryError(
            f"defect atom {i} ({defect.get_chemical_symbols()[i]}) is {m.distances[i]:.2f} Å from its host site "
            f"{int(m.mapping[i])}, more than tolerance={tolerance:g} Å ({len(big)} atom(s) so displaced): an "
            "interstitial or a very large relaxation? Pass tolerance= larger if the relaxation is real")


def locate_vacancy(host, defect, expected=None, *, tolerance: float = 1.0, n_shells: int = 3,
                   shell_tolerance: float = 0.2, symprec: float = 0.1, symmetry_shells: int = 2, max_missing: int = 8,
                   cell_tolerance: float = 0.03) -> VacancySite:
    """Find the missing atom of a defect supercell and describe its surroundings.

    Parameters
    ----------
    host : ase.Atoms
        Pristine supercell.
    defect : ase.Atoms
        The same supercell with one or more atoms removed and relaxed (atoms
        may be reordered, the whole cell rigidly shifted, and atoms relaxed by
        up to ``tolerance``).
    expected : int, str, (3,) array or None
        Resolves ambiguities: a host atom index, an element symbol (which of
        several vacancies is the site) or a Cartesian position in Å (host
        frame; the nearest host atom is taken).
    tolerance : float, Å
        Largest displacement of a defect atom from its host site.
    n_shells : int
        Number of neighbour shells to report.
    shell_tolerance : float, Å
        A new shell starts where sorted host distances from the site jump by more than this.
    symprec : float, Å
        Distance tolerance of the point-group search.
    symmetry_shells : int
        Shells that the point-group operations must also map onto themselves
        (1: the first shell alone; 2, the default: the first shell as seen
        from the second, which is the crystal's site symmetry in common lattices).
    max_missing : int
        Largest number of missing atoms (and element-count changes) accepted.
    cell_tolerance : float
        Largest relative difference between host and defect cell vectors.

    Returns
    -------
    VacancySite

    Raises
    ------
    GeometryError
        Different cells, more than ``max_missing`` atoms changed, no missing
        atom, an interstitial, or two equally good candidates (the message
        says what to pass as ``expected=``).
    """
    _check_atoms(host, "host")
    _check_atoms(defect, "defect")
    _check_pair(host, defect, max_missing, cell_tolerance)
    kind, value = _resolve_expected(expected, host)
    m, notes = _choose_match(host, defect, kind, value, tolerance)
    hsym, dsym = host.get_chemical_symbols(), defect.get_chemical_symbols()
    if len(m.unmatched):
        i = int(m.unmatched[0])
        raise GeometryError(
            f"{len(m.unmatched)} defect atom(s) (first: {i}, {dsym[i]}) have no free host site within "
            f"{2 * tolerance:g} Å: an interstitial or a different structure; locate_vacancy handles vacancies and "
            "substitutions (pass tolerance= larger if these are real relaxations)")
    if not len(m.missing):
        far = int(np.argmax(m.distances))
        raise GeometryError(f"no missing atom: every host atom has a partner in the defect cell (largest "
                            f"displacement {m.distances[far]:.2f} Å, defect atom {far}); is this the pristine cell?")
    if len(m.missing) > max_missing:
        raise GeometryError(f"{len(m.missing)} host atoms have no partner (more than max_missing={max_missing}); "
                            "are host and defect the same supercell?")
    missing = [int(i) for i in m.missing]
    if kind == "index":
        primary = value
    elif kind == "element":
        cands = [i for i in missing if hsym[i] == value]
        if not cands:
            raise GeometryError(f"expected={value!r} but the missing atoms are "
                                f"{[(i, hsym[i]) for i in missing]} (host index, element)")
        primary = cands[0]
        if len(cands) > 1:
            notes.append(f"{len(cands)} {value} atoms are missing; the site is host atom {primary} "
                         f"(pass expected=<host index> to pick another of {cands})")
    else:
        primary = missing[0]
        if len(missing) > 1:
            notes.append(f"{len(missing)} atoms are missing ({', '.join(f'{i} {hsym[i]}' for i in missing)}); "
                         f"the site is host atom {primary} (pass expected= to pick another)")
    _check_displacements(m, host, defect, primary, tolerance, ambiguity=kind != "index")
    return _build_site(host, defect, m, primary, missing, notes, n_shells, shell_tolerance, symprec, symmetry_shells)


def _site_symmetry(shells, symmetry_shells, symprec):
    """Point groups (relaxed, host) of the first shell, checked against shells up to ``symmetry_shells``.

    Operations must map every included shell onto itself (labels are element and
    shell), so a near-ideal first shell in a lower-symmetry crystal (wurtzite:
    a nearly regular tetrahedron, site symmetry C3v) is not over-symmetrised.
    The returned operations act on the first shell; permutations are restricted
    to it and ``symmetrized`` holds the group-averaged first-shell vectors.
    """
    use = [nb for sh in shells[:max(1, symmetry_shells)] for nb in sh]
    n1 = len(shells[0]) if shells else 0
    labels = [(nb.element, nb.shell) for nb in use]
    out = []
    for attr in ("vector", "host_vector"):
        vec = np.array([getattr(nb, attr) for nb in use]).reshape(-1, 3)
        g = find_point_group(vec, labels, symprec)
        out.append(replace(g, permutations=g.permutations[:, :n1], symmetrized=g.symmetrized[:n1]))
    return out


def _build_site(host, defect, m, primary, missing, notes, n_shells, shell_tolerance, symprec, symmetry_shells):
    hc, dc, pbc = host.get_cell().array, defect.get_cell().array, host.get_pbc()
    hp = host.get_positions()
    hsym, dsym = host.get_chemical_symbols(), defect.get_chemical_symbols()
    hinv = np.linalg.inv(hc)

    def to_defect_frame(v_host):
        return np.asarray(v_host) @ hinv @ dc

    f_site = fractional(hc, hp[primary])[0] + m.shift_fractional
    f_site = np.where(pbc, f_site - np.floor(f_site), f_site)
    position = f_site @ dc
    inverse = np.full(len(host), -1, dtype=int)
    inverse[m.mapping] = np.arange(len(m.mapping))
    # host neighbours of the site, every periodic image; widen the cutoff until n_shells shells are in
    d_all = np.linalg.norm(minimum_image(hc, hp - hp[primary], pbc)[0], axis=1)
    d_all[primary] = np.inf
    cutoff = 2.2 * float(d_all.min()) if np.isfinite(d_all.min()) else 5.0
    for _ in range(6):
        idx, shifts, hvec, hdist = site_neighbours(hc, hp, pbc, hp[primary], cutoff)
        labels = cluster_shells(hdist, shell_tolerance)
        if labels.size and labels.max() > n_shells:
            break
        cutoff *= 1.5
    keep = (labels <= n_shells) & (inverse[idx] >= 0)
    shells: list[list[Neighbour]] = [[] for _ in range(int(labels.max()) if labels.size else 0)]
    for j, s, hv, k in zip(idx[keep], shifts[keep], hvec[keep], labels[keep]):
        i = int(inverse[j])
        u = m.displacements[i]
        hd = float(np.linalg.norm(hv))
        rhat = hv / hd
        rad = float(u @ rhat)
        vec = to_defect_frame(hv + u)
        shells[k - 1].append(Neighbour(index=i, host_index=int(j), element=dsym[i], shell=int(k), vector=vec,
                                       host_vector=np.array(hv), distance=float(np.linalg.norm(vec)),
                                       host_distance=hd, radial_displacement=rad,
                                       tangential_displacement=float(np.linalg.norm(u - rad * rhat)),
                                       image=np.array(s, int)))
    shells = tuple(tuple(sh) for sh in shells[:n_shells])
    pg, hpg = _site_symmetry(shells, symmetry_shells, symprec)
    others = [MissingAtom(host_index=i, element=hsym[i],
                          position=tuple(float(x) for x in to_defect_frame(hp[i] + m.shift)))
              for i in missing if i != primary]
    subs = [Substitution(index=int(i), host_index=int(m.mapping[i]), host_element=hsym[m.mapping[i]],
                         element=dsym[i], displacement=float(m.distances[i])) for i in m.substituted]
    for arr in (position, m.mapping):
        arr.flags.writeable = False
    return VacancySite(position=position, element=hsym[primary], host_index=int(primary), defect=defect, host=host,
                       mapping=m.mapping, shells=shells, point_group=pg.symbol, operations=pg.operations,
                       permutations=pg.permutations, host_point_group=hpg.symbol, host_operations=hpg.operations,
                       host_permutations=hpg.permutations, host_first_shell=hpg.symmetrized,
                       other_vacancies=others, substitutions=subs, shift=m.shift, symmetry_tolerance=symprec,
                       notes=tuple(notes))
