"""Thermodynamic levels and their consequence.

* :mod:`~orbtool.levels.chempot` — allowed chemical potentials (:func:`stability_region`).
* :mod:`~orbtool.levels.formation` — formation energies, lowest-energy envelope,
  transition levels (:func:`formation_energies` → :class:`FormationDiagram`).
* :mod:`~orbtool.levels.ewald`, :mod:`~orbtool.levels.correction` — anisotropic
  Ewald sums and charged-cell corrections (:func:`charge_correction`);
  :mod:`~orbtool.levels.model_potential` — the screened point-charge potential
  for model-subtracted alignment.
* :mod:`~orbtool.levels.srh` — Shockley–Read–Hall rates and lifetimes
  (:class:`Semiconductor`, :class:`TrapRecombination`).
* :mod:`~orbtool.levels.defect_levels` — :class:`DefectLevels`, the Kohn–Sham
  state, transition levels and SRH factors of one defect side by side.
"""

from .charge_state import ChargeState
from .chempot import ChemicalPotentials, Phase, StabilityRegion, stability_region
from .correction import (
    ChargeCorrection,
    PotentialAlignment,
    charge_correction,
    image_charge_energy,
    makov_payne_energy,
    potential_alignment,
)
from .defect_levels import DefectLevels, LevelEntry
from .ewald import dielectric_tensor, ewald_energy, lattice_madelung_alpha
from .formation import FormationDiagram, TransitionLevel, formation_energies
from .model_potential import ewald_potential, point_charge_potential_grid
from .srh import (
    LifetimeScan,
    Semiconductor,
    TrapRecombination,
    capture_time,
    effective_density_of_states,
    intrinsic_density,
    srh_rate,
)

__all__ = [
    "ChemicalPotentials", "Phase", "StabilityRegion", "stability_region",
    "ChargeCorrection", "PotentialAlignment", "charge_correction", "image_charge_energy", "makov_payne_energy",
    "potential_alignment",
    "DefectLevels", "LevelEntry",
    "dielectric_tensor", "ewald_energy", "lattice_madelung_alpha", "ewald_potential", "point_charge_potential_grid",
    "ChargeState", "FormationDiagram", "TransitionLevel", "formation_energies",
    "LifetimeScan", "Semiconductor", "TrapRecombination", "capture_time", "effective_density_of_states",
    "intrinsic_density", "srh_rate",
]
