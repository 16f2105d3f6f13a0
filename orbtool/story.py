"""One account per case: the defect state, the model that describes it, its level, label, character,
knobs and how far each knob is backed by data — computed once, read by every surface.

The app (:class:`orbtool.widgets.App`), the CLI, ``fit_summary.txt``, the HTML reports and the
figures all format a :class:`CaseStory`; none of them refits or reselects. When both a family fit
and a per-case fit exist, the story carries both, each named (``"family fit"``, ``"per-case fit"``).

The rule for *the defect state* is :data:`STATE_RULE` (one rule, applied by
:func:`choose_defect_state` everywhere; defined in :mod:`orbtool.analysis.character`, below the fit and
every surface, and re-exported here). Stories are built by
:meth:`orbtool.family.FamilyAnalysis.story` (a family) and
:func:`orbtool.family.case_story` (one case on its own); this module sits below
:mod:`orbtool.family` and imports nothing above it.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from .analysis.character import (  # noqa: F401  (the rule, re-exported)
    RESONANT_MIN_SHELL,
    RESONANT_WINDOW,
    STATE_RULE,
    choose_defect_state,
)
from .errors import OrbtoolError

__all__ = ["STATE_RULE", "RESONANT_WINDOW", "RESONANT_MIN_SHELL", "MODEL_CAUTION", "toxic_caution",
           "choose_defect_state", "ModelAccount", "CaseStory", "build_story", "representative", "DataCoverage",
           "validated_ranges"]

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


# ------------------------------------------------------------------ what the data behind a fit cover
@dataclass(frozen=True)
class DataCoverage:
    """What the fitted cases of a model cover, knob by knob, and what the DFT harness measured.

    Attributes
    ----------
    cases : tuple of str — the fitted cases.
    distance : (float, float) or None — range of the first-shell mean distance to the site over the cases, Å.
    breathing : (float, float) or None — range of the first shell's mean radial displacement over the host
        distance (fraction, negative inward) over the cases that know their host.
    distortion : float or None — largest non-breathing first-shell displacement (norm, Å) among the cases.
    cations : dict — first-shell element → number of fitted cases it occurs in.
    charges : tuple of int — charge states fitted (as the targets record them; empty when they do not).
    motifs : dict — "point group, n-fold" → number of fitted cases.
    harness : tuple of str — what the leave-one-host-out harness measured on real DFT
        (``orbtool/data/knob_validation.json``, through :func:`orbtool.tb.fit.knob_validation_lines`).
    """

    cases: tuple = ()
    distance: tuple | None = None
    breathing: tuple | None = None
    distortion: float | None = None
    cations: dict = field(default_factory=dict)
    charges: tuple = ()
    motifs: dict = field(default_factory=dict)
    harness: tuple = ()

    def lines(self) -> list[tuple[str, str]]:
        """(knob, what backs it) for every knob of the level explorer, in plain text."""
        n = len(self.cases)
        if not n:
            return [("data", "the fit does not say which cases it rests on: every knob is the model's extrapolation")]
        out = []
        if self.distance is None:
            out.append(("breathing", "first-shell distances of the fitted cases unknown"))
        else:
            lo, hi = self.distance
            txt = f"fitted cases span first-shell distances {lo:.3f}–{hi:.3f} Å"
            if self.breathing is not None:
                txt += f", breathing {self.breathing[0]:+.1%} … {self.breathing[1]:+.1%} of the host distance"
            if hi - lo <= 1e-4:
                txt += ": one distance only, so the breathing response is the model's distance law (extrapolation)"
            out.append(("breathing", txt + f" ({n} case{'s' if n > 1 else ''})"))
        if self.distortion is not None:
            out.append(("distortion mode", f"the fitted cases are distorted by at most {self.distortion:.3f} Å "
                        "(norm of the non-breathing first-shell displacement); larger amplitudes are extrapolation"))
        out.append(("coupling scale", "not varied in the data (the fitted couplings are one value per parameter): "
                    "the slider explores the model only"))
        out.append(("on-site offset", "not varied in the data: the slider explores the model only"))
        out.append(("swap cation", "first-shell elements fitted: " + ", ".join(
            f"{el} ({k} case{'s' if k > 1 else ''})" for el, k in self.cations.items())
            + "; any other element is a term-value extrapolation"))
        out.append(("charge", "charge states fitted: " + (", ".join(f"{q:+d}" for q in self.charges) if self.charges
                                                            else "not recorded in the targets")))
        out.append(("site motif", "; ".join(f"{m} ({k})" for m, k in self.motifs.items())))
        out.append(("harness", " ".join(self.harness) if self.harness else
                    "no measurement of the knobs on real DFT is bundled (orbtool/data/knob_validation.json)"))
        return out


def validated_ranges(fit) -> DataCoverage:
    """What the data behind ``fit`` cover: the range of each knob across the fitted cases (first-shell distance
    and breathing, distortion, cations, charges, site motifs) and what the DFT harness measured.

    Not the optimiser's parameter bounds: those say where the fit may search, not where it was checked.

    Parameters
    ----------
    fit : FitResult — its ``problem`` names the fitted cases (``by_case``: targets with site and charge;
        ``models``: the case's cluster).

    Returns
    -------
    DataCoverage
    """
    prob = getattr(fit, "problem", None)
    by_case = dict(getattr(prob, "by_case", None) or {})
    models = dict(getattr(prob, "models", None) or {})
    try:
        from .tb.fit import knob_validation_lines

        harness = tuple(knob_validation_lines())
    except (ImportError, KeyError, TypeError):
        harness = ()
    cases = tuple(c for c in by_case if c in models)
    if not cases:
        return DataCoverage(harness=harness)
    dist, breathe, distort, charges = [], [], [], set()
    cations: dict = {}
    motifs: dict = {}
    for c in cases:
        model = models[c]
        first = np.asarray(model.shell) == 1
        dist.append(float(np.linalg.norm(np.asarray(model.vectors)[first], axis=1).mean()))
        for el in sorted({model.elements[i] for i in np.flatnonzero(first)}):
            cations[el] = cations.get(el, 0) + 1
        motif = f"{model.point_group}, {int(first.sum())}-fold"
        motifs[motif] = motifs.get(motif, 0) + 1
        targets = by_case[c]
        q = next((t.charge for t in targets if getattr(t, "charge", None) is not None), None)
        if q is not None:
            charges.add(int(q))
        site = next((t.site for t in targets if getattr(t, "site", None) is not None), None)
        desc = {}
        if site is not None and hasattr(site, "descriptors"):
            try:
                desc = site.descriptors()
            except (OrbtoolError, ValueError, AttributeError):
                desc = {}
        if "breathing_fraction" in desc:
            breathe.append(float(desc["breathing_fraction"]))
        if "distortion_total" in desc:
            distort.append(float(desc["distortion_total"]))
    return DataCoverage(cases=cases, distance=(min(dist), max(dist)),
                        breathing=(min(breathe), max(breathe)) if breathe else None,
                        distortion=max(distort) if distort else None, cations=dict(sorted(cations.items())),
                        charges=tuple(sorted(charges)), motifs=dict(sorted(motifs.items())), harness=harness)
