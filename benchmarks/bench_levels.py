"""Speed of orbtool's Ewald sum against a straightforward textbook implementation.

Run: ``python benchmarks/bench_levels.py``. Prints wall-time ratios (reference / orbtool) measured in this
process, and the agreement of the two energies. The reference is the plain Ewald sum (isotropic ε = 1):
a Python loop over charge pairs with the images vectorised, a fixed η = √π (N/V²)^{1/6}, and one complex
exponential per (charge, G) for the structure factor.
"""

from __future__ import annotations

import math
import time

import numpy as np
from ase.build import bulk
from scipy.special import erfc

from orbtool.levels import ewald_energy, image_charge_energy
from orbtool.units import COULOMB


def reference_ewald(cell, pos, q, accuracy=1e-13):
    n = len(q)
    vol = abs(np.linalg.det(cell))
    eta = math.sqrt(math.pi) * (n / vol ** 2) ** (1 / 6)
    x = math.sqrt(-math.log(accuracy)) + 0.5
    recip = 2 * math.pi * np.linalg.inv(cell).T
    rcut = x / eta
    nmax = np.ceil(rcut * np.linalg.norm(recip, axis=1) / (2 * math.pi)).astype(int) + 1
    rng = [np.arange(-m, m + 1) for m in nmax]
    lat = np.stack(np.meshgrid(*rng, indexing="ij"), -1).reshape(-1, 3) @ cell
    e_real = 0.0
    for i in range(n):
        for j in range(n):
            d = np.linalg.norm(pos[i] - pos[j] + lat, axis=1)
            d = d[(d > 1e-10) & (d < rcut + 1)]
            e_real += q[i] * q[j] * np.sum(erfc(eta * d) / d)
    gcut = 2 * eta * x
    mmax = np.ceil(gcut * np.linalg.norm(cell, axis=1) / (2 * math.pi)).astype(int) + 1
    rng = [np.arange(-m, m + 1) for m in mmax]
    g = np.stack(np.meshgrid(*rng, indexing="ij"), -1).reshape(-1, 3) @ recip
    k2 = np.sum(g * g, axis=1)
    g, k2 = g[(k2 > 0) & (k2 < gcut ** 2)], k2[(k2 > 0) & (k2 < gcut ** 2)]
    sf = q @ np.exp(1j * pos @ g.T)
    e_recip = 2 * math.pi / vol * np.sum(np.exp(-k2 / (4 * eta ** 2)) / k2 * np.abs(sf) ** 2)
    e_self = -eta / math.sqrt(math.pi) * np.sum(q * q)
    e_bg = -math.pi * q.sum() ** 2 / (2 * vol * eta ** 2)
    return COULOMB * (0.5 * e_real + e_recip + e_self + e_bg)


def timed(fn, *args, repeat=3):
    best = math.inf
    for _ in range(repeat):
        t = time.perf_counter()
        out = fn(*args)
        best = min(best, time.perf_counter() - t)
    return out, best


def main():
    print(f"{'case':<34} {'orbtool s':>10} {'reference s':>12} {'ratio':>7} {'|ΔE| eV':>9}")
    for rep in (1, 2, 3):
        atoms = bulk("NaCl", "rocksalt", a=5.64, cubic=True).repeat(rep)
        q = np.where(np.array(atoms.get_chemical_symbols()) == "Na", 1.0, -1.0)
        args = (atoms.cell[:], atoms.positions, q)
        e1, t1 = timed(ewald_energy, *args)
        e0, t0 = timed(reference_ewald, *args, repeat=1)
        print(f"{'NaCl ' + str(len(q)) + ' ions':<34} {t1:10.4f} {t0:12.4f} {t0 / t1:7.1f} {abs(e1 - e0):9.1e}")
    cell = bulk("Si", "diamond", a=5.43, cubic=True).repeat(4).cell[:]
    e1, t1 = timed(image_charge_energy, 2, cell, 11.7)
    e0, t0 = timed(lambda: -reference_ewald(cell, np.zeros((1, 3)), np.array([2.0])) / 11.7)
    print(f"{'point charge, 512-atom Si cell':<34} {t1:10.4f} {t0:12.4f} {t0 / t1:7.1f} {abs(e1 - e0):9.1e}")
    e1, t1 = timed(image_charge_energy, 2, cell, np.diag([11.7, 11.7, 30.0]))
    print(f"{'same, anisotropic ε (no reference)':<34} {t1:10.4f}")


if __name__ == "__main__":
    main()
