"""Allowed chemical potentials of the elements of a host compound.

With ``Δμ_i = μ_i − μ_i^elemental`` (eV/atom), the host ``A_a B_b …`` is in
equilibrium with its surroundings when

* ``Σ n_i Δμ_i = ΔH_f`` (the host formation enthalpy per formula unit),
* ``Δμ_i ≤ 0`` (no element precipitates),
* ``Σ m_ki Δμ_i ≤ ΔH_k`` for every competing phase ``k`` (it does not form).

For two elements the region is an interval solved in closed form; for more,
each bound is found by :func:`scipy.optimize.linprog` and the corners by
intersecting constraints (S. B. Zhang and J. E. Northrup, Phys. Rev. Lett.
67, 2339 (1991); C. Freysoldt et al., Rev. Mod. Phys. 86, 253 (2014), sec. II).
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass

import numpy as np

from ..errors import ModelError

__all__ = ["Phase", "ChemicalPotentials", "StabilityRegion", "stability_region", "parse_composition"]

#: Tolerance (eV) for a point to count as inside the region.
TOLERANCE = 1e-6


def parse_composition(composition, field: str = "composition") -> dict[str, float]:
    """``{"Ga": 2, "O": 3}`` from a dict or a formula string (``"Ga2O3"``)."""
    if isinstance(composition, str):
        from ase.formula import Formula
        try:
            composition = Formula(composition).count()
        except Exception as exc:  # ASE raises ValueError with its own words
            raise ModelError(f"{field}: cannot read formula {composition!r} ({exc})") from None
    if not isinstance(composition, dict) or not composition:
        raise ModelError(f"{field}: expected a formula string or a non-empty {{element: count}} dict")
    out = {}
    for el, n in composition.items():
        n = float(n)
        if not n > 0 or not np.isfinite(n):
            raise ModelError(f"{field}: count of {el} must be positive, got {n}")
        out[str(el)] = n
    return out


@dataclass(frozen=True)
class Phase:
    """A compound with its formation enthalpy.

    Attributes
    ----------
    name : str
        Label, e.g. ``"Ga2O3"``.
    composition : dict[str, float]
        Atoms per formula unit.
    enthalpy : float
        Formation enthalpy per formula unit relative to the elemental
        references, eV (negative for a stable compound).
    """

    name: str
    composition: dict
    enthalpy: float

    @classmethod
    def make(cls, name: str, enthalpy: float, composition=None) -> "Phase":
        comp = parse_composition(name if composition is None else composition, field=f"phase {name}")
        h = float(enthalpy)
        if not np.isfinite(h):
            raise ModelError(f"phase {name}: formation enthalpy must be finite")
        return cls(name=name, composition=comp, enthalpy=h)


@dataclass(frozen=True)
class ChemicalPotentials:
    """A checked point of the stability region.

    Attributes
    ----------
    delta : dict[str, float]
        ``Δμ_i`` relative to the elemental references, eV/atom.
    absolute : dict[str, float] or None
        ``μ_i = μ_i^elemental + Δμ_i`` (eV/atom), if references were given.
    label : str
        Where in the region the point is (e.g. ``"Ga-rich"``).
    """

    delta: dict
    absolute: dict | None
    label: str = ""


@dataclass(frozen=True)
class StabilityRegion:
    """Allowed ``Δμ`` of a host compound (eV/atom).

    Attributes
    ----------
    host : Phase
    competing : tuple of Phase
    elements : tuple[str, ...]
    bounds : dict[str, tuple[float, float]]
        Smallest and largest allowed ``Δμ`` of each element, eV.
    vertices : ndarray (nv, n_elements)
        Corners of the region (columns in :attr:`elements` order), eV.
    limiting : tuple of tuple[str, ...]
        For each vertex, the constraints that meet there.
    method : str
        ``"closed form (two elements)"`` or ``"linear programming"``.
    """

    host: Phase
    competing: tuple
    elements: tuple
    bounds: dict
    vertices: np.ndarray
    limiting: tuple
    method: str

    # ------------------------------------------------------------ constraints
    def _constraints(self):
        n = np.array([self.host.composition.get(e, 0.0) for e in self.elements])
        rows = [np.eye(len(self.elements))[i] for i in range(len(self.elements))]
        rhs = [0.0] * len(self.elements)
        names = [f"elemental {e} (Δμ_{e} ≤ 0)" for e in self.elements]
        for ph in self.competing:
            rows.append(np.array([ph.composition.get(e, 0.0) for e in self.elements]))
            rhs.append(ph.enthalpy)
            names.append(f"competing {ph.name} (Σ m_i Δμ_i ≤ {ph.enthalpy:g} eV)")
        return n, np.array(rows), np.array(rhs), names

    def violations(self, delta: dict) -> list[str]:
        """Constraints broken by ``delta`` (empty if inside), in words."""
        n, rows, rhs, names = self._constraints()
        x = np.array([delta[e] for e in self.elements])
        out = []
        eq = float(n @ x) - self.host.enthalpy
        if abs(eq) > TOLERANCE:
            out.append(f"Σ n_i Δμ_i = {n @ x:.6f} eV but the host needs ΔH_f = {self.host.enthalpy:.6f} eV")
        excess = rows @ x - rhs
        for name, ex in zip(names, excess):
            if ex > TOLERANCE:
                out.append(f"{name} broken by {ex:.6f} eV")
        return out

    def at(self, delta: dict, references: dict | None = None, label: str = "") -> ChemicalPotentials:
        """Check a point and return it (with absolute μ if ``references`` given).

        If exactly one element is missing from ``delta`` it is fixed by the
        host equilibrium ``Σ n_i Δμ_i = ΔH_f``.

        Raises
        ------
        ModelError
            Unknown elements, more than one missing, or a point outside the
            region (naming the constraint broken and by how much).
        """
        delta = {str(k): float(v) for k, v in dict(delta).items()}
        extra = set(delta) - set(self.elements)
        if extra:
            raise ModelError(f"chemical potentials given for {sorted(extra)}, not in host {self.host.name}")
        missing = [e for e in self.elements if e not in delta]
        if len(missing) > 1:
            raise ModelError(f"give Δμ for all but at most one of {list(self.elements)}; missing {missing}")
        if missing:
            m = missing[0]
            rest = sum(self.host.composition[e] * delta[e] for e in delta)
            delta[m] = (self.host.enthalpy - rest) / self.host.composition[m]
        bad = self.violations(delta)
        if bad:
            raise ModelError(f"chemical potentials {delta} lie outside the stability region of "
                             f"{self.host.name}: " + "; ".join(bad))
        absolute = None
        if references is not None:
            lost = [e for e in self.elements if e not in references]
            if lost:
                raise ModelError(f"elemental reference energies missing for {lost}")
            absolute = {e: float(references[e]) + delta[e] for e in self.elements}
        return ChemicalPotentials(delta={e: delta[e] for e in self.elements}, absolute=absolute, label=label)

    def rich(self, element: str, references: dict | None = None) -> ChemicalPotentials:
        """The point where ``Δμ_element`` is largest (``element``-rich limit)."""
        return self._extreme(element, +1, references)

    def poor(self, element: str, references: dict | None = None) -> ChemicalPotentials:
        """The point where ``Δμ_element`` is smallest (``element``-poor limit)."""
        return self._extreme(element, -1, references)

    def _extreme(self, element, sign, references):
        if element not in self.elements:
            raise ModelError(f"{element} is not an element of {self.host.name}")
        k = self.elements.index(element)
        col = self.vertices[:, k]
        target = col.max() if sign > 0 else col.min()
        cand = self.vertices[np.abs(col - target) <= TOLERANCE]
        # ties (an edge of the region) are broken by the centre of that edge
        point = cand.mean(axis=0)
        tag = f"{element}-{'rich' if sign > 0 else 'poor'}"
        return self.at(dict(zip(self.elements, point)), references, label=tag)

    def summary(self) -> str:
        """The bounds and corners of the region."""
        lines = [f"Stability region of {self.host.name} (ΔH_f = {self.host.enthalpy:.4f} eV/f.u.; {self.method})"]
        for e in self.elements:
            lo, hi = self.bounds[e]
            lines.append(f"  Δμ_{e:<3} from {lo:+.4f} to {hi:+.4f} eV")
        lines.append("  corners:")
        for v, lim in zip(self.vertices, self.limiting):
            coords = ", ".join(f"Δμ_{e} = {x:+.4f}" for e, x in zip(self.elements, v))
            lines.append(f"    {coords}   ({'; '.join(lim)})")
        return "\n".join(lines)


def _vertices(n, rows, rhs, names, h):
    """Corners: intersect the equality with every (k−1)-subset of constraints."""
    k = len(n)
    verts, labels = [], []
    for combo in itertools.combinations(range(len(rows)), k - 1):
        a = np.vstack([n] + [rows[i] for i in combo])
        b = np.concatenate([[h], rhs[list(combo)]])
        if abs(np.linalg.det(a)) < 1e-12:
            continue
        x = np.linalg.solve(a, b)
        if np.all(rows @ x - rhs <= TOLERANCE):
            if not any(np.allclose(x, v, atol=TOLERANCE) for v in verts):
                verts.append(x)
                labels.append(tuple(names[i] for i in combo))
    return np.array(verts).reshape(-1, k), tuple(labels)


def stability_region(host, enthalpy: float | None = None, competing=(), *, method: str = "auto"
                     ) -> StabilityRegion:
    """Allowed chemical potentials of a host compound.

    Parameters
    ----------
    host : str, dict or Phase
        Host formula (``"GaN"``) or composition; with ``enthalpy``.
    enthalpy : float
        Host formation enthalpy per formula unit, eV (< 0).
    competing : iterable of Phase or (formula, enthalpy) pairs
        Other compounds of the same elements that must not form.
    method : {"auto", "closed-form", "linprog"}
        ``"auto"`` uses the closed form for two elements.

    Raises
    ------
    ModelError
        A host that is not stable (ΔH_f ≥ 0 or a competing phase always
        forms), elements in a competing phase that the host lacks.
    """
    if not isinstance(host, Phase):
        if enthalpy is None:
            raise ModelError("stability_region needs the host formation enthalpy (enthalpy=..., eV per formula unit)")
        name = host if isinstance(host, str) else "".join(f"{e}{n:g}" for e, n in dict(host).items())
        host = Phase.make(name, enthalpy, host)
    if not host.enthalpy < 0:
        raise ModelError(f"host {host.name}: formation enthalpy must be negative for a stable compound, "
                         f"got {host.enthalpy} eV")
    phases = tuple(p if isinstance(p, Phase) else Phase.make(p[0], p[1]) for p in competing)
    elements = tuple(host.composition)
    for p in phases:
        extra = set(p.composition) - set(elements)
        if extra:
            raise ModelError(f"competing phase {p.name} contains {sorted(extra)}, which {host.name} lacks; "
                             "fix impurity chemical potentials by hand instead")
    if len(elements) < 2:
        raise ModelError(f"host {host.name} has one element: its chemical potential is fixed, no region to find")
    if method == "auto":
        method = "closed-form" if len(elements) == 2 else "linprog"
    if method not in ("closed-form", "linprog"):
        raise ModelError(f"method must be 'auto', 'closed-form' or 'linprog', got {method!r}")
    if method == "closed-form" and len(elements) != 2:
        raise ModelError("the closed form applies to two-element hosts only")
    region = StabilityRegion(host=host, competing=phases, elements=elements, bounds={},
                             vertices=np.zeros((0, len(elements))), limiting=(), method="")
    n, rows, rhs, names = region._constraints()
    h = host.enthalpy
    if method == "closed-form":
        # Δμ_B = (h − n_A Δμ_A)/n_B: every constraint r_A Δμ_A + r_B Δμ_B ≤ c becomes s Δμ_A ≤ t
        s = rows[:, 0] - rows[:, 1] * n[0] / n[1]
        t = rhs - rows[:, 1] * h / n[1]
        lo, hi, lo_by, hi_by = -np.inf, np.inf, None, None
        for si, ti, nm in zip(s, t, names):
            if abs(si) < 1e-14:
                if ti < -TOLERANCE:
                    raise ModelError(f"host {host.name} is never stable: {nm}")
                continue
            if si > 0 and ti / si < hi:
                hi, hi_by = ti / si, nm
            elif si < 0 and ti / si > lo:
                lo, lo_by = ti / si, nm
        if lo > hi + TOLERANCE:
            raise ModelError(f"host {host.name} is not stable against its competing phases "
                             f"({lo_by} and {hi_by} cannot both be avoided)")
        xa = np.array([lo, hi])
        verts = np.column_stack([xa, (h - n[0] * xa) / n[1]])
        limiting = ((lo_by,), (hi_by,))
        bounds = {elements[0]: (float(lo), float(hi)),
                  elements[1]: tuple(sorted((float(verts[0, 1]), float(verts[1, 1]))))}
        label = "closed form (two elements)"
    else:
        from scipy.optimize import linprog  # imported here: scipy.optimize is slow to import
        bounds = {}
        for i, e in enumerate(elements):
            ends = []
            for sign in (+1.0, -1.0):
                c = np.zeros(len(elements))
                c[i] = sign
                res = linprog(c, A_ub=rows, b_ub=rhs, A_eq=n[None, :], b_eq=[h], bounds=[(None, None)] * len(n),
                              method="highs")
                if res.status == 2:
                    raise ModelError(f"host {host.name} is not stable against its competing phases "
                                     "(no chemical potentials satisfy all constraints)")
                if res.status != 0:
                    raise ModelError(f"linear program for Δμ_{e} failed: {res.message}")
                ends.append(float(res.x[i]))
            bounds[e] = (ends[0] + 0.0, ends[1] + 0.0)
        verts, limiting = _vertices(n, rows, rhs, names, h)
        label = "linear programming"
    return StabilityRegion(host=host, competing=phases, elements=elements, bounds=bounds,
                           vertices=verts + 0.0, limiting=limiting, method=label)
