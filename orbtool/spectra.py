"""Energy-resolved electronic-structure data: :class:`ProjectedDOS` and
:class:`BandProjections`.

Orbital names follow the real-spherical-harmonic order m = -l … l used by
most plane-wave codes: ``s``; ``py pz px``; ``dxy dyz dz2 dxz dx2-y2``;
f orbitals as ``f-3 … f3``. l-resolved channels are named ``s``, ``p``,
``d``, ``f``; an atom's total is ``tot``.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Iterable, NamedTuple

import numpy as np

from ._validate import as_array
from .errors import InputFormatError

__all__ = ["Channel", "ProjectedDOS", "BandProjections", "ORBITAL_L", "orbital_l"]

#: angular momentum of every orbital name orbtool uses
ORBITAL_L: dict[str, int] = {
    "s": 0, "p": 1, "d": 2, "f": 3,
    "py": 1, "pz": 1, "px": 1,
    "dxy": 2, "dyz": 2, "dz2": 2, "dxz": 2, "dx2-y2": 2,
    **{f"f{m}": 3 for m in range(-3, 4)},
}

_L_NAME = "spdf"


def orbital_l(name: str) -> int:
    """Angular momentum quantum number of an orbital name (``-1`` for ``tot``)."""
    if name == "tot":
        return -1
    try:
        return ORBITAL_L[name]
    except KeyError:
        raise ValueError(f"unknown orbital name {name!r}; expected one of {sorted(ORBITAL_L)} or 'tot'") from None


class Channel(NamedTuple):
    """One projected-DOS column: which atom, element, orbital and spin.

    ``atom`` is the 0-based index in the structure (``-1`` when the channel
    is summed over all atoms of ``element``); ``spin`` is 0 (up, or the only
    channel) or 1 (down).
    """

    atom: int
    element: str
    orbital: str
    spin: int = 0

    @property
    def l(self) -> int:  # noqa: E743 - the trade's symbol
        return orbital_l(self.orbital)

    def label(self) -> str:
        at = f"{self.element}{self.atom}" if self.atom >= 0 else self.element
        return f"{at}:{self.orbital}:{'up' if self.spin == 0 else 'down'}"


def _meta_lines(meta: dict) -> list[str]:
    """What a reader decided or guessed (format, conventions, notes), for summaries."""
    out = []
    if "format" in meta or "format_reason" in meta:
        out.append(f"  format        {meta.get('format', '?')}"
                   + (f": {meta['format_reason']}" if meta.get("format_reason") else ""))
    for key, value in meta.items():
        if key in ("format", "format_reason"):
            continue
        if key.startswith("note") or key.endswith("guess") or key.endswith("reason"):
            vals = value if isinstance(value, (list, tuple)) else [value]
            out += [f"  note: {v}" for v in vals if v]
    return out


@dataclass(frozen=True, eq=False)
class ProjectedDOS:
    """Density of states projected on atoms and orbitals.

    Attributes
    ----------
    energies : ndarray, shape (nE,)
        Energy grid, eV, strictly increasing, on the code's absolute scale
        (not shifted by the Fermi level; use :attr:`fermi`).
    values : ndarray, shape (nchan, nE)
        Projected DOS of each channel, states/eV (per spin channel).
    channels : tuple of Channel, length nchan
        What each row of :attr:`values` is.
    total : ndarray, shape (nspin, nE), or None
        Total DOS of the cell per spin, states/eV, when the file has it.
    fermi : float or None
        Fermi level (or highest occupied level) reported by the code, eV.
    nspin : int
        1 (spin-degenerate: each channel holds both spins) or 2.
    atoms : ase.Atoms or None
        The structure, when known (ties ``atom`` indices to positions).
    source, meta
        Provenance: file read and free-form notes (format, guesses).
    """

    energies: np.ndarray
    values: np.ndarray
    channels: tuple
    total: np.ndarray | None = None
    fermi: float | None = None
    nspin: int = 1
    atoms: Any = None
    source: str | None = None
    meta: dict = field(default_factory=dict)

    def __post_init__(self):
        src = self.source
        e = as_array(self.energies, "energies", ndim=1, source=src)
        if e.size < 2:
            raise InputFormatError(src, None, "energies need at least 2 points", field="energies")
        if not np.all(np.diff(e) > 0):
            raise InputFormatError(src, None, "energies must be strictly increasing", field="energies")
        chans = tuple(Channel(*c) for c in self.channels)
        vals = as_array(self.values, "values", shape=(len(chans), e.size), source=src)
        for c in chans:
            try:
                orbital_l(c.orbital)
            except ValueError as exc:
                raise InputFormatError(src, None, str(exc), field="channels") from None
            if c.spin not in (0, 1) or (c.spin == 1 and self.nspin != 2):
                raise InputFormatError(src, None, f"channel {c} has spin {c.spin} but nspin={self.nspin}",
                                       field="channels")
        if self.nspin not in (1, 2):
            raise InputFormatError(src, None, f"nspin must be 1 or 2, got {self.nspin}", field="nspin")
        object.__setattr__(self, "energies", e)
        object.__setattr__(self, "values", vals)
        object.__setattr__(self, "channels", chans)
        if self.total is not None:
            object.__setattr__(self, "total", as_array(self.total, "total", shape=(self.nspin, e.size),
                                                       source=src))
        if self.fermi is not None:
            f = float(self.fermi)
            if not np.isfinite(f):
                raise InputFormatError(src, None, "fermi level is not finite", field="fermi")
            object.__setattr__(self, "fermi", f)
        if self.atoms is not None:
            n = len(self.atoms)
            bad = [c for c in chans if c.atom >= n]
            if bad:
                raise InputFormatError(src, None, f"channel atom index {bad[0].atom} outside the structure "
                                       f"({n} atoms)", field="channels")

    # ----------------------------------------------------------- selection
    @property
    def step(self) -> float:
        """Mean energy spacing, eV."""
        return float((self.energies[-1] - self.energies[0]) / (self.energies.size - 1))

    @property
    def atom_indices(self) -> list[int]:
        """Sorted atom indices that have channels."""
        return sorted({c.atom for c in self.channels if c.atom >= 0})

    def mask(self, atoms: Iterable[int] | int | None = None, elements: Iterable[str] | str | None = None,
             orbitals: Iterable[str] | str | None = None, l: int | Iterable[int] | None = None,  # noqa: E741
             spin: int | None = None) -> np.ndarray:
        """Boolean mask over channels matching every given criterion.

        ``orbitals`` matches names exactly; ``l`` matches angular momentum
        (so ``l=1`` picks ``p`` or ``px/py/pz`` rows, whichever the file has).
        ``tot`` channels are excluded unless asked for by name.
        """
        def _set(x, kind):
            if x is None:
                return None
            return {x} if isinstance(x, kind) else set(x)
        ints = (int, np.integer)
        A, E, O, L = _set(atoms, ints), _set(elements, str), _set(orbitals, str), _set(l, ints)
        m = np.ones(len(self.channels), dtype=bool)
        for i, c in enumerate(self.channels):
            if A is not None and c.atom not in A:
                m[i] = False
            elif E is not None and c.element not in E:
                m[i] = False
            elif O is not None and c.orbital not in O:
                m[i] = False
            elif O is None and c.orbital == "tot":
                m[i] = False
            elif L is not None and c.l not in L:
                m[i] = False
            elif spin is not None and c.spin != spin:
                m[i] = False
        return m

    def select(self, **criteria) -> np.ndarray:
        """Sum of the channels matching ``criteria`` (see :meth:`mask`),
        shape (nE,), states/eV. Raises ``KeyError`` if nothing matches."""
        m = self.mask(**criteria)
        if not m.any():
            raise KeyError(f"no PDOS channel matches {criteria}")
        return self.values[m].sum(axis=0)

    def orbital_resolution(self) -> str:
        """``"lm"`` if any channel is m-resolved, ``"l"`` if only l-resolved,
        ``"atom"`` if only atom totals."""
        orbs = {c.orbital for c in self.channels}
        if orbs - {"s", "p", "d", "f", "tot"}:
            return "lm"
        if orbs - {"tot"}:
            return "l"
        return "atom"

    def summary(self) -> str:
        """What the PDOS holds and how it was read."""
        lines = [f"ProjectedDOS from {self.source or '<memory>'}",
                 f"  energies      {self.energies[0]:.3f} … {self.energies[-1]:.3f} eV, {self.energies.size} points "
                 f"(step {self.step:.4f} eV)",
                 f"  channels      {len(self.channels)} on {len(self.atom_indices)} atoms, "
                 f"{self.orbital_resolution()}-resolved, nspin = {self.nspin}",
                 f"  Fermi level   {'—' if self.fermi is None else f'{self.fermi:.4f} eV'}",
                 f"  total DOS     {'yes' if self.total is not None else 'no'}"]
        return "\n".join(lines + _meta_lines(self.meta))

    def integrate(self, values: np.ndarray, emin: float | None = None, emax: float | None = None) -> float:
        """Trapezoid integral of a (nE,) curve on this energy grid between
        ``emin`` and ``emax`` (eV): states."""
        e = self.energies
        m = np.ones(e.size, bool)
        if emin is not None:
            m &= e >= emin
        if emax is not None:
            m &= e <= emax
        return float(np.trapezoid(np.asarray(values)[m], e[m]))


@dataclass(frozen=True, eq=False)
class BandProjections:
    """Per-band, per-k-point projections of the Kohn–Sham states on atoms and
    orbitals (the most precise record of a defect state's character).

    Attributes
    ----------
    kpoints : ndarray, shape (nk, 3)
        k-points in fractional (reciprocal-lattice) coordinates.
    kweights : ndarray, shape (nk,)
        k-point weights, normalised to sum to 1.
    energies : ndarray, shape (nspin, nk, nb)
        Band energies, eV (absolute scale of the code).
    occupations : ndarray, shape (nspin, nk, nb), or None
        Electrons in each state, between 0 and :attr:`max_occupation`.
    weights : ndarray, shape (nspin, nk, nb, natom, norb)
        Projection |⟨Y_lm,atom|ψ⟩|² of each state, ≥ 0, dimensionless
        (rows need not sum to 1: the spheres do not fill space).
    orbitals : tuple of str, length norb
        Orbital names (see module docstring).
    atoms : ase.Atoms or None
        The structure (natom must match).
    fermi : float or None
        Fermi level reported by the code, eV.
    source, meta
        Provenance.
    """

    kpoints: np.ndarray
    kweights: np.ndarray
    energies: np.ndarray
    occupations: np.ndarray | None
    weights: np.ndarray
    orbitals: tuple
    atoms: Any = None
    fermi: float | None = None
    source: str | None = None
    meta: dict = field(default_factory=dict)

    def __post_init__(self):
        src = self.source
        k = as_array(self.kpoints, "kpoints", shape=(None, 3), source=src)
        nk = k.shape[0]
        w = as_array(self.kweights, "kweights", shape=(nk,), source=src)
        if nk == 0:
            raise InputFormatError(src, None, "no k-points", field="kpoints")
        if np.any(w < 0) or not w.sum() > 0:
            raise InputFormatError(src, None, "k-point weights must be non-negative and not all zero",
                                   field="kweights")
        w = w / w.sum()
        w.flags.writeable = False
        e = as_array(self.energies, "energies", ndim=3, source=src)
        nspin, nk2, nb = e.shape
        if nk2 != nk or nspin not in (1, 2):
            raise InputFormatError(src, None, f"energies shape {e.shape} does not match {nk} k-points "
                                   "and 1 or 2 spins", field="energies")
        orbs = tuple(str(o) for o in self.orbitals)
        for o in orbs:
            try:
                orbital_l(o)
            except ValueError as exc:
                raise InputFormatError(src, None, str(exc), field="orbitals") from None
        wt = as_array(self.weights, "weights", shape=(nspin, nk, nb, None, len(orbs)), source=src)
        if wt.size and wt.min() < -1e-6:
            raise InputFormatError(src, None, f"projection weights must be >= 0 (found {wt.min():.3g})",
                                   field="weights")
        occ = self.occupations
        if occ is not None:
            occ = as_array(occ, "occupations", shape=(nspin, nk, nb), source=src)
            top = 2.0 if nspin == 1 else 1.0
            if occ.min() < -1e-6 or occ.max() > top + 1e-6:
                raise InputFormatError(src, None, f"occupations must lie in [0, {top:g}] for nspin={nspin}, "
                                       f"found [{occ.min():.4g}, {occ.max():.4g}]", field="occupations")
        if self.atoms is not None and len(self.atoms) != wt.shape[3]:
            raise InputFormatError(src, None, f"weights cover {wt.shape[3]} atoms but the structure has "
                                   f"{len(self.atoms)}", field="weights")
        for name, val in (("kpoints", k), ("kweights", w), ("energies", e), ("weights", wt),
                          ("occupations", occ), ("orbitals", orbs)):
            object.__setattr__(self, name, val)
        if self.fermi is not None:
            object.__setattr__(self, "fermi", float(self.fermi))

    @property
    def nspin(self) -> int:
        return self.energies.shape[0]

    @property
    def nkpoints(self) -> int:
        return self.energies.shape[1]

    @property
    def nbands(self) -> int:
        return self.energies.shape[2]

    @property
    def natoms(self) -> int:
        return self.weights.shape[3]

    @property
    def max_occupation(self) -> float:
        """Electrons a state can hold: 2 without spin polarisation, 1 with."""
        return 2.0 if self.nspin == 1 else 1.0

    def summary(self) -> str:
        """What the projections hold and how they were read."""
        lines = [f"BandProjections from {self.source or '<memory>'}",
                 f"  k-points      {self.nkpoints}, bands {self.nbands}, spins {self.nspin}, atoms {self.natoms}",
                 f"  orbitals      {' '.join(self.orbitals)}",
                 f"  energies      {float(self.energies.min()):.3f} … {float(self.energies.max()):.3f} eV",
                 f"  occupations   {'yes' if self.occupations is not None else 'no (band edges need them)'}",
                 f"  Fermi level   {'—' if self.fermi is None else f'{self.fermi:.4f} eV'}"]
        return "\n".join(lines + _meta_lines(self.meta))

    def orbital_ls(self) -> np.ndarray:
        """Angular momentum of each orbital column, shape (norb,)."""
        return np.array([orbital_l(o) for o in self.orbitals])

    def character(self, band: int, spin: int = 0) -> np.ndarray:
        """k-weighted projection weights of one band, shape (natom, norb),
        normalised to sum to 1 (dimensionless)."""
        w = np.einsum("k,kao->ao", self.kweights, self.weights[spin, :, band])
        s = w.sum()
        return w / s if s > 0 else w

    def band_energy(self, band: int, spin: int = 0) -> float:
        """k-weighted mean energy of one band, eV."""
        return float(self.kweights @ self.energies[spin, :, band])

    def band_occupation(self, band: int, spin: int = 0) -> float:
        """k-weighted occupation of one band (electrons); needs occupations."""
        if self.occupations is None:
            raise InputFormatError(self.source, None, "these projections carry no occupations; "
                                   "a file with band occupations is needed", field="occupations")
        return float(self.kweights @ self.occupations[spin, :, band])
