"""Speed of the grid partition (orbtool.analysis.density) against a straightforward route.

Goal (issue 5): a 256³ grid among 500 atoms, spheres and nearest-atom cells,
in ≤ 0.5 s together, with no Python loop over grid points.

The straightforward route makes one full-grid minimum-image distance map per
atom (``Grid.minimum_image_distance`` / ``Grid.sphere_mask``): a running
arg-min gives the nearest-atom labels, a mask gives each sphere. Its cost is
exactly linear in the number of atoms, so by default it is timed on a subset
of atoms and scaled (printed as such); ``--full`` times it on every atom.
Before timing, both routes are checked to agree on a smaller grid. A second
reference for the nearest-atom cells is scipy's periodic cKDTree queried for
every grid point.

Run:  python benchmarks/bench_density.py [--n 256] [--atoms 500] [--full]
"""

from __future__ import annotations

import argparse
import os
import time

import numpy as np

from orbtool.analysis._partition import nearest_atom_sums, sphere_sums
from orbtool.grid import Grid


def structure(natoms: int, seed: int = 0):
    """A jittered simple-cubic crystal with vacancies: natoms of the m³ sites, a = 2.7 Å."""
    m = int(np.ceil(natoms ** (1 / 3)))
    a = 2.7
    rng = np.random.default_rng(seed)
    sites = np.stack(np.meshgrid(*[np.arange(m)] * 3, indexing="ij"), -1).reshape(-1, 3) * a
    pos = sites[rng.permutation(len(sites))[:natoms]] + rng.normal(0, 0.1, (natoms, 3))
    return np.eye(3) * m * a, pos


def reference_voronoi(grid: Grid, pos: np.ndarray, natoms_total: int | None = None) -> np.ndarray:
    best = np.full(grid.shape, np.inf)
    label = np.zeros(grid.shape, dtype=np.int32)
    for i, p in enumerate(pos):
        d = grid.minimum_image_distance(p)
        closer = d < best
        best[closer] = d[closer]
        label[closer] = i
    return np.bincount(label.ravel(), weights=grid.values.ravel(), minlength=len(pos))


def kdtree_voronoi(grid: Grid, pos: np.ndarray) -> np.ndarray:
    """Second reference: scipy's periodic cKDTree queried for every grid point
    (orthogonal cells only), one slab of points at a time."""
    from scipy.spatial import cKDTree

    lengths = np.diag(grid.cell)
    tree = cKDTree(pos % lengths, boxsize=lengths)
    n1, n2, n3 = grid.shape
    yz = np.stack(np.meshgrid(np.arange(n2) / n2 * lengths[1], np.arange(n3) / n3 * lengths[2],
                              indexing="ij"), -1).reshape(-1, 2)
    out = np.zeros(len(pos))
    for i in range(n1):
        pts = np.column_stack([np.full(len(yz), i / n1 * lengths[0]), yz])
        _, lab = tree.query(pts)
        out += np.bincount(lab, weights=grid.values[i].ravel(), minlength=len(pos))
    return out


def reference_spheres(grid: Grid, pos: np.ndarray, radius: float) -> np.ndarray:
    return np.array([grid.values[grid.sphere_mask(p, radius)].sum() for p in pos])


def best_of(fn, repeat=3):
    """Best wall time and best process (CPU) time of ``repeat`` runs, s."""
    wall, cpu = [], []
    for _ in range(repeat):
        t, c = time.perf_counter(), time.process_time()
        out = fn()
        wall.append(time.perf_counter() - t)
        cpu.append(time.process_time() - c)
    return min(wall), min(cpu), out


def public(grid, cell, pos, radius, kernels):
    """The public ``partition()`` (checks, density, totals, sphere-overlap note) against its kernels,
    and ``partition(..., "spheres")`` with 2000 atoms (goals: ≤ 0.5 s for both methods on 256³/500
    atoms, ≤ 1 s for 2000 atoms)."""
    from ase import Atoms

    from orbtool.analysis.density import partition
    atoms = Atoms(f"H{len(pos)}", positions=pos, cell=cell, pbc=True)
    g = Grid(grid.values, cell, atoms=atoms, unit="e/Å^3")
    t_pv, c_pv, _ = best_of(lambda: partition(g, "voronoi"))
    t_ps, c_ps, _ = best_of(lambda: partition(g, "spheres", radii=radius))
    print(f"public partition(): voronoi {t_pv:.3f} s, spheres {t_ps:.3f} s, both {t_pv + t_ps:.3f} s wall "
          f"(CPU {c_pv + c_ps:.3f} s); kernels alone {kernels:.3f} s; overhead ratio {(t_pv + t_ps) / kernels:.2f}; "
          f"goal ≤ 0.5 s: {'met' if t_pv + t_ps <= 0.5 else 'NOT met'}; load {os.getloadavg()[0]:.2f}")
    cell2, pos2 = structure(2000)
    a2 = Atoms("H2000", positions=pos2, cell=cell2, pbc=True)
    n2 = int(round(grid.shape[0] * cell2[0, 0] / cell[0, 0] / 2)) * 2
    g2 = Grid(np.random.default_rng(2).random((n2,) * 3), cell2, atoms=a2, unit="e/Å^3")
    t2, c2, _ = best_of(lambda: partition(g2, "spheres", radii=radius))
    print(f"public partition(spheres), 2000 atoms, grid {n2}^3 (same spacing): {t2:.3f} s wall (CPU {c2:.3f} s); "
          f"goal ≤ 1 s: {'met' if t2 <= 1.0 else 'NOT met'}; load {os.getloadavg()[0]:.2f}")


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=256, help="grid points per axis")
    ap.add_argument("--atoms", type=int, default=500)
    ap.add_argument("--radius", type=float, default=1.2, help="sphere radius, Å")
    ap.add_argument("--ref-atoms", type=int, default=20, help="atoms the reference is timed on (then scaled)")
    ap.add_argument("--full", action="store_true", help="time the reference on every atom")
    args = ap.parse_args(argv)

    cell, pos = structure(args.atoms)
    rng = np.random.default_rng(1)
    radii = np.full(len(pos), args.radius)

    # agreement on a small grid, full reference
    small = Grid(rng.random((48, 48, 48)), cell)
    ok_v = np.allclose(nearest_atom_sums(small.values, cell, small.origin, pos), reference_voronoi(small, pos))
    ok_s = np.allclose(sphere_sums(small.values, cell, small.origin, pos, radii),
                       reference_spheres(small, pos, args.radius))
    print(f"agreement on 48^3: voronoi {ok_v}, spheres {ok_s}")

    grid = Grid(rng.random((args.n,) * 3), cell)
    v = grid.values
    t_v, c_v, _ = best_of(lambda: nearest_atom_sums(v, cell, grid.origin, pos))
    t_s, c_s, _ = best_of(lambda: sphere_sums(v, cell, grid.origin, pos, radii))
    print(f"grid {args.n}^3 ({v.size:,d} points), {len(pos)} atoms, cell {cell[0, 0]:.1f} Å, sphere radius "
          f"{args.radius} Å")
    print(f"orbtool  voronoi {t_v:8.3f} s   spheres {t_s:8.3f} s   both {t_v + t_s:8.3f} s (wall, best of 3)")
    print(f"         voronoi {c_v:8.3f} s   spheres {c_s:8.3f} s   both {c_v + c_s:8.3f} s (CPU time of this process; "
          "differs from wall time on a shared or multi-threaded machine)")
    if hasattr(os, "getloadavg"):
        print(f"load average during the run: {os.getloadavg()[0]:.2f} on {os.cpu_count()} CPUs")
    public(grid, cell, pos, args.radius, t_v + t_s)

    sub = pos if args.full else pos[: args.ref_atoms]
    scale = len(pos) / len(sub)
    t0 = time.perf_counter()
    reference_voronoi(grid, sub)
    r_v = (time.perf_counter() - t0) * scale
    t0 = time.perf_counter()
    reference_spheres(grid, sub, args.radius)
    r_s = (time.perf_counter() - t0) * scale
    t0 = time.perf_counter()
    kd = kdtree_voronoi(grid, pos)
    r_kd = time.perf_counter() - t0
    ok_kd = np.allclose(kd, nearest_atom_sums(v, cell, grid.origin, pos))
    print(f"scipy periodic cKDTree, every point: voronoi {r_kd:8.2f} s (agrees: {ok_kd}); "
          f"ratio {r_kd / t_v:6.1f}×")
    how = "all atoms" if args.full else f"timed on {len(sub)} atoms, scaled ×{scale:g} (cost is linear in atoms)"
    print(f"straightforward voronoi {r_v:8.2f} s   spheres {r_s:8.2f} s   ({how})")
    print(f"ratio (straightforward / orbtool): voronoi {r_v / t_v:7.1f}×   spheres {r_s / t_s:7.1f}×   "
          f"both {(r_v + r_s) / (t_v + t_s):7.1f}×")
    print(f"goal ≤ 0.5 s for both: {'met' if t_v + t_s <= 0.5 else 'NOT met'} on this machine")


if __name__ == "__main__":
    main()
