"""Speed of the demo-data generator's kernels (run: python benchmarks/bench_demo.py).

1. Bloch Hamiltonians of a 63-atom vacancy cell at 8 k points: scatter with ``np.bincount`` vs a
   per-pair Python loop filling 4x4 blocks (reference, same process). Goal: ≥ 10× the loop.
2. Slater-orbital state density on a 40^3 grid: the vectorised evaluation vs a per-grid-point loop
   timed on 2 000 points and scaled. Goal: ≥ 50× the loop.
3. One complete host run (build, calibrate, solve, project). Goal: ≤ 2 s CPU single-threaded.
"""

from __future__ import annotations

import os

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import math  # noqa: E402
import time  # noqa: E402

import numpy as np  # noqa: E402

from orbtool.demo import scenario as sc  # noqa: E402
from orbtool.demo import tbmodel  # noqa: E402
from orbtool.demo.density import _radial, slater_exponent, state_density  # noqa: E402


def cpu(f, repeat=3):
    best = math.inf
    for _ in range(repeat):
        t = time.process_time()
        f()
        best = min(best, time.process_time() - t)
    return best


def loop_hamiltonians(atoms, bonds, kpts):
    n = 4 * len(atoms)
    H = np.zeros((len(kpts), n, n), complex)
    onsite = tbmodel.onsite_vector(atoms.get_chemical_symbols())
    for ik, k in enumerate(kpts):
        for b in range(len(bonds.i)):
            blk = tbmodel.sk_blocks(bonds.vectors[b:b + 1])[0] * bonds.scale[b]
            i, j = bonds.i[b], bonds.j[b]
            H[ik, 4 * i:4 * i + 4, 4 * j:4 * j + 4] += blk * np.exp(2j * np.pi * k @ bonds.shifts[b])
        H[ik] += np.diag(onsite)
    return H


def loop_density(atoms, coeffs, points):
    cell = atoms.cell.array
    spos = atoms.get_scaled_positions()
    sym = atoms.get_chemical_symbols()
    out = np.empty(len(points))
    for p, f in enumerate(points):
        psi = np.zeros(coeffs.shape[2])
        for a in range(len(atoms)):
            d = f - spos[a]
            d = (d - np.round(d)) @ cell
            r = max(np.linalg.norm(d), 1e-12)
            n, z = slater_exponent(sym[a])
            rad = _radial(np.array(r), n, z)
            ang = np.array([1 / math.sqrt(4 * math.pi), *(math.sqrt(3 / (4 * math.pi)) * d / r)])
            psi += (rad * ang) @ coeffs[a]
        out[p] = 2 * np.sum(psi ** 2)
    return out


def main():
    spec = sc.HOSTS[0]
    host = sc.build_host(spec)
    d, site, shell = sc.breathe(host, sc.vacancy_index(host, "S"), 0.0, 1.2 * spec.bond)
    b = tbmodel.find_bonds(d, spec.cutoff, ("Sn",), sc.SECOND_SCALE)
    kfull, _, _ = sc.kpoint_sets()
    ours = tbmodel.hamiltonians(d, b, kfull)
    ref = loop_hamiltonians(d, b, kfull)
    assert np.allclose(ours, ref.real if not np.iscomplexobj(ours) else ref)
    t_fast = cpu(lambda: tbmodel.hamiltonians(d, b, kfull))
    t_loop = cpu(lambda: loop_hamiltonians(d, b, kfull), repeat=1)
    print(f"1. Hamiltonians 8 k, 63 atoms: {t_fast * 1e3:.1f} ms vs loop {t_loop * 1e3:.0f} ms "
          f"-> {t_loop / t_fast:.0f}x (goal >= 10x)")

    eps, vec = np.linalg.eigh(tbmodel.hamiltonians(d, b, [[0, 0, 0]])[0])
    coeffs = vec[:, [156]].reshape(len(d), 4, 1)
    shape = (40, 40, 40)
    t_vec = cpu(lambda: state_density(d, coeffs, shape), repeat=1)
    rng = np.random.default_rng(0)
    pts = rng.random((2000, 3))
    t_pts = cpu(lambda: loop_density(d, coeffs, pts), repeat=1)
    t_loop_full = t_pts * np.prod(shape) / len(pts)
    print(f"2. state density 40^3: {t_vec:.2f} s vs loop (scaled from 2000 points) {t_loop_full:.0f} s "
          f"-> {t_loop_full / t_vec:.0f}x (goal >= 50x)")

    t_host = cpu(lambda: sc.compute_host(spec), repeat=1)
    print(f"3. one host run (calibrate + solve + project, 8 k): {t_host:.2f} s CPU (goal <= 2 s)")


if __name__ == "__main__":
    main()
