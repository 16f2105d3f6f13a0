"""One charge state of a defect: its total energies and finite-size correction (:class:`ChargeState`)."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..errors import InputFormatError

__all__ = ["ChargeState"]


def _finite(value, what: str, source=None, field_name=None) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise InputFormatError(source, None, f"{what} must be a number, got {value!r}", field=field_name) from None
    if not math.isfinite(v):
        raise InputFormatError(source, None, f"{what} must be finite, got {v}", field=field_name)
    return v


def _qstr(q) -> str:
    q = int(q)
    return f"{q:+d}" if q else "0"


@dataclass(frozen=True)
class ChargeState:
    """Total energies of one charge state of a defect.

    Attributes
    ----------
    charge : int
        q, e (electrons removed count positive).
    total_energy : float
        Total energy of the defect supercell in this charge state, eV.
    host_total_energy : float or None
        Total energy of the pristine supercell, eV (may instead be given once
        to :func:`formation_energies`).
    correction : float
        Finite-size correction added to ``total_energy``, eV (a
        :class:`~orbtool.levels.correction.ChargeCorrection` is accepted and
        kept in :attr:`correction_detail`).
    exchanged : dict[str, int] or None
        Atoms added to the host (negative: removed), e.g. ``{"O": -1}``.
    source : str or None
        Where the energies came from.
    correction_detail : ChargeCorrection or None
        The correction object, when one was given (set automatically).
    """

    charge: int
    total_energy: float
    host_total_energy: float | None = None
    correction: float = 0.0
    exchanged: dict | None = None
    source: str | None = None
    correction_detail: object = None

    def __post_init__(self):
        src = self.source
        q = self.charge
        ok = isinstance(q, (int, np.integer, float, np.floating)) and not isinstance(q, bool)
        if not ok or not math.isfinite(q) or int(q) != q:
            raise InputFormatError(src, None, f"charge must be an integer, got {q!r}", field="charge")
        object.__setattr__(self, "charge", int(q))
        object.__setattr__(self, "total_energy", _finite(self.total_energy, "total_energy", src, "total_energy"))
        if self.host_total_energy is not None:
            object.__setattr__(self, "host_total_energy",
                               _finite(self.host_total_energy, "host_total_energy", src, "host_total_energy"))
        corr = self.correction
        if hasattr(corr, "terms") and hasattr(corr, "energy"):
            if getattr(corr, "charge", self.charge) != self.charge:
                raise InputFormatError(src, None, f"correction is for q = {corr.charge:+d} but the state has "
                                       f"q = {self.charge:+d}", field="correction")
            object.__setattr__(self, "correction_detail", corr)
            corr = corr.energy
        object.__setattr__(self, "correction", _finite(corr, "correction", src, "correction"))
        if self.exchanged is not None:
            object.__setattr__(self, "exchanged", {str(k): int(v) for k, v in dict(self.exchanged).items() if v})

    @classmethod
    def from_case(cls, case, correction=None, host_total_energy: float | None = None, *, dielectric=None,
                  defect_position=None, scheme: str = "ewald", subtract_model: bool = False) -> "ChargeState":
        """Build from a :class:`~orbtool.case.DefectCase` (energies in eV).

        The atoms exchanged are counted from the defect and host structures
        when both are present.

        Parameters
        ----------
        case : DefectCase
        correction : float or ChargeCorrection, optional
            Finite-size correction, eV. If omitted and ``dielectric`` is
            given, it is computed with
            :func:`~orbtool.levels.correction.charge_correction` on the defect
            cell, adding potential alignment when the case holds ``"potential"``
            grids for defect and host and ``defect_position`` (Å) is given.
        host_total_energy : float, optional
            Overrides the case's host energy, eV.
        dielectric, defect_position, scheme, subtract_model
            Passed to ``charge_correction``.
        """
        src = getattr(case, "source", None) or getattr(case, "name", None)
        if case.total_energy is None:
            raise InputFormatError(src, None, f"case {case.name!r} has no defect total energy", field="total_energy")
        host_e = case.host_total_energy if host_total_energy is None else host_total_energy
        exchanged = None
        if case.host is not None:
            from collections import Counter
            d = Counter(case.defect.get_chemical_symbols())
            h = Counter(case.host.get_chemical_symbols())
            exchanged = {e: d[e] - h[e] for e in set(d) | set(h) if d[e] != h[e]}
        if correction is None and dielectric is not None:
            from .correction import charge_correction
            hp, dp = case.host_grids.get("potential"), case.grids.get("potential")
            use_grids = hp is not None and dp is not None and defect_position is not None
            correction = charge_correction(case.charge, case.defect, dielectric, scheme=scheme,
                                           host_potential=hp if use_grids else None,
                                           defect_potential=dp if use_grids else None,
                                           defect_position=defect_position, subtract_model=subtract_model)
        elif correction is None:
            correction = 0.0
        return cls(charge=case.charge, total_energy=case.total_energy, host_total_energy=host_e,
                   correction=correction, exchanged=exchanged, source=src)
