"""Weighted least-squares fit of a cluster model to the in-gap states of one or many cases.

Residuals r_k = √w (model − observed)/σ for each target's level above the VBM and (optionally) its
s/(s+p) character and first-shell fraction. Minimised with ``scipy.optimize.least_squares``
(trust-region reflective, bounds respected, robust loss optional). The level is referred to the VBM
by a fitted parameter ``vbm`` (the model-scale energy of the valence-band maximum).

Statistics: covariance C = s² (JᵀJ)⁻¹ from the whitened Jacobian at the optimum (s² = χ²/dof unless
``absolute_sigma``); correlation matrix; identifiability from the singular values of J with columns
scaled by each parameter's range (directions with σ_min/σ_max < 1e-3 are reported as not fixed by the
data); AIC = χ² + 2k and BIC = χ² + k ln N (K. P. Burnham & D. R. Anderson, *Model Selection and
Multimodel Inference*, Springer 2002, for Gaussian errors of known scale); leave-one-case-out
cross-validation on demand (:meth:`FitResult.cross_validate`).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy.optimize import least_squares

from ..errors import FitError
from ._problem import Problem as _Problem
from ._problem import collect_models as _collect_models
from .targets import Target

__all__ = ["fit", "FitResult", "FitParameter"]


def knob_validation_lines() -> list:
    """How well each knob was checked on real DFT, from ``orbtool/data/knob_validation.json`` (written by
    the leave-one-host-out harness, tests/external/periodic/harness.py --write); [] when absent."""
    import json
    from importlib import resources

    try:
        rec = json.loads(resources.files("orbtool.data").joinpath("knob_validation.json").read_text("utf-8"))
    except (FileNotFoundError, OSError, ValueError):
        return []
    sw, br = rec["swap"], rec["breathing"]
    routes = sw.get("routes") or {}
    how = "; ".join(f"{text} {r['n']}, RMS {r['rms']:.2f} eV, sign right in {r['sign_right']}"
                    for key, text in (("host_gap", "given the new host's gap (host_gap=):"),
                                      ("free_atom", "from free-atom term values only:"))
                    if (r := routes.get(key)) and r["n"])
    return [f"knob validation on real DFT ({rec['date']}, model: {rec['model']}): the cation knob was checked "
            f"on {sw['n']} real swaps, RMS {sw['rms']:.2f} eV, sign right in {sw['sign_right']} of {sw['n']}"
            + (f" ({how})" if how else "") + "; "
            f"the breathing knob on {br['series']} series ({br['n']} leave-one-out predictions), RMS "
            f"{br['rms']:.2f} eV. Predictions outside what was checked are extrapolations."]


@dataclass(frozen=True)
class FitParameter:
    """One entry of the fit's parameter vector (``name`` may be ``"<base>@<case>"`` when per-case)."""

    name: str
    value: float
    lower: float
    upper: float
    free: bool
    unit: str = ""
    doc: str = ""

    @property
    def base(self) -> str:
        return self.name.split("@")[0]


def fit(model, targets, *, free=None, fixed=None, bounds=None, per_case=(), initial=None, loss: str = "linear",
        f_scale: float = 1.0, absolute_sigma: bool = False, use=("level", "character")) -> "FitResult":
    """Fit ``model`` to ``targets``.

    Parameters
    ----------
    model : ClusterModel
        Settings template; each target's ``site`` gets its own copy of the model.
    targets : sequence of Target
    free : sequence of str, optional
        Parameters to fit (base names, e.g. ``"coupling_scale"``, ``"shift_Ga"``, ``"n"``, ``"vbm"``).
        Default: ``coupling_scale``, ``vbm`` and, for the hybrid model with character targets,
        ``s_fraction``.
    fixed : dict, optional
        Values for parameters held fixed (overrides defaults).
    bounds : dict name -> (lower, upper), optional
    per_case : sequence of str
        Base names that get one copy per case (e.g. ``("vbm",)``); others are shared.
    initial : dict, optional
        Starting values for free parameters.
    loss, f_scale
        Passed to ``scipy.optimize.least_squares`` ("linear", "soft_l1", "huber", "cauchy", ...).
    absolute_sigma : bool
        True: covariance from the target σ as given; False: scaled by χ²/dof.
    use : tuple
        Which targets to use: "level" always; "character" adds s fraction and shell fraction.
    """
    targets = list(targets)
    if not targets:
        raise FitError("no targets to fit")
    for t in targets:
        if not isinstance(t, Target):
            raise FitError(f"targets must be orbtool.tb.Target objects, got {type(t).__name__}")
    models = _collect_models(model, targets)
    specs = {}
    for m in models.values():
        for p in m.parameters():
            specs.setdefault(p.name, p)
    has_char = any(t.s_fraction is not None for t in targets) and "character" in use
    auto_free = free is None
    if auto_free:  # in order of priority; trimmed below to what the data can fix
        free = ["vbm"] + (["s_fraction"] if model.orbitals == "hybrid" and has_char else []) + ["coupling_scale"]
    free = list(free)
    unknown = [n for n in list(free) + list(fixed or {}) + list(per_case)
               if n.split("@")[0] not in specs and n.split("@")[0] != "vbm"]
    if unknown:
        raise FitError(f"unknown parameter(s) {unknown}; this model has {sorted(specs) + ['vbm']}")
    # starting value of vbm: put the first case's defect level where its target says
    first = targets[0]
    lv0 = models[first.case].solve({**(fixed or {})})
    vbm0 = float(lv0.level[0] - first.above_vbm)
    params = []
    cases = list(models)
    for name in sorted(set(specs) | {"vbm"}, key=lambda n: (n != "vbm", n)):
        spec = specs.get(name)
        val, lo, hi, unit, doc = ((vbm0, vbm0 - 30.0, vbm0 + 30.0, "eV", "model-scale energy of the VBM")
                                  if spec is None else (spec.value, spec.lower, spec.upper, spec.unit, spec.doc))
        if fixed and name in fixed:
            val = float(fixed[name])
        if initial and name in initial:
            val = float(initial[name])
        if bounds and name in bounds:
            lo, hi = map(float, bounds[name])
        if not lo <= val <= hi:
            raise FitError(f"parameter {name}: value {val} outside its bounds [{lo}, {hi}]")
        names = [f"{name}@{c}" for c in cases] if name in per_case else [name]
        for nm in names:  # a per-case copy may be fixed or freed by its full name "<name>@<case>"
            v = float((fixed or {}).get(nm, (initial or {}).get(nm, val)))
            params.append(FitParameter(nm, v, lo, hi, name in free or nm in free, unit, doc))
    prob = _Problem(models, targets, params, use)
    n_res = prob.residuals(np.array([p.value for p in params])).shape[1]
    if auto_free and sum(p.free for p in params) > n_res:
        keep = set(free[:max(1, n_res - (len(cases) - 1 if "vbm" in per_case else 0))])
        params = [FitParameter(p.name, p.value, p.lower, p.upper, p.base in keep, p.unit, p.doc) for p in params]
        prob = _Problem(models, targets, params, use)
    x_all = np.array([p.value for p in params])
    free_idx = np.array([k for k, p in enumerate(params) if p.free], dtype=int)
    n_res = prob.residuals(x_all).shape[1]
    if n_res < len(free_idx):
        raise FitError(f"{n_res} target values but {len(free_idx)} free parameters "
                       f"({', '.join(params[k].name for k in free_idx)}): fix some with fixed={{...}} or add targets")
    return _run(prob, params, x_all, free_idx, loss, f_scale, absolute_sigma)


def _run(prob, params, x_all, free_idx, loss, f_scale, absolute_sigma):
    lo = np.array([params[k].lower for k in free_idx])
    hi = np.array([params[k].upper for k in free_idx])

    def full(xf):
        X = np.repeat(x_all[None], np.atleast_2d(xf).shape[0], axis=0)
        X[:, free_idx] = np.atleast_2d(xf)
        return X

    def fun(xf):
        r = prob.residuals(full(xf))[0]
        if not np.all(np.isfinite(r)):
            raise FitError("non-finite residuals: the model produced NaN/inf for parameters "
                           + ", ".join(f"{params[k].name}={v:.4g}" for k, v in zip(free_idx, xf)))
        return r

    def jac(xf):
        h = 1e-6 * np.maximum(1.0, np.abs(xf))
        h = np.where(xf + h > hi, -h, h)  # step inwards at an upper bound
        X = np.vstack([xf, xf + np.diag(h)])
        R = prob.residuals(full(X))
        return ((R[1:] - R[0]) / h[:, None]).T

    x0 = x_all[free_idx]
    sol = least_squares(fun, x0, jac=jac, bounds=(lo, hi), loss=loss, f_scale=f_scale, method="trf",
                        x_scale="jac")
    return FitResult._build(prob, params, full(sol.x)[0], free_idx, sol, fun, jac, absolute_sigma)


@dataclass(frozen=True, eq=False)
class FitResult:
    """Outcome of :func:`fit`: values, uncertainties, diagnostics and the models to predict with.

    Attributes
    ----------
    names : list[str]  every parameter (free and fixed); ``values`` (eV or dimensionless as ``units``).
    free : list[str]  the fitted ones; ``sigma`` (nfree,), ``covariance``, ``correlation`` (nfree, nfree).
    chi2, dof, aic, bic : float/int; ``residuals`` whitened (N,).
    singular_values : ndarray; ``weak_directions`` list of (singular value, {name: component}).
    at_bounds : list[str]  free parameters that ended on a bound.
    """

    names: list
    values: np.ndarray
    units: list
    free: list
    sigma: np.ndarray
    covariance: np.ndarray
    correlation: np.ndarray
    chi2: float
    dof: int
    aic: float
    bic: float
    residuals: np.ndarray
    singular_values: np.ndarray
    weak_directions: list
    at_bounds: list
    success: bool
    message: str
    bounds: dict
    problem: object = field(repr=False, default=None)
    notes: list = field(default_factory=list)
    _cache: dict = field(repr=False, default_factory=dict)

    @classmethod
    def _build(cls, prob, params, x, free_idx, sol, fun, jac, absolute_sigma):
        r = fun(x[free_idx])
        J = jac(x[free_idx])
        n, k = J.shape
        chi2 = float(r @ r)
        dof = n - k
        span = np.array([params[i].upper - params[i].lower for i in free_idx])
        span = np.where(np.isfinite(span) & (span > 0), span, 1.0)
        Js = J * span[None]
        U, s, Vt = np.linalg.svd(Js, full_matrices=False)
        weak = []
        smax = s[0] if len(s) else 0.0
        for sv, v in zip(s, Vt):
            if smax == 0 or sv / smax < 1e-3:
                comp = {params[free_idx[j]].name: float(v[j]) for j in np.argsort(-np.abs(v))[:3]}
                weak.append((float(sv), comp))
        cutoff = 1e-10 * smax
        inv_s2 = np.where(s > cutoff, 1.0 / np.where(s > cutoff, s, 1.0) ** 2, 0.0)
        cov = (Vt.T * inv_s2) @ Vt * np.outer(span, span)
        notes = []
        if not absolute_sigma and dof > 0:
            cov = cov * chi2 / dof
            if chi2 / dof < 1e-8:
                notes.append("the model reproduces the targets exactly, so χ²-scaled uncertainties vanish; "
                             "refit with absolute_sigma=True to use the targets' σ")
        elif dof <= 0:
            notes.append("no degrees of freedom left: uncertainties come from the targets' σ alone")
        sig = np.sqrt(np.clip(np.diag(cov), 0, None))
        with np.errstate(invalid="ignore", divide="ignore"):
            corr = cov / np.outer(sig, sig)
        at = []
        for j, i in enumerate(free_idx):
            p = params[i]
            tol = 1e-6 * max(1.0, p.upper - p.lower)
            if x[i] - p.lower < tol or p.upper - x[i] < tol:
                at.append(p.name)
        return cls(names=[p.name for p in params], values=np.array(x), units=[p.unit for p in params],
                   free=[params[i].name for i in free_idx], sigma=sig, covariance=cov, correlation=corr,
                   chi2=chi2, dof=int(dof), aic=chi2 + 2 * k, bic=chi2 + k * np.log(max(n, 1)), residuals=r,
                   singular_values=s, weak_directions=weak, at_bounds=at, success=bool(sol.success),
                   message=str(sol.message), bounds={p.name: (p.lower, p.upper) for p in params}, problem=prob,
                   notes=notes)

    # ------------------------------------------------------------------ access
    @property
    def params(self) -> dict:
        return dict(zip(self.names, map(float, self.values)))

    def value(self, name: str) -> float:
        return self.params[name]

    def error(self, name: str) -> float:
        """1σ of a free parameter (0 for fixed ones)."""
        return float(self.sigma[self.free.index(name)]) if name in self.free else 0.0

    @property
    def parameter_bounds(self) -> dict:
        """{name: (lower, upper, value)} for sliders."""
        return {n: (lo, hi, self.params[n]) for n, (lo, hi) in self.bounds.items()}

    def summary(self) -> str:
        """A readable table of the fit (values ± 1σ, flags, quality, identifiability)."""
        lines = [f"Cluster-model fit: {len(self.problem.by_case)} case(s), {len(self.residuals)} target values, "
                 f"{len(self.free)} free parameters",
                 f"  chi2 = {self.chi2:.4g}, dof = {self.dof}, AIC = {self.aic:.4g}, BIC = {self.bic:.4g}",
                 f"  optimizer: {'converged' if self.success else 'NOT converged'} ({self.message})",
                 f"  {'parameter':<24}{'value':>12}{'± 1σ':>12}  unit  note"]
        for n, v, u in zip(self.names, self.values, self.units):
            if n in self.free:
                note = "AT BOUND " + str(self.bounds[n]) if n in self.at_bounds else ""
                lines.append(f"  {n:<24}{v:>12.5g}{self.error(n):>12.3g}  {u:<4}  {note}")
            else:
                lines.append(f"  {n:<24}{v:>12.5g}{'fixed':>12}  {u:<4}")
        big = [(a, b, self.correlation[i, j]) for i, a in enumerate(self.free) for j, b in enumerate(self.free)
               if i < j and abs(self.correlation[i, j]) > 0.9]
        for a, b, c in big:
            lines.append(f"  strong correlation {a} / {b}: {c:+.3f}")
        for sv, comp in self.weak_directions:
            combo = " + ".join(f"{w:+.2f}·{n}" for n, w in comp.items())
            lines.append(f"  NOT fixed by the data (singular value {sv:.2g}): {combo}")
        if self.at_bounds:
            lines.append(f"  warning: {', '.join(self.at_bounds)} stopped at a bound; "
                         "its uncertainty is not reliable")
        lines += [f"  note: {n}" for n in self.notes]
        lines += [f"  {line}" for line in knob_validation_lines()]
        return "\n".join(lines)

    def to_dict(self) -> dict:
        """Plain JSON-ready dictionary of the result."""
        return {"names": list(self.names), "values": [float(v) for v in self.values], "units": list(self.units),
                "free": list(self.free), "sigma": [float(s) for s in self.sigma],
                "correlation": np.nan_to_num(self.correlation).tolist(), "chi2": self.chi2, "dof": self.dof,
                "aic": float(self.aic), "bic": float(self.bic), "at_bounds": list(self.at_bounds),
                "weak_directions": [{"singular_value": s, "combination": c} for s, c in self.weak_directions],
                "success": self.success, "message": self.message, "notes": list(self.notes),
                "bounds": {k: list(v) for k, v in self.bounds.items()},
                "cases": list(self.problem.by_case)}

    def cross_validate(self) -> dict:
        """Leave-one-case-out: refit without each case and predict its level (eV).

        Returns {"errors": {case: predicted − observed}, "rms": float, "skipped": {case: reason}};
        needs ≥ 2 cases. A case that cannot be predicted (the remaining targets do not fix the free
        parameters, or the refit yields no finite level) is listed in ``skipped`` with the reason,
        never as a NaN error; FitError when no case can be predicted.
        """
        prob = self.problem
        cases = list(prob.by_case)
        if len(cases) < 2:
            raise FitError("cross-validation needs at least two cases")
        free_idx = np.array([self.names.index(n) for n in self.free])
        errs, skipped = {}, {}
        for c in cases:
            keep = [t for t in prob.targets if t.case != c]
            sub = _Problem({k: m for k, m in prob.models.items() if k != c}, keep, prob.params, prob.use)
            sub.compiled = {k: v for k, v in prob.compiled.items() if k != c}
            idx = np.array([k for k in free_idx if not self.names[k].endswith(f"@{c}")])
            n_res = sub.residuals(self.values).shape[1]
            if len(idx) > n_res:
                skipped[c] = (f"without {c!r} only {n_res} target values remain for {len(idx)} free parameters "
                              f"({', '.join(self.names[k] for k in idx)})")
                continue
            try:
                res = _run(sub, prob.params, self.values.copy(), idx, "linear", 1.0, True)
            except FitError as exc:
                skipped[c] = f"the refit without {c!r} failed: {exc}"
                continue
            err = float(prob.model_values(c, res.values[None])[0][0, 0] - prob.by_case[c][0].above_vbm)
            if np.isfinite(err):
                errs[c] = err
            else:
                skipped[c] = f"the refit without {c!r} predicts no finite level"
        if not errs:
            raise FitError("cross-validation predicted no case: " + "; ".join(skipped.values()))
        vals = np.array(list(errs.values()))
        return {"errors": errs, "rms": float(np.sqrt(np.mean(vals ** 2))), "skipped": skipped}

    # ------------------------------------------------------------------ what-if (see whatif.py, inverse.py)
    def predict(self, geometry=None, swap=None, coupling_scale=1.0, onsite_shift=0.0, case=None, **kw):
        """Defect level for new knobs with its uncertainty -> :class:`~orbtool.tb.whatif.Prediction`."""
        from .whatif import predict

        return predict(self, geometry, swap, coupling_scale, onsite_shift, case, **kw)

    def scan(self, case=None, geometries=None, swap=None, **arrays):
        """Batched defect levels over geometries and/or parameter arrays (eV above the VBM)."""
        from .whatif import scan

        return scan(self, case, geometries, swap, **arrays)

    def smallest_change_to_shallow(self, within: float = 0.1, edge: str = "nearest", case=None, **kw):
        """Smallest structural/chemical change making the level shallow (see ``inverse.py``)."""
        from .inverse import smallest_change_to_shallow

        return smallest_change_to_shallow(self, within, edge, case, **kw)

    def explain(self, case=None) -> str:
        """Plain-language account of the mechanism."""
        from .inverse import explain

        return explain(self, case)
