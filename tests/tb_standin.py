"""Stand-in vacancy sites for the tight-binding tests (built from ASE bulk crystals).

Only what orbtool.tb needs from a VacancySite: position, defect, first_shell, second_shell,
point_group, operations. Operations are the signed permutation matrices (cubic group) that map the
two-shell cluster onto itself.
"""

from __future__ import annotations

import itertools
from types import SimpleNamespace

import numpy as np
from ase.build import bulk
from ase.geometry import find_mic


def cubic_operations():
    ops = []
    for perm in itertools.permutations(range(3)):
        for signs in itertools.product((1, -1), repeat=3):
            M = np.zeros((3, 3))
            M[range(3), perm] = signs
            ops.append(M)
    return np.array(ops)


def make_site(name="Si", crystal="diamond", a=5.431, remove=0, repeat=3, shells_tol=0.05):
    """Bulk supercell with atom ``remove`` taken out, as a duck-typed vacancy site."""
    atoms = bulk(name, crystal, a=a, cubic=True).repeat(repeat)
    pos = atoms.positions[remove].copy()
    element = atoms[remove].symbol
    defect = atoms.copy()
    del defect[remove]
    vec, dist = find_mic(defect.positions - pos, defect.cell, defect.pbc)
    order = np.argsort(dist)
    radii = []
    for d in dist[order]:
        if not radii or d > radii[-1] + shells_tol:
            radii.append(d)
        if len(radii) > 2:
            break
    def shell(k):
        sel = [i for i in order if abs(dist[i] - radii[k]) < shells_tol]
        return tuple(SimpleNamespace(index=int(i), element=defect[int(i)].symbol, vector=vec[i].copy(),
                                     shell=k + 1, distance=float(dist[i])) for i in sel)
    first, second = shell(0), shell(1)
    cluster = np.array([n.vector for n in first + second])
    ops = [R for R in cubic_operations()
           if np.all(np.min(np.linalg.norm((cluster @ R.T)[:, None] - cluster[None], axis=-1), axis=1) < 1e-6)]
    ops = np.array(ops)
    has_inv = any(np.allclose(R, -np.eye(3)) for R in ops)
    group = {48: "Oh", 24: "Oh" if has_inv else "Td"}.get(len(ops), "C1")
    return SimpleNamespace(position=pos, element=element, defect=defect, first_shell=first,
                           second_shell=second, shells=(first, second), point_group=group, operations=ops)


def breathe(site, fraction):
    """A copy of ``site`` whose first shell moved radially by ``fraction`` of its distance."""
    defect = site.defect.copy()
    first = []
    for n in site.first_shell:
        new = n.vector * (1 + fraction)
        defect.positions[n.index] = site.position + new
        first.append(SimpleNamespace(index=n.index, element=n.element, vector=new, shell=1,
                                     distance=float(np.linalg.norm(new))))
    return SimpleNamespace(position=site.position, element=site.element, defect=defect, first_shell=tuple(first),
                           second_shell=site.second_shell, shells=(tuple(first), site.second_shell),
                           point_group=site.point_group, operations=site.operations)
