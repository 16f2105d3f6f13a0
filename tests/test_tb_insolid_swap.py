"""The in-solid swap route (``predict(swap=..., host_gap=...)``): swapped dangling orbitals keep their
place relative to the band edge they belong to.

References for the checks: the universal scaling of tight-binding couplings, V ∝ ħ²/(m d²)
(W. A. Harrison, *Electronic Structure and the Properties of Solids* (1980), ch. 2, Eq. 2-4): in a
uniform strain by s every coupling-made energy scales by s⁻², so a level's depth below its band edge
does too; and the rigid-shift theorem of a one-element cluster (adding δ to every on-site energy moves
every eigenvalue by δ — linear algebra). Real-engine numbers are in tests/external/test_periodic_family.py.
"""

import numpy as np
import pytest
from ase.build import bulk

from orbtool.analysis import locate_vacancy
from orbtool.errors import ModelError
from orbtool.tb import ClusterModel, Target, fit

GAP = 2.0


def _site(formula="ZnS", structure="zincblende", a=5.41, remove=1, rep=2):
    host = bulk(formula, structure, a=a).repeat(rep)
    defect = host.copy()
    del defect[remove]
    return host, defect, locate_vacancy(host, defect)


@pytest.fixture(scope="module")
def anion_vacancy():
    host, defect, site = _site()
    model = ClusterModel.around(site, "hybrid", term_values="harrison1980")
    res = fit(model, [Target("v", above_vbm=0.6, s_fraction=0.25, site=site, gap=GAP)])
    return defect, res


def _scaled(atoms, s):
    out = atoms.copy()
    out.set_cell(atoms.cell[:] * s, scale_atoms=True)
    return out


def test_same_gap_same_lattice_gives_the_fitted_level(anion_vacancy):
    defect, res = anion_vacancy
    base = res.predict(labels=False).level
    same = res.predict(swap={"Zn": "Cd"}, host_gap=GAP, labels=False).level
    assert same == pytest.approx(base, abs=1e-9)
    # the free-atom route differs (Cd's term values are not Zn's)
    assert abs(res.predict(swap={"Zn": "Cd"}, labels=False).level - base) > 1e-3


def test_cation_orbitals_follow_the_conduction_band_edge(anion_vacancy):
    # a one-element cluster shifted rigidly: every level moves by the gap change (rigid-shift theorem)
    defect, res = anion_vacancy
    base = res.predict(labels=False).level
    for dg in (-0.7, 0.3):
        p = res.predict(swap={"Zn": "Cd"}, host_gap=GAP + dg, labels=False)
        assert p.level - base == pytest.approx(dg, abs=1e-9)
        assert p.cbm == pytest.approx(GAP + dg)


def test_depth_below_the_edge_scales_like_the_couplings(anion_vacancy):
    # uniform strain s with the same gap: depth below the CBM scales by (d0/d)^n = s^-n (Harrison 1980, ch. 2)
    defect, res = anion_vacancy
    n = res.values[res.names.index("n")]
    base = res.predict(labels=False).level
    for s in (1.04, 1.08):
        level = res.predict(geometry=_scaled(defect, s), swap={"Zn": "Cd"}, host_gap=GAP, labels=False).level
        assert GAP - level == pytest.approx((GAP - base) * s ** (-n), rel=1e-6)


def test_anion_orbitals_keep_their_place_relative_to_the_vbm():
    # cation vacancy: the first shell is S, whose dangling orbitals are valence-band states
    host, defect, site = _site(remove=0)
    assert site.element == "Zn"
    model = ClusterModel.around(site, "hybrid", term_values="harrison1980")
    res = fit(model, [Target("v", above_vbm=0.3, s_fraction=0.1, site=site, gap=GAP)])
    base = res.predict(labels=False).level
    moved = res.predict(swap={"S": "Se"}, host_gap=GAP - 0.8, labels=False)
    assert moved.level == pytest.approx(base, abs=1e-9)


def test_refusals(anion_vacancy):
    defect, res = anion_vacancy
    with pytest.raises(ModelError, match="pass swap"):
        res.predict(host_gap=1.0)
    for bad in (-1.0, 0.0, float("nan"), "wide"):
        with pytest.raises(ModelError, match="host_gap"):
            res.predict(swap={"Zn": "Cd"}, host_gap=bad)
    _, _, site = _site()
    model = ClusterModel.around(site, "hybrid", term_values="harrison1980")
    nogap = fit(model, [Target("v", above_vbm=0.6, s_fraction=0.25, site=site)])
    with pytest.raises(ModelError, match="gap of the fitted case"):
        nogap.predict(swap={"Zn": "Cd"}, host_gap=1.0)


def test_uncertainty_is_propagated_through_the_route(anion_vacancy):
    defect, res = anion_vacancy
    p = res.predict(geometry=_scaled(defect, 1.05), swap={"Zn": "Cd"}, host_gap=1.2)
    assert np.isfinite(p.sigma) and p.sigma >= 0
