"""Finite-size corrections for charged defect supercells.

Three terms, each optional, each reported by name in :class:`ChargeCorrection`:

* **image** — minus the Ewald energy of the defect charge ``q`` repeated on the
  supercell lattice in a neutralising background, screened by a scalar or a
  3×3 dielectric tensor (any cell shape; see :mod:`orbtool.levels.ewald`).
  For a scalar ε this equals the Makov–Payne leading term ``q²α/(2εL)``
  with α computed for the actual lattice.
* **quadrupole** — the third-order Makov–Payne term ``2πqQ/(3εL³)`` for cubic
  cells, when the user gives the second radial moment ``Q`` of the defect
  charge (G. Makov and M. C. Payne, Phys. Rev. B 51, 4014 (1995), eq. 15).
* **alignment** — ``q·ΔV`` with ``ΔV`` the average of ``V_defect − V_host``
  (electrostatic potential energy of an electron, eV) over grid points far
  from the defect (S. Lany and A. Zunger, Phys. Rev. B 78, 235104 (2008);
  C. Freysoldt et al., Rev. Mod. Phys. 86, 253 (2014), sec. IV).

Sign convention: the correction is *added* to the defect total energy,
``E_def,corrected = E_def + E_corr``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from .._validate import check_cell
from ..errors import InputFormatError, ModelError
from ..grid import Grid
from ..units import COULOMB
from .ewald import dielectric_tensor, ewald_energy, lattice_madelung_alpha

__all__ = ["ChargeCorrection", "PotentialAlignment", "image_charge_energy", "makov_payne_energy",
           "potential_alignment", "charge_correction"]


def _cell_of(cell) -> np.ndarray:
    """Cell rows (Å) from an array, an ase.Atoms or a Grid."""
    if hasattr(cell, "get_cell"):
        cell = np.asarray(cell.get_cell())
    elif isinstance(cell, Grid):
        cell = cell.cell
    return check_cell(cell, None)


def _integer_charge(charge) -> int:
    try:
        q = int(charge)
    except (TypeError, ValueError):
        raise ModelError(f"charge must be an integer, got {charge!r}") from None
    if q != charge:
        raise ModelError(f"charge must be an integer, got {charge!r}")
    return q


def image_charge_energy(charge: int, cell, dielectric, *, eta: float | None = None) -> float:
    """Image-charge correction of a point charge ``q`` in a periodic cell, eV.

    ``−E_Ewald(q)``: minus the electrostatic energy per cell of the point
    charge, its periodic images and the neutralising background, screened by
    ``dielectric`` (scalar or 3×3 tensor). Positive for ``q ≠ 0``.
    """
    q = _integer_charge(charge)
    eps = dielectric_tensor(dielectric, minimum=1.0)
    if q == 0:
        return 0.0
    return -ewald_energy(_cell_of(cell), np.zeros((1, 3)), [float(q)], eps, eta=eta)


def makov_payne_energy(charge: int, cell, dielectric: float, quadrupole: float | None = None) -> dict:
    """Makov–Payne correction terms, eV.

    ``q²α/(2εL)`` with α and ``L = V^{1/3}`` from
    :func:`~orbtool.levels.ewald.lattice_madelung_alpha` (α = 2.8373 for a
    simple cubic cell), plus ``2πqQ/(3εL³)`` when ``quadrupole`` (second
    radial moment ``Q = ∫ρ r² d³r`` of the defect charge, e·Å², proton
    charge positive) is given; that term is defined for cubic cells only.
    G. Makov and M. C. Payne, Phys. Rev. B 51, 4014 (1995).

    Returns
    -------
    dict
        ``leading`` and ``quadrupole`` (eV; ``None`` if not asked), ``alpha``,
        ``length`` (Å).
    """
    q = _integer_charge(charge)
    eps = dielectric_tensor(dielectric, minimum=1.0)
    if not np.allclose(eps, eps[0, 0] * np.eye(3), rtol=1e-10, atol=1e-12):
        raise ModelError("Makov–Payne needs a scalar dielectric constant; for a tensor use scheme='ewald'")
    epsilon = float(eps[0, 0])
    cell = _cell_of(cell)
    alpha, length = lattice_madelung_alpha(cell)
    out = {"leading": q * q * alpha * COULOMB / (2.0 * epsilon * length), "quadrupole": None,
           "alpha": alpha, "length": length}
    if quadrupole is not None:
        lengths = np.linalg.norm(cell, axis=1)
        cubic = np.allclose(lengths, lengths[0], rtol=1e-6) and np.allclose(
            cell @ cell.T, lengths[0] ** 2 * np.eye(3), rtol=1e-6, atol=1e-6 * lengths[0] ** 2)
        if not cubic:
            raise ModelError("the Makov–Payne quadrupole term is derived for cubic cells; this cell is not cubic")
        out["quadrupole"] = 2.0 * math.pi * q * float(quadrupole) * COULOMB / (3.0 * epsilon * length ** 3)
    return out


@dataclass(frozen=True)
class PotentialAlignment:
    """Far-from-defect average of the defect − host potential.

    Attributes
    ----------
    delta_v : float
        Mean of ``V_defect − V_host`` over the far region, eV.
    spread : float
        Standard deviation of the difference over that region, eV (a rough
        uncertainty of ``delta_v``).
    far_radius : float
        Points at least this far (minimum image) from the defect were used, Å.
    n_points : int
        Number of grid points averaged.
    fraction : float
        ``n_points`` over all grid points.
    """

    delta_v: float
    spread: float
    far_radius: float
    n_points: int
    fraction: float


def _shortest_lattice_vector(cell: np.ndarray) -> float:
    n = np.stack(np.meshgrid(*([np.arange(-2, 3)] * 3), indexing="ij"), axis=-1).reshape(-1, 3)
    n = n[np.any(n != 0, axis=1)]
    return float(np.linalg.norm(n @ cell, axis=1).min())


def potential_alignment(host: Grid, defect: Grid, defect_position, *, far_radius: float | None = None,
                        model=None) -> PotentialAlignment:
    """Average ``V_defect − V_host`` over points far from the defect.

    Parameters
    ----------
    host, defect : Grid
        Local electrostatic potential energy of an electron (unit ``"eV"``)
        on the same grid of the same cell.
    defect_position : array_like (3,) or object with ``.position``
        Defect centre, Å (e.g. a ``VacancySite``).
    far_radius : float, optional
        Use points at least this far from the defect, Å. Default: 0.4 × the
        shortest lattice vector (80 % of the radius of the sphere inscribed
        in the Wigner–Seitz cell).
    model : ndarray of the grid's shape, optional
        Model potential energy of an electron (eV) due to the defect charge
        (e.g. :func:`~orbtool.levels.model_potential.point_charge_potential_grid`),
        subtracted from the difference before averaging.
    """
    for g, role in ((host, "host"), (defect, "defect")):
        if not isinstance(g, Grid):
            raise ModelError(f"{role} potential must be an orbtool Grid, got {type(g).__name__}")
        if g.unit != "eV":
            raise InputFormatError(g.source, None, f"{role} potential must have unit 'eV', got {g.unit!r}",
                                   field="unit")
    if host.shape != defect.shape:
        raise InputFormatError(defect.source, None,
                               f"defect potential grid {defect.shape} differs from host grid {host.shape}",
                               field="shape")
    if not np.allclose(host.cell, defect.cell, atol=1e-4):
        raise InputFormatError(defect.source, None, "defect and host potential grids span different cells",
                               field="cell")
    pos = getattr(defect_position, "position", defect_position)
    pos = np.asarray(pos, dtype=float)
    if pos.shape != (3,) or not np.isfinite(pos).all():
        raise ModelError(f"defect_position must be 3 finite Cartesian coordinates (Å), got {pos!r}")
    if far_radius is None:
        far_radius = 0.4 * _shortest_lattice_vector(defect.cell)
    if not far_radius >= 0:
        raise ModelError(f"far_radius must be non-negative, got {far_radius}")
    far = ~defect.sphere_mask(pos, far_radius)
    n_far = int(np.count_nonzero(far))
    if n_far == 0:
        raise ModelError(f"no grid point lies farther than {far_radius:.3f} Å from the defect; "
                         "choose a smaller far_radius")
    diff = np.asarray(defect.values, dtype=float) - np.asarray(host.values, dtype=float)
    if model is not None:
        model = np.asarray(model, dtype=float)
        if model.shape != diff.shape:
            raise ModelError(f"model potential shape {model.shape} differs from the grids' {diff.shape}")
        diff = diff - model
    diff = diff[far]
    return PotentialAlignment(delta_v=float(diff.mean()), spread=float(diff.std()), far_radius=float(far_radius),
                              n_points=n_far, fraction=n_far / defect.values.size)


@dataclass(frozen=True)
class ChargeCorrection:
    """Energy to add to a charged defect cell's total energy, with its parts.

    Attributes
    ----------
    charge : int
        Defect charge q, e.
    energy : float
        Sum of the terms used, eV.
    terms : dict[str, float]
        Each term used, eV: any of ``"image"``, ``"quadrupole"``, ``"alignment"``.
    scheme : str
        ``"ewald"`` (anisotropic Ewald image term) or ``"makov-payne"``.
    dielectric : ndarray (3, 3)
        Dielectric tensor used.
    notes : tuple[str, ...]
        What was used, what was left out and why.
    details : dict
        Madelung α, length L (Å), alignment statistics.
    """

    charge: int
    energy: float
    terms: dict
    scheme: str
    dielectric: np.ndarray
    notes: tuple = ()
    details: dict = field(default_factory=dict)

    def __float__(self) -> float:
        return float(self.energy)

    @property
    def used(self) -> tuple[str, ...]:
        """Names of the terms included in :attr:`energy`."""
        return tuple(self.terms)

    def summary(self) -> str:
        """A short table of the correction terms."""
        lines = [f"Charge correction for q = {self.charge:+d} ({self.scheme})"]
        for name, value in self.terms.items():
            lines.append(f"  {name:<12} {value:+.4f} eV")
        lines.append(f"  {'total':<12} {self.energy:+.4f} eV")
        eps = np.linalg.eigvalsh(self.dielectric)
        lines.append("  dielectric   principal values " + ", ".join(f"{v:.3g}" for v in eps))
        lines += [f"  note: {n}" for n in self.notes]
        return "\n".join(lines)

    def to_dict(self) -> dict:
        """Plain-Python form (JSON-serialisable)."""
        details = {k: (v.__dict__ if isinstance(v, PotentialAlignment) else v) for k, v in self.details.items()}
        return {"charge": self.charge, "energy_eV": self.energy, "terms_eV": dict(self.terms),
                "scheme": self.scheme, "dielectric": self.dielectric.tolist(), "notes": list(self.notes),
                "details": details}


def charge_correction(charge: int, cell, dielectric, *, scheme: str = "ewald", quadrupole: float | None = None,
                      host_potential: Grid | None = None, defect_potential: Grid | None = None,
                      defect_position=None, far_radius: float | None = None, subtract_model: bool = False
                      ) -> ChargeCorrection:
    """Finite-size correction of a charged defect supercell.

    Parameters
    ----------
    charge : int
        Defect charge q (e).
    cell : array_like (3, 3), ase.Atoms or Grid
        Supercell, Å.
    dielectric : float or array_like (3, 3)
        Static dielectric constant (scalar) or tensor; every principal value
        must exceed 1.
    scheme : {"ewald", "makov-payne"}
        ``"ewald"``: image term by anisotropic Ewald summation (any ε).
        ``"makov-payne"``: image term ``q²α/(2εL)`` (scalar ε), plus the
        quadrupole term if ``quadrupole`` is given (cubic cells).
    quadrupole : float, optional
        Second radial moment of the defect charge, e·Å² (Makov–Payne only).
    host_potential, defect_potential : Grid, optional
        Electrostatic potential grids (eV); both give the alignment term.
    defect_position : array_like (3,) or object with ``.position``
        Defect centre (Å), needed for the alignment term.
    far_radius : float, optional
        See :func:`potential_alignment`.
    subtract_model : bool
        Subtract the potential of the screened periodic point charge before
        averaging (Freysoldt, Neugebauer & Van de Walle, Phys. Rev. Lett. 102,
        016402 (2009)); otherwise the plain difference is averaged (Lany &
        Zunger 2008).
    """
    q = _integer_charge(charge)
    eps = dielectric_tensor(dielectric, minimum=1.0)
    if scheme not in ("ewald", "makov-payne"):
        raise ModelError(f"scheme must be 'ewald' or 'makov-payne', got {scheme!r}")
    if cell is None and defect_potential is not None:
        cell = defect_potential.cell
    if cell is None:
        raise ModelError("charge_correction needs the supercell (cell=...)")
    cell = _cell_of(cell)
    terms: dict[str, float] = {}
    notes: list[str] = []
    details: dict = {}
    if quadrupole is not None and scheme != "makov-payne":
        raise ModelError("a quadrupole moment is used only by scheme='makov-payne'")
    if q == 0:
        notes.append("neutral defect: no image or alignment term is needed")
    elif scheme == "ewald":
        terms["image"] = image_charge_energy(q, cell, eps)
        length = float(np.linalg.det(cell)) ** (1.0 / 3.0)
        eps_bar = float(np.linalg.det(eps)) ** (1.0 / 3.0)
        details.update(length=length, alpha_effective=2.0 * eps_bar * length * terms["image"] / (q * q * COULOMB))
        notes.append("image: anisotropic Ewald point-charge energy (Rurali & Cartoixà 2009; Murphy & Hine 2013); "
                     f"as q²α/(2ε̄L) with ε̄ = (det ε)^(1/3), L = V^(1/3) = {length:.4f} Å: "
                     f"α = {details['alpha_effective']:.6f}")
    else:
        mp = makov_payne_energy(q, cell, eps, quadrupole)
        terms["image"] = mp["leading"]
        details.update(alpha=mp["alpha"], length=mp["length"])
        notes.append(f"image: Makov–Payne q²α/(2εL), α = {mp['alpha']:.6f}, L = V^(1/3) = {mp['length']:.4f} Å")
        if mp["quadrupole"] is not None:
            terms["quadrupole"] = mp["quadrupole"]
            notes.append(f"quadrupole: 2πqQ/(3εL³) with Q = {quadrupole:g} e·Å²")
        else:
            notes.append("quadrupole term not included (no quadrupole moment given)")
    have = (host_potential is not None, defect_potential is not None)
    if all(have) and q != 0:
        if not np.allclose(defect_potential.cell, cell, atol=1e-4):
            raise InputFormatError(defect_potential.source, None, "the potential grid's cell differs from the "
                                   "supercell given for the correction", field="cell")
        if defect_position is None:
            raise ModelError("potential alignment needs defect_position (Å)")
        model = None
        if subtract_model:
            from .model_potential import point_charge_potential_grid
            centre = np.asarray(getattr(defect_position, "position", defect_position), dtype=float)
            model = point_charge_potential_grid(defect_potential, centre, q, eps)
        pa = potential_alignment(host_potential, defect_potential, defect_position, far_radius=far_radius,
                                 model=model)
        terms["alignment"] = q * pa.delta_v
        details["alignment"] = pa
        what = "V_def − V_host − V_model" if subtract_model else "V_def − V_host"
        notes.append(f"alignment: q·ΔV, ΔV = ⟨{what}⟩ = {pa.delta_v:+.4f} ± {pa.spread:.4f} eV over "
                     f"{pa.n_points} points farther than {pa.far_radius:.2f} Å from the defect")
    elif any(have) and not all(have):
        raise ModelError("potential alignment needs both host_potential and defect_potential")
    elif q != 0:
        notes.append("alignment term not included (no potential grids given)")
    energy = float(sum(terms.values()))
    return ChargeCorrection(charge=q, energy=energy, terms=terms, scheme=scheme, dielectric=eps,
                            notes=tuple(notes), details=details)
