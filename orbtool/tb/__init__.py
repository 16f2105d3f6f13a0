"""Tight-binding core: Slater–Koster cluster model of the vacancy, fitter with uncertainties, what-if engine.

Typical use::

    model = orbtool.tb.ClusterModel.around(site, orbitals="hybrid", scaling="harrison")
    result = orbtool.tb.fit(model, orbtool.tb.targets_from_case(case, site))
    result.predict(geometry=site.breathe(-0.05)).verdict
"""

from __future__ import annotations

from .cluster import ClusterModel, Levels, Parameter
from .elements import TermValues, available_elements, term_values
from .fit import FitParameter, FitResult, fit
from .inverse import ShallowChange
from .scaling import HARRISON_ETA_1980, HARRISON_ETA_1999, DistanceLaw, harrison_coupling
from .slater_koster import ORBITAL_NAMES, sk_block
from .targets import Target, targets_from_case
from .whatif import Prediction

__all__ = ["ClusterModel", "Levels", "Parameter", "TermValues", "available_elements", "term_values",
           "FitParameter", "FitResult", "fit", "ShallowChange", "HARRISON_ETA_1980", "HARRISON_ETA_1999",
           "DistanceLaw", "harrison_coupling", "ORBITAL_NAMES", "sk_block", "Target", "targets_from_case",
           "Prediction"]
