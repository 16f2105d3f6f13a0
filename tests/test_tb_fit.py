"""Fitter: parameter recovery with honest uncertainties (coverage over 50 seeds), bad input, diagnostics."""

import numpy as np
import pytest
from tb_standin import breathe, make_site

from orbtool.errors import FitError
from orbtool.tb import ClusterModel, Target, fit

TRUE = {"vbm": -7.3, "coupling_scale": 0.55, "n": 3.0, "s_fraction": 0.18}
STRAINS = (-0.15, -0.1, -0.05, 0.0, 0.05, 0.1, 0.15)
SIGMA = 0.02


@pytest.fixture(scope="module")
def family():
    base = make_site()
    sites = [breathe(base, s) for s in STRAINS]
    model = ClusterModel.around(base, "hybrid")
    truth = []
    for k, st in enumerate(sites):
        m = model.with_site(st)
        lv = m.solve({"coupling_scale": TRUE["coupling_scale"], "n": TRUE["n"], "s_fraction": TRUE["s_fraction"]})
        truth.append(float(lv.level[0] - TRUE["vbm"]))
    return model, sites, np.array(truth)


def _targets(sites, truth, rng):
    noisy = truth + rng.normal(0, SIGMA, len(truth))
    s_obs = TRUE["s_fraction"] + rng.normal(0, SIGMA, len(truth))
    return [Target(f"c{k}", above_vbm=float(noisy[k]), sigma_level=SIGMA, s_fraction=float(s_obs[k]),
                   sigma_s=SIGMA, gap=1.2, site=sites[k]) for k in range(len(sites))]


@pytest.mark.slow
def test_parameter_recovery_coverage(family):
    # Coverage of Gaussian confidence intervals under a (nearly) linear model: the true value lies within
    # ±2σ in ≈95 % of repetitions (standard least-squares theory, e.g. Press et al., Numerical Recipes
    # 3rd ed., Sec. 15.6). Requirement of the issue: ≥ 90 % of 50 seeds for every parameter.
    model, sites, truth = family
    free = ["vbm", "coupling_scale", "n", "s_fraction"]
    hits = {k: 0 for k in free}
    for seed in range(50):
        rng = np.random.default_rng(seed)
        res = fit(model, _targets(sites, truth, rng), free=free, absolute_sigma=True,
                  initial={"coupling_scale": 1.0, "n": 2.0, "s_fraction": 0.25})
        for k in free:
            hits[k] += abs(res.value(k) - TRUE[k]) <= 2 * res.error(k)
    for k in free:
        assert hits[k] >= 45, f"{k}: true value inside 2σ in only {hits[k]}/50 seeds"


def test_fit_reports(family):
    model, sites, truth = family
    res = fit(model, _targets(sites, truth, np.random.default_rng(3)), free=["vbm", "coupling_scale", "n"],
              fixed={"s_fraction": TRUE["s_fraction"]})
    nval = 2 * len(STRAINS)  # one level and one s fraction per case
    assert res.success and res.dof == nval - 3
    # χ² of a correct model with correct σ is ~ dof (χ² distribution mean = dof): loose 5-σ bound
    assert res.chi2 < res.dof + 5 * np.sqrt(2 * res.dof)
    np.testing.assert_allclose(np.diag(res.correlation), 1.0)
    assert res.aic == pytest.approx(res.chi2 + 2 * 3)  # Burnham & Anderson (2002): AIC = χ² + 2k
    assert res.bic == pytest.approx(res.chi2 + 3 * np.log(nval))
    d = res.to_dict()
    assert d["free"] == res.free and len(d["sigma"]) == 3
    assert "coupling_scale" in res.summary()
    cv = res.cross_validate()
    assert set(cv["errors"]) == {f"c{k}" for k in range(len(STRAINS))}
    assert cv["rms"] < 5 * SIGMA  # leave-one-out errors of a correct model are of the noise size


def test_unidentifiable_and_bounds(family):
    model, sites, truth = family
    # a rigid shift of Si and the VBM offset enter the level only through their difference:
    # the identifiability report must name that combination (common practice: SVD of the Jacobian).
    res = fit(model, _targets(sites, truth, np.random.default_rng(5)), free=["vbm", "shift_Si", "coupling_scale"],
              fixed={"n": 3.0, "s_fraction": 0.18})
    assert res.weak_directions, res.summary()
    names = set(res.weak_directions[0][1])
    assert {"vbm", "shift_Si"} <= names
    # a bound that binds is reported, not hidden
    res = fit(model, _targets(sites, truth, np.random.default_rng(6)), free=["vbm", "coupling_scale"],
              bounds={"coupling_scale": (0.8, 2.0)}, fixed={"n": 3.0, "s_fraction": 0.18})
    assert "coupling_scale" in res.at_bounds and "AT BOUND" in res.summary()


def test_bad_inputs(family):
    model, sites, truth = family
    one = [Target("a", above_vbm=0.5)]
    with pytest.raises(FitError, match="free parameters"):
        fit(model, one, free=["vbm", "coupling_scale"])
    with pytest.raises(FitError, match="unknown parameter"):
        fit(model, one, free=["nonsense"])
    with pytest.raises(FitError, match="finite"):
        Target("a", above_vbm=float("nan"))
    with pytest.raises(FitError, match="no targets"):
        fit(model, [])


def test_predict_and_inverse(family):
    model, sites, truth = family
    res = fit(model, _targets(sites, truth, np.random.default_rng(9)), free=["vbm", "coupling_scale", "n"],
              fixed={"s_fraction": TRUE["s_fraction"]})
    p = res.predict(case="c3")
    # the prediction at the fitted geometry reproduces the fitted level of that case
    assert p.level == pytest.approx(res.problem.model_values("c3", res.values[None])[0, 0, 0])
    assert p.labels[int(np.argmin(np.abs(p.levels - p.level)))] == "t2"  # Coulson–Kearsley: t2 in the gap
    # predict(geometry=Atoms) with the breathed cell equals the case built from that cell
    p2 = res.predict(geometry=sites[0].defect, case="c3")
    assert p2.level == pytest.approx(res.predict(case="c0").level, abs=1e-9)
    assert p.sigma > 0 and p.verdict in ("deep", "deep — borderline within 2σ") or "shallow" in p.verdict
    band = res.predict(case="c3", samples=400).band
    assert band[0] < p.level < band[1]
    changes = res.smallest_change_to_shallow(within=0.1, case="c3")
    kinds = {c.knob for c in changes}
    assert "mode:breathing" in kinds and "onsite_shift" in kinds
    shift = next(c for c in changes if c.knob == "onsite_shift")
    if shift.reached:  # the shifted model indeed sits within 0.1 eV of an edge
        lv = res.predict(case="c3", onsite_shift=shift.change, labels=False).level
        assert lv <= 0.1 + 1e-3 or 1.2 - lv <= 0.1 + 1e-3
    text = res.explain(case="c3")
    assert "above the VBM" in text and "breathing" in text


def test_targets_from_duck_typed_state(family):
    # Definitions used by orbtool (common practice for PDOS-derived characters): s fraction = s/(s+p),
    # first-shell fraction = f1/(f1+f2), gap = CBM − VBM of the state's band edges.
    from types import SimpleNamespace

    from orbtool.tb import targets_from_case

    model, sites, truth = family
    edges = SimpleNamespace(vbm=1.0, cbm=2.1, gap=1.1)
    state = SimpleNamespace(above_vbm=0.35, below_cbm=0.75, orbital_weights={"s": 0.1, "p": 0.3, "d": 0.6},
                            shell_fractions={1: 0.45, 2: 0.15, "rest": 0.4}, edges=edges)
    case = SimpleNamespace(name="v", labels={"cation": "Si"}, charge=-1)
    (t,) = targets_from_case(case, site=sites[3], state=state)
    assert t.above_vbm == 0.35 and t.gap == 1.1 and t.charge == -1
    assert t.s_fraction == pytest.approx(0.25) and t.shell1 == pytest.approx(0.75)
    res = fit(model, [t], free=["vbm"])
    # charge −1 adds an electron to the Si vacancy's defect molecule: 5 electrons, still the t2 level
    assert res.problem.models["v"].electrons == pytest.approx(5.0)
    assert res.predict().level == pytest.approx(0.35, abs=1e-6)


def test_full_cluster_fit_and_knobs():
    # sp valence cluster (first + second shell) of the Si vacancy: the dangling level transforms as
    # a1 and/or t2 of Td (Coulson & Kearsley 1957; four dangling hybrids span a1 + t2).
    site = make_site()
    m = ClusterModel.around(site, "sp")
    t = [Target("si", above_vbm=0.3, shell1=0.6, gap=1.1)]
    res = fit(m, t, free=["vbm"])
    p = res.predict(geometry=breathe(site, -0.03).defect)
    assert set(p.character["label"].split("+")) <= {"a1", "t2"}
    assert 0 < p.character["dangling"] <= 1 and abs(p.character["s"] + p.character["p"] - 1) < 1e-9
    lv = res.scan(coupling_scale=np.array([1.0, 1.2]))
    assert lv.shape == (2,) and np.all(np.isfinite(lv))
    assert "above the VBM" in res.explain()
    assert any(c.knob == "onsite_shift" and c.reached for c in res.smallest_change_to_shallow(within=0.1))
