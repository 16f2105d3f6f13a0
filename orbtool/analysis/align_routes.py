"""Independent routes to the defect-cell → host energy offset, each with its own spread.

Every route compares a reference that the vacancy does not disturb, atom by atom over the atoms
farthest from it, so that each gives a mean offset and a spread (standard deviation over the far
atoms) — the idea of potential alignment (S. B. Zhang & J. E. Northrup, Phys. Rev. Lett. 67, 2339
(1991); C. Freysoldt et al., Rev. Mod. Phys. 86, 253 (2014), Sec. IV):

* ``potential-atoms``: the electrostatic potential energy of an electron averaged over a sphere
  (radius 1 Å) around each far atom, host minus defect (a sampled version of the atom-centred
  potentials some codes print, e.g. GPAW's ``get_atomic_electrostatic_potentials``);
* ``atomic-potentials``: such per-atom potentials given by the engine itself;
* ``pdos-valence``: the centroid of the far atoms' valence-band PDOS;
* ``pdos-semicore``: the centroid of the far atoms' deepest isolated band (a semicore d band, an
  anion s band) where the PDOS holds one.

Window rule for the PDOS routes (stated and tested): a *band* of the far atoms' host PDOS is a
contiguous stretch where the PDOS is at least 1 % of its peak; its window extends on each side to
the middle of the adjacent low-DOS gap, at most 1 eV beyond the band. An edge in a gap holds no
states, so moving it within the gap moves the centroid only through the 1 % tails. The valence
band is the highest band starting below the host's Fermi level; the semicore band is the lowest
band lying wholly inside the data (a band cut by the end of the energy grid is not used) below it.
A window spanning several bands is avoided: it weighs them by projection weights that change with
the chemistry near the defect.
The defect cell's window is the host's, moved by the current offset, iterated to self-consistency;
the first offset superposes the far atoms' whole spectra (maximum cross-correlation), which tells
which band of the defect cell is which band of the host (a gap state of the defect cell is not
mistaken for the valence band).
"""

from __future__ import annotations

import numpy as np

from ..errors import InputFormatError

__all__ = ["bands_of", "valence_window", "semicore_window", "pdos_route", "spectral_offset", "potential_atoms_route",
           "atomic_potentials_route"]

BAND_THRESHOLD = 0.01
MAX_MARGIN = 1.0


def bands_of(energies, dos, threshold: float = BAND_THRESHOLD) -> list[tuple[float, float, bool]]:
    """Windows (lo, hi, complete) of the bands of a DOS curve, by the module's window rule.

    ``complete`` is False for a band cut by an end of the energy grid.
    """
    e = np.asarray(energies, float)
    d = np.asarray(dos, float)
    if e.size < 3 or not d.max() > 0:
        return []
    on = d >= threshold * d.max()
    starts = list(np.flatnonzero(on & ~np.r_[False, on[:-1]]))
    ends = list(np.flatnonzero(on & ~np.r_[on[1:], False]))
    out = []
    for k, (i, j) in enumerate(zip(starts, ends)):
        complete = i > 0 and j < e.size - 1
        prev_end = e[ends[k - 1]] if k > 0 else e[0]
        next_start = e[starts[k + 1]] if k + 1 < len(starts) else e[-1]
        lo = max(0.5 * (prev_end + e[i]), e[i] - MAX_MARGIN) if k > 0 else max(e[0], e[i] - MAX_MARGIN)
        hi = (min(0.5 * (e[j] + next_start), e[j] + MAX_MARGIN) if k + 1 < len(starts)
              else min(e[-1], e[j] + MAX_MARGIN))
        out.append((float(lo), float(hi), bool(complete)))
    return out


def _far_curve(pdos, atoms, l=None):
    crit = {"atoms": [int(a) for a in atoms]}
    if l is not None:
        crit["l"] = l
    try:
        return pdos.select(**crit)
    except KeyError:
        raise InputFormatError(pdos.source, None, f"no PDOS channel for the far atoms {crit['atoms']}",
                               field="channels") from None


def valence_window(pdos, atoms, fermi=None):
    """Window (lo, hi) of the far atoms' valence band: the highest band starting below the Fermi
    level (one band: a window spanning several bands would weigh them by projection weights that
    change with the chemistry near the defect)."""
    ef = pdos.fermi if fermi is None else fermi
    bands = bands_of(pdos.energies, _far_curve(pdos, atoms))
    below = [b for b in bands if ef is None or b[0] < ef]
    if not below:
        raise InputFormatError(pdos.source, None, "no band of the far atoms below the Fermi level", field="energies")
    return below[-1][:2]


def semicore_window(pdos, atoms, valence):
    """Window of the far atoms' deepest complete band below the valence window, or None."""
    bands = bands_of(pdos.energies, _far_curve(pdos, atoms))
    deep = [b for b in bands if b[2] and b[1] <= valence[0] + 1e-9]
    return deep[0][:2] if deep else None


def _centroid(pdos, atoms, window, shift=0.0):
    """Centroid (eV, on the PDOS's own scale) of the states in ``window`` − ``shift``."""
    from .moments import dos_moments
    e = pdos.energies
    lo, hi = max(window[0] - shift, float(e[0])), min(window[1] - shift, float(e[-1]))
    return dos_moments(e, _far_curve(pdos, atoms), (lo, hi), source=pdos.source).centre


def spectral_offset(host_pdos, defect_pdos, far_h, far_d, max_offset: float = 20.0) -> float:
    """Rigid offset (eV) that best superposes the far atoms' PDOS of the defect cell on the host's:
    the maximum of their cross-correlation (both resampled on the finer of the two energy steps).
    Only a starting point: it tells which band of the defect cell is which band of the host."""
    step = min(host_pdos.step, defect_pdos.step)
    lo = min(host_pdos.energies[0], defect_pdos.energies[0])
    hi = max(host_pdos.energies[-1], defect_pdos.energies[-1])
    e = np.arange(lo, hi + step / 2, step)
    ch = np.interp(e, host_pdos.energies, _far_curve(host_pdos, far_h), left=0.0, right=0.0)
    cd = np.interp(e, defect_pdos.energies, _far_curve(defect_pdos, far_d), left=0.0, right=0.0)
    corr = np.correlate(ch, cd, mode="full")
    lags = (np.arange(corr.size) - (e.size - 1)) * step
    corr[np.abs(lags) > max_offset] = -np.inf
    return float(lags[int(np.argmax(corr))])


def pdos_route(host_pdos, defect_pdos, far_h, far_d, window, start: float) -> tuple[float, float, list[str]]:
    """(offset, spread over the far atoms, notes) from PDOS centroids.

    ``window`` is the band's window on the host scale; ``start`` a first offset
    (:func:`spectral_offset`). The defect cell's centroid is taken over the host window moved onto
    the defect scale by the current offset, iterated until the offset settles, so that both cells
    are integrated over the same states.
    """
    shift = start
    notes = []
    c_h = _centroid(host_pdos, far_h, window)
    for _ in range(50):
        new = c_h - _centroid(defect_pdos, far_d, window, shift)
        if abs(new - start) > MAX_MARGIN:
            # the window would slide onto another band: keep the last offset inside the reach
            notes.append(f"refinement left the ±{MAX_MARGIN:g} eV reach of the starting offset; stopped")
            break
        if abs(new - shift) < 1e-6:
            shift = new
            break
        shift = new
    else:
        notes.append("centroid refinement did not settle within 50 steps")
    per_atom = []
    for a_h, a_d in zip(far_h, far_d):
        try:
            per_atom.append(_centroid(host_pdos, [a_h], window) - _centroid(defect_pdos, [a_d], window, shift))
        except InputFormatError:
            continue
    spread = float(np.std(per_atom)) if len(per_atom) > 1 else float("nan")
    return float(shift), spread, notes


def _sphere_means(grid, centres, radius):
    out = []
    for c in centres:
        m = grid.minimum_image_distance(c) <= radius
        if not m.any():
            raise InputFormatError(grid.source, None, f"no grid point within {radius} Å of an atom", field="values")
        out.append(float(grid.values[m].mean()))
    return np.array(out)


def potential_atoms_route(host_grid, defect_grid, host_atoms, defect_atoms, far_h, far_d, radius: float = 1.0):
    """(offset, spread, per-atom offsets) from the potential averaged in spheres around the far atoms (eV)."""
    vh = _sphere_means(host_grid, host_atoms.get_positions()[far_h], radius)
    vd = _sphere_means(defect_grid, defect_atoms.get_positions()[far_d], radius)
    diff = vh - vd
    return float(diff.mean()), float(diff.std()), diff


def atomic_potentials_route(host_potentials, defect_potentials, far_h, far_d):
    """(offset, spread, per-atom offsets) from per-atom potentials given by the engine (eV)."""
    vh = np.asarray(host_potentials, float)
    vd = np.asarray(defect_potentials, float)
    if vh.ndim != 1 or vd.ndim != 1 or max(far_h) >= vh.size or max(far_d) >= vd.size:
        raise InputFormatError(None, None, "atomic potentials must be one number per atom of each cell",
                               field="atomic_potentials")
    diff = vh[np.asarray(far_h)] - vd[np.asarray(far_d)]
    return float(diff.mean()), float(diff.std()), diff
