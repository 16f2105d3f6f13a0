"""A state's character: the one rule that says which level is *the defect state*, and two routes to a
state's character side by side.

The rule (:data:`STATE_RULE`, :func:`choose_defect_state`, :func:`defect_state`) lives here, below every
surface and below the fit, so that :func:`orbtool.family.analyze_case`, :func:`orbtool.tb.targets_from_case`
and the app apply the same rule (:mod:`orbtool.story` re-exports it).

The projection route (:func:`orbtool.analysis.states.in_gap_states`) weighs a
state by its projections on atom-centred spheres/orbitals; the grid route
(:func:`orbtool.analysis.density.partition`) splits its partial-charge or
orbital grid among atoms in real space. Neither is "the" answer — projection
spheres do not fill space and real-space cells depend on the rule used — but
agreement between them is a good sign that the character is robust.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..errors import InputFormatError
from ..grid import Grid
from ._records import Record
from .density import Partition, partition

__all__ = ["RouteComparison", "compare_routes", "STATE_RULE", "RESONANT_WINDOW", "RESONANT_MIN_SHELL",
           "choose_defect_state", "defect_state"]

#: how far outside the gap (eV) a level may lie and still be the defect state (resonant level)
RESONANT_WINDOW = 0.3
#: first-shell weight a resonant level needs to count as the vacancy's level: most of it on the vacancy's
#: neighbours (common practice for "localised"; the demo-data tests use the same 50 %)
RESONANT_MIN_SHELL = 0.5

STATE_RULE = ("the defect state is the level — a whole degenerate multiplet — with the largest weight on the "
              "vacancy's first neighbour shell, among the levels in the gap; when the gap holds none, a level "
              f"up to {RESONANT_WINDOW} eV outside it (resonant) with at least {RESONANT_MIN_SHELL:.0%} on the "
              "first shell, its energy used as it is")


def choose_defect_state(states):
    """The defect state among ``states`` (DefectState multiplets) by :data:`STATE_RULE` (None if empty).

    Ties on the first-shell weight (to 1e-9) go to spin up, then to the deeper level (lower energy), so the
    choice is a total order and does not depend on the order of ``states``.
    """
    states = list(states)
    if not states:
        return None
    return max(states, key=lambda s: (round(float(s.shell_fractions.get(1, 0.0)), 9), -int(s.spin),
                                      -float(s.above_vbm)))


def defect_state(case, site, states=None):
    """Apply :data:`STATE_RULE` to one case.

    Parameters
    ----------
    case : DefectCase
    site : VacancySite
    states : list of DefectState, optional
        The case's in-gap states (:func:`orbtool.analysis.in_gap_states`), when already computed.

    Returns
    -------
    state : DefectState or None
    resonant : bool — the state lies outside the gap (chosen by character, energy used as it is).
    states : list of DefectState — the in-gap states.
    """
    from .states import in_gap_states

    if states is None:
        states = list(in_gap_states(case, site=site))
    state = choose_defect_state(states)
    if state is not None:
        return state, False, states
    near = [s for s in in_gap_states(case, site=site, tol=-RESONANT_WINDOW)
            if s.shell_fractions.get(1, 0.0) >= RESONANT_MIN_SHELL]
    state = choose_defect_state(near)
    return state, state is not None, states


@dataclass(frozen=True, eq=False)
class RouteComparison(Record):
    """Per-atom weights of one state from projections and from a grid.

    Attributes
    ----------
    projection_weights, grid_weights : ndarray (natom,)
        Both normalised to sum to 1 over the atoms (dimensionless).
    method : str
        Grid partition used (``"voronoi"`` or ``"spheres"``).
    shells : dict
        ``{1: (projections, grid), 2: (...), "rest": (...)}`` shell fractions
        (empty without a site).
    top_overlap : float
        Share of the ``top`` atoms by projections that are also among the
        ``top`` atoms by grid (1 = same set).
    correlation : float
        Pearson correlation of the two weight vectors.
    max_difference : float
        Largest |projection − grid| weight over atoms.
    top : int
    provenance : tuple of str
    """

    projection_weights: np.ndarray
    grid_weights: np.ndarray
    method: str
    shells: dict
    top_overlap: float
    correlation: float
    max_difference: float
    top: int
    provenance: tuple = field(default_factory=tuple)

    def summary(self) -> str:
        p, g = self.projection_weights, self.grid_weights
        order = np.argsort(-(p + g), kind="stable")[: self.top]
        lines = [f"Character of the state: projections vs grid ({self.method})",
                 f"  correlation {self.correlation:.3f}   largest difference {self.max_difference:.3f}   "
                 f"top-{self.top} overlap {self.top_overlap:.0%}",
                 "  atom   projections      grid"]
        lines += [f"  {i:4d}   {p[i]:11.4f}  {g[i]:8.4f}" for i in order]
        for key, (a, b) in self.shells.items():
            name = f"shell {key}" if key != "rest" else "rest   "
            lines.append(f"  {name}  {a:11.4f}  {b:8.4f}")
        lines += [f"  note: {n}" for n in self.provenance]
        return "\n".join(lines)


def compare_routes(state, grid, site=None, *, method: str = "voronoi", radii=None, top: int = 6,
                   atoms=None) -> RouteComparison:
    """Compare a state's atom weights from projections with a grid partition.

    Parameters
    ----------
    state : DefectState
        From :func:`~orbtool.analysis.states.in_gap_states`.
    grid : Grid or Partition
        The state's partial charge / orbital grid, or a partition of it.
    site : VacancySite, optional
        For shell fractions (defaults to none).
    method, radii, atoms
        Passed to :func:`~orbtool.analysis.density.partition` when ``grid``
        is a Grid.
    top : int
        How many leading atoms to compare as sets.
    """
    part = grid if isinstance(grid, Partition) else None
    if part is None:
        if not isinstance(grid, Grid):
            raise InputFormatError(None, None, f"expected a Grid or a Partition, got {type(grid).__name__}",
                                   field="grid")
        part = partition(grid, method, atoms=atoms, radii=radii)
    p = np.asarray(state.atom_weights, dtype=float)
    if p.size != part.charges.size:
        raise InputFormatError(part.source, None, f"the state has weights on {p.size} atoms but the grid's "
                               f"structure has {part.charges.size}", field="atoms")
    held = float(part.charges.sum())
    if not held > 0:
        raise InputFormatError(part.source, None, "the grid partition holds no density", field="values")
    g = part.charges / held
    p = p / p.sum() if p.sum() > 0 else p
    notes = [f"grid weights renormalised over atoms ({held / part.total:.1%} of the grid integral lies in "
             "the atoms' regions)" if part.total else "grid weights renormalised over atoms"]
    k = int(min(max(1, top), p.size))
    tp = set(np.argsort(-p, kind="stable")[:k].tolist())
    tg = set(np.argsort(-g, kind="stable")[:k].tolist())
    corr = float(np.corrcoef(p, g)[0, 1]) if p.size > 1 and p.std() > 0 and g.std() > 0 else float("nan")
    shells = {}
    if site is not None:
        from .states import _shell_indices

        s1, s2 = _shell_indices(site, 1), _shell_indices(site, 2)
        a1, a2 = (float(p[s1].sum()), float(g[s1].sum())), (float(p[s2].sum()), float(g[s2].sum()))
        shells = {1: a1, 2: a2, "rest": (1.0 - a1[0] - a2[0], 1.0 - a1[1] - a2[1])}
    return RouteComparison(projection_weights=p, grid_weights=g, method=part.method, shells=shells,
                           top_overlap=len(tp & tg) / k, correlation=corr,
                           max_difference=float(np.abs(p - g).max()), top=k, provenance=tuple(notes))
