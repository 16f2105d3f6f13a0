"""Band edges of the host from the cluster's Slater–Koster parameters (orbtool.tb.host_bands)."""

import numpy as np
import pytest
from ase.build import bulk

from orbtool.analysis import locate_vacancy
from orbtool.tb import ClusterModel, Target, fit
from orbtool.tb.host_bands import HostBands
from orbtool.tb.scaling import HARRISON_ETA_1980, DistanceLaw
from orbtool.units import HBAR2_OVER_ME

ZN, S = (-8.40, -3.38), (-20.80, -10.27)  # Harrison (1980) Solid State Table (REFERENCES [2nd])


def _gamma_levels(a=5.41):
    """Closed form at Γ of the nearest-neighbour sp zinc-blende model (Vogl, Hjalmarson & Dow,
    J. Phys. Chem. Solids 44, 365 (1983), their Γ-point blocks without s*): the s block couples
    anion s and cation s by 4 V_ssσ; each p block (x, y, z) couples anion and cation p by
    4 (V_ppσ + 2 V_ppπ)/3; s–p terms cancel at Γ. Couplings: Harrison's η ħ²/(m d²), 1980 set."""
    d = a * np.sqrt(3) / 4
    u = HBAR2_OVER_ME / d ** 2
    vss = 4 * HARRISON_ETA_1980["ss_sigma"] * u
    vxx = 4 * (HARRISON_ETA_1980["pp_sigma"] + 2 * HARRISON_ETA_1980["pp_pi"]) * u / 3
    out = []
    for ea, ec, v, mult in ((S[0], ZN[0], vss, 1), (S[1], ZN[1], vxx, 3)):
        m, r = (ea + ec) / 2, np.hypot((ec - ea) / 2, v)
        out += [m - r] * mult + [m + r] * mult
    return d, np.sort(out)


def test_primitive_cell_gamma_levels_match_the_closed_form():
    d, ref = _gamma_levels()
    hb = HostBands.of(bulk("ZnS", "zincblende", a=5.41), {"Zn": ZN, "S": S}, DistanceLaw(d0=d))
    np.testing.assert_allclose(hb.levels(1.0, 2.0, {})[0], ref, atol=1e-10)
    vbm, cbm = hb.edges(1.0, 2.0, {})
    assert hb.n_occupied == 4 and vbm[0] == pytest.approx(ref[3]) and cbm[0] == pytest.approx(ref[4])


def test_supercell_vbm_is_the_gamma15_level_and_moves_with_the_lattice():
    # zinc blende's VBM is at Γ; a 3×3×3 supercell folds Γ onto Γ, so its Γ VBM is the same level
    d, ref = _gamma_levels()
    hb = HostBands.of(bulk("ZnS", "zincblende", a=5.41).repeat(3), {"Zn": ZN, "S": S}, DistanceLaw(d0=d))
    assert hb.edges(1.0, 2.0, {})[0][0] == pytest.approx(ref[3], abs=1e-9)
    _, ref2 = _gamma_levels(5.82)
    assert hb.swapped({}, 5.82 / 5.41).edges(1.0, 2.0, {})[0][0] == pytest.approx(ref2[3], abs=1e-9)
    # a shift of the cation raises the VBM by less than the shift (it is mostly anion p)
    up = hb.edges(1.0, 2.0, {"Zn": 1.0})[0][0] - ref[3]
    assert 0 < up < 0.5


def test_fit_with_model_edges_refers_levels_to_the_model_vbm():
    host = bulk("ZnS", "zincblende", a=5.41).repeat(2)
    defect = host.copy()
    del defect[1]
    site = locate_vacancy(host, defect)
    m = ClusterModel.around(site, "hybrid", edges="model", term_values="harrison1980")
    assert m.host_bands is not None and "S" in m.onsite
    r = fit(m, [Target("v", above_vbm=0.8, s_fraction=0.2, site=site)])
    lv = m.solve(r.problem.case_params("v", r.values[None]))
    vbm_model = m.host_bands.edges(1.0, 2.0, {"Zn": 0.0})[0][0]
    assert float(lv.level[0] - vbm_model - r.value("vbm")) == pytest.approx(r.predict().level, abs=1e-9)
    assert r.predict().level == pytest.approx(0.8, abs=1e-6)
