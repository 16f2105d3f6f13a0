"""The cluster-model fit across the engine's structural and chemical variants.

Targets are the in-gap level of each variant above the host VBM, as orbtool
reads it from the engine's output (verified against the engine's MO energies
in test_rocksalt_cluster.py). Reference: the engine's level shifts between
variants — ``vac_out5`` / ``vac_in5`` (first shell moved radially ±5 %) and
``vac_na`` (first-shell Li → Na) relative to ``vac``.

Model: the reduced "defect molecule" of six dangling hybrids on the first-shell
cations (ClusterModel "hybrid"), couplings by Harrison's universal d⁻² law
(W. A. Harrison, Electronic Structure and the Properties of Solids, 1980;
Froyen & Harrison, Phys. Rev. B 20, 2420 (1979)), on-site energies from
orbtool's term-value table. Free: the VBM offset and one coupling scale.
Acceptance (issue 9): shifts with the engine's sign and within 0.15 eV;
leave-one-case-out prediction within 0.2 eV.
"""

from __future__ import annotations

import numpy as np
import pytest
from external_cases import engine_record

BREATHING = ("vac", "vac_out5", "vac_in5")


def _level(case, site, name):
    """above_vbm of the engine's in-gap orbital (spin, MO index from engine.json)."""
    from orbtool.analysis import in_gap_states
    rec = engine_record(name)
    hits = [s for s in in_gap_states(case, site=site) if s.spin == rec["state_spin"] and s.band == rec["state_index"]]
    assert len(hits) == 1
    return hits[0]


@pytest.fixture(scope="module")
def breathing_fit(cases, sites):
    from orbtool.tb import ClusterModel, fit, targets_from_case
    states = {n: _level(cases[n], sites[n], n) for n in BREATHING}
    targets = [t for n in BREATHING for t in targets_from_case(cases[n], site=sites[n], state=states[n])]
    model = ClusterModel.around(sites["vac"], orbitals="hybrid", scaling="harrison", charge=1)
    result = fit(model, targets, use=("level",))
    return result, {n: s.above_vbm for n, s in states.items()}


def test_breathing_shifts_have_the_engine_sign_and_size(breathing_fit):
    result, dft = breathing_fit
    assert result.success
    model = {n: result.predict(case=n).level for n in BREATHING}
    for n in ("vac_out5", "vac_in5"):
        d_dft = dft[n] - dft["vac"]
        d_model = model[n] - model["vac"]
        # engine: outward breathing raises the level, inward lowers it (measured +0.15 / −0.31 eV)
        assert np.sign(d_model) == np.sign(d_dft) != 0, (n, d_dft, d_model)
        assert abs(d_model - d_dft) < 0.15, (n, d_dft, d_model)


def test_breathing_leave_one_out_prediction(breathing_fit):
    result, _ = breathing_fit
    cv = result.cross_validate()
    assert set(cv["errors"]) == set(BREATHING)
    for n, err in cv["errors"].items():
        assert np.isfinite(err) and abs(err) < 0.2, (n, err)


def test_breathing_prediction_through_geometry_edit(breathing_fit, sites, cases):
    """predict(geometry=site.breathe(f)) on the vac cell equals the fitted level of the case
    the engine computed at that geometry (same model, geometry given two ways)."""
    result, _ = breathing_fit
    for n, f in (("vac_out5", 0.05), ("vac_in5", -0.05)):
        edited = sites["vac"].breathe(f)
        np.testing.assert_allclose(edited.get_positions(), cases[n].defect.get_positions(), atol=1e-6)
        via_edit = result.predict(geometry=edited, case="vac").level
        assert via_edit == pytest.approx(result.predict(case=n).level, abs=1e-6)


@pytest.mark.xfail(strict=True, reason=(
    "measured: the engine lowers the level by 0.43 eV when the six first-shell Li become Na "
    "(vac_na − vac, host scale); the hybrid model fitted on the breathing variants predicts +0.28 eV "
    "(the sp cluster +0.20 eV), because the free-atom LDA term values put Na 3s/3p above Li 2s/2p "
    "(+0.06/+0.35 eV) while Harrison's couplings do not depend on the element. Whatever lowers the "
    "engine's level (presumably the more diffuse Na orbitals squeezed to the Li–F distance) is outside a "
    "term-value + universal-coupling model; fitting a Na on-site shift to the one Na case would only "
    "restate it."))
def test_cation_swap_prediction(cases, sites, breathing_fit):
    """Chemistry knob: predict the first-shell Li → Na swap with the model fitted on the breathing
    variants only, against the engine's own shift (vac_na − vac)."""
    result, dft = breathing_fit
    na = _level(cases["vac_na"], sites["vac_na"], "vac_na").above_vbm
    d_dft = na - dft["vac"]
    d_model = result.predict(case="vac", swap={"Li": "Na"}).level - result.predict(case="vac").level
    assert np.sign(d_model) == np.sign(d_dft), (d_dft, d_model)
    assert abs(d_model - d_dft) < 0.15, (d_dft, d_model)
