"""Batch analysis of a chemical family and the family table.

:func:`analyze_family` (defined in :mod:`orbtool.batch`, re-exported here)
runs :func:`analyze_case` on every case — in worker processes by default, or
on a ``dask.distributed`` cluster — and collects a :class:`FamilyAnalysis`: one row per case (geometry
descriptors, the in-gap state and its character), errors per case without
stopping the others, a shared tight-binding fit, transition levels, SRH
factors and trends.
"""

from __future__ import annotations

import csv
import io
import json
import math
import time
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from .errors import OrbtoolError

__all__ = ["CaseAnalysis", "FamilyAnalysis", "analyze_case", "case_story", "TOXIC_ELEMENTS",
           "clean_for_json"]

#: elements whose presence adds a handling caution to reports (common practice: the
#: heavy-metal and metalloid hazards named in most chemical-safety regulations)
TOXIC_ELEMENTS = ("Pb", "Cd", "Tl", "Hg", "As", "Se", "Te", "Sb", "Be", "Cr", "Ba")


@dataclass(eq=False)
class CaseAnalysis:
    """What orbtool found for one case.

    Attributes
    ----------
    name, labels, charge : the case's identity.
    site : VacancySite or None
    states : list of DefectState (in-gap states, may be empty: no deep level)
    state : DefectState or None — the defect state by :data:`orbtool.story.STATE_RULE`
    resonant : bool — the defect state lies just outside the gap (chosen by character)
    descriptors : dict of float — geometry descriptors of the site
    moments : dict — first-shell PDOS moments host vs defect (may be empty)
    error : str or None — why the analysis stopped, if it did
    notes : list of str — guesses and warnings
    seconds : float — wall time
    """

    name: str
    labels: dict
    charge: int
    site: Any = None
    states: list = field(default_factory=list)
    state: Any = None
    resonant: bool = False
    descriptors: dict = field(default_factory=dict)
    moments: dict = field(default_factory=dict)
    error: str | None = None
    notes: list = field(default_factory=list)
    seconds: float = 0.0

    @property
    def ok(self) -> bool:
        return self.error is None

    def summary(self) -> str:
        """The case's result in a few lines, with every note (guesses included)."""
        head = f"{self.name} (q = {self.charge:+d}): "
        if not self.ok:
            return head + f"not analysed — {self.error}"
        lines = [head + f"vacancy of {self.site.element}, {len(self.site.first_shell)} first neighbours, "
                 f"point group {self.site.point_group}; {len(self.states)} in-gap state(s)"]
        if self.state is not None:
            s = self.state
            lines.append(f"  defect state  {s.above_vbm:+.3f} eV above the VBM, {s.below_cbm:.3f} eV below the CBM, "
                         f"occupation {s.occupation:.2f}, first shell {s.shell_fractions.get(1, 0.0):.0%}")
        lines += [f"  note: {n}" for n in self.notes]
        return "\n".join(lines)


def _first_shell_moments(case, site) -> dict:
    """Change of the first-shell PDOS moments host → defect (Cyrot-Lackmann moments theorem)."""
    if case.defect_pdos is None or case.host_pdos is None:
        return {}
    from .analysis.shell_moments import neighbour_moments
    res = neighbour_moments(case, site=site)
    return res.to_dict() if hasattr(res, "to_dict") else dict(res)


def analyze_case(case) -> CaseAnalysis:
    """Locate the vacancy, find the in-gap states and summarise one case.

    Errors that belong to the input (no host, no vacancy, no gap …) are
    recorded in :attr:`CaseAnalysis.error` instead of raised, so a family
    batch continues past a broken case.
    """
    t0 = time.perf_counter()
    out = CaseAnalysis(case.name, dict(case.labels), case.charge)
    try:
        from .analysis import defect_state, locate_vacancy
        if case.host is None:
            raise OrbtoolError("no host structure: the vacancy cannot be located")
        out.site = locate_vacancy(case.host, case.defect)
        out.descriptors = dict(out.site.descriptors())
        out.state, out.resonant, states = defect_state(case, out.site)
        out.states = list(states)
        st = out.state
        if st is not None and not out.resonant and len(out.states) > 1:  # a choice: say which state and why
            which = (f"band {st.band}" if len(st.bands) == 1 else
                     f"the {len(st.bands)}-fold multiplet of bands {', '.join(str(b) for b in st.bands)}")
            out.notes.append(f"{len(out.states)} in-gap levels; the defect state is taken to be {which} spin {st.spin} "
                             f"at VBM + {st.above_vbm:.3f} eV, the one with the largest first-shell weight "
                             f"({st.shell_fractions.get(1, 0.0):.2f})")
        elif st is not None and out.resonant:
            side, by = (("below the VBM", -st.above_vbm) if st.above_vbm < 0 else ("above the CBM", -st.below_cbm))
            out.notes.append(f"no level in the gap; the defect state is the resonant level {by:.3f} eV {side} "
                             f"(first shell {st.shell_fractions.get(1, 0.0):.2f}), chosen by character")
        elif st is None:
            out.notes.append("no state in the gap: the vacancy leaves no deep Kohn–Sham level")
        try:
            out.moments = _first_shell_moments(case, out.site)
        except OrbtoolError as exc:
            out.notes.append(f"moments skipped: {exc}")
    except OrbtoolError as exc:
        out.error = str(exc)
    out.seconds = time.perf_counter() - t0
    return out


def case_story(case, **fit_options):
    """Analyse one case on its own (:func:`analyze_case`), fit it with the same model choice as a family
    (:meth:`FamilyAnalysis.shared_fit`: hybrid vs sp by AIC) and return its
    :class:`~orbtool.story.CaseStory`, the fit named ``"per-case fit"``."""
    from .case import Family
    fa = FamilyAnalysis(Family((case,), name=case.name), [analyze_case(case)])
    return fa.story(case.name, **fit_options)


def _num(x):
    if x is None:
        return None
    try:
        v = float(x)
    except (TypeError, ValueError):
        return x
    return v if math.isfinite(v) else None


@dataclass(eq=False)
class FamilyAnalysis:
    """The family's results, one :class:`CaseAnalysis` per case, plus the
    family-level steps (shared fit, transition levels, trends) computed on
    demand and kept."""

    family: Any
    results: list
    fit_result: Any = None
    fit_cases: list = field(default_factory=list)
    levels: dict = field(default_factory=dict)
    notes: list = field(default_factory=list)
    fit_why: str = ""

    def __post_init__(self):
        self.stories: dict = {}  # (name, per_case) → CaseStory; a cache, not saved with a session

    def __getitem__(self, name) -> CaseAnalysis:
        for r in self.results:
            if r.name == name:
                return r
        raise KeyError(name)

    @property
    def errors(self) -> dict[str, str]:
        return {r.name: r.error for r in self.results if r.error}

    def toxic_elements(self) -> list[str]:
        """Elements of :data:`TOXIC_ELEMENTS` present in the family."""
        present = self.family.elements()
        return [e for e in TOXIC_ELEMENTS if e in present]

    # --------------------------------------------------------------- fitting
    def shared_fit(self, orbitals: str = "auto", charge: int | None = 0, per_case=(), free=None, **fit_options):
        """One tight-binding model fitted across the family.

        Each case contributes its defect state (level above the VBM and its
        character) as a target; the coupling law is shared and every cation
        after the first gets its own on-site offset (``shift_<element>``), so
        the chemistry knob is measured, not assumed. Only cases in charge
        state ``charge`` are used (the model has no charge dependence);
        ``None`` uses every case.

        ``orbitals="auto"`` fits the reduced defect molecule (``"hybrid"``) and
        the full s/p cluster of the first two shells (``"sp"``) and keeps the
        one with the lower AIC (Akaike, IEEE Trans. Autom. Control 19, 716
        (1974)); the choice and both AIC values are recorded in :attr:`notes`.
        """
        from . import tb
        use = [r for r in self.results if r.ok and r.state is not None and (charge is None or r.charge == charge)]
        if not use:
            raise OrbtoolError("no case has an in-gap defect state to fit"
                               + (f" in charge state {charge:+d}" if charge is not None else ""))
        targets = []
        for r in use:
            targets += tb.targets_from_case(self.family[r.name], r.site, r.state)
        cations = []
        for r in use:
            c = r.labels.get("cation")
            if c and c not in cations:
                cations.append(c)
        kinds = ("hybrid", "sp") if orbitals == "auto" else (orbitals,)
        fits = {}
        for kind in kinds:
            model = tb.ClusterModel.around(use[0].site, orbitals=kind)
            names = {p.name for p in model.with_site(use[0].site).parameters()}
            chosen = free
            if chosen is None:
                chosen = ["vbm", "coupling_scale"] + [f"shift_{c}" for c in cations[1:]]
                chosen = [n for n in chosen if n == "vbm" or n in names or n.startswith("shift_")]
            try:
                fits[kind] = tb.fit(model, targets, per_case=per_case, free=chosen, **fit_options)
            except OrbtoolError as exc:
                self.notes.append(f"{kind} model not fitted: {exc}")
        if not fits:
            raise OrbtoolError("no cluster model could be fitted: " + "; ".join(self.notes[-len(kinds):]))
        best = min(fits, key=lambda k: fits[k].aic)
        if len(fits) > 1:
            self.fit_why = "chosen by AIC: " + ", ".join(
                f"{k} {f.aic:.1f}" + (" (kept)" if k == best else "") for k, f in fits.items())
            self.notes.append("model " + self.fit_why)
        else:
            self.fit_why = f"{best} model as asked" if orbitals != "auto" else f"only the {best} model could be fitted"
        self.fit_result = fits[best]
        self.fit_cases = [r.name for r in use]
        self.stories = {}
        return self.fit_result

    # ----------------------------------------------------------------- story
    def story(self, name, *, per_case: bool = False, **fit_options):
        """The :class:`orbtool.story.CaseStory` of case ``name``, computed once and kept.

        The shared fit (fitted here with ``fit_options`` if not yet done) is the ``"family fit"``;
        a family of one case calls it the ``"per-case fit"``. With ``per_case=True`` the case is also
        fitted on its own (same model choice) and that fit is carried second, named ``"per-case fit"``.
        """
        from .story import build_story
        key = (name, per_case)
        cache = self.__dict__.setdefault("stories", {})
        if key in cache:
            return cache[key]
        r = self[name]
        fits = []
        if r.ok and r.state is not None:
            if self.fit_result is None:
                try:
                    self.shared_fit(**({"charge": None} if len(self.results) == 1 else {}), **fit_options)
                except OrbtoolError as exc:
                    self.notes.append(f"shared fit not possible: {exc}")
            single = len(self.results) == 1
            if self.fit_result is not None and name in self.fit_cases:
                fits.append(("per-case fit" if single else "family fit", self.fit_result, self.fit_why))
            if per_case and not single:
                own = case_story(self.family[name], **fit_options)
                fits += [(m.name, m.fit, m.why) for m in own.models]
        fitted = [self[n] for n in self.fit_cases]
        distances = [x.descriptors.get("site_distance_mean") for x in fitted]
        distances = [float(d) for d in distances if d is not None and math.isfinite(float(d))]
        story = build_story(r, fits, cations=[c for c in self.family.label_values("cation") if c],
                            fitted_cations=sorted({x.labels.get("cation") for x in fitted if x.labels.get("cation")}),
                            distances=distances)
        if r.ok and r.state is not None and not story.models and self.fit_result is not None:
            story.notes.append(f"{name} is not part of the family fit (fitted: cases in the fitted charge state)")
        cache[key] = story
        return story

    # ------------------------------------------------------- thermodynamics
    def transition_levels(self, *, srh: dict | None = None):
        """Formation diagrams (grouped by the ``defect`` label), joined with the
        Kohn–Sham state and SRH factors (:class:`orbtool.levels.DefectLevels`).

        Chemical potentials come from ``family.references["mu"]`` (absolute,
        eV/atom); a ``dielectric`` reference (scalar, 3×3, or a table keyed by the
        ``defect``, ``motif`` or ``cation`` label)
        switches on the charged-cell correction. SRH conditions default to the illustrative values in
        ``srh`` (masses 0.3 mₑ, σ = 1e-15 cm², N_t = 1e15 cm⁻³, 300 K); the
        *ratio* to a mid-gap trap that orbtool reports hardly depends on them.
        """
        from . import levels as lv
        refs = self.family.references or {}
        mu = refs.get("mu")
        conditions = {"electron_mass": 0.3, "hole_mass": 0.3, "sigma": 1e-15, "trap_density": 1e15,
                      "temperature": 300.0, **(srh or {})}
        groups: dict[str, list] = {}
        for r in self.results:
            key = r.labels.get("defect") or r.name
            groups.setdefault(key, []).append(r)
        out = {}
        for key, members in groups.items():
            ok = [m for m in members if m.ok]
            if not ok:
                continue
            base = min(ok, key=lambda m: abs(m.charge))
            edges = base.state.edges if base.state is not None else None
            if edges is None:
                from .analysis import band_edges
                c = self.family[base.name]
                src = c.host_projections or c.host_pdos
                if src is None:
                    continue
                edges = band_edges(src)
            gap = float(edges.gap)
            diagram = None
            cases = [self.family[m.name] for m in ok]
            if mu and all(c.total_energy is not None and c.host_total_energy is not None for c in cases):
                try:
                    # charged-cell correction (Ewald point charge + alignment) when the manifest gives a
                    # dielectric constant; without one the energies are used as given (and the diagram says so)
                    diel = refs.get("dielectric")
                    if isinstance(diel, dict):  # a table keyed by defect group, motif or cation label
                        diel = next((diel[base.labels[k]] for k in ("defect", "motif", "cation")
                                     if base.labels.get(k) in diel), None)
                    pos = base.site.position if base.site is not None else None
                    diagram = lv.formation_energies(cases, mu, vbm=float(edges.vbm), gap=gap, name=key,
                                                    dielectric=diel, defect_position=pos)
                except OrbtoolError as exc:
                    self.notes.append(f"{key}: formation energies skipped: {exc}")
            try:
                mat = lv.Semiconductor.from_masses(gap, conditions["electron_mass"], conditions["hole_mass"],
                                                   conditions["temperature"])
                rec = lv.TrapRecombination.from_capture(mat, conditions["sigma"], conditions["sigma"],
                                                        conditions["trap_density"])
                out[key] = lv.DefectLevels.build(key, state=base.state, diagram=diagram, recombination=rec, gap=gap)
            except OrbtoolError as exc:
                self.notes.append(f"{key}: levels skipped: {exc}")
        self.levels = out
        return out

    # ----------------------------------------------------------------- table
    def table(self) -> list[dict]:
        """One flat row per case: labels, geometry, state, character, levels."""
        rows = []
        for r in self.results:
            row: dict[str, Any] = {"name": r.name, "charge": r.charge, **{k: v for k, v in r.labels.items()}}
            row["status"] = "ok" if r.ok else "error"
            row["error"] = r.error or ""
            if r.site is not None:
                row["removed"] = r.site.element
                row["point_group"] = r.site.point_group
                row["n_first_shell"] = len(r.site.first_shell)
                for k, v in r.descriptors.items():
                    row[k] = _num(v)
            if r.moments:
                # host → defect change of the first-shell PDOS moments (Cyrot-Lackmann moments theorem)
                row["shell1_centre_shift"] = _num(r.moments.get("mean_centre_shift"))
                row["shell1_variance_change"] = _num(r.moments.get("mean_variance_change"))
            row["n_in_gap"] = len(r.states)
            s = r.state
            if s is not None:
                row.update(above_vbm=_num(s.above_vbm), below_cbm=_num(s.below_cbm),
                           occupation=_num(s.occupation), dispersion=_num(s.dispersion),
                           gap=_num(s.edges.gap) if getattr(s, "edges", None) else None,
                           shell1_fraction=_num(s.shell_fractions.get(1)),
                           shell2_fraction=_num(s.shell_fractions.get(2)),
                           s_weight=_num(s.orbital_weights.get("s")), p_weight=_num(s.orbital_weights.get("p")),
                           d_weight=_num(s.orbital_weights.get("d")))
            key = r.labels.get("defect") or r.name
            dl = self.levels.get(key)
            if dl is not None:
                ks = [e for e in dl.entries if e.kind == "single-particle"]
                if ks and ks[0].srh_ratio is not None:
                    row["srh_vs_midgap"] = _num(ks[0].srh_ratio)
                tl = [e for e in dl.entries if e.kind == "thermodynamic"]
                row["transition_levels"] = "; ".join(f"{e.label} {e.above_vbm:+.3f}" for e in tl)
            rows.append(row)
        return rows

    def columns(self) -> list[str]:
        cols: list[str] = []
        for row in self.table():
            for k in row:
                if k not in cols:
                    cols.append(k)
        return cols

    def to_csv(self) -> str:
        """The table as CSV text (empty cells for missing values).

        Text cells (and column names) that start with ``=``, ``+``, ``-``, ``@``, a tab or a
        carriage return get a leading apostrophe, so a spreadsheet shows them as text instead of
        running them as formulas (OWASP, "CSV Injection"); numbers are written unchanged."""
        def text(v):
            return "'" + v if isinstance(v, str) and v[:1] in ("=", "+", "-", "@", "\t", "\r") else v
        buf = io.StringIO()
        cols = self.columns()
        w = csv.DictWriter(buf, fieldnames=cols, lineterminator="\n")
        w.writerow({k: text(k) for k in cols})
        for row in self.table():
            w.writerow({k: "" if v is None else repr(v) if isinstance(v, float) else text(v) for k, v in row.items()})
        return buf.getvalue()

    def to_json(self) -> str:
        """Table, errors, fit and levels as JSON text."""
        doc = {"family": getattr(self.family, "name", "family"), "cases": self.table(), "errors": self.errors,
               "notes": self.notes, "toxic_elements": self.toxic_elements()}
        if self.fit_result is not None:
            doc["fit"] = self.fit_result.to_dict()
            doc["fit_cases"] = self.fit_cases
        if self.levels:
            doc["levels"] = {k: v.to_dict() for k, v in self.levels.items()}
        return json.dumps(clean_for_json(doc), indent=1, allow_nan=False)

    # ---------------------------------------------------------------- trends
    def trends(self) -> dict:
        """Level depth against every geometry descriptor: Pearson r over the
        cases with a defect state (n ≥ 3), and, when a shared fit exists, the
        model's split of the level change into a structure and a chemistry
        part (see :meth:`knob_effects`)."""
        rows = [r for r in self.table() if r.get("above_vbm") is not None]
        out: dict[str, Any] = {"n": len(rows), "correlation": {}}
        geometry_keys = set()
        for r in self.results:
            geometry_keys.update(r.descriptors)
        if len(rows) >= 3:
            y = np.array([r["above_vbm"] for r in rows])
            for k in sorted(geometry_keys & set(rows[0])):
                vals = [r.get(k) for r in rows]
                if k in ("above_vbm", "below_cbm", "charge") or not all(
                        isinstance(v, float) for v in vals):
                    continue
                x = np.array(vals)
                if np.ptp(x) > 1e-12 and np.ptp(y) > 1e-12:
                    out["correlation"][k] = float(np.corrcoef(x, y)[0, 1])
        if self.fit_result is not None:
            out["knobs"] = self.knob_effects()
        return out

    def knob_effects(self) -> list[dict]:
        """For each fitted case: level shift (eV) from a 5 % inward breathing
        (structure knob) and from swapping its cation for each other cation in
        the family (chemistry knob), predicted by the shared fit."""
        fit = self.fit_result
        cations = [c for c in self.family.label_values("cation") if c]
        out = []
        for name in self.fit_cases:
            r = self[name]
            base = fit.predict(case=name)
            entry = {"case": name, "level": base.level,
                     "breathe_-5%": fit.predict(geometry=r.site.breathe(-0.05), case=name).level - base.level}
            own = r.labels.get("cation")
            for other in cations:
                if own and other != own:
                    try:
                        entry[f"swap_{own}->{other}"] = fit.predict(swap={own: other}, case=name).level - base.level
                    except OrbtoolError as exc:
                        entry[f"swap_{own}->{other}"] = None
                        self.notes.append(f"{name}: swap {own}->{other} not predicted: {exc}")
            out.append(entry)
        return out


def clean_for_json(o):
    """Recursively turn numpy scalars/arrays into Python values and non-finite
    floats into ``None`` (JSON has no NaN)."""
    if isinstance(o, dict):
        return {str(k): clean_for_json(v) for k, v in o.items()}
    if isinstance(o, (list, tuple, set)):
        return [clean_for_json(v) for v in o]
    if isinstance(o, np.ndarray):
        return clean_for_json(o.tolist())
    if isinstance(o, (np.floating, float)):
        v = float(o)
        return v if math.isfinite(v) else None
    if isinstance(o, (np.integer,)):
        return int(o)
    if isinstance(o, np.bool_):
        return bool(o)
    if o is None or isinstance(o, (str, int, bool)):
        return o
    if hasattr(o, "to_dict"):
        return clean_for_json(o.to_dict())
    return str(o)


def __getattr__(name):
    # ``orbtool.family.analyze_family`` stays importable; the batch runner lives one layer up, in
    # orbtool.batch (which builds on this module), so it is resolved on first use, not imported here
    if name == "analyze_family":
        import importlib
        return importlib.import_module("orbtool.batch").analyze_family
    raise AttributeError(f"module 'orbtool.family' has no attribute {name!r}")
