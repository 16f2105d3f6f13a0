"""Result objects of the vacancy locator: :class:`Neighbour` and :class:`VacancySite`.

:func:`orbtool.analysis.geometry.locate_vacancy` builds them; this module
holds what a site can tell (descriptors, symmetry-adapted distortion
patterns, a summary) and the geometry edits for what-if questions. Edits
always return a new ``ase.Atoms`` built from the relaxed defect cell and never
touch the inputs.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property

import numpy as np

from ..errors import GeometryError
from . import edits
from .distortions import symmetry_adapted_modes
from .periodic import minimum_image

__all__ = ["Neighbour", "MissingAtom", "Substitution", "VacancySite"]


@dataclass(frozen=True, eq=False)
class Neighbour:
    """One atom of a neighbour shell around a vacancy site.

    Attributes
    ----------
    index : int
        Index of the atom in the defect cell.
    host_index : int
        Index of its site in the host cell.
    element : str
        Chemical symbol in the defect cell.
    shell : int
        1 for the first shell (the atoms with dangling orbitals), 2, 3, ...
    vector : (3,) float, Å
        From the site to the atom in the relaxed defect cell (defect-cell frame),
        for the periodic image named by ``image``.
    host_vector : (3,) float, Å
        The same in the host cell (host frame).
    distance, host_distance : float, Å
        Norms of ``vector`` and ``host_vector``.
    radial_displacement : float, Å
        Relaxation along the host site→atom direction; negative = inward.
    tangential_displacement : float, Å
        Size of the relaxation perpendicular to that direction.
    image : (3,) int
        Integer cell shift of the periodic image (host cell basis).
    """

    index: int
    host_index: int
    element: str
    shell: int
    vector: np.ndarray
    host_vector: np.ndarray
    distance: float
    host_distance: float
    radial_displacement: float
    tangential_displacement: float
    image: np.ndarray = field(default_factory=lambda: np.zeros(3, int))

    def __post_init__(self):
        for name in ("vector", "host_vector", "image"):
            arr = np.array(getattr(self, name))
            arr.flags.writeable = False
            object.__setattr__(self, name, arr)


@dataclass(frozen=True)
class MissingAtom:
    """A host atom with no partner in the defect cell (another vacancy of a complex).

    ``position`` is Cartesian Å in the defect-cell frame.
    """

    host_index: int
    element: str
    position: tuple


@dataclass(frozen=True)
class Substitution:
    """A defect-cell atom sitting on a host site of another element."""

    index: int
    host_index: int
    host_element: str
    element: str
    displacement: float


@dataclass(frozen=True, eq=False)
class VacancySite:
    """A located vacancy, its neighbour shells and local symmetry.

    Attributes
    ----------
    position : (3,) float, Å
        Cartesian site position in the defect cell's frame (rigid shift between
        host and defect removed), wrapped into the cell.
    element : str
        Element of the removed atom.
    host_index : int
        Index of the removed atom in the host cell.
    defect, host : ase.Atoms
        The relaxed defect cell and the pristine host cell (not copied; never modified).
    mapping : (n_defect,) int
        Host index of every defect-cell atom.
    shells : tuple of tuple of Neighbour
        Shells by increasing host distance from the site.
    point_group : str
        Schoenflies symbol of the relaxed first shell (plus the site).
    operations : (nop, 3, 3) float
        Its operations, Cartesian, acting on vectors from the site.
    permutations : (nop, n_first) int
        How each operation permutes the first-shell atoms.
    host_point_group, host_operations, host_permutations
        The same for the unrelaxed first shell (sets the symmetry-adapted modes).
    host_first_shell : (n_first, 3) float, Å
        Unrelaxed site→neighbour vectors averaged over the host point group
        (exactly symmetric; the reference of :meth:`distortion_modes`).
    other_vacancies : list of MissingAtom
        Further missing host atoms (divacancies, complexes).
    substitutions : list of Substitution
    shift : (3,) float, Å
        Rigid shift found between host and defect cells (host frame).
    symmetry_tolerance : float, Å
    notes : tuple of str
        Choices made while locating the site (what was assumed, what to pass to change it).
    """

    position: np.ndarray
    element: str
    host_index: int
    defect: object
    host: object
    mapping: np.ndarray
    shells: tuple
    point_group: str
    operations: np.ndarray
    permutations: np.ndarray
    host_point_group: str
    host_operations: np.ndarray
    host_permutations: np.ndarray
    host_first_shell: np.ndarray
    other_vacancies: list
    substitutions: list
    shift: np.ndarray
    symmetry_tolerance: float
    notes: tuple = ()

    def __post_init__(self):
        note = _strain_note(self.host, self.defect, self.shells[0] if self.shells else ())
        if note and note not in self.notes:
            object.__setattr__(self, "notes", tuple(self.notes) + (note,))

    # ------------------------------------------------------------------ shells
    @property
    def first_shell(self) -> tuple:
        """The neighbours that carry the dangling orbitals."""
        return self.shells[0] if self.shells else ()

    @property
    def second_shell(self) -> tuple:
        return self.shells[1] if len(self.shells) > 1 else ()

    def _first_arrays(self):
        first = self.first_shell
        vec = np.array([nb.vector for nb in first]).reshape(-1, 3)
        hv = np.array([nb.host_vector for nb in first]).reshape(-1, 3)
        return first, vec, hv

    # ------------------------------------------------------------ distortions
    @cached_property
    def _modes(self):
        return symmetry_adapted_modes(self.host_first_shell, self.host_operations, self.host_permutations)

    def distortion_modes(self) -> dict:
        """Unit-norm displacement patterns of the first shell, each (n_first, 3).

        ``"breathing"`` is the uniform radial pattern; the other keys are the
        irreducible blocks of the internal displacements under the host point
        group (see :mod:`orbtool.analysis.distortions`), one key per basis
        pattern, e.g. ``"E.1"``, ``"E.2"``, ``"T2.1"``... (a one-dimensional
        block is named by its label alone). Rigid translations and rotations
        of the shell are left out.
        """
        breathing, blocks = self._modes
        out = {"breathing": breathing.copy()}
        for label, basis in blocks:
            if len(basis) == 1:
                out[label] = basis[0].copy()
            else:
                for k, b in enumerate(basis, 1):
                    out[f"{label}.{k}"] = b.copy()
        return out

    def descriptors(self) -> dict:
        """Flat dict of floats describing the vacancy cage (lengths Å, angles degrees).

        Keys: ``n_first``, ``n_vacancies``; ``site_distance_{mean,min,max}`` and
        ``host_site_distance_mean`` (neighbour–site); ``pair_distance_{mean,min,max}``
        and ``host_pair_distance_mean`` (neighbour–neighbour within the first
        shell, the lengths that set the dangling-orbital couplings),
        ``pair_distance_spread`` ((max − min)/mean, grows with pairing);
        ``angle_{mean,min,max}`` (neighbour–site–neighbour); ``coordination_lost_{mean,max}``
        (missing host neighbours per first-shell atom); ``breathing_amplitude``
        (mean radial displacement, Å, negative inward), ``breathing_fraction``
        (that over the mean host distance); ``tangential_rms``; ``off_centre``
        (length of the mean displacement); ``distortion_total`` and
        ``distortion_<block>`` (norm, Å, of the first-shell displacement projected
        on each symmetry-adapted block of the host point group); ``point_group_order``.
        """
        first, vec, hv = self._first_arrays()
        n = len(first)
        out: dict[str, float] = {"n_first": float(n), "n_vacancies": float(1 + len(self.other_vacancies))}
        if n == 0:
            return out
        d, hd = np.linalg.norm(vec, axis=1), np.linalg.norm(hv, axis=1)
        out.update(site_distance_mean=float(d.mean()), site_distance_min=float(d.min()),
                   site_distance_max=float(d.max()), host_site_distance_mean=float(hd.mean()))
        if n > 1:
            i, j = np.triu_indices(n, 1)
            pd = np.linalg.norm(vec[i] - vec[j], axis=1)
            hpd = np.linalg.norm(hv[i] - hv[j], axis=1)
            cosang = np.einsum("kx,kx->k", vec[i], vec[j]) / (d[i] * d[j])
            ang = np.degrees(np.arccos(np.clip(cosang, -1.0, 1.0)))
            out.update(pair_distance_mean=float(pd.mean()), pair_distance_min=float(pd.min()),
                       pair_distance_max=float(pd.max()), host_pair_distance_mean=float(hpd.mean()),
                       pair_distance_spread=float((pd.max() - pd.min()) / pd.mean()),
                       angle_mean=float(ang.mean()), angle_min=float(ang.min()), angle_max=float(ang.max()))
        lost = self.coordination_lost()
        out.update(coordination_lost_mean=float(lost.mean()), coordination_lost_max=float(lost.max()))
        radial = np.array([nb.radial_displacement for nb in first])
        tang = np.array([nb.tangential_displacement for nb in first])
        u = vec - hv
        out.update(breathing_amplitude=float(radial.mean()), breathing_fraction=float(radial.mean() / hd.mean()),
                   tangential_rms=float(np.sqrt(np.mean(tang**2))),
                   off_centre=float(np.linalg.norm(u.mean(axis=0))))
        _, blocks = self._modes
        total = 0.0
        for label, basis in blocks:
            amp = float(np.linalg.norm(np.einsum("knx,nx->k", basis, u)))
            out[f"distortion_{label}"] = amp
            total += amp**2
        out["distortion_total"] = float(np.sqrt(total))
        out["point_group_order"] = float(len(self.operations))
        return out

    def coordination_lost(self) -> np.ndarray:
        """Missing host neighbours of each first-shell atom (counts, first-shell order).

        A host atom is a bonded neighbour of first-shell atom j when it lies
        within 1.1× j's nearest-neighbour distance in the host (common practice
        for a bond cutoff).
        """
        host_pos = self.host.get_positions()
        cell, pbc = self.host.get_cell().array, self.host.get_pbc()
        missing = [self.host_index] + [m.host_index for m in self.other_vacancies]
        out = []
        for nb in self.first_shell:
            _, d = _mic_dist(cell, pbc, host_pos - host_pos[nb.host_index])
            d[nb.host_index] = np.inf
            cutoff = 1.1 * d.min()
            out.append(int(np.count_nonzero(d[missing] <= cutoff)))
        return np.array(out, dtype=float)

    # ----------------------------------------------------------------- edits
    # (implemented in orbtool.analysis.edits; each returns a new ase.Atoms)
    def scale_shell(self, factor: float, shell: int = 1):
        """New Atoms with one shell's distances to the site multiplied by ``factor`` (r → factor · r)."""
        return edits.scale_shell(self, factor, shell)

    def breathe(self, fraction: float):
        """New Atoms with the first shell moved radially by ``fraction`` × its distance to the site.

        ``fraction = -0.05`` moves every first neighbour 5 % of its distance inward.
        """
        return edits.breathe(self, fraction)

    def distort(self, mode, amplitude: float):
        """New Atoms with the first shell displaced along a pattern.

        ``mode`` is a key of :meth:`distortion_modes` or an (n_first, 3) array
        (normalised here); ``amplitude`` (Å) is the norm of the whole first-shell
        displacement (Σ_i |Δr_i|²)^½.
        """
        return edits.distort(self, mode, amplitude)

    def swap_element(self, old: str, new: str, shell: int | None = None):
        """New Atoms with every ``old`` atom replaced by ``new`` (whole cell, or only shell ``shell``)."""
        return edits.swap_element(self, old, new, shell)

    def relaxed_subshells(self, shell: int = 1, gap: float = 0.05) -> tuple:
        """The atoms of one (host) shell grouped by their relaxed distance to the site.

        A pairing or Jahn–Teller distortion splits a shell (e.g. 4 → 2 + 2);
        groups are separated where sorted relaxed distances jump by more than
        ``gap`` Å, nearest group first.
        """
        if not 1 <= shell <= len(self.shells):
            raise GeometryError(f"shell must be between 1 and {len(self.shells)}, got {shell}")
        sh = self.shells[shell - 1]
        if not sh:
            return ()
        d = np.array([nb.distance for nb in sh])
        order = np.argsort(d, kind="stable")
        cuts = np.flatnonzero(np.diff(d[order]) > gap) + 1
        return tuple(tuple(sh[i] for i in grp) for grp in np.split(order, cuts))

    # --------------------------------------------------------------- summary
    def summary(self) -> str:
        """A readable table of the site, its shells and symmetry."""
        p = self.position
        lines = [f"Vacancy of {self.element} (host atom {self.host_index}) at "
                 f"({p[0]:.3f}, {p[1]:.3f}, {p[2]:.3f}) Å",
                 f"  point group  {self.point_group} relaxed, {self.host_point_group} unrelaxed "
                 f"(tolerance {self.symmetry_tolerance:g} Å)"]
        if np.linalg.norm(self.shift) > 1e-3:
            s = self.shift
            lines.append(f"  rigid shift  ({s[0]:.3f}, {s[1]:.3f}, {s[2]:.3f}) Å between host and defect cells")
        lines.append("  shell  n  elements        host d (Å)  relaxed d (Å)  radial (Å)  tangential (Å)")
        for k, sh in enumerate(self.shells, 1):
            if not sh:
                continue
            els = {}
            for nb in sh:
                els[nb.element] = els.get(nb.element, 0) + 1
            formula = " ".join(f"{e}{c}" for e, c in els.items())
            hd = np.mean([nb.host_distance for nb in sh])
            d = np.mean([nb.distance for nb in sh])
            rad = np.mean([nb.radial_displacement for nb in sh])
            tan = np.mean([nb.tangential_displacement for nb in sh])
            rad = round(float(rad), 3) + 0.0  # no "-0.000"
            lines.append(f"  {k:>5} {len(sh):>2}  {formula:<15} {hd:>10.3f}  {d:>13.3f}  {rad:>+10.3f}  {tan:>14.3f}")
        for m in self.other_vacancies:
            lines.append(f"  also missing: {m.element} (host atom {m.host_index})")
        for s in self.substitutions:
            lines.append(f"  substitution: {s.element} on a {s.host_element} site "
                         f"(defect atom {s.index}, host atom {s.host_index})")
        for note in self.notes:
            lines.append(f"  note: {note}")
        return "\n".join(lines)


#: relative cell difference (host vs defect) above which a note is added (0.1 %, common practice)
STRAIN_NOTE_THRESHOLD = 1e-3


def _strain_note(host, defect, first) -> str:
    """A note when the defect cell is strained relative to the host cell: the first-shell
    displacements then include the homogeneous strain, which is not relaxation around the vacancy."""
    if host is None or defect is None:
        return ""
    hc, dc = np.asarray(host.get_cell().array, float), np.asarray(defect.get_cell().array, float)
    try:
        deform = np.linalg.solve(hc, dc)  # dc = hc @ deform: rows of hc are lattice vectors
    except np.linalg.LinAlgError:
        return ""
    strain = 0.5 * (deform + deform.T) - np.eye(3)
    size = float(np.abs(strain).max())
    if size <= STRAIN_NOTE_THRESHOLD:
        return ""
    vol = float(abs(np.linalg.det(dc)) / abs(np.linalg.det(hc)) - 1.0)
    part = ""
    if first:
        hv = np.array([nb.host_vector for nb in first]).reshape(-1, 3)
        r0 = np.linalg.norm(hv, axis=1)
        moved = float(np.mean(np.linalg.norm(hv @ deform, axis=1) - r0))
        part = f"; the strain alone moves the first shell by {moved:+.3f} Å on average, part of the breathing shown"
    return (f"the defect cell differs from the host cell (largest strain component {size:.2%}, volume {vol:+.2%}): "
            f"displacements include this homogeneous strain, not only relaxation around the vacancy{part}")


def _mic_dist(cell, pbc, vectors):
    mic, _ = minimum_image(cell, vectors, pbc)
    return mic, np.linalg.norm(mic, axis=1)
