"""In-gap states and alignment with the vacancy located by orbtool.analysis.geometry.

External reference: the diamond structure of silicon from ASE (a = 5.43 Å) and
its neighbour distances from ase.geometry (first shell 4 atoms at a√3/4 =
2.351 Å; second shell 12 atoms at a/√2 = 3.840 Å; Kittel, *Introduction to
Solid State Physics*, chapter 1, diamond structure [from memory]).
"""

import numpy as np
import pytest
from ase.build import bulk
from ase.geometry import get_distances

from orbtool.analysis.alignment import align
from orbtool.analysis.states import in_gap_states
from orbtool.case import DefectCase
from orbtool.grid import Grid
from orbtool.spectra import BandProjections

REMOVED = 5


@pytest.fixture(scope="module")
def cells():
    host = bulk("Si", "diamond", 5.43, cubic=True).repeat(2)
    defect = host.copy()
    del defect[REMOVED]
    _, d = get_distances(defect.get_positions(), [host.positions[REMOVED]], cell=host.cell, pbc=True)
    d = d[:, 0]
    first = np.flatnonzero(np.abs(d - 5.43 * np.sqrt(3) / 4) < 0.05)
    second = np.flatnonzero(np.abs(d - 5.43 / np.sqrt(2)) < 0.05)
    assert len(first) == 4 and len(second) == 12
    return host, defect, first, second


def projections(n_atoms, energies, occupations, weights):
    e = np.asarray(energies, float)[None, None, :]
    occ = np.asarray(occupations, float)[None, None, :]
    w = np.asarray(weights, float)[None, None, :, :, None]
    return BandProjections(np.zeros((1, 3)), [1.0], e, occ, w, ("s",))


def test_site_located_lazily_gives_the_ase_shells(cells):
    host, defect, first, second = cells
    n = len(defect)
    gap_state = np.zeros(n)
    gap_state[first] = 0.2
    gap_state[second] = 0.1 / 12
    flat = np.full(n, 1.0 / n)
    dproj = projections(n, [-1.0, 0.2, 1.0], [2.0, 1.0, 0.0], [flat, gap_state, flat])
    hflat = np.full(len(host), 1.0 / len(host))
    hproj = projections(len(host), [-1.0, 1.0], [2.0, 0.0], [hflat, hflat])
    case = DefectCase("V_Si", defect, host=host, projections=dproj, host_projections=hproj)
    (st,) = in_gap_states(case)
    total = 0.2 * 4 + 0.1
    assert st.shell_fractions[1] == pytest.approx(0.8 / total, abs=1e-12)
    assert st.shell_fractions[2] == pytest.approx(0.1 / total, abs=1e-12)
    assert st.occupation == pytest.approx(1.0)
    assert any("NOT aligned" in p for p in st.provenance)


def test_potential_alignment_with_located_site(cells):
    host, defect, _, _ = cells
    g = Grid(np.zeros((40, 40, 40)), host.cell)
    site = host.positions[REMOVED]
    vh = np.sin(2 * np.pi * g.points[..., 0] / 5.43)
    d = g.minimum_image_distance(site)
    vd = vh - 0.42 + 1.5 * np.exp(-d**2 / (2 * 0.5**2))   # offset + a bump at the site (far tail < 1e-10)
    case = DefectCase("V_Si", defect, host=host, grids={"potential": g.with_values(vd, unit="eV")},
                      host_grids={"potential": g.with_values(vh, unit="eV")})
    al = align(case)
    assert al.shift == pytest.approx(0.42, abs=1e-9)
    assert "potential" in al.method
    planar = align(case, region="planar")
    assert planar.shift == pytest.approx(0.42, abs=1e-9)
    assert "planar" in planar.method
