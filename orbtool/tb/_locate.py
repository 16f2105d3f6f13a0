"""Finding the fitted vacancy in a geometry handed to ``predict`` (internal).

A fitted model knows its cluster by atom indices and the vacancy by its position in the fitted
case's cell. A new geometry (``ase.Atoms``) may be an edit of that cell (breathing, distortion), the
same supercell of another host (another lattice constant, e.g. the partner of a cation swap), or a
cell with the vacancy somewhere else. The site is carried over in fractional coordinates of the new
cell, then checked: the point must be empty and its nearest atoms must be the model's first shell.
Otherwise the vacancy is not where the model expects it and the geometry is refused (an error says
how to build a model around the vacancy of that geometry).
"""

from __future__ import annotations

import numpy as np

from ..errors import ModelError


def site_in(model, atoms) -> np.ndarray:
    """Cartesian position (Å) of the model's vacancy in ``atoms``; ModelError when it is not there.

    Parameters
    ----------
    model : ClusterModel
        Needs ``site_position``, ``indices``, ``shell``, ``vectors`` and, to map fractional
        coordinates, ``cell`` (the fitted case's cell; without it the position is used as is).
    atoms : ase.Atoms
    """
    from ase.geometry import find_mic

    n = len(atoms)
    if n <= int(model.indices.max()):
        raise ModelError(f"geometry has {n} atoms but the cluster uses index {int(model.indices.max())}: "
                         "it is not the fitted case's supercell")
    pos = np.asarray(model.site_position, dtype=float)
    cell0 = model.cell
    if cell0 is not None and abs(np.linalg.det(np.asarray(cell0))) > 1e-9 and atoms.cell.rank == 3:
        frac = np.linalg.solve(np.asarray(cell0).T, pos)
        pos = frac @ np.array(atoms.cell[:])
    d, _ = find_mic(atoms.positions - pos[None], atoms.cell, atoms.pbc)
    dist = np.linalg.norm(d, axis=1)
    first = np.asarray(model.indices)[np.asarray(model.shell) == 1]
    d1 = float(np.min(np.linalg.norm(model.vectors[np.asarray(model.shell) == 1], axis=1)))
    order = np.argsort(dist, kind="stable")
    nearest = order[: len(first)]
    hint = ("build a model around the vacancy of this geometry instead: locate it with "
            "orbtool.analysis.locate_vacancy(host, geometry) and pass the site to ClusterModel.around / "
            "model.with_site")
    if dist[order[0]] < 0.5 * d1:
        raise ModelError(f"the fitted vacancy site is occupied in this geometry (atom {int(order[0])}, "
                         f"{atoms.get_chemical_symbols()[int(order[0])]}, {dist[order[0]]:.2f} Å from it): the "
                         f"vacancy is elsewhere; {hint}")
    if set(nearest.tolist()) != set(first.tolist()):
        raise ModelError(f"the {len(first)} atoms nearest the fitted vacancy site in this geometry "
                         f"({sorted(nearest.tolist())}) are not the model's first shell ({sorted(first.tolist())}); "
                         f"{hint}")
    return pos


def check_elements(model, atoms, swap) -> None:
    """Refuse a geometry whose cluster atoms are other elements than the model's (after ``swap``)."""
    sym = np.array(atoms.get_chemical_symbols())[np.asarray(model.indices)]
    swap = dict(swap or {})
    bad = [(int(i), s, e) for i, s, e in zip(model.indices, sym, model.elements) if s not in (e, swap.get(e, e))]
    if bad:
        i, s, e = bad[0]
        raise ModelError(f"the geometry has {s} at atom {i} where the fitted cluster has {e}"
                         + (f" (and {len(bad) - 1} more)" if len(bad) > 1 else "")
                         + f": pass swap={{'{e}': '{s}'}} to change the element, or fit a model of that case")
