"""The "what would make it shallow" scan: bounded stacked work, and no fake precision where a knob
has no first-order effect.

References: linear error propagation σ_x = σ_f / |df/dx| (e.g. J. R. Taylor, An Introduction to Error
Analysis, 2nd ed., Sec. 3.11), which is undefined where df/dx = 0; for an even function f(x) = f(−x)
(a site-symmetry-preserving change of sign of a distortion) df/dx = 0 at x = 0 (elementary calculus).
"""

from __future__ import annotations

import numpy as np
import pytest
from tb_standin import make_site

import orbtool.tb.inverse as inverse
from orbtool.tb import ClusterModel, Target, fit


def test_entry_gives_linear_sigma_where_the_slope_is_finite():
    grid = np.linspace(-0.5, 0.5, 41)
    lev = 0.6 - 2.0 * grid  # reaches 0.1 eV above the VBM at x = +0.25, slope −2 eV/Å
    ch = inverse._entry(None, None, "mode:test", "Å", grid, lev, 1.2, 0.1, "vbm", 0.03)
    assert ch.reached and ch.change == pytest.approx(0.25)
    assert ch.sigma == pytest.approx(0.03 / 2.0)  # Taylor Sec. 3.11: σ_x = σ_f / |df/dx|


@pytest.mark.parametrize("curv", [0.0, 0.4])
def test_entry_reports_no_first_order_effect_instead_of_a_huge_sigma(curv):
    # already shallow at x = 0 and even in x (or flat): df/dx = 0 there, so σ_level/|slope| is meaningless
    grid = np.linspace(-0.5, 0.5, 41)
    lev = 0.05 + curv * grid ** 2
    ch = inverse._entry(None, None, "mode:even", "Å", grid, lev, 1.2, 0.1, "vbm", 0.03)
    assert ch.reached and ch.change == pytest.approx(0.0, abs=1e-12)
    assert ch.sigma == np.inf and "no first-order effect" in ch.note


@pytest.fixture(scope="module")
def shallow_fit():
    # Si vacancy stand-in (Td site), one target 0.05 eV above the VBM: shallow at zero change
    site = make_site()
    model = ClusterModel.around(site, "hybrid")
    return fit(model, [Target("si", above_vbm=0.05, gap=1.1, site=site)], free=["vbm"])


def test_already_shallow_case_has_no_astronomical_sigmas(shallow_fit):
    changes = shallow_fit.smallest_change_to_shallow(within=0.1, swaps=False)
    modes = [c for c in changes if c.knob.startswith("mode:")]
    assert modes and all(c.reached and c.change == 0.0 for c in modes)
    for c in changes:  # before: ~1e11 Å for modes whose slope at zero is rounding noise
        assert c.sigma == np.inf or c.sigma < 10.0, (c.knob, c.sigma)
        if c.sigma == np.inf:
            assert "no first-order effect" in c.note


def test_scan_is_stacked_and_bounded_whatever_n_grid(shallow_fit, monkeypatch):
    # every round diagonalises all modes in one stacked call; the points per knob do not grow with n_grid
    calls = []
    real = inverse.scan

    def counting(fit_, **kw):
        out = real(fit_, **kw)
        calls.append((sorted(k for k in kw if k != "case"), len(out)))
        return out

    monkeypatch.setattr(inverse, "scan", counting)
    model = shallow_fit.problem.models["si"]
    n_modes = len(model.modes)
    # aim at the CBM so that the margin changes sign inside the range and the refinement rounds run
    inverse.smallest_change_to_shallow(shallow_fit, within=0.1, edge="cbm", n_grid=5001, swaps=False)
    geo = [n for keys, n in calls if keys == ["geometries"]]
    shift = [n for keys, n in calls if keys == ["onsite_shift"]]
    bound = inverse._COARSE + inverse._ROUNDS * (inverse._FINE - 2)
    assert 1 <= len(geo) <= 1 + inverse._ROUNDS and len(shift) <= 1 + inverse._ROUNDS
    assert geo[0] == n_modes * inverse._COARSE and sum(geo) <= n_modes * bound
    assert sum(shift) <= bound
