"""Band edges, alignment and in-gap states on a model with a known answer.

External references
-------------------
* Su–Schrieffer–Heeger chain (W. P. Su, J. R. Schrieffer & A. J. Heeger,
  Phys. Rev. Lett. 42, 1698 (1979)): on-site ε₀, alternating hoppings t₁
  (intra-cell) and t₂ (inter-cell). Bulk bands ε₀ ± |t₁ + t₂e^{ik}|, so the
  gap edges are ε₀ ∓ |t₂ − t₁| (at k = π). A chain with one site missing has
  an odd number of sites, hence (chiral symmetry) one state exactly at ε₀,
  mid-gap, living on the majority sublattice with amplitudes
  ψ_{m+1} = −(t₁/t₂) ψ_m from the dangling end; it holds one electron at
  half filling.
* The band structures are computed by pythtb (reference library), not orbtool.
* Moments theorem (Cyrot-Lackmann, J. Phys. Chem. Solids 29, 1235 (1968)):
  the dangling neighbour loses exactly t₂² of its second moment.
"""

from types import SimpleNamespace

import numpy as np
import pytest
from ase import Atoms
from pythtb import tb_model

from orbtool.analysis.alignment import align
from orbtool.analysis.shell_moments import neighbour_moments
from orbtool.analysis.states import NoGapError, band_edges, in_gap_states
from orbtool.case import DefectCase
from orbtool.errors import GeometryError, InputFormatError, OrbtoolError
from orbtool.grid import Grid
from orbtool.spectra import BandProjections, ProjectedDOS

EPS0, T1, T2, NCELL, A = -1.3, -0.6, -1.5, 6, 1.4


def ssh(vacancy: bool, t1=T1, t2=T2, nk=4, eps0=EPS0):
    """SSH supercell of NCELL cells; the vacancy removes the last (B) site."""
    nsite = 2 * NCELL
    keep = list(range(nsite - 1)) if vacancy else list(range(nsite))
    model = tb_model(1, 1, [[nsite * A]], [[i / nsite] for i in keep])
    model.set_onsite([eps0] * len(keep))
    pos = {s: i for i, s in enumerate(keep)}
    for s in range(nsite):
        nxt, R = (s + 1) % nsite, (1 if s == nsite - 1 else 0)
        if s in pos and nxt in pos:
            model.set_hop(t1 if s % 2 == 0 else t2, pos[s], pos[nxt], [R])
    ks = np.arange(nk) / nk
    evals, evecs = model.solve_all([[k] for k in ks], eig_vectors=True)   # (nb, nk), (nb, nk, norb)
    nb = len(keep)
    energies = evals.T[None]                                               # (1, nk, nb)
    weights = (np.abs(evecs) ** 2).transpose(1, 0, 2)[None, :, :, :, None]  # (1, nk, nb, natom, 1)
    occ = np.zeros((1, nk, nb))
    nel = len(keep)                                                        # one electron per site
    occ[0, :, : nel // 2] = 2.0
    if nel % 2:
        occ[0, :, nel // 2] = 1.0
    atoms = Atoms(f"C{nb}", positions=[[A * s, 0, 0] for s in keep], cell=[nsite * A, 8.0, 8.0], pbc=True)
    proj = BandProjections(np.c_[ks, np.zeros((nk, 2))], np.ones(nk), energies, occ, weights, ("s",),
                           atoms=atoms, source="pythtb SSH")
    return proj, atoms, (evals, evecs)


def pdos_from(evals, evecs, atoms, sigma=2e-3, lo=-5.0, hi=3.0):
    e = np.arange(lo, hi, sigma / 4)
    nb, nk, norb = evecs.shape
    x = (e[None, :] - evals.reshape(-1)[:, None]) / sigma
    g = np.exp(-0.5 * x * x) / (sigma * np.sqrt(2 * np.pi))                # (nb*nk, nE)
    w = (np.abs(evecs) ** 2).reshape(-1, norb) / nk
    vals = 2.0 * (w.T @ g)                                                 # spin-degenerate
    chans = [(i, "C", "s", 0) for i in range(norb)]
    return ProjectedDOS(e, vals, chans, total=vals.sum(axis=0)[None], fermi=EPS0, atoms=atoms)


def ssh_site():
    nb = lambda i, hi: SimpleNamespace(index=i, host_index=hi, element="C")
    last = 2 * NCELL - 2
    return SimpleNamespace(position=np.array([(2 * NCELL - 1) * A, 0.0, 0.0]),
                           shells=((nb(0, 0), nb(last, last)), (nb(1, 1), nb(last - 1, last - 1))),
                           first_shell=(nb(0, 0), nb(last, last)), second_shell=(nb(1, 1), nb(last - 1, last - 1)),
                           mapping=np.arange(2 * NCELL - 1))


@pytest.fixture(scope="module")
def case():
    host, hatoms, _ = ssh(False)
    defect, datoms, _ = ssh(True)
    return DefectCase("V_C", datoms, host=hatoms, projections=defect, host_projections=host)


def test_host_edges_are_the_ssh_gap(case):
    e = band_edges(case.host_projections)
    assert e.vbm == pytest.approx(EPS0 - abs(T2 - T1), abs=1e-10)
    assert e.cbm == pytest.approx(EPS0 + abs(T2 - T1), abs=1e-10)
    assert e.gap == pytest.approx(2 * abs(T2 - T1), abs=1e-10)
    assert "VBM" in e.summary()


def test_midgap_state_of_the_broken_chain(case):
    states = in_gap_states(case, ssh_site(), alignment=0.0)
    assert len(states) == 1
    st = states[0]
    # chiral symmetry: exactly at ε₀, mid-gap, half filled (SSH 1979)
    assert st.energy == pytest.approx(EPS0, abs=1e-10)
    assert st.above_vbm == pytest.approx(abs(T2 - T1), abs=1e-10)
    assert st.below_cbm == pytest.approx(abs(T2 - T1), abs=1e-10)
    assert st.occupation == pytest.approx(1.0)
    assert st.max_occupation == 2.0
    assert st.dispersion < 1e-10            # the vacancy cuts the only path between images
    # amplitudes ψ_{m+1} = −(t₁/t₂) ψ_m on the even sites, zero on the odd ones
    r2 = (T1 / T2) ** 2
    w = r2 ** np.arange(NCELL) * (1 - r2) / (1 - r2**NCELL)
    assert np.allclose(st.atom_weights[0::2], w, atol=1e-10)
    assert np.allclose(st.atom_weights[1::2], 0.0, atol=1e-10)
    assert st.shell_fractions[1] == pytest.approx(w[0] + w[-1], abs=1e-10)
    assert st.shell_fractions[2] == pytest.approx(0.0, abs=1e-10)
    assert st.orbital_weights == pytest.approx({"s": 1.0, "p": 0.0, "d": 0.0})
    assert "In-gap state" in st.summary()
    record = st.to_dict()                    # what sessions and family tables store
    assert record["edges"]["gap"] == pytest.approx(2 * abs(T2 - T1))
    assert record["shell_fractions"][1] == st.shell_fractions[1]


def test_pdos_edges_with_stated_threshold(case):
    _, hatoms, (ev, evec) = ssh(False, nk=24)
    sigma = 2e-3
    pdos = pdos_from(ev, evec, hatoms, sigma=sigma)
    e = band_edges(pdos, threshold=0.05)
    # broadening widens the bands: the crossing lies within a few σ outside the exact edge
    assert e.vbm == pytest.approx(EPS0 - abs(T2 - T1), abs=5 * sigma)
    assert e.cbm == pytest.approx(EPS0 + abs(T2 - T1), abs=5 * sigma)
    assert "0.05 states/eV" in e.method


def test_lost_second_moment_of_the_dangling_neighbour():
    _, hatoms, (hev, hvec) = ssh(False)
    _, datoms, (dev, dvec) = ssh(True)
    c = DefectCase("V_C", datoms, host=hatoms, host_pdos=pdos_from(hev, hvec, hatoms, sigma=1e-3),
                   defect_pdos=pdos_from(dev, dvec, datoms, sigma=1e-3))
    cmp = neighbour_moments(c, ssh_site(), alignment=0.0, levels=3)
    row = {r.atom: r for r in cmp.rows}
    # site 0 lost its t₂ bond, the last site its t₁ bond (moments theorem); σ² = 1e-6 eV² broadening
    assert row[0].host.variance == pytest.approx(T1**2 + T2**2, abs=1e-5)
    assert row[0].variance_change == pytest.approx(-T2**2, abs=1e-5)
    assert row[2 * NCELL - 2].variance_change == pytest.approx(-T1**2, abs=1e-5)
    assert row[0].centre_shift == pytest.approx(0.0, abs=1e-6)
    # recursion from the host LDOS: a₀ = ε₀, b₁² = Σ|t|²
    assert row[0].host_recursion.a[0] == pytest.approx(EPS0, abs=1e-5)
    assert row[0].host_recursion.b[0] ** 2 == pytest.approx(T1**2 + T2**2, abs=1e-4)
    assert "lost" in cmp.summary()
    table = cmp.to_dict()
    assert table["rows"][0]["variance_change"] == pytest.approx(row[table["rows"][0]["atom"]].variance_change)


def test_alignment_by_far_potential_and_by_far_pdos(case):
    cell = np.diag([2 * NCELL * A, 8.0, 8.0])
    site = ssh_site()
    g = Grid(np.zeros((96, 16, 16)), cell)
    d = g.minimum_image_distance(site.position)
    host_v = np.cos(2 * np.pi * g.points[..., 0] / A)           # periodic host potential, eV
    offset = 0.37
    # defect = host + constant offset + a Gaussian well at the site (tail < 1e-12 in the far quarter)
    defect_v = host_v + offset - 2.0 * np.exp(-d**2 / (2 * 0.6**2))
    c = case.replace(grids={"potential": g.with_values(defect_v, unit="eV")},
                     host_grids={"potential": g.with_values(host_v, unit="eV")})
    al = align(c, site)
    assert al.shift == pytest.approx(-offset, abs=1e-9)
    # PDOS route: every far atom's channel sits 0.25 eV higher in the defect cell
    e = np.linspace(-6, 4, 4001)
    line = lambda c0: np.exp(-0.5 * ((e - c0) / 0.3) ** 2)
    n = len(case.host)
    hp = ProjectedDOS(e, np.stack([line(-2.0)] * n), [(i, "C", "s", 0) for i in range(n)], fermi=0.0)
    dp = ProjectedDOS(e, np.stack([line(-1.75)] * (n - 1)), [(i, "C", "s", 0) for i in range(n - 1)], fermi=0.3)
    al2 = align(case.replace(host_pdos=hp, defect_pdos=dp), site, method="pdos")
    assert al2.shift == pytest.approx(-0.25, abs=1e-6)


def test_bad_inputs(case):
    metal, matoms, _ = ssh(False, t1=-1.0, t2=-1.0)
    with pytest.raises(NoGapError, match="metallic"):
        band_edges(metal)
    with pytest.raises(NoGapError):
        in_gap_states(case.replace(host_projections=metal), ssh_site(), alignment=0.0)
    p = case.projections
    bare = BandProjections(p.kpoints, p.kweights, p.energies, None, p.weights, p.orbitals, atoms=p.atoms)
    with pytest.raises(InputFormatError, match="occupations"):
        in_gap_states(case.replace(projections=bare), ssh_site(), alignment=0.0)
    with pytest.raises(InputFormatError, match="occupations"):
        band_edges(bare)
    with pytest.raises(InputFormatError, match="host_projections"):
        in_gap_states(case.replace(host_projections=None), ssh_site(), alignment=0.0)
    cell = np.diag([2 * NCELL * A, 8.0, 8.0])
    g1, g2 = Grid(np.zeros((48, 8, 8)), cell), Grid(np.zeros((48, 8, 10)), cell)
    bad = case.replace(grids={"potential": g1.with_values(g1.values, unit="eV")},
                       host_grids={"potential": g2.with_values(g2.values, unit="eV")})
    with pytest.raises(GeometryError, match="do not belong together"):
        align(bad, ssh_site())
    with pytest.raises(OrbtoolError, match="cannot align"):
        align(case, ssh_site())


def test_spin_resolved_edges():
    # rigid spin splitting ±Δ/2 of the SSH bands: each spin keeps the SSH gap, the
    # overall gap shrinks by Δ (SSH 1979 band edges, shifted)
    host, _, _ = ssh(False)
    delta = 0.6
    e = np.concatenate([host.energies - delta / 2, host.energies + delta / 2])
    occ = np.concatenate([host.occupations / 2] * 2)
    w = np.concatenate([host.weights] * 2)
    pol = BandProjections(host.kpoints, host.kweights, e, occ, w, host.orbitals, atoms=host.atoms)
    edges = band_edges(pol)
    g = abs(T2 - T1)
    assert edges.by_spin[0] == pytest.approx((EPS0 - delta / 2 - g, EPS0 - delta / 2 + g), abs=1e-10)
    assert edges.by_spin[1] == pytest.approx((EPS0 + delta / 2 - g, EPS0 + delta / 2 + g), abs=1e-10)
    assert edges.gap == pytest.approx(2 * g - delta, abs=1e-10)


def test_projection_and_grid_routes_agree_for_the_midgap_state(case):
    from scipy.stats import chi

    from orbtool.analysis.character import compare_routes

    site = ssh_site()
    st = in_gap_states(case, site, alignment=0.0)[0]
    # a grid whose state density is a narrow Gaussian on every atom, weighted by the SSH amplitudes
    cell = np.diag([2 * NCELL * A, 8.0, 8.0])
    g = Grid(np.zeros((168, 80, 80)), cell)
    sigma = 0.15
    dens = np.zeros(g.shape)
    for p, w in zip(case.defect.get_positions(), st.atom_weights):
        if w > 1e-12:
            dens += w * (2 * np.pi * sigma**2) ** -1.5 * np.exp(-g.minimum_image_distance(p) ** 2 / (2 * sigma**2))
    g = g.with_values(dens, unit="e/Å^3", atoms=case.defect)
    cmp = compare_routes(st, g, site, top=3)
    # Voronoi cells hold each Gaussian up to the Maxwell tail beyond half the bond (chi₃, scipy)
    bound = chi(df=3).sf(A / 2 / sigma)
    assert cmp.max_difference < bound + 1e-6
    assert cmp.top_overlap == 1.0 and cmp.correlation > 0.999
    assert cmp.shells[1][1] == pytest.approx(st.shell_fractions[1], abs=2 * bound + 1e-6)
    assert "projections vs grid" in cmp.summary()


def test_moment_comparison_rejects_bad_windows_and_missing_pdos(case):
    _, hatoms, (hev, hvec) = ssh(False)
    _, datoms, (dev, dvec) = ssh(True)
    c = DefectCase("V_C", datoms, host=hatoms, host_pdos=pdos_from(hev, hvec, hatoms),
                   defect_pdos=pdos_from(dev, dvec, datoms))
    with pytest.raises(InputFormatError, match="outside the range"):
        neighbour_moments(c, ssh_site(), alignment=0.0, window=(-9.0, 0.0))
    with pytest.raises(InputFormatError, match="host_pdos"):
        neighbour_moments(c.replace(host_pdos=None), ssh_site(), alignment=0.0)
    by_orbital = neighbour_moments(c, ssh_site(), alignment=0.0, by="orbital")
    assert {r.orbital for r in by_orbital.rows} == {"s"}


def test_alignment_on_a_deep_channel(case):
    # far atoms: a deep s peak moved by +0.30 eV and a valence p peak moved by +0.10 eV in the
    # defect cell; aligning on the deep s channel must return −0.30 eV (construction; Gaussian lines)
    site = ssh_site()
    e = np.linspace(-16, 4, 8001)
    line = lambda c0: np.exp(-0.5 * ((e - c0) / 0.25) ** 2)
    n = len(case.host)
    chans_h = [(i, "C", o, 0) for i in range(n) for o in ("s", "p")]
    chans_d = [(i, "C", o, 0) for i in range(n - 1) for o in ("s", "p")]
    hp = ProjectedDOS(e, np.stack([line(-12.0), line(-2.0)] * n), chans_h, fermi=0.0)
    dp = ProjectedDOS(e, np.stack([line(-11.7), line(-1.9)] * (n - 1)), chans_d, fermi=0.0)
    c = case.replace(host_pdos=hp, defect_pdos=dp)
    deep = align(c, site, method="pdos", l=0, window=(-14.0, -10.0))
    assert deep.shift == pytest.approx(-0.30, abs=1e-6)
    assert "l=0" in deep.method
    valence = align(c, site, method="pdos", l=1, window=(-4.0, 0.0))
    assert valence.shift == pytest.approx(-0.10, abs=1e-6)
