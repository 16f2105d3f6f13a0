"""Fit targets: what the DFT in-gap state analysis says about one defect level."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..errors import FitError

__all__ = ["Target", "targets_from_case"]


@dataclass(frozen=True, eq=False)
class Target:
    """Observed properties of one defect level of one case, each with an uncertainty.

    Attributes
    ----------
    case : str
        Case name (per-case parameters are keyed by it).
    above_vbm : float
        Level energy above the valence-band maximum (eV).
    sigma_level : float
        Its uncertainty (eV).
    s_fraction : float or None
        s/(s+p) character of the state (dimensionless), compared with the model's.
    sigma_s : float
    shell1 : float or None
        Fraction of the state on the first shell, normalised over shells 1+2 (full clusters only).
    sigma_shell : float
    gap : float or None
        Band gap of the case (eV), for deep/shallow verdicts.
    weight : float
        Multiplies every residual of this target (1 = as given).
    site : VacancySite-like or None
        The site of this case (the fit builds the case's cluster from it); None = the model's own site.
    labels : dict
        Free labels (cation, anion, ...).
    charge : int or None
        Charge state of the case (sets the formal electron count of the hybrid model); None = the model's.
    degeneracy : int or None
        Number of bands in the DFT state's degenerate multiplet (its identity: the hybrid model's
        ``level="auto"`` follows the lowest cluster multiplet of this size; None = formal counting).
    occupation : float or None
        Electrons in the DFT multiplet (reported with the fit; no rule derives them from valences).
    """

    case: str
    above_vbm: float
    sigma_level: float = 0.05
    s_fraction: float | None = None
    sigma_s: float = 0.05
    shell1: float | None = None
    sigma_shell: float = 0.05
    gap: float | None = None
    weight: float = 1.0
    site: object = None
    labels: dict = field(default_factory=dict)
    charge: int | None = None
    degeneracy: int | None = None
    occupation: float | None = None

    def __post_init__(self):
        for name in ("above_vbm", "sigma_level", "sigma_s", "sigma_shell", "weight"):
            v = getattr(self, name)
            if not np.isfinite(v):
                raise FitError(f"target {self.case!r}: {name} must be finite, got {v!r}")
        for name in ("sigma_level", "sigma_s", "sigma_shell"):
            if getattr(self, name) <= 0:
                raise FitError(f"target {self.case!r}: {name} must be positive")
        if self.weight < 0:
            raise FitError(f"target {self.case!r}: weight must be non-negative")
        for name in ("s_fraction", "shell1", "gap"):
            v = getattr(self, name)
            if v is not None and not np.isfinite(v):
                raise FitError(f"target {self.case!r}: {name} must be finite or None, got {v!r}")


def _first_shell_sp(state, site):
    """s/(s+p) of the state on the first-shell atoms (the dangling orbitals' character); a DefectState of a
    degenerate multiplet carries the weights of the sum of its projectors. None when the site or the
    per-atom, per-orbital weights are missing."""
    first = [int(nb.index) for nb in (getattr(site, "first_shell", None) or ())]
    ao = getattr(state, "atom_orbital", None)
    names = tuple(getattr(state, "orbital_names", ()) or ())
    if not first or ao is None or not names or max(first) >= np.asarray(ao).shape[0]:
        return None
    w = np.asarray(ao, dtype=float)[first].sum(axis=0)
    s_w = float(sum(w[k] for k, n in enumerate(names) if n == "s"))
    p_w = float(sum(w[k] for k, n in enumerate(names) if n in ("p", "px", "py", "pz")))
    return s_w / (s_w + p_w) if s_w + p_w > 0 else None


def _identity(state):
    """(bands in the multiplet, electrons in it) of a DefectState; (None, None) for a state that does not
    say which bands it holds (a hand-made record: the model then counts electrons formally)."""
    bands = getattr(state, "bands", None)
    if not bands:
        return None, None
    occ = getattr(state, "occupation", None)
    return len(tuple(bands)), (None if occ is None else float(occ))


def _state_targets(name, state, site, sigma_level, sigma_s, sigma_shell, use_character, labels, charge):
    above = float(state.above_vbm)
    s_frac = shell1 = None
    ow = getattr(state, "orbital_weights", None) or {}
    first_sp = _first_shell_sp(state, site) if use_character else None
    if first_sp is not None:
        s_frac = first_sp
    elif use_character and ("s" in ow and "p" in ow) and (ow["s"] + ow["p"]) > 0:
        s_frac = float(ow["s"] / (ow["s"] + ow["p"]))
    sf = getattr(state, "shell_fractions", None) or {}
    if use_character and sf.get(1) is not None and sf.get(2) is not None and (sf[1] + sf[2]) > 0:
        shell1 = float(sf[1] / (sf[1] + sf[2]))
    gap = None
    edges = getattr(state, "edges", None)
    if edges is not None and getattr(edges, "gap", None) is not None:
        gap = float(edges.gap)
    elif getattr(state, "below_cbm", None) is not None:
        gap = above + float(state.below_cbm)
    degeneracy, occupation = _identity(state)
    return Target(case=name, above_vbm=above, sigma_level=sigma_level, s_fraction=s_frac, sigma_s=sigma_s,
                  shell1=shell1, sigma_shell=sigma_shell, gap=gap, site=site, labels=dict(labels),
                  charge=charge, degeneracy=degeneracy, occupation=occupation)


def targets_from_case(case, site=None, state=None, *, sigma_level: float = 0.05, sigma_s: float = 0.05,
                      sigma_shell: float = 0.05, use_character: bool = True) -> list[Target]:
    """Targets for one :class:`~orbtool.case.DefectCase` from its in-gap state analysis.

    Parameters
    ----------
    case : DefectCase
    site : VacancySite, optional
        Located with ``orbtool.analysis.locate_vacancy`` when not given.
    state : DefectState or list of them, optional
        Default: the defect state by the one rule of :func:`orbtool.analysis.choose_defect_state`
        (a whole degenerate multiplet; a resonant level just outside the gap chosen by character when the
        gap holds none), the same state :func:`orbtool.family.analyze_case` reports.
    sigma_level, sigma_s, sigma_shell : float
        Uncertainties assigned to the level (eV) and to the character fractions.
    use_character : bool
        Also fit the s/(s+p) character and the first-shell fraction when available.

    Each target carries its state's identity: the number of bands in the multiplet and the electrons in it
    (``Target.degeneracy``, ``Target.occupation``), from the DefectState itself.
    """
    if site is None:
        from ..analysis import locate_vacancy  # lazy: tb depends on analysis only here

        if getattr(case, "host", None) is None:
            raise FitError(f"case {case.name!r} has no host structure: pass site=... explicitly")
        site = locate_vacancy(case.host, case.defect)
    if state is None:
        from ..analysis import defect_state

        state, _, found = defect_state(case, site)
        if state is None:
            raise FitError(f"case {case.name!r}: no in-gap state (nor a resonant level with most of its weight on "
                           f"the first shell) found; pass state=... explicitly")
    states = state if isinstance(state, (list, tuple)) else [state]
    labels = getattr(case, "labels", {}) or {}
    charge = getattr(case, "charge", None)
    return [_state_targets(case.name, s, site, sigma_level, sigma_s, sigma_shell, use_character, labels, charge)
            for s in states]
