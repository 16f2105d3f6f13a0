"""'validated ranges' in the level explorer: what the fitted cases cover (first-shell distance and breathing,
cations, charges, site motif) and what the DFT harness measured — not the optimiser's parameter bounds.

Reference geometry: in rocksalt the nearest-neighbour distance is a/2 (C. Kittel, *Introduction to Solid State
Physics*, 8th ed., ch. 1, the NaCl structure); the cases below move the six neighbours of a Cl vacancy radially
by known fractions, so the breathing range the data cover is known in advance.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from ase.build import bulk

from orbtool.analysis import locate_vacancy
from orbtool.story import validated_ranges
from orbtool.tb import ClusterModel, Target, fit
from orbtool.tb.fit import knob_validation_lines

A = 5.64  # Å, NaCl (from memory; any value works, the test compares with a/2)
FRACTIONS = (-0.03, 0.02)
SPAN = f"{A / 2 * (1 + FRACTIONS[0]):.3f}–{A / 2 * (1 + FRACTIONS[1]):.3f} Å"


def _breathed(fraction):
    host = bulk("NaCl", "rocksalt", a=A, cubic=True).repeat(2)
    cl = [i for i, s in enumerate(host.get_chemical_symbols()) if s == "Cl"]
    v = cl[5]
    centre = host.positions[v].copy()
    defect = host.copy()
    d = defect.get_distances(v, range(len(defect)), mic=True, vector=True)
    near = [i for i in range(len(defect)) if i != v and abs(np.linalg.norm(d[i]) - A / 2) < 1e-6]
    assert len(near) == 6
    for i in near:
        defect.positions[i] = centre + d[i] * (1 + fraction)
    del defect[v]
    return locate_vacancy(host, defect)


@pytest.fixture(scope="module")
def two_case_fit():
    sites = [_breathed(f) for f in FRACTIONS]
    targets = [Target("in", above_vbm=1.0, site=sites[0], charge=0), Target("out", above_vbm=1.2, site=sites[1],
                                                                           charge=1)]
    return fit(ClusterModel.around(sites[0], "hybrid"), targets, free=["vbm"])


def test_coverage_is_what_the_fitted_cases_span(two_case_fit):
    cov = validated_ranges(two_case_fit)
    assert set(cov.cases) == {"in", "out"}
    lo, hi = cov.distance
    assert lo == pytest.approx(A / 2 * (1 + FRACTIONS[0]), abs=1e-6)
    assert hi == pytest.approx(A / 2 * (1 + FRACTIONS[1]), abs=1e-6)
    assert cov.breathing == pytest.approx(FRACTIONS, abs=1e-6)
    assert cov.cations == {"Na": 2}
    assert cov.charges == (0, 1)
    assert cov.motifs == {"Oh, 6-fold": 2}
    assert cov.distortion == pytest.approx(0.0, abs=1e-6)     # pure breathing: no other displacement
    assert list(cov.harness) == knob_validation_lines()      # the harness record, read by its loader
    text = dict(cov.lines())
    assert SPAN in text["breathing"] and "-3.0% … +2.0%" in text["breathing"]
    assert "Na (2 cases)" in text["swap cation"]
    assert "+0, +1" in text["charge"]


def test_coverage_is_not_the_optimiser_bounds(two_case_fit):
    """Widening every parameter's bounds changes where the optimiser may search, not what the data cover; the
    explorer's panel shows the coverage and no bounds."""
    from orbtool.widgets.levels import validated_ranges_html

    before = validated_ranges(two_case_fit).lines()
    wide = {n: (lo - 10.0, hi + 10.0) for n, (lo, hi) in two_case_fit.bounds.items()}
    widened = dataclasses.replace(two_case_fit, bounds=wide)
    assert widened.parameter_bounds != two_case_fit.parameter_bounds
    assert validated_ranges(widened).lines() == before
    html = validated_ranges_html(widened)
    assert "validated ranges" in html and SPAN in html
    for lo, hi in wide.values():
        assert f"[{lo:.3g}, {hi:.3g}]" not in html


def test_one_distance_only_is_called_extrapolation():
    site = _breathed(0.0)
    result = fit(ClusterModel.around(site, "hybrid"), [Target("v", above_vbm=1.0, site=site)], free=["vbm"])
    cov = validated_ranges(result)
    assert cov.distance[0] == pytest.approx(cov.distance[1]) == pytest.approx(A / 2, abs=1e-6)
    assert "extrapolation" in dict(cov.lines())["breathing"]
    assert "not recorded" in dict(cov.lines())["charge"]


def test_a_fit_without_cases_says_so():
    class Bare:
        pass
    (line,) = validated_ranges(Bare()).lines()
    assert "extrapolation" in line[1]
