"""Where a state's density lives on a grid: partition among atoms and
localisation about the vacancy site.

Two partitions of a (partial-charge or orbital) grid among the atoms:

* ``"spheres"`` — the integral inside a sphere of chosen radius about every
  atom (spheres may overlap; what no sphere covers is reported as
  ``outside``);
* ``"voronoi"`` — every grid point goes to its nearest atom under periodic
  boundaries (G. Voronoi, J. reine angew. Math. 134, 198 (1908) [citation from memory]); the cells
  fill space, so the parts add up to the whole.

Localisation measures about a site: the fraction within radius R, the
inverse participation ratio IPR = ∫ρ̃² dV of the normalised density ρ̃
(participation volume 1/IPR; R. J. Bell & P. Dean, Discuss. Faraday Soc. 50,
55 (1970) for the participation ratio [citation from memory]), the radii
holding 50 % and 90 % of the state, the spherically averaged radial profile,
and the offset of the density centroid from the site.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..errors import GeometryError, InputFormatError
from ..grid import Grid
from ._partition import nearest_atom_sums, sphere_sums
from ._records import Record

__all__ = ["Partition", "Localisation", "partition", "partition_spheres", "partition_voronoi", "localisation",
           "site_position"]

#: cell mismatch tolerated between a grid and a structure, Å (per lattice-vector component)
CELL_TOLERANCE = 1e-3


@dataclass(frozen=True, eq=False)
class Partition(Record):
    """The integral of a grid field split among atoms.

    Attributes
    ----------
    method : str
        ``"spheres"`` or ``"voronoi"``.
    charges : ndarray (natom,)
        Integral of the density in each atom's region (electrons for a
        density in e/Å³; probability for |ψ|²).
    total : float
        Integral over the whole cell (same unit).
    outside : float
        ``total − Σ charges``: the part in no sphere (≈ 0 for Voronoi; may
        be negative when spheres overlap).
    symbols : tuple of str
        Chemical symbols of the atoms.
    radii : ndarray (natom,) or None
        Sphere radii used, Å.
    source : str or None
        Grid file the field came from.
    provenance : tuple of str
        What was assumed.
    """

    method: str
    charges: np.ndarray
    total: float
    outside: float
    symbols: tuple
    radii: np.ndarray | None = None
    source: str | None = None
    provenance: tuple = field(default_factory=tuple)

    @property
    def fractions(self) -> np.ndarray:
        """``charges / total`` (dimensionless)."""
        return self.charges / self.total if self.total != 0 else np.zeros_like(self.charges)

    def ranking(self) -> np.ndarray:
        """Atom indices by decreasing charge."""
        return np.argsort(-self.charges, kind="stable")

    def summary(self, top: int = 10) -> str:
        """A table of the atoms holding most of the field."""
        lines = [f"Partition by {self.method} of {self.source or '<memory>'}",
                 f"  total {self.total:.6g}   outside the regions {self.outside:.4g} "
                 f"({self.outside / self.total:.1%})" if self.total else f"  total {self.total:.6g}",
                 "  atom  element   charge      fraction" + ("   radius/Å" if self.radii is not None else "")]
        frac = self.fractions
        for i in self.ranking()[:top]:
            row = f"  {i:4d}  {self.symbols[i]:<7} {self.charges[i]:10.5f}  {frac[i]:9.4f}"
            if self.radii is not None:
                row += f"   {self.radii[i]:8.3f}"
            lines.append(row)
        lines += [f"  note: {p}" for p in self.provenance]
        return "\n".join(lines)


@dataclass(frozen=True, eq=False)
class Localisation(Record):
    """How compact a state is about a site.

    Attributes
    ----------
    site : ndarray (3,)
        Centre used, Å (Cartesian).
    total : float
        Integral of the density over the cell (the normalisation used).
    within : dict[float, float]
        Fraction of the state within each radius R (Å) of the site.
    ipr : float
        Inverse participation ratio ∫ρ̃² dV of the normalised density, 1/Å³.
    participation_volume : float
        1/IPR, Å³.
    participation_fraction : float
        Participation volume divided by the cell volume (1 for a uniform state).
    r50, r90 : float
        Radii about the site holding 50 % and 90 % of the state, Å (NaN when
        not reached within the cell).
    radii : ndarray (nbin,)
        Bin centres of the radial profile, Å.
    radial_density : ndarray (nbin,)
        Spherically averaged density in each shell (normalised state), 1/Å³.
    cumulative : ndarray (nbin,)
        Fraction of the state within the outer edge of each bin.
    complete_radius : float
        Largest radius whose sphere fits in the cell (beyond it shells are
        truncated by the cell and the profile is a partial average), Å.
    centroid_offset : ndarray (3,)
        Density centroid minus site, Å, taken in the cell-shaped box centred
        on the site.
    provenance : tuple of str
    """

    site: np.ndarray
    total: float
    within: dict
    ipr: float
    participation_volume: float
    participation_fraction: float
    r50: float
    r90: float
    radii: np.ndarray
    radial_density: np.ndarray
    cumulative: np.ndarray
    complete_radius: float
    centroid_offset: np.ndarray
    provenance: tuple = ()

    @property
    def centroid_distance(self) -> float:
        """|centroid offset|, Å."""
        return float(np.linalg.norm(self.centroid_offset))

    def summary(self) -> str:
        s = self.site
        lines = [f"Localisation about ({s[0]:.3f}, {s[1]:.3f}, {s[2]:.3f}) Å",
                 f"  integral of the density        {self.total:.6g}",
                 f"  inverse participation ratio    {self.ipr:.5g} 1/Å^3",
                 f"  participation volume           {self.participation_volume:.4g} Å^3 "
                 f"({self.participation_fraction:.2%} of the cell)",
                 f"  radius holding 50 % / 90 %     {self.r50:.3f} / {self.r90:.3f} Å",
                 f"  centroid offset from the site  {self.centroid_distance:.3f} Å"]
        lines += [f"  fraction within {r:.2f} Å        {f:.4f}" for r, f in self.within.items()]
        lines += [f"  note: {p}" for p in self.provenance]
        return "\n".join(lines)


# ---------------------------------------------------------------- helpers
def site_position(site) -> np.ndarray:
    """Cartesian position (Å) of a site given as a VacancySite-like object
    (anything with ``.position``) or as 3 numbers."""
    pos = getattr(site, "position", site)
    try:
        p = np.asarray(pos, dtype=float).reshape(3)
    except (TypeError, ValueError):
        raise InputFormatError(None, None, f"site must have a 3-vector position (Å), got {pos!r}",
                               field="site") from None
    if not np.isfinite(p).all():
        raise InputFormatError(None, None, "site position is not finite", field="site")
    return p


def _state_density(grid: Grid) -> np.ndarray:
    if not isinstance(grid, Grid):
        raise InputFormatError(None, None, f"expected an orbtool Grid, got {type(grid).__name__}", field="grid")
    if grid.unit == "eV":
        raise InputFormatError(grid.source, None, "this grid holds a potential (eV); a density or an orbital "
                               "grid is needed", field="unit")
    rho = grid.density()
    if grid.unit == "Å^-3/2" or float(rho.min()) >= 0.0:  # |ψ|² or no negative value: one pass, no masks
        return rho
    neg = float(-rho[rho < 0].sum())
    pos = float(rho[rho > 0].sum())
    if neg > 0.01 * pos:
        share = neg / max(pos, 1e-300)
        raise InputFormatError(grid.source, None, f"the density has a large negative part ({share:.1%} "
                               "of the positive part); a state density (|ψ|² or a partial charge) is needed, "
                               "not a spin or difference density", field="values")
    return rho


def _structure(grid: Grid, atoms):
    """The atoms to partition among, checked against the grid's cell."""
    if atoms is None:
        atoms = grid.atoms
        if atoms is None:
            raise InputFormatError(grid.source, None, "the grid carries no structure; pass atoms=",
                                   field="atoms")
    if not hasattr(atoms, "get_positions"):
        raise InputFormatError(grid.source, None, "atoms must be an ase.Atoms object", field="atoms")
    cell = np.asarray(atoms.get_cell(), float)
    if abs(np.linalg.det(cell)) > 1e-9 and not np.allclose(cell, grid.cell, atol=CELL_TOLERANCE):
        raise GeometryError(f"grid {grid.source or '<memory>'} and the structure do not belong together: "
                            f"grid cell {np.round(grid.cell, 4).tolist()} Å vs structure cell "
                            f"{np.round(cell, 4).tolist()} Å")
    return atoms


def _radii_for(atoms, radii) -> np.ndarray:
    sym = atoms.get_chemical_symbols()
    if isinstance(radii, dict):
        missing = sorted(set(sym) - set(radii))
        if missing:
            raise InputFormatError(None, None, f"no sphere radius given for {', '.join(missing)}", field="radii")
        r = np.array([float(radii[s]) for s in sym])
    else:
        r = np.broadcast_to(np.asarray(radii, dtype=float), (len(sym),)).copy()
    if not np.all(np.isfinite(r)) or np.any(r < 0):
        raise InputFormatError(None, None, "sphere radii must be finite and non-negative (Å)", field="radii")
    return r


def _overlapping_pairs(atoms, r: np.ndarray) -> int:
    """Number of atom pairs i < j whose spheres overlap, r_i + r_j > d_ij, for any periodic image.

    A k-d tree neighbour search (``scipy.spatial.cKDTree.sparse_distance_matrix``) of the atoms
    against their images in the 27 neighbouring cells within 2·max(r), instead of every pairwise
    distance: about linear in the number of atoms. The 27 cells hold every image within reach
    because :func:`~orbtool.analysis._partition.sphere_sums` has already refused spheres wider
    than the cell.
    """
    if len(atoms) < 2 or not (r > 0).any():
        return 0
    from scipy.spatial import cKDTree
    n = len(atoms)
    cell = np.asarray(atoms.get_cell(), float)
    frac = atoms.get_scaled_positions(wrap=True)
    shifts = np.array([(i, j, k) for i in (-1, 0, 1) for j in (-1, 0, 1) for k in (-1, 0, 1)], dtype=float)
    images = ((frac[None, :, :] + shifts[:, None, :]).reshape(-1, 3)) @ cell
    near = cKDTree(frac @ cell).sparse_distance_matrix(cKDTree(images), 2.0 * float(r.max()) + 1e-9,
                                                       output_type="ndarray")
    i, j, d = near["i"], near["j"] % n, near["v"]
    hit = (i < j) & (r[i] > 0) & (r[j] > 0) & (r[i] + r[j] > d)
    return int(np.unique(i[hit].astype(np.int64) * n + j[hit]).size)


# ---------------------------------------------------------------- public functions
def partition(grid: Grid, method: str = "voronoi", *, atoms=None, radii=None) -> Partition:
    """Split the density of ``grid`` among the atoms.

    Parameters
    ----------
    grid : Grid
        Partial charge (e/Å³) or signed orbital (Å^-3/2, squared here).
    method : {"voronoi", "spheres"}
        Nearest-atom cells under periodic boundaries, or spheres of ``radii``.
    atoms : ase.Atoms, optional
        Structure (default: ``grid.atoms``); its cell must match the grid's.
    radii : float, sequence (natom,) or dict element → Å
        Sphere radii for ``method="spheres"``.

    Returns
    -------
    Partition
    """
    rho = _state_density(grid)
    atoms = _structure(grid, atoms)
    pos = atoms.get_positions()
    dv = grid.voxel_volume
    total = float(rho.sum(dtype=np.float64)) * dv
    notes = ["density = |ψ|² of the orbital grid" if grid.unit == "Å^-3/2" else f"density = values ({grid.unit})"]
    if method == "voronoi":
        q = nearest_atom_sums(rho, grid.cell, grid.origin, pos) * dv
        r = None
        notes.append("nearest-atom cells, periodic images from the 27 neighbouring cells")
    elif method == "spheres":
        if radii is None:
            raise InputFormatError(grid.source, None, "method='spheres' needs radii= (Å)", field="radii")
        r = _radii_for(atoms, radii)
        try:
            q = sphere_sums(rho, grid.cell, grid.origin, pos, r) * dv
        except ValueError as exc:
            raise InputFormatError(grid.source, None, str(exc), field="radii") from None
        n_over = _overlapping_pairs(atoms, r)
        if n_over:
            notes.append(f"{n_over} pair(s) of spheres overlap; shared points count for both")
    else:
        raise InputFormatError(grid.source, None, f"method must be 'voronoi' or 'spheres', got {method!r}",
                               field="method")
    return Partition(method=method, charges=q, total=total, outside=total - float(q.sum()),
                     symbols=tuple(atoms.get_chemical_symbols()), radii=r, source=grid.source,
                     provenance=tuple(notes))


def partition_spheres(grid: Grid, radii, *, atoms=None) -> Partition:
    """:func:`partition` with ``method="spheres"``."""
    return partition(grid, "spheres", atoms=atoms, radii=radii)


def partition_voronoi(grid: Grid, *, atoms=None) -> Partition:
    """:func:`partition` with ``method="voronoi"``."""
    return partition(grid, "voronoi", atoms=atoms)


def localisation(grid: Grid, site, *, within=(2.0, 3.0, 4.0), bin_width: float | None = None) -> Localisation:
    """Localisation measures of a state density about ``site``.

    Parameters
    ----------
    grid : Grid
        Partial charge or signed orbital of the state.
    site : VacancySite or array (3,)
        Centre, Å (Cartesian, same frame as the grid).
    within : sequence of float
        Radii R (Å) for the fraction of the state within R.
    bin_width : float, optional
        Radial bin width, Å (default: half the shortest voxel step).

    Returns
    -------
    Localisation
    """
    rho = _state_density(grid)
    if grid.atoms is not None:
        _structure(grid, None)
    c = site_position(site)
    dv = grid.voxel_volume
    total = float(rho.sum(dtype=np.float64)) * dv
    if not total > 0:
        raise InputFormatError(grid.source, None, "the density integrates to zero; nothing to localise",
                               field="values")
    d = grid.minimum_image_distance(c)
    step = float(np.linalg.norm(grid.voxel_vectors, axis=1).min())
    w = float(bin_width) if bin_width else 0.5 * step
    if not w > 0:
        raise InputFormatError(None, None, "bin_width must be positive (Å)", field="bin_width")
    b = (d / w).astype(np.int64).ravel()
    mass = np.bincount(b, weights=rho.ravel()) * dv / total
    count = np.bincount(b, minlength=mass.size)
    with np.errstate(invalid="ignore", divide="ignore"):
        shell = np.where(count > 0, mass / (count * dv), 0.0)
    cum = np.cumsum(mass)
    edges = (np.arange(mass.size) + 1) * w

    def radius_at(q):
        j = int(np.searchsorted(cum, q))
        if j >= cum.size:
            return float("nan")
        lo_c = cum[j - 1] if j > 0 else 0.0
        lo_e = edges[j - 1] if j > 0 else 0.0
        return float(lo_e + (q - lo_c) / (cum[j] - lo_c) * (edges[j] - lo_e)) if cum[j] > lo_c else float(lo_e)

    frac_within = {float(R): float(rho[d <= R].sum(dtype=np.float64) * dv / total) for R in within}
    ipr = float((rho.astype(np.float64) ** 2).sum() * dv / total**2)
    # centroid in the cell-shaped box centred on the site: wrapped fractional offsets per axis
    inv = np.linalg.inv(grid.cell)
    cf = (c - grid.origin) @ inv
    offs = [((fa - ci + 0.5) % 1.0) - 0.5 for fa, ci in zip(grid.fractional_axes(), cf)]
    marg = [rho.sum(axis=(1, 2)), rho.sum(axis=(0, 2)), rho.sum(axis=(0, 1))]
    s = float(rho.sum(dtype=np.float64))
    frac_off = np.array([float(m @ o) / s for m, o in zip(marg, offs)])
    heights = grid.volume / np.linalg.norm(np.cross(grid.cell[[1, 2, 0]], grid.cell[[2, 0, 1]]), axis=1)
    notes = ["IPR = ∫ρ̃²dV with ρ̃ normalised to 1 over the cell",
             "radial profile from minimum-image distances to the site"]
    return Localisation(site=c, total=total, within=frac_within, ipr=ipr, participation_volume=1.0 / ipr,
                        participation_fraction=1.0 / (ipr * grid.volume), r50=radius_at(0.5), r90=radius_at(0.9),
                        radii=(np.arange(mass.size) + 0.5) * w, radial_density=shell, cumulative=cum,
                        complete_radius=float(heights.min() / 2), centroid_offset=frac_off @ grid.cell,
                        provenance=tuple(notes))
