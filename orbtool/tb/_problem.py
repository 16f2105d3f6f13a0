"""The fit problem: global parameter vector -> per-case parameters -> whitened residuals (internal)."""

from __future__ import annotations

import numpy as np

from .host_bands import model_vbm


class Problem:
    """Maps the global parameter vector to per-case parameters and residuals (batched)."""

    def __init__(self, models, targets, params, use):
        self.models = models  # case -> ClusterModel
        self.compiled = {c: m.compile() for c, m in models.items()}
        self.targets = targets
        self.params = params
        self.names = [p.name for p in params]
        self.index = {n: k for k, n in enumerate(self.names)}
        self.use = use
        self.by_case: dict = {}
        for t in targets:
            self.by_case.setdefault(t.case, []).append(t)

    def case_params(self, case, X):
        """Parameter dict (arrays over the batch X (B, nparam)) for one case."""
        out = {}
        for base in {p.base for p in self.params}:
            k = self.index.get(f"{base}@{case}", self.index.get(base))
            if k is not None:
                out[base] = X[:, k]
        return out

    def model_values(self, case, X):
        """(B, ntarget_case, 3) predicted (above_vbm, s_fraction, shell1) for one case."""
        p = self.case_params(case, X)
        vbm = p.pop("vbm")
        cc = self.compiled[case]
        full = cc.model.defaults()
        full.update(p)
        vbm = vbm + model_vbm(cc.model, full)
        lv = cc.solve(full)
        sp = lv.s_weight + lv.p_weight
        s_frac = np.divide(lv.s_weight, sp, out=np.zeros_like(sp), where=sp > 0)
        sh = lv.atom_weight[:, cc.first].sum(1)
        tot = lv.atom_weight.sum(1)
        shell1 = np.divide(sh, tot, out=np.ones_like(tot), where=tot > 0)
        vals = np.stack([lv.level - vbm, s_frac, shell1], axis=1)
        return np.repeat(vals[:, None, :], len(self.by_case[case]), axis=1)

    def stacked(self):
        """The one-batch evaluator for all cases (hybrid models), or None."""
        if not hasattr(self, "_stacked"):
            from ._stacked import StackedHybrid

            self._stacked = StackedHybrid.make(self)
        return self._stacked

    def residuals(self, X, cases=None, stacked: bool = True):
        """(B, nres) whitened residuals."""
        X = np.atleast_2d(X)
        out = []
        st = self.stacked() if stacked and cases is None else None
        allv = st.values(X) if st is not None else None
        for ci, case in enumerate(cases or self.by_case):
            if allv is not None:
                mv = np.repeat(allv[:, ci, None, :], len(self.by_case[case]), axis=1)
            else:
                mv = self.model_values(case, X)
            for k, t in enumerate(self.by_case[case]):
                w = np.sqrt(t.weight)
                out.append(w * (mv[:, k, 0] - t.above_vbm) / t.sigma_level)
                if "character" in self.use and t.s_fraction is not None and self.has_s(case):
                    out.append(w * (mv[:, k, 1] - t.s_fraction) / t.sigma_s)
                if "character" in self.use and t.shell1 is not None and self.models[case].orbitals != "hybrid":
                    out.append(w * (mv[:, k, 2] - t.shell1) / t.sigma_shell)
        return np.stack(out, axis=1)

    def has_s(self, case):
        return self.models[case].orbitals in ("hybrid", "sp", "spd")


class _SiteOf:
    """The reference geometry of a model seen as a site (to rebuild the model with another charge)."""

    def __init__(self, model):
        from types import SimpleNamespace

        self.position = model.site_position
        self.defect = None
        n1 = int((model.shell == 1).sum())
        nb = [SimpleNamespace(index=int(i), element=e, vector=v)
              for i, e, v in zip(model.indices, model.elements, model.vectors)]
        self.first_shell, self.second_shell = tuple(nb[:n1]), tuple(nb[n1:])
        self.point_group, self.operations = model.point_group, model.operations
        self.distortion_modes = lambda: dict(model.modes)


def _family_source(model, targets):
    """The model with one term-value source for every case of a shared fit: when the source was chosen
    automatically and a later case holds an element the first case's table lacks, the source that holds
    every element of every case (sources are never mixed inside one fit)."""
    from dataclasses import replace

    from .elements import common_source

    if model.options.get("term_values", "auto") != "auto":
        return model, False
    els = set(model.elements)
    for t in targets:
        site = t.site
        if site is None:
            continue
        for shell in ("first_shell", "second_shell"):
            els |= {str(nb.element) for nb in (getattr(site, shell, ()) or ())}
    els -= set(model.options.get("onsite") or {})
    src = common_source(els, "auto")
    if src == model.term_source:
        return model, False
    return replace(model, term_source=src), True


def collect_models(model, targets):
    models = {}
    model, rebuilt = _family_source(model, targets)
    for t in targets:
        if t.case in models:
            continue
        if t.site is None and t.charge is None and not rebuilt:
            m = model
        else:
            site = t.site if t.site is not None else _SiteOf(model)
            m = model.with_site(site, charge=t.charge)
        models[t.case] = match_state(m, t)
    return models


def match_state(model, target, tol: float | None = None):
    """The hybrid model with ``level="auto"`` follows the DFT state's identity when the target knows it:
    the lowest cluster multiplet with as many levels as the DFT multiplet (``target.degeneracy``), at
    the model's default parameters. No valence-counting rule is used then (counting by group valence
    fails for 6- and 8-fold sites and lone-pair cations; see the project's references, "Electron
    counting"). Without a degeneracy the model is returned unchanged (formal counting)."""
    from dataclasses import replace

    if model.orbitals != "hybrid" or model.level != "auto" or not getattr(target, "degeneracy", None):
        return model
    from ._evaluate import DEGENERATE

    tol = DEGENERATE if tol is None else tol
    lv = model.solve()
    E = lv.energies[0]
    start, groups = 0, []
    while start < len(E):
        stop = start + 1
        while stop < len(E) and abs(E[stop] - E[start]) < tol:
            stop += 1
        groups.append((start, stop))
        start = stop
    hits = [g for g in groups if g[1] - g[0] == target.degeneracy]
    if not hits:
        return replace(model, notes=model.notes + (
            f"no cluster multiplet of {target.degeneracy} levels matches the DFT state: formal counting used",))
    k = hits[0][0]
    label = lv.labels[0][k]
    occ = "" if target.occupation is None else f", {target.occupation:g} e"
    return replace(model, level=int(k), notes=model.notes + (
        f"defect level: the lowest {label} multiplet ({target.degeneracy} level(s)), matching the DFT state "
        f"({target.degeneracy} band(s){occ}); no valence counting",))
