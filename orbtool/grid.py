"""Volumetric data on a periodic grid: :class:`Grid`."""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property
from typing import Any

import numpy as np

from ._validate import as_array, check_cell
from .errors import InputFormatError
from .units import GRID_UNITS

__all__ = ["Grid"]


@dataclass(frozen=True, eq=False)
class Grid:
    """Values sampled on a regular grid spanning a (periodic) cell.

    Point ``(i, j, k)`` sits at ``origin + i/n1 * a1 + j/n2 * a2 + k/n3 * a3``
    (the convention of cube and XSF files with the periodic end point
    dropped).

    Attributes
    ----------
    values : ndarray, shape (n1, n2, n3)
        The sampled field, in :attr:`unit`.
    cell : ndarray, shape (3, 3)
        Lattice vectors (rows) spanned by the whole grid, Å.
    origin : ndarray, shape (3,)
        Cartesian position of point (0, 0, 0), Å.
    atoms : ase.Atoms or None
        Structure the grid belongs to (positions in Å), if the file had one.
    unit : str
        One of :data:`orbtool.units.GRID_UNITS`: ``"e/Å^3"`` (density),
        ``"Å^-3/2"`` (signed orbital), ``"eV"`` (potential) or ``"arb"``.
    source : str or None
        File the grid was read from (for messages and provenance).
    name : str
        Short label (e.g. ``"total"``, ``"spin"``, ``"band 129"``).
    pbc : bool
        Whether the grid is periodic (True for plane-wave outputs and for
        cube files of periodic cells; molecular cube files are treated as
        periodic boxes too, which is harmless when the field decays inside).
    meta : dict
        Free-form provenance (format, conversions applied, guesses made).
    """

    values: np.ndarray
    cell: np.ndarray
    origin: np.ndarray = field(default_factory=lambda: np.zeros(3))
    atoms: Any = None
    unit: str = "arb"
    source: str | None = None
    name: str = ""
    pbc: bool = True
    meta: dict = field(default_factory=dict)

    def __post_init__(self):
        src = self.source
        values = as_array(self.values, "values", ndim=3, source=src)
        if min(values.shape) < 1:
            raise InputFormatError(src, None, f"grid counts must be positive, got {values.shape}",
                                   field="values")
        object.__setattr__(self, "values", values)
        object.__setattr__(self, "cell", check_cell(self.cell, src))
        object.__setattr__(self, "origin", as_array(self.origin, "origin", shape=(3,), source=src))
        if self.unit not in GRID_UNITS:
            raise InputFormatError(src, None, f"unit must be one of {GRID_UNITS}, got {self.unit!r}",
                                   field="unit")
        if self.atoms is not None and not hasattr(self.atoms, "get_positions"):
            raise InputFormatError(src, None, "atoms must be an ase.Atoms object or None", field="atoms")

    # ------------------------------------------------------------------ geometry
    @property
    def shape(self) -> tuple[int, int, int]:
        """Grid counts (n1, n2, n3)."""
        return self.values.shape  # type: ignore[return-value]

    @property
    def volume(self) -> float:
        """Cell volume, Å³."""
        return float(np.linalg.det(self.cell))

    @property
    def voxel_volume(self) -> float:
        """Volume of one grid cell, Å³."""
        return self.volume / self.values.size

    @property
    def voxel_vectors(self) -> np.ndarray:
        """Step vectors between neighbouring points (rows), Å."""
        return self.cell / np.asarray(self.shape, dtype=float)[:, None]

    def fractional_axes(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """1-D fractional coordinates of the points along each axis."""
        return tuple(np.arange(n) / n for n in self.shape)  # type: ignore[return-value]

    @cached_property
    def points(self) -> np.ndarray:
        """Cartesian coordinates of every point, shape (n1, n2, n3, 3), Å.

        Computed on first access (it is 3× the size of :attr:`values`); use
        :meth:`axis_points` or :meth:`sphere_mask` where possible.
        """
        f1, f2, f3 = self.fractional_axes()
        a1, a2, a3 = self.cell
        return (self.origin
                + f1[:, None, None, None] * a1
                + f2[None, :, None, None] * a2
                + f3[None, None, :, None] * a3)

    def axis_points(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Per-axis Cartesian offsets, shapes (n1,3), (n2,3), (n3,3); a point
        is ``origin + p1[i] + p2[j] + p3[k]``."""
        f = self.fractional_axes()
        return tuple(fi[:, None] * a for fi, a in zip(f, self.cell))  # type: ignore[return-value]

    # --------------------------------------------------------------- integrals
    def integrate(self, mask: np.ndarray | None = None, *, square: bool = False) -> float:
        """Integral of the field over the cell (or over ``mask``).

        Uses the periodic trapezoid (= rectangle) rule, which is spectrally
        accurate for smooth periodic functions.

        Parameters
        ----------
        mask : bool ndarray of :attr:`shape`, optional
            Integrate only where True.
        square : bool
            Integrate |values|² instead (the probability of a signed orbital).

        Returns
        -------
        float
            In ``unit × Å³`` (electrons for a density).
        """
        v = self.values
        if square:
            v = np.abs(v) ** 2 if np.iscomplexobj(v) else v * v
        if mask is not None:
            mask = np.asarray(mask, dtype=bool)
            if mask.shape != self.shape:
                raise ValueError(f"mask shape {mask.shape} does not match grid {self.shape}")
            total = float(v[mask].sum(dtype=np.float64))
        else:
            total = float(v.sum(dtype=np.float64))
        return total * self.voxel_volume

    def density(self) -> np.ndarray:
        """A non-negative density from the values: |ψ|² for an orbital grid,
        the values themselves otherwise (1/Å³)."""
        if self.unit == "Å^-3/2":
            return self.values * self.values
        return np.asarray(self.values)

    def minimum_image_distance(self, center) -> np.ndarray:
        """Distance (Å) of every grid point to ``center`` under the minimum
        image convention (exact for the nearest image in skewed cells up to
        the usual 27-image search), shape :attr:`shape`."""
        return np.sqrt(self._min_image_d2(np.asarray(center, dtype=float)))

    def _min_image_d2(self, center: np.ndarray) -> np.ndarray:
        """Squared minimum-image distance of every point to ``center``.

        Works per axis on wrapped fractional offsets and the metric tensor, so
        no (n1, n2, n3, 3) coordinate array is made; for skewed cells the 27
        neighbouring images are searched, for orthogonal cells one suffices.
        """
        g = self.cell @ self.cell.T  # metric tensor, Å²
        c_frac = (center - self.origin) @ np.linalg.inv(self.cell)
        f = self.fractional_axes()
        base = [((fi - c) + 0.5) % 1.0 - 0.5 for fi, c in zip(f, c_frac)]
        orthogonal = np.allclose(g - np.diag(np.diag(g)), 0.0, atol=1e-10 * np.trace(g))
        best = None
        for s in ([(0, 0, 0)] if orthogonal else _IMAGE_SHIFTS):
            d0 = (base[0] + s[0])[:, None, None]
            d1 = (base[1] + s[1])[None, :, None]
            d2_ = (base[2] + s[2])[None, None, :]
            d2 = g[0, 0] * d0 ** 2 + g[1, 1] * d1 ** 2 + g[2, 2] * d2_ ** 2
            if not orthogonal:
                d2 = d2 + 2 * (g[0, 1] * d0 * d1 + g[0, 2] * d0 * d2_ + g[1, 2] * d1 * d2_)
            best = d2 if best is None else np.minimum(best, d2)
        return best

    def sphere_mask(self, center, radius: float) -> np.ndarray:
        """Boolean mask of points within ``radius`` (Å) of ``center`` (Å),
        respecting periodic boundaries (a sphere crossing a face wraps)."""
        if not radius >= 0:
            raise ValueError(f"radius must be non-negative, got {radius}")
        return self._min_image_d2(np.asarray(center, dtype=float)) <= radius * radius

    def with_values(self, values, **changes) -> "Grid":
        """A copy with new values (and optionally other fields changed)."""
        kw = dict(cell=self.cell, origin=self.origin, atoms=self.atoms, unit=self.unit,
                  source=self.source, name=self.name, pbc=self.pbc, meta=dict(self.meta))
        kw.update(changes)
        return Grid(values=values, **kw)

    def summary(self) -> str:
        """One readable paragraph describing the grid."""
        n = "×".join(str(s) for s in self.shape)
        lines = [f"Grid {self.name or '(unnamed)'} from {self.source or '<memory>'}",
                 f"  points        {n} ({self.values.size:,d})",
                 f"  cell volume   {self.volume:.4f} Å^3   voxel {self.voxel_volume:.3e} Å^3",
                 f"  unit          {self.unit}",
                 f"  min/max       {float(self.values.min()):.4g} / {float(self.values.max()):.4g}",
                 f"  integral      {self.integrate():.6g} {self.unit}·Å^3"]
        if self.atoms is not None:
            lines.append(f"  atoms         {len(self.atoms)} ({self.atoms.get_chemical_formula()})")
        # what the reader decided or guessed (format, units, quantity) is part of the story
        m = self.meta
        if "format" in m or "format_reason" in m:
            lines.append(f"  format        {m.get('format', '?')}" + (f": {m['format_reason']}" if "format_reason" in m
                                                                       else ""))
        if "length_unit" in m:
            lines.append(f"  file lengths  {m['length_unit']} (converted to Å)")
        if "quantity" in m:
            lines.append(f"  quantity      {m['quantity']}" + (f": {m['quantity_reason']}" if m.get("quantity_reason")
                                                               else ""))
        for key in ("note", "structure"):
            if m.get(key):
                lines.append(f"  note: {m[key]}")
        return "\n".join(lines)


# the 27 lattice images needed for minimum-image distances in skewed cells
_IMAGE_SHIFTS = [(i, j, k) for i in (-1, 0, 1) for j in (-1, 0, 1) for k in (-1, 0, 1)]
