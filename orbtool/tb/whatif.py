"""What-if engine on a fitted cluster model: predictions with uncertainty bands and batched scans.

Knobs (all relative to the fitted model of one case):
* ``geometry`` — new ase.Atoms or vectors (natom, 3). For Atoms the fitted vacancy is located in the
  given cell (carried over in fractional coordinates, then checked: the point must be empty and its
  nearest atoms the model's first shell; the cluster atoms must be the model's elements or the
  ``swap`` targets) and refused with a ModelError otherwise — a geometry with the vacancy elsewhere is
  never measured around the fitted case's site;
* ``swap`` — {"Sn": "Ge"}: on-site energies of the old element replaced by the new element's term
  values from the same table (the fitted shift of the old element is kept: it absorbs the table's
  systematic error); bond lengths are those of ``geometry`` (no relaxation is implied);
* ``swap`` with ``host_gap`` — the in-solid route. ``host_gap`` is the band gap (eV) of the host the swap
  makes (a pristine-host calculation of the new compound, or the user's value). Free-atom term values do
  not know the crystal: Cd 5s lies above Zn 4s in the free atoms, yet CdS has half the gap of ZnS. So the
  swapped orbitals are placed relative to the band edge they belong to: dangling orbitals of first-shell
  cations (an anion vacancy) are conduction-band states, those of first-shell anions (a cation vacancy)
  valence-band states. Their distance from that edge, ε_h − E_edge (ε_h: the dangling hybrid's energy
  with the fitted parameters; E_edge = VBM + gap of the fitted case for cations, the VBM for anions), is a
  coupling-made energy, so under the new host's lattice it scales like every coupling,
  by λ = V(d0·a_B/a_A)/V(d0) (a: cube root of the cell volume, the uniform part of the change; λ = 1 when
  no new cell is given); the edge itself moves by ``host_gap − gap`` (cations) or 0 (anions). Every
  orbital of the swapped element moves rigidly by the resulting δ (cluster and, with edges="model",
  host bands). In a uniform strain of a pure-coupling model this keeps the level's depth below its edge
  in proportion to the couplings — the universal scaling of W. A. Harrison, *Electronic Structure and
  the Properties of Solids* (1980), ch. 2. Checked on the periodic GPAW family
  (tests/external/periodic/README.md);
* ``coupling_scale`` — multiplies every coupling; ``onsite_shift`` — eV added to the on-site energies
  of the first-shell atoms (those carrying the dangling orbitals).

Levels are given above the VBM (the fitted ``vbm`` is subtracted). Uncertainty: linear propagation
σ² = g C gᵀ with g = ∂level/∂θ by finite differences, and optionally Monte-Carlo sampling of θ from
N(θ̂, C) clipped to the bounds (both evaluated as one batched ``eigh``).
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from ..errors import FitError, ModelError
from ._evaluate import multiplet_members
from ._locate import check_elements
from .elements import term_values
from .host_bands import model_vbm
from .symmetry import class_columns, label_levels

__all__ = ["Prediction", "predict", "scan", "edge_anchor"]

#: elements whose dangling orbitals in a compound semiconductor or insulator are conduction-band
#: (cation) states: groups 1, 2, 12, 13 and 14 metals and the post-transition cations (common practice;
#: the anions of groups 15–17 and O, S, Se, Te are valence-band states)
_CATION_LIKE = ("Li", "Na", "K", "Rb", "Cs", "Be", "Mg", "Ca", "Sr", "Ba", "Zn", "Cd", "Hg", "B", "Al", "Ga",
                "In", "Tl", "Si", "Ge", "Sn", "Pb", "Cu", "Ag", "Au", "Sc", "Y", "La", "Ti", "Zr", "Hf")


@dataclass(frozen=True, eq=False)
class Prediction:
    """The defect level predicted for one set of knobs.

    Attributes
    ----------
    level : float  defect level above the VBM (eV); ``sigma`` its 1σ (eV).
    levels : ndarray  every cluster level above the VBM (eV); ``labels`` their irrep labels.
    vbm, cbm : float  band edges on the same scale (vbm = 0; cbm = gap of the case or nan).
    above_vbm, below_cbm : float (eV); verdict : str.
    band : (float, float) or None  2.5–97.5 % range from parameter sampling (when samples > 0).
    character : dict  s/p/d weights, first-shell and dangling weights of the defect level.
    """

    level: float
    sigma: float
    levels: np.ndarray
    labels: list
    vbm: float
    cbm: float
    above_vbm: float
    below_cbm: float
    verdict: str
    band: tuple | None = None
    character: dict | None = None


def _case(fit, case):
    cases = list(fit.problem.by_case)
    if case is None:
        return cases[0]
    if isinstance(case, (int, np.integer)):
        return cases[int(case)]
    name = getattr(case, "name", case)
    if name not in cases:
        raise FitError(f"unknown case {name!r}; the fit has {cases}")
    return name


def edge_anchor(fit, case, host_gap, geometry=None) -> dict:
    """What the in-solid route needs to place swapped orbitals (see the module docstring): the fitted
    case's gap, the new host's gap, whether the dangling orbitals are cation (conduction-band) states,
    and the uniform length scale a_B/a_A of the new cell."""
    gap = fit.problem.by_case[case][0].gap
    if gap is None or not np.isfinite(gap):
        raise ModelError(f"host_gap needs the band gap of the fitted case {case!r} (Target.gap is not set)")
    try:
        host_gap = float(host_gap)
    except (TypeError, ValueError):
        raise ModelError(f"host_gap must be a band gap in eV, got {host_gap!r}") from None
    if not np.isfinite(host_gap) or host_gap <= 0:
        raise ModelError(f"host_gap must be a positive band gap in eV, got {host_gap!r}")
    model = fit.problem.models[case]
    first = sorted({model.elements[i] for i in np.flatnonzero(np.asarray(model.shell) == 1)})
    scale = 1.0
    if hasattr(geometry, "get_positions") and model.cell is not None:
        scale = float(abs(np.linalg.det(geometry.cell[:])) / abs(np.linalg.det(model.cell))) ** (1 / 3)
    return {"gap": float(gap), "host_gap": host_gap, "scale": scale, "elements": first,
            "cation": _cation_like(first, model.options.get("vacant"), model.term_source)}


def _dangling_energy(model, full, el):
    """(B,) energy (eV, model scale) of ``el``'s dangling orbital for parameter arrays ``full``: the
    hybrid f ε_s + (1 − f) ε_p (hybrid model) or ε_s (s, sp, spd clusters: the s-like band edge)."""
    eps = model.onsite[el]
    shift = np.asarray(full.get(f"shift_{el}", 0.0), dtype=float)
    if model.orbitals == "hybrid":
        f = np.asarray(full.get("s_fraction", model.s_fraction), dtype=float)
        return f * eps[0] + (1 - f) * eps[1] + shift
    return eps[0] + shift


def _anchor_shifts(cc, full, vbm):
    """{shift_<el>: (B,) eV} moves of the swapped elements by the in-solid route (module docstring)."""
    a = cc.anchor
    model = cc.model
    x = full["q"] if model.law.kind == "exp" else full["n"]
    d0 = model.law.d0
    lam = (model.law.radial(d0 * a["scale"], q=x) if model.law.kind == "exp"
           else model.law.radial(d0 * a["scale"], n=x)) / (model.law.radial(d0, q=x) if model.law.kind == "exp"
                                                            else model.law.radial(d0, n=x))
    edge_a = vbm + (a["gap"] if a["cation"] else 0.0)
    edge_move = (a["host_gap"] - a["gap"]) if a["cation"] else 0.0
    out = {}
    for el in a["elements"]:
        if el not in cc.swap:
            continue
        offset = _dangling_energy(model, full, el) - edge_a
        out[f"shift_{el}"] = np.asarray(full[f"shift_{el}"]) + edge_move + offset * (lam - 1.0)
    return out


def _cation_like(first, vacant, source) -> bool:
    """True when the first-shell atoms are the cations of the compound (their dangling orbitals are
    conduction-band states): the removed atom holds its valence electrons more tightly (a deeper valence
    p term value, the electronegativity of the trade in Harrison's scale — W. A. Harrison, *Electronic
    Structure and the Properties of Solids* (1980), Table 2-2); without the removed element, the list
    of common cations."""
    if vacant:
        try:
            tv_v = term_values(str(vacant), source)
            deeper = [(term_values(el, source).p or term_values(el, source).s) > (tv_v.p or tv_v.s) for el in first]
            return all(deeper)
        except ModelError:
            pass
    return all(el in _CATION_LIKE for el in first)


def _compiled(fit, case, geometry, swap, host_gap=None):
    model = fit.problem.models[case]
    key = (case, tuple(sorted((swap or {}).items())), host_gap)
    if host_gap is not None and not swap:
        raise ModelError("host_gap describes the host a swap makes: pass swap={old: new} with it")
    anchor = None if host_gap is None else edge_anchor(fit, case, host_gap, geometry)
    if swap:
        bad = [el for el in swap if el not in model.species]
        if bad:
            raise ModelError(f"swap names {bad} but the cluster holds {list(model.species)}")
        onsite = dict(model.onsite)
        for old, new in swap.items():
            if anchor is not None:     # in-solid route: placed relative to the band edge in _params
                continue
            tv = term_values(new, model.term_source)
            onsite[old] = (tv.s, np.nan if tv.p is None else tv.p, np.nan if tv.d is None else tv.d)
        model = replace(model, onsite=onsite, swap_map={**model.swap_map, **swap})
    if model.host_bands is not None and (swap or hasattr(geometry, "get_positions")):
        scale = 1.0
        if hasattr(geometry, "get_positions") and model.cell is not None:
            scale = float(abs(np.linalg.det(geometry.cell[:])) / abs(np.linalg.det(model.cell))) ** (1 / 3)
        model = replace(model, host_bands=model.host_bands.swapped(dict(swap or {}), scale, model.onsite))
    if geometry is None:
        cache = fit._cache.setdefault("compiled", {})
        if key not in cache:
            cache[key] = model.compile()
            cache[key].swap = dict(swap or {})
            cache[key].anchor = anchor
        return cache[key]
    cc = model.compile(geometry)  # locates the vacancy in the geometry first (ModelError when not there)
    if hasattr(geometry, "get_positions"):
        check_elements(fit.problem.models[case], geometry, swap)
    cc.swap = dict(swap or {})
    cc.anchor = anchor
    return cc


def _params(fit, case, cc, X, coupling_scale=1.0, onsite_shift=0.0):
    """Model parameters (arrays over the batch X (B, nparam)) with the knobs applied, and the VBM."""
    p = fit.problem.case_params(case, X)
    vbm = p.pop("vbm")
    full = cc.model.defaults()
    full.update(p)
    full["coupling_scale"] = full["coupling_scale"] * np.asarray(coupling_scale)
    anchor = getattr(cc, "anchor", None)
    # an incoming element whose on-site offset the fit measured (it was in the family) keeps that offset
    for old, new in (getattr(cc, "swap", None) or {}).items():
        if anchor is None and f"shift_{new}" in p and new not in cc.model.species:
            full[f"shift_{old}"] = p[f"shift_{new}"]
    if anchor is not None:   # in-solid route: relative to the edge, on the fitted case's VBM scale
        full.update(_anchor_shifts(cc, full, vbm + model_vbm(fit.problem.models[case], full)))
    vbm = vbm + model_vbm(cc.model, full)  # the host's edge moves with swap/strain (edges="model")
    first_species = {cc.model.elements[i] for i in np.flatnonzero(cc.first)}
    for el in first_species:
        full[f"shift_{el}"] = full[f"shift_{el}"] + np.asarray(onsite_shift)
    return full, vbm


def _batch_levels(fit, case, cc, X, coupling_scale=1.0, onsite_shift=0.0):
    """(B,) defect level above the VBM and the Levels object for parameter batch X (B, nparam)."""
    full, vbm = _params(fit, case, cc, X, coupling_scale, onsite_shift)
    lv = cc.solve(full)
    return lv.level - vbm, lv, vbm


def _gradient(fit, case, cc, lv=None, **knobs):
    """∂level/∂θ for the free parameters by the Hellmann–Feynman theorem, ∂E/∂θ = <ψ|∂H/∂θ|ψ>
    (H. Hellmann 1937; R. P. Feynman, Phys. Rev. 56, 340 (1939)), averaged over the defect multiplet;
    ∂H/∂θ by finite differences of H alone, so only one diagonalisation is needed."""
    free_idx = np.array([fit.names.index(n) for n in fit.free], dtype=int)
    if not len(free_idx):
        return np.zeros(0)
    if lv is None:
        _, lv, _ = _batch_levels(fit, case, cc, fit.values[None], **knobs)
    x = fit.values
    h = 1e-6 * np.maximum(1.0, np.abs(x[free_idx]))
    h = np.where(x[free_idx] + h > np.array([fit.bounds[n][1] for n in fit.free]), -h, h)
    X = np.repeat(x[None], len(free_idx) + 1, axis=0)
    X[np.arange(1, len(free_idx) + 1), free_idx] += h
    full, vbm = _params(fit, case, cc, X, **knobs)
    H = cc.hamiltonian(full)
    dH = (H[1:] - H[0]) / h[:, None, None]
    E, V = lv.energies[0], lv.vectors[0]
    members = multiplet_members(E, int(lv.index[0]))   # the whole multiplet, by the one degeneracy rule
    Vm = V[:, members]
    g = np.einsum("im,kij,jm->k", Vm, dH, Vm) / len(members)
    vbm = np.broadcast_to(np.asarray(vbm, dtype=float), (len(X),))
    return g - (vbm[1:] - vbm[0]) / h


def verdict_for(level, sigma, gap, within):
    """'deep' / 'shallow ...' / 'resonant ...' with a borderline note (eV)."""
    if level < 0:
        return "resonant with the valence band"
    if gap is not None and np.isfinite(gap) and level > gap:
        return "resonant with the conduction band"
    d_v = level
    d_c = gap - level if gap is not None and np.isfinite(gap) else np.inf
    near = min(d_v, d_c)
    edge = "VBM" if d_v <= d_c else "CBM"
    out = f"shallow (within {within:g} eV of the {edge})" if near <= within else "deep"
    if sigma > 0 and abs(near - within) < 2 * sigma:
        out += " — borderline within 2σ"
    return out


def predict(fit, geometry=None, swap=None, coupling_scale=1.0, onsite_shift=0.0, case=None, *, samples: int = 0,
            labels: bool = True, shallow_within: float = 0.1, seed: int = 0, host_gap=None) -> Prediction:
    """Defect level for the given knobs with its uncertainty (see module docstring; ``host_gap`` in eV
    is the gap of the host a ``swap`` makes — the in-solid route)."""
    case = _case(fit, case)
    cc = _compiled(fit, case, geometry, swap, host_gap)
    knobs = dict(coupling_scale=coupling_scale, onsite_shift=onsite_shift)
    lev, lv, vbm = _batch_levels(fit, case, cc, fit.values[None], **knobs)
    level = float(lev[0])
    g = _gradient(fit, case, cc, lv, **knobs)
    sigma = float(np.sqrt(max(g @ fit.covariance @ g, 0.0))) if len(g) else 0.0
    band = None
    if samples:
        band = _sampled_band(fit, case, cc, samples, seed, knobs)
    gap = fit.problem.by_case[case][0].gap if host_gap is None else float(host_gap)
    cbm = float(gap) if gap is not None else float("nan")
    E = lv.energies[0] - float(np.asarray(vbm).ravel()[0])
    lab = _labels(fit, cc, lv) if labels else ["?"] * len(E)
    char = {"s": float(lv.s_weight[0]), "p": float(lv.p_weight[0]), "d": float(lv.d_weight[0]),
            "first_shell": float(lv.shell1_weight[0]), "dangling": float(lv.dangling_weight[0]),
            "label": lab[int(lv.index[0])]}
    return Prediction(level=level, sigma=sigma, levels=E, labels=lab, vbm=0.0, cbm=cbm, above_vbm=level,
                      below_cbm=cbm - level, verdict=verdict_for(level, sigma, gap, shallow_within), band=band,
                      character=char)


def _sampled_band(fit, case, cc, samples, seed, knobs):
    free_idx = np.array([fit.names.index(n) for n in fit.free], dtype=int)
    rng = np.random.default_rng(seed)
    draw = rng.multivariate_normal(fit.values[free_idx], fit.covariance, size=int(samples), method="eigh")
    lo = np.array([fit.bounds[n][0] for n in fit.free])
    hi = np.array([fit.bounds[n][1] for n in fit.free])
    X = np.repeat(fit.values[None], int(samples), axis=0)
    X[:, free_idx] = np.clip(draw, lo, hi)
    lev, _, _ = _batch_levels(fit, case, cc, X, **knobs)
    return tuple(float(v) for v in np.percentile(lev, [2.5, 97.5]))


def _labels(fit, cc, lv):
    """Irrep labels of the levels (class/column matching cached per model)."""
    model = cc.model
    key = ("classes", id(model.operations), model.point_group)
    cache = fit._cache
    if key not in cache:
        try:
            cache[key] = class_columns(model.point_group, model.operations, cc.vectors[0][cc.first])
        except ValueError:
            cache[key] = None
    if cache[key] is None:
        return ["?"] * lv.energies.shape[1]
    return label_levels(lv.energies[0], lv.vectors[0], cc.vectors[0], model.point_group, model.operations,
                        cc.c.lmax, model.orbitals == "hybrid", classes_cols=cache[key])


def scan(fit, case=None, geometries=None, swap=None, **arrays) -> np.ndarray:
    """Defect level above the VBM (eV) over a batch: ``geometries`` (B, natom, 3) vectors and/or
    parameter arrays (B,) given by base name (``coupling_scale`` and ``onsite_shift`` act as knobs)."""
    case = _case(fit, case)
    cc = _compiled(fit, case, geometries, swap)
    knobs = {k: np.asarray(arrays.pop(k)) for k in ("coupling_scale", "onsite_shift") if k in arrays}
    B = max([cc.G] + [np.asarray(v).size for v in list(arrays.values()) + list(knobs.values())])
    X = np.repeat(fit.values[None], B, axis=0)
    for name, v in arrays.items():
        cols = [k for k, n in enumerate(fit.names) if n == name or n == f"{name}@{case}"]
        if not cols:
            raise FitError(f"unknown parameter {name!r}")
        X[:, cols[0]] = v
    lev, _, _ = _batch_levels(fit, case, cc, X, **knobs)
    return lev
