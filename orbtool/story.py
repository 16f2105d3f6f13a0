"""One account per case: the defect state, the model that describes it, its level, label, character,
knobs and how far each knob is backed by data — computed once, read by every surface.

The app (:class:`orbtool.widgets.App`), the CLI, ``fit_summary.txt``, the HTML reports and the
figures all format a :class:`CaseStory`; none of them refits or reselects. When both a family fit
and a per-case fit exist, the story carries both, each named (``"family fit"``, ``"per-case fit"``).

The rule for *the defect state* is :data:`STATE_RULE` (one rule, applied by
:func:`choose_defect_state` everywhere). Stories are built by
:meth:`orbtool.family.FamilyAnalysis.story` (a family) and
:func:`orbtool.family.case_story` (one case on its own); this module sits below
:mod:`orbtool.family` and imports nothing above it.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from .errors import OrbtoolError

__all__ = ["STATE_RULE", "RESONANT_WINDOW", "RESONANT_MIN_SHELL", "MODEL_CAUTION", "toxic_caution",
           "choose_defect_state", "ModelAccount", "CaseStory", "build_story", "representative"]

#: how far outside the gap (eV) a level may lie and still be the defect state (resonant level)
RESONANT_WINDOW = 0.3
#: first-shell weight a resonant level needs to count as the vacancy's level: most of it on the vacancy's
#: neighbours (common practice for "localised"; the demo-data tests use the same 50 %)
RESONANT_MIN_SHELL = 0.5

STATE_RULE = ("the defect state is the level — a whole degenerate multiplet — with the largest weight on the "
              "vacancy's first neighbour shell, among the levels in the gap; when the gap holds none, a level "
              f"up to {RESONANT_WINDOW} eV outside it (resonant) with at least {RESONANT_MIN_SHELL:.0%} on the "
              "first shell, its energy used as it is")

MODEL_CAUTION = ("Model predictions are not measurements: the fitted tight-binding model interpolates the DFT data "
                 "it was given and inherits its approximations (band gaps, self-interaction). Confirm candidates "
                 "with full calculations and experiment.")


def toxic_caution(elements) -> str:
    """Caution text for a family containing toxic elements (empty if none)."""
    if not elements:
        return ""
    return (f"This family contains {', '.join(elements)}: toxic elements whose synthesis, handling and disposal "
            "are governed by local regulations and licensed laboratory practice. orbtool gives no advice on "
            "handling; follow your institution's safety office.")


def choose_defect_state(states):
    """The defect state among ``states`` by :data:`STATE_RULE` (None if empty).

    Ties on the first-shell weight go to spin up, then to the deeper level (lower energy), so the
    choice is a total order and does not depend on the order of ``states``.
    """
    states = list(states)
    if not states:
        return None
    return max(states, key=lambda s: (round(float(s.shell_fractions.get(1, 0.0)), 9), -int(s.spin),
                                      -float(s.above_vbm)))


@dataclass(frozen=True, eq=False)
class ModelAccount:
    """What one fitted model says about the defect level of one case.

    Attributes
    ----------
    name : str — ``"family fit"`` or ``"per-case fit"``.
    fit : FitResult
    kind : str — cluster kind ("hybrid", "sp").
    why : str — why this kind was kept (AIC values, or the kind asked for).
    level, sigma : float — defect level above the VBM and its 1σ, eV.
    label : str — irreducible representation of the defect level.
    verdict : str
    character : dict — s/p/d, first-shell and dangling weights of the level.
    dangling : dict — orbital kind → (mean on-site energy above the VBM in eV, count).
    dangling_energy : float — on-site energy (eV above the VBM) of the orbital kind closest to the level:
        the uncoupled dangling orbitals the level is built from.
    knobs : dict — knob name → level shift (eV): ``"breathe −5 %"`` and ``"Sn→Ge"``-style swaps.
    swaps : list of str — the swaps considered (``"Sn→Ge"``), same order as in ``knobs``.
    validation : dict — knob name → what the fitted data cover for it (text).
    """

    name: str
    fit: Any
    kind: str
    why: str
    level: float
    sigma: float
    label: str
    verdict: str
    character: dict
    dangling: dict
    dangling_energy: float
    knobs: dict
    swaps: list
    validation: dict


@dataclass(eq=False)
class CaseStory:
    """The account of one case every surface shows.

    Attributes
    ----------
    name, charge, labels : identity of the case.
    state : DefectState or None — the defect state by :data:`STATE_RULE`.
    resonant : bool — the state lies outside the gap (chosen by character).
    rule : str — :data:`STATE_RULE`.
    models : list of ModelAccount — the family fit first (when the case is in it), then a per-case fit.
    notes : list of str
    """

    name: str
    charge: int
    labels: dict
    state: Any = None
    resonant: bool = False
    rule: str = STATE_RULE
    models: list = field(default_factory=list)
    notes: list = field(default_factory=list)

    @property
    def model(self) -> ModelAccount | None:
        """The model the surfaces show (the first of :attr:`models`)."""
        return self.models[0] if self.models else None

    @property
    def dft_level(self) -> float | None:
        """The DFT defect state's energy above the VBM, eV."""
        return None if self.state is None else float(self.state.above_vbm)

    def summary(self) -> str:
        """The story in a few lines (every surface prints this text)."""
        lines = [f"Defect state of {self.name} (q = {self.charge:+d})"]
        st = self.state
        if st is None:
            lines.append("  no defect state: " + self.rule)
            return "\n".join(lines + [f"  note: {n}" for n in self.notes])
        deg = f"{st.degeneracy}-fold multiplet" if getattr(st, "degeneracy", 1) > 1 else "single level"
        where = "RESONANT (outside the gap)" if self.resonant else "in the gap"
        lines.append(f"  DFT state     {st.above_vbm:+.3f} eV above the VBM, {deg}, {where}, first shell "
                     f"{st.shell_fractions.get(1, 0.0):.0%}, occupation {st.occupation:.2f} e")
        lines.append(f"  rule          {self.rule}")
        for m in self.models:
            lines.append(f"  {m.name:<13} {m.kind} cluster ({m.why}): level {m.level:+.3f} ± {m.sigma:.3f} eV, "
                         f"label {m.label}, {m.verdict}")
            lines.append("                dangling orbitals " + ", ".join(
                f"{k} ×{n} {e:+.2f} eV" for k, (e, n) in m.dangling.items()))
            for k, v in m.knobs.items():
                val = "not predicted" if v is None else f"{v:+.3f} eV"
                lines.append(f"                knob {k:<14} {val}  [{m.validation.get(k, '')}]")
        lines += [f"  note: {n}" for n in self.notes]
        return "\n".join(lines)

    def to_dict(self) -> dict:
        st = self.state
        return {"case": self.name, "charge": self.charge, "rule": self.rule, "resonant": self.resonant,
                "dft_level": self.dft_level, "bands": list(getattr(st, "bands", ())) if st is not None else [],
                "models": [{k: getattr(m, k) for k in ("name", "kind", "why", "level", "sigma", "label", "verdict",
                                                       "character", "dangling_energy", "knobs", "swaps",
                                                       "validation")} for m in self.models],
                "notes": list(self.notes)}


def _dangling_groups(fit, name):
    from .mechanism import mechanism
    return mechanism(fit, name, knobs={"none": 0.0}).orbital_groups()


def _swap_candidates(old, cations, source) -> list[str]:
    """The family's other cations (data behind them), then every element of the fit's term-value table with
    the same valence-electron count as ``old`` (model only), each once."""
    from .tb.elements import available_elements, valence_electrons
    out = [c for c in cations if c != old]
    try:
        ve = valence_electrons(old)
        table = available_elements(source)
    except (OrbtoolError, KeyError, ValueError):
        return out
    for el in table:
        try:
            same = el != old and valence_electrons(el) == ve
        except (OrbtoolError, KeyError, ValueError):
            same = False
        if same and el not in out:
            out.append(el)
    return out


def _account(name_of_model, fit, why, analysis, *, cations=(), fitted_cations=(), distances=None) -> ModelAccount:
    """Evaluate ``fit`` once for ``analysis.name``: level, label, dangling orbitals, knobs, validation."""
    case = analysis.name
    pred = fit.predict(case=case)
    groups = _dangling_groups(fit, case)
    dangling_energy = min((e for e, _ in groups.values()), key=lambda e: abs(e - pred.level))
    knobs: dict = {}
    validation: dict = {}
    model = fit.problem.models[case]
    try:  # structure knob: the first shell 5 % closer to the site (cluster vectors scaled, as in mechanism())
        factor = np.where(np.asarray(model.shell) == 1, 0.95, 1.0)[:, None]
        knobs["breathe −5 %"] = fit.predict(geometry=model.vectors * factor, case=case).level - pred.level
    except (OrbtoolError, AttributeError) as exc:
        knobs["breathe −5 %"] = None
        validation["breathe −5 %"] = f"not predicted: {exc}"
    if "breathe −5 %" not in validation:
        d = (analysis.descriptors or {}).get("site_distance_mean")
        if distances and d and max(distances) - min(distances) > 1e-4:
            lo, hi = min(distances), max(distances)
            after = 0.95 * d
            inside = lo - 1e-9 <= after <= hi + 1e-9
            validation["breathe −5 %"] = (f"fitted cases span first-shell distances {lo:.3f}–{hi:.3f} Å; −5 % gives "
                                          f"{after:.3f} Å: " + ("inside the data" if inside else "extrapolation"))
        else:
            validation["breathe −5 %"] = ("the fitted cases have one first-shell distance only: the breathing response "
                                          "is the model's Slater–Koster distance law, not fitted (extrapolation)")
    first = sorted({model.elements[i] for i, sh in enumerate(model.shell) if sh == 1})
    own = analysis.labels.get("cation")
    old = own if own in first else (first[0] if first else None)
    swaps = []
    if old is not None:
        for new in _swap_candidates(old, cations, model.term_source):
            if new == old:
                continue
            key = f"{old}→{new}"
            swaps.append(key)
            try:
                knobs[key] = fit.predict(swap={old: new}, case=case).level - pred.level
                validation[key] = (f"{new} on-site offset fitted to DFT cases of this family" if new in fitted_cations
                                   else f"{new} from the term-value table only (no fitted {new} case): extrapolation")
            except OrbtoolError as exc:
                knobs[key] = None
                validation[key] = f"not predicted: {exc}"
    ch = dict(pred.character or {})
    return ModelAccount(name=name_of_model, fit=fit, kind=model.orbitals, why=why, level=float(pred.level),
                        sigma=float(pred.sigma), label=str(ch.get("label", "?")), verdict=pred.verdict, character=ch,
                        dangling=groups, dangling_energy=float(dangling_energy), knobs=knobs, swaps=swaps,
                        validation=validation)


def build_story(analysis, fits=(), *, cations=(), fitted_cations=(), distances=None) -> CaseStory:
    """The story of one :class:`~orbtool.family.CaseAnalysis`.

    Parameters
    ----------
    analysis : CaseAnalysis
    fits : sequence of (name, FitResult, why)
        Models that include this case, in the order the surfaces should show them.
    cations : sequence of str
        Elements offered as cation swaps (the family's cations).
    fitted_cations : sequence of str
        Cations with fitted DFT cases (their swap is backed by data).
    distances : sequence of float, optional
        First-shell mean distances (Å) of the fitted cases (the data the structure knob rests on).
    """
    story = CaseStory(analysis.name, analysis.charge, dict(analysis.labels), state=analysis.state,
                      resonant=bool(getattr(analysis, "resonant", False)))
    if analysis.state is None:
        story.notes.append(analysis.error or "no defect state found by the rule")
        return story
    for name, fit, why in fits:
        if fit is None or case_not_in(fit, analysis.name):
            continue
        try:
            story.models.append(_account(name, fit, why, analysis, cations=cations, fitted_cations=fitted_cations,
                                         distances=distances))
        except OrbtoolError as exc:
            story.notes.append(f"{name}: not evaluated: {exc}")
    if len(story.models) > 1:
        a, b = story.models[0], story.models[1]
        story.notes.append(f"{a.name} and {b.name} differ by {b.level - a.level:+.3f} eV in the level"
                           + ("" if a.label == b.label else f" and label ({a.label} vs {b.label})"))
    return story


def case_not_in(fit, name) -> bool:
    return name not in getattr(fit.problem, "by_case", {})


def representative(res, fit=None):
    """The case the single-case figures and the app show first: among the fitted cases (all cases with a
    defect state when there is no fit), a relaxed neutral one (not a what-if variant) with the deepest level."""
    cands = [r for r in res.results if r.ok and r.state is not None and (fit is None or r.name in res.fit_cases)]
    if not cands:
        return None

    def key(r):
        plain = str(r.labels.get("variant", "relaxed")) in ("relaxed", "", "None")
        return (plain, r.charge == 0, min(r.state.above_vbm, r.state.below_cbm), r.name)
    return max(cands, key=key)
