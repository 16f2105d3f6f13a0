"""The numbers behind a mechanism diagram, taken from a fitted model.

:func:`mechanism` collects, for one case of a :class:`~orbtool.tb.FitResult`,
the dangling-orbital energies, their couplings, the resulting levels with
symmetry labels and the band edges, plus how far each knob moves the level.
Figures, widgets and reports only draw these numbers (no plotting here).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

__all__ = ["Mechanism", "mechanism"]


@dataclass(frozen=True, eq=False)
class Mechanism:
    """Ingredients of the orbital-interaction picture of one defect level.

    All energies in eV relative to the host VBM.

    Attributes
    ----------
    case : str
    orbitals : str  — model kind ("hybrid", "sp", ...)
    basis : list of str — basis labels ("Sn12:h", ...)
    onsite : ndarray (nbasis,) — diagonal of H: the dangling-orbital (or atomic) energies
    couplings : list of (i, j, value) — off-diagonal elements |H_ij| > 1 meV, strongest first
    levels : ndarray — all cluster levels; ``labels`` their irreducible representations
    defect_index : int — the first (lowest) member of the defect level's multiplet
    level, sigma : float — the defect level and its 1σ
    cbm : float — conduction-band minimum (gap), nan if unknown
    verdict : str
    knobs : dict — level shift (eV) per knob, e.g. {"breathe −5 %": -0.12, "Sn→Ge": 0.31}
    """

    case: str
    orbitals: str
    basis: list
    onsite: np.ndarray
    couplings: list
    levels: np.ndarray
    labels: list
    defect_index: int
    level: float
    sigma: float
    cbm: float
    verdict: str
    knobs: dict = field(default_factory=dict)

    def orbital_groups(self) -> dict:
        """Mean on-site energy and count per orbital kind ("Sn p", "S s", "Sn hybrid")."""
        out: dict = {}
        for label, e in zip(self.basis, self.onsite):
            atom, orb = label.split(":")
            kind = f"{atom.rstrip('0123456789')} {'hybrid' if orb == 'h' else orb[0]}"
            tot, n = out.get(kind, (0.0, 0))
            out[kind] = (tot + float(e), n + 1)
        return {k: (tot / n, n) for k, (tot, n) in out.items()}

    def multiplets(self) -> list:
        """The levels as multiplets by the model's one degeneracy rule
        (:data:`orbtool.tb._evaluate.DEGENERATE`): list of (mean energy eV, size, indices, label), ascending."""
        from .tb._evaluate import multiplet_bounds

        E = np.asarray(self.levels, dtype=float)
        if not len(E):
            return []
        first, last = multiplet_bounds(E[None])
        out = []
        for a in sorted(set(first[0].tolist())):
            idx = list(range(a, int(last[0, a]) + 1))
            out.append((float(E[idx].mean()), len(idx), idx, self.labels[a] if self.labels else "?"))
        return out

    def summary(self) -> str:
        lines = [f"Mechanism of the defect level in {self.case} ({self.orbitals} model)",
                 f"  defect level  {self.level:+.3f} ± {self.sigma:.3f} eV above the VBM "
                 f"({self.labels[self.defect_index]}), gap {self.cbm:.3f} eV: {self.verdict}",
                 "  orbital energies (eV above the VBM): " + ", ".join(
                     f"{k} ×{n} {e:+.2f}" for k, (e, n) in self.orbital_groups().items())]
        if self.couplings:
            i, j, v = self.couplings[0]
            lines.append(f"  strongest coupling  {self.basis[i]}–{self.basis[j]}: {v:+.3f} eV")
        for k, v in self.knobs.items():
            lines.append(f"  knob {k:<18} moves the level by {v:+.3f} eV")
        return "\n".join(lines)


def mechanism(fit, case=None, knobs: dict | None = None) -> Mechanism:
    """Extract the mechanism of ``case`` from a fitted model.

    Parameters
    ----------
    fit : FitResult
    case : str, optional
        Case name (default: the first case of the fit).
    knobs : dict name -> level shift (eV), optional
        Extra knob effects to carry along (e.g. from
        :meth:`orbtool.family.FamilyAnalysis.knob_effects`). When absent, the
        5 % inward breathing is predicted here.
    """
    from .tb.whatif import _case
    name = _case(fit, case)
    prob = fit.problem
    model = prob.models[name]
    p = {k: float(v[0]) for k, v in prob.case_params(name, fit.values[None]).items()}
    vbm = p.pop("vbm")
    full = model.defaults()
    full.update(p)
    H = np.asarray(model.hamiltonian(full))
    onsite = np.diag(H).real - vbm
    iu = np.triu_indices(H.shape[0], 1)
    vals = H[iu]
    order = np.argsort(-np.abs(vals))
    couplings = [(int(iu[0][k]), int(iu[1][k]), float(vals[k])) for k in order if abs(vals[k]) > 1e-3]
    pred = fit.predict(case=name)
    idx = _defect_multiplet(np.asarray(pred.levels, dtype=float), pred.level)
    kn = dict(knobs or {})
    if not kn:
        # structure knob: the first shell 5 % closer to the site (cluster vectors scaled)
        factor = np.where(np.asarray(model.shell) == 1, 0.95, 1.0)[:, None]
        kn["breathe −5 %"] = fit.predict(geometry=model.vectors * factor, case=name).level - pred.level
    return Mechanism(case=name, orbitals=model.orbitals, basis=model.basis_labels(), onsite=onsite,
                     couplings=couplings, levels=np.asarray(pred.levels), labels=list(pred.labels),
                     defect_index=idx, level=pred.level, sigma=pred.sigma, cbm=pred.cbm, verdict=pred.verdict,
                     knobs=kn)


def _defect_multiplet(levels, level) -> int:
    """First member of the multiplet whose mean energy is ``level`` (the prediction's level is a multiplet
    mean; taking the nearest single level instead would pick a member by rounding noise)."""
    from .tb._evaluate import multiplet_bounds, multiplet_mean

    first, last = multiplet_bounds(levels[None])
    means = multiplet_mean(levels[None], first, last)[0]
    d = np.abs(means - level)
    return int(first[0, int(np.argmax(d <= d.min() + 1e-9))])
