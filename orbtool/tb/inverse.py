"""The inverse question and the plain-language account of a fitted model.

:func:`smallest_change_to_shallow` scans, coarse to fine, as stacked diagonalisations, (a) the amplitude of each
distortion mode of the first shell (Å, unit-norm patterns: amplitude a moves the shell by a in the
3N-dimensional displacement space), (b) a rigid shift of the first-shell on-site energies (eV) and
(c) swaps of the first-shell element for every element of the same term-value table, and reports the
smallest change that brings the defect level within ``within`` eV of a band edge, with its 1σ from the
fit covariance (σ_change = σ_level / |∂level/∂change|, linear propagation; reported as ``inf`` with a
note when the slope is so small that this σ would exceed the whole scanned range, e.g. a symmetric
mode at zero amplitude whose first-order effect vanishes).

:func:`explain` turns the numbers into sentences: the level and its verdict, which orbitals carry it,
how strong the dominant coupling is, and how far each knob moves it per unit change.
"""

from __future__ import annotations

import contextlib
from dataclasses import dataclass

import numpy as np

from ..errors import FitError
from .elements import available_elements, term_values
from .whatif import _case, _compiled, _gradient, predict, scan

__all__ = ["ShallowChange", "smallest_change_to_shallow", "explain", "single_blas_thread"]


_BLAS: list = []  # [(set_local or None, set_global or None, get_global or None)] once looked up


def _openblas():
    """Thread-count functions of numpy's bundled OpenBLAS (ctypes), or Nones when there is none."""
    if not _BLAS:
        found = (None, None, None)
        try:
            import ctypes
            import glob
            import os
            libs = os.path.join(os.path.dirname(os.path.dirname(np.__file__)), "numpy.libs")
            for path in sorted(glob.glob(os.path.join(libs, "*openblas*"))):
                lib = ctypes.CDLL(path)  # the copy numpy already loaded (same path: same handle)

                def sym(*names):
                    for n in names:
                        f = getattr(lib, n, None)
                        if f is not None:
                            return f
                    return None
                found = (sym("openblas_set_num_threads_local"),
                         sym("scipy_openblas_set_num_threads64_", "openblas_set_num_threads64_",
                             "openblas_set_num_threads"),
                         sym("scipy_openblas_get_num_threads64_", "openblas_get_num_threads64_",
                             "openblas_get_num_threads"))
                if any(f is not None for f in found):
                    break
        except OSError:
            pass
        _BLAS.append(found)
    return _BLAS[0]


@contextlib.contextmanager
def single_blas_thread():
    """Run the enclosed linear algebra with one BLAS thread in the calling thread.

    Stacks of small symmetric eigenproblems (tens of orbitals) gain nothing from BLAS threads, and
    on a busy machine the threads' synchronisation costs far more than the work: measured on a
    2-core machine at load ~18, ``np.linalg.eigh`` of 300 matrices 72×72 took 160–215 s wall with
    OpenBLAS's default threads and 3.4–3.9 s with one thread. Uses OpenBLAS's thread-local setting
    (``openblas_set_num_threads_local``, OpenBLAS ≥ 0.3.27) when present, so other threads are not
    affected; does nothing for other BLAS libraries.
    """
    set_local, set_global, get_global = _openblas()
    if set_local is not None:
        old = set_local(1)
        try:
            yield
        finally:
            set_local(old if old > 0 else 0)
    elif set_global is not None and get_global is not None:
        old = get_global()
        set_global(1)
        try:
            yield
        finally:
            set_global(old)
    else:
        yield


@dataclass(frozen=True)
class ShallowChange:
    """One way of making the level shallow.

    knob : str  e.g. "mode:breathing", "onsite_shift", "swap:Ga->Al".
    change : float  amplitude (Å), shift (eV) or, for swaps, the hybrid on-site change (eV).
    unit : str; sigma : float (same unit; ``inf`` when the knob has no first-order effect where the
    condition is met, so linear propagation gives no uncertainty: the note says so); level_after : float
    (eV above VBM).
    reached : bool  whether the condition is met inside the scanned range; note : str.
    """

    knob: str
    change: float
    unit: str
    sigma: float
    level_after: float
    reached: bool
    note: str


def _margin(level, gap, within, edge):
    """Distance to the chosen band edge minus ``within`` (eV); ≤ 0 means shallow (or resonant)."""
    level = np.asarray(level, dtype=float)
    to_v = level - within
    to_c = (gap - level - within) if gap is not None else np.full_like(level, np.inf)
    return {"vbm": to_v, "cbm": to_c}.get(edge, np.minimum(to_v, to_c))


def _condition(level, gap, within, edge):
    return _margin(level, gap, within, edge) <= 0


def _smallest(grid, margin):
    """Smallest |x| where the margin reaches 0 (linear interpolation between grid points), or None."""
    k0 = int(np.argmin(np.abs(grid)))
    if margin[k0] <= 0:
        return float(grid[k0])
    flips = np.flatnonzero((margin[:-1] > 0) != (margin[1:] > 0))
    if not len(flips):
        return None
    xs = grid[flips] + (grid[flips + 1] - grid[flips]) * margin[flips] / (margin[flips] - margin[flips + 1])
    return float(xs[np.argmin(np.abs(xs))])


#: points of the first, coarse scan per knob and of each refinement, and the number of refinements:
#: every knob costs at most _COARSE + _ROUNDS * (_FINE - 2) levels whatever ``n_grid`` asks for
_COARSE, _FINE, _ROUNDS = 25, 9, 2


def _flip(grid, margin):
    """Index i of the sign change of ``margin`` between grid[i] and grid[i+1] nearest to 0, or None."""
    k0 = int(np.argmin(np.abs(grid)))
    if margin[k0] <= 0:
        return None
    flips = np.flatnonzero((margin[:-1] > 0) != (margin[1:] > 0))
    if not len(flips):
        return None
    xs = grid[flips] + (grid[flips + 1] - grid[flips]) * margin[flips] / (margin[flips] - margin[flips + 1])
    return int(flips[np.argmin(np.abs(xs))])


def _coarse_to_fine(evaluate, grids, gap, within, edge):
    """Levels of several knobs on coarse grids, refined around the sign change nearest to zero.

    ``evaluate(list of 1-D arrays) -> list of level arrays`` is called once per round with every
    knob's new points, so each round is one stacked diagonalisation. Returns (grids, levels), each
    grid sorted, the refinements merged in.
    """
    levels = evaluate(grids)
    for _ in range(_ROUNDS):
        new = []
        for g, lev in zip(grids, levels):
            i = _flip(g, _margin(lev, gap, within, edge))
            new.append(np.empty(0) if i is None else np.linspace(g[i], g[i + 1], _FINE)[1:-1])
        if not any(len(x) for x in new):
            break
        more = evaluate(new)
        for k, (x, lev) in enumerate(zip(new, more)):
            if len(x):
                g = np.concatenate([grids[k], x])
                order = np.argsort(g, kind="stable")
                grids[k], levels[k] = g[order], np.concatenate([levels[k], lev])[order]
    return grids, levels


def smallest_change_to_shallow(fit, within: float = 0.1, edge: str = "nearest", case=None,
                               max_amplitude: float = 0.5, max_shift: float = 5.0, n_grid: int = 201,
                               swaps: bool = True) -> list:
    """Smallest structural or chemical change that makes the level shallow (list of ShallowChange).

    The knobs are scanned coarse to fine: min(``n_grid``, 25) points over the whole range, then
    twice 7 more points between the two points where the margin to the band edge changes sign
    nearest to zero (bisection-like refinement; resolution (range/24)/64). All distortion modes are
    diagonalised together in one stacked call per round, so the cost is bounded (≤ 39 levels per
    knob, 3 stacked calls) whatever ``n_grid``; the answer is then interpolated linearly as before.

    Parameters
    ----------
    within : float  distance (eV) from the band edge counted as shallow.
    edge : {"nearest", "vbm", "cbm"}
    max_amplitude : float  largest mode amplitude scanned (Å).
    max_shift : float  largest first-shell on-site shift scanned (eV).
    n_grid : int  upper bound on the points of the coarse scan (odd numbers include zero).
    """
    if edge not in ("nearest", "vbm", "cbm"):
        raise FitError(f"edge must be 'nearest', 'vbm' or 'cbm', got {edge!r}")
    with single_blas_thread():
        return _smallest_change(fit, within, edge, case, max_amplitude, max_shift, n_grid, swaps)


def _smallest_change(fit, within, edge, case, max_amplitude, max_shift, n_grid, swaps):
    case = _case(fit, case)
    model = fit.problem.models[case]
    gap = fit.problem.by_case[case][0].gap
    if edge == "cbm" and gap is None:
        raise FitError("the case has no band gap recorded: cannot aim at the CBM")
    base = predict(fit, case=case, labels=False)
    first = model.shell == 1
    n0 = max(3, min(int(n_grid), _COARSE))
    names = list(model.modes)
    patterns = [model.modes[n] for n in names]

    def modes(amps_list):
        counts = [len(a) for a in amps_list]
        if not sum(counts):
            return [np.empty(0) for _ in counts]
        vec = np.repeat(model.vectors[None], sum(counts), axis=0)
        at = 0
        for amps, pattern in zip(amps_list, patterns):
            vec[at:at + len(amps), first] += amps[:, None, None] * pattern[None]
            at += len(amps)
        lev = scan(fit, case=case, geometries=vec)  # one stacked diagonalisation for every mode
        return np.split(lev, np.cumsum(counts)[:-1])

    out = []
    if names:
        amps = np.linspace(-max_amplitude, max_amplitude, n0)
        grids, levels = _coarse_to_fine(modes, [amps.copy() for _ in names], gap, within, edge)
        for name, g, lev in zip(names, grids, levels):
            out.append(_entry(fit, case, f"mode:{name}", "Å", g, lev, gap, within, edge, base.sigma))

    def shifts_eval(xs):
        return [scan(fit, case=case, onsite_shift=xs[0]) if len(xs[0]) else np.empty(0)]

    (g,), (lev,) = _coarse_to_fine(shifts_eval, [np.linspace(-max_shift, max_shift, n0)], gap, within, edge)
    out.append(_entry(fit, case, "onsite_shift", "eV", g, lev, gap, within, edge, base.sigma))
    if swaps:
        out.extend(_swaps(fit, case, model, gap, within, edge))
    return out


def _entry(fit, case, knob, unit, grid, lev, gap, within, edge, sigma_level):
    x = _smallest(grid, _margin(lev, gap, within, edge))
    if x is None:
        k = int(np.argmin(np.abs(lev - (0 if edge == "vbm" else (gap if edge == "cbm" else lev.min())))))
        return ShallowChange(knob, float("nan"), unit, float("nan"), float(lev[k]), False,
                             f"no change within ±{abs(grid).max():g} {unit} reaches the band edge "
                             f"(level spans {lev.min():.3f}…{lev.max():.3f} eV above the VBM)")
    slope = float(np.interp(x, grid, np.gradient(lev, grid)))
    span = float(np.abs(grid).max())
    sig = sigma_level / abs(slope) if slope != 0 else float("inf")
    if not np.isfinite(sig) or sig > span:
        # no first-order effect here (e.g. a mode that keeps the site's symmetry to first order, at
        # zero amplitude): linear propagation σ_level/|slope| does not give the uncertainty of the change
        return ShallowChange(knob, x, unit, float("inf"), float(np.interp(x, grid, lev)), True,
                             f"no first-order effect here (slope {slope:+.1e} eV per {unit}): the level's "
                             f"±{sigma_level:.3f} eV does not translate into an uncertainty of the change "
                             f"within ±{span:g} {unit} (σ reported as inf)")
    return ShallowChange(knob, x, unit, float(sig), float(np.interp(x, grid, lev)), True,
                         f"level moves {slope:+.3f} eV per {unit} here")


def _swaps(fit, case, model, gap, within, edge):
    first_species = sorted({model.elements[i] for i in np.flatnonzero(model.shell == 1)})
    out = []
    for old in first_species:
        cands = []
        for new in available_elements(model.term_source):
            if new == old:
                continue
            tv = term_values(new, model.term_source)
            if tv.p is None:
                continue
            p = predict(fit, case=case, swap={old: new}, labels=False)
            ok = bool(_condition(np.array([p.level]), gap, within, edge)[0])
            dist = min(p.level, (gap - p.level) if gap is not None else np.inf)
            size = abs(tv.p - model.onsite[old][1]) + abs(tv.s - model.onsite[old][0])
            cands.append((not ok, size if ok else abs(dist - within), new, p, tv))
        # first the swaps that work, smallest change of term values first; then the nearest misses
        cands.sort(key=lambda c: (c[0], c[1]))
        for miss, _, new, p, tv in cands[:3]:
            ref = term_values(old, model.term_source) if old in available_elements(model.term_source) else None
            d_eps = (tv.s - ref.s, tv.p - ref.p) if ref is not None else (np.nan, np.nan)
            out.append(ShallowChange(f"swap:{old}->{new}", float(d_eps[1]), "eV", p.sigma, p.level, not miss,
                                     f"Δε_s {d_eps[0]:+.2f} eV, Δε_p {d_eps[1]:+.2f} eV; {p.verdict}"))
    return out


def explain(fit, case=None) -> str:
    """Plain-language account of the mechanism, from the fitted numbers."""
    case = _case(fit, case)
    model = fit.problem.models[case]
    p = predict(fit, case=case)
    ch = p.character
    lines = [f"The defect level of {case} sits {p.level:.2f} ± {p.sigma:.2f} eV above the VBM"
             + (f" ({p.below_cbm:.2f} eV below the CBM)" if np.isfinite(p.cbm) else "") + f": {p.verdict}."]
    orb = ", ".join(f"{100 * ch[k]:.0f}% {k}" for k in ("s", "p", "d") if ch[k] > 0.005)
    who = "/".join(sorted({model.elements[i] for i in np.flatnonzero(model.shell == 1)}))
    lines.append(f"It is built from the dangling orbitals of the {int((model.shell == 1).sum())} {who} neighbours "
                 f"({orb}; {100 * ch['first_shell']:.0f}% on the first shell), symmetry {ch['label']} "
                 f"in {model.point_group}.")
    cc = _compiled(fit, case, None, None)
    params = fit.problem.case_params(case, fit.values[None])
    params.pop("vbm")
    H = cc.hamiltonian({**cc.model.defaults(), **params})[0]
    off = H - np.diag(np.diag(H))
    i, j = np.unravel_index(np.argmax(np.abs(off)), off.shape)
    labels = model.basis_labels()
    lines.append(f"The strongest coupling is {off[i, j]:+.2f} eV between {labels[i]} and {labels[j]} "
                 f"({model.law.describe()}, coupling scale {fit.params.get('coupling_scale', 1.0):.2f}).")
    first = model.shell == 1
    eps = 0.01
    vec = np.repeat(model.vectors[None], 2, axis=0)
    vec[1, first] *= 1 + eps
    d_breathe = np.diff(scan(fit, case=case, geometries=vec))[0] / (100 * eps)
    d_shift = float(np.diff(scan(fit, case=case, onsite_shift=np.array([0.0, 0.1])))[0] / 0.1)
    d_scale = float(np.diff(scan(fit, case=case, coupling_scale=np.array([1.0, 1.1])))[0])
    lines.append(f"Knobs: +1% outward breathing of the first shell moves the level {d_breathe:+.3f} eV; "
                 f"raising the neighbours' orbital energies by 1 eV moves it {d_shift:+.2f} eV; "
                 f"10% stronger couplings move it {d_scale:+.3f} eV.")
    g = _gradient(fit, case, cc)
    if len(g):
        contrib = np.abs(g) * fit.sigma
        k = int(np.argmax(contrib))
        lines.append(f"The level is most sensitive to {fit.free[k]}: its 1σ alone moves the level ±{contrib[k]:.3f} eV "
                     f"(parameter correlations bring the total to ±{p.sigma:.3f} eV).")
    if fit.at_bounds:
        lines.append(f"Caution: {', '.join(fit.at_bounds)} stopped at a bound of its range.")
    return "\n".join(lines)
