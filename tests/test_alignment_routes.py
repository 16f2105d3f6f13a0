"""Independent alignment routes on the pyscf engine data: each PDOS route against the engine's own
band energies and Löwdin weights, the window rule's insensitivity to its edges, and the warning
when routes disagree.

Reference: the engine's eigenvalues and Löwdin weights per atom (``projections.proj.txt.gz`` of
``tests/external/data``): the weight-averaged eigenvalue of the far atoms over a band is what the
broadened PDOS centroid must reproduce (moments theorem, F. Cyrot-Lackmann, Adv. Phys. 16, 393
(1967): the first moment of a Gaussian-broadened DOS equals the weighted mean of its levels).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

import orbtool
from orbtool.analysis import align, locate_vacancy
from orbtool.analysis import align_routes as ar
from orbtool.analysis.alignment import align_routes, far_atoms, host_indices

DATA = Path(__file__).parent / "external" / "data"


@pytest.fixture(scope="module")
def lif():
    case = orbtool.load_case(DATA / "vac", host=DATA / "host")
    site = locate_vacancy(case.host, case.defect)
    far_d = far_atoms(case.defect, site.position)
    far_h = host_indices(site, case.defect, case.host, far_d)
    return case, site, far_h, far_d


def _weighted_levels(proj, atoms, window, shift=0.0):
    """Far-atom Löwdin-weighted mean of the engine's eigenvalues inside ``window`` − ``shift`` (eV)."""
    e = proj.energies[0, 0]
    w = proj.weights[0, 0][:, atoms].sum(axis=(1, 2))
    m = (e + shift >= window[0]) & (e + shift <= window[1])
    return float((e[m] * w[m]).sum() / w[m].sum())


def test_each_pdos_route_matches_the_engine_levels(lif):
    case, site, far_h, far_d = lif
    res = align_routes(case, site)
    routes = {r["route"]: r for r in res.routes}
    assert set(routes) == {"pdos-valence", "pdos-semicore"}           # no potential grids in this set
    for name, r in routes.items():
        direct = (_weighted_levels(case.host_projections, far_h, r["window"])
                  - _weighted_levels(case.projections, far_d, r["window"], r["shift"]))
        # broadening (σ = 0.15 eV) and the 1 % tails cut at the window edges: 0.01 eV
        assert r["shift"] == pytest.approx(direct, abs=0.01), name
        assert r["spread"] >= 0 and r["n_atoms"] == len(far_d)
    # the semicore route uses the deepest band (Li 1s near −50 eV), the valence route F 2p
    assert routes["pdos-semicore"]["window"][1] < routes["pdos-valence"]["window"][0]


def test_window_edges_inside_gaps_do_not_move_the_result(lif):
    case, _, far_h, far_d = lif
    val = ar.valence_window(case.host_pdos, far_h)
    start = ar.spectral_offset(case.host_pdos, case.defect_pdos, far_h, far_d)
    base = ar.pdos_route(case.host_pdos, case.defect_pdos, far_h, far_d, val, start)[0]
    for d in (-0.4, -0.2, 0.2, 0.4):
        moved = ar.pdos_route(case.host_pdos, case.defect_pdos, far_h, far_d, (val[0] + d, val[1] + d), start)[0]
        assert moved == pytest.approx(base, abs=0.01)
    # the former default (everything up to the host's Fermi level) moves by eV when its edge moves by 1 eV
    ef = case.host_pdos.fermi
    old = [align(case, method="pdos", window=(case.host_pdos.energies[0], ef + d)).shift for d in (-1.0, 0.0)]
    assert abs(old[1] - old[0]) > 0.5


def test_routes_that_disagree_are_flagged(lif):
    case, site, _, _ = lif
    res = align_routes(case, site)
    shifts = [r["shift"] for r in res.routes]
    assert bool(res.warnings) == (max(shifts) - min(shifts) > 0.1)
    assert "route pdos-valence" in res.summary()
    # the default alignment keeps its shift and carries the cross-check
    a = align(case, site)
    assert {r["route"] for r in a.routes} >= {"pdos-occupied", "pdos-valence", "pdos-semicore"}
    assert bool(a.warnings) == ("WARNING" in a.method)


def test_atomic_potentials_route(lif):
    case, site, far_h, far_d = lif
    vh = np.arange(len(case.host), dtype=float)
    vd = np.arange(len(case.defect), dtype=float) + 0.25
    res = align_routes(case, site, atomic_potentials=(vh, vd))
    r = res.routes[0]
    assert r["route"] == "atomic-potentials"
    # mean of V_host − V_defect over the far atoms, by hand
    assert r["shift"] == pytest.approx(float(np.mean(vh[far_h] - vd[far_d])))
