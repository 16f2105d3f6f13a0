"""A slice of the in-gap state's density through the vacancy."""

from __future__ import annotations

import numpy as np
from scipy.ndimage import map_coordinates

from .. import style
from .export import new_figure, styled


def _plane_axes(normal):
    n = np.asarray(normal, float)
    n /= np.linalg.norm(n)
    trial = np.array([1.0, 0, 0]) if abs(n[0]) < 0.9 else np.array([0, 1.0, 0])
    u = np.cross(n, trial)
    u /= np.linalg.norm(u)
    v = np.cross(n, u)
    return n, u, v


def sample_plane(grid, center, normal=(0, 0, 1), half_width: float = 6.0, points: int = 161):
    """Density of ``grid`` on a square of side 2·half_width (Å) centred on
    ``center`` perpendicular to ``normal``, by periodic cubic interpolation.
    Returns (s, t, values) with s, t the in-plane coordinates (Å)."""
    n, u, v = _plane_axes(normal)
    s = np.linspace(-half_width, half_width, points)
    S, T = np.meshgrid(s, s, indexing="xy")
    xyz = np.asarray(center)[None, None] + S[..., None] * u + T[..., None] * v
    frac = (xyz - grid.origin) @ np.linalg.inv(grid.cell)
    idx = (frac * np.asarray(grid.shape))
    vals = map_coordinates(grid.density(), [idx[..., 0], idx[..., 1], idx[..., 2]], order=3, mode="grid-wrap")
    return s, s, vals, (u, v)


@styled
def state_slice_figure(grid, site, *, normal=None, half_width: float = 6.0, width: str = "single",
                       atom_window: float = 0.6):
    """Density of the in-gap state in the plane through the vacancy that holds
    the most first-shell atoms (or the one normal to ``normal``), with the
    atoms within ``atom_window`` Å of the plane drawn and the vacant site marked."""
    vecs = np.array([nb.vector for nb in site.first_shell])
    if normal is None:
        normal = _best_normal(vecs)
    s, t, vals, (u, v) = sample_plane(grid, site.position, normal, half_width)
    fig = new_figure(width, aspect=0.85)
    ax = fig.add_subplot(111)
    vmax = float(vals.max()) or 1.0
    im = ax.imshow(vals, origin="lower", extent=(s[0], s[-1], t[0], t[-1]), cmap="cividis", vmin=0, vmax=vmax)
    ax.contour(s, t, vals, levels=[0.1 * vmax, 0.3 * vmax, 0.6 * vmax], colors=[style.PAPER], linewidths=0.5)
    n = np.asarray(normal, float) / np.linalg.norm(normal)
    atoms = site.defect
    from ase.geometry import find_mic
    d, _ = find_mic(atoms.positions - site.position, atoms.cell, atoms.pbc)
    near = (np.abs(d @ n) < atom_window) & (np.abs(d @ u) < half_width) & (np.abs(d @ v) < half_width)
    first = {nb.index for nb in site.first_shell}
    for i in np.flatnonzero(near):
        shell = 1 if i in first else 2
        ax.scatter(d[i] @ u, d[i] @ v, s=22 if shell == 1 else 12, color=style.shell_colour(shell),
                   edgecolor=style.PAPER, linewidth=0.5, zorder=3)
        if shell == 1:
            ax.text(d[i] @ u, d[i] @ v + 0.35, atoms[i].symbol, ha="center", va="bottom", fontsize=5.5,
                    color=style.PAPER)
    ax.scatter([0], [0], s=30, marker="x", color=style.VACANCY_GHOST, zorder=4, linewidth=1.2)
    ax.set_xlabel("in-plane distance (Å)")
    ax.set_ylabel("in-plane distance (Å)")
    ax.grid(False)
    cb = fig.colorbar(im, ax=ax, shrink=0.85)
    cb.set_label("state density (1/Å³)")
    ax.set_title(f"in-gap state density (vacancy ×)\nplane normal ({n[0]:.2f}, {n[1]:.2f}, {n[2]:.2f})",
                 loc="left", fontsize=6.5)
    return fig


def _best_normal(vecs):
    """Normal of the plane through the site holding the most first-shell atoms."""
    best, count = np.array([0, 0, 1.0]), -1
    for i in range(len(vecs)):
        for j in range(i + 1, len(vecs)):
            nrm = np.cross(vecs[i], vecs[j])
            if np.linalg.norm(nrm) < 1e-6:
                continue
            nrm = nrm / np.linalg.norm(nrm)
            c = int(np.sum(np.abs(vecs @ nrm) < 0.3))
            if c > count:
                best, count = nrm, c
    return best
