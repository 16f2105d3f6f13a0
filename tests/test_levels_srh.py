"""Shockley–Read–Hall checks: silicon at 300 K, analytic limits, symmetry properties.

Formula: W. Shockley & W. T. Read, Phys. Rev. 87, 835 (1952); R. N. Hall, Phys. Rev. 87, 387 (1952).
Silicon constants: S. M. Sze & K. K. Ng, Physics of Semiconductor Devices, 3rd ed. (2007), appendix
(E_g 1.12 eV, N_c 2.8e19, N_v 2.65e19, n_i 9.65e9 cm^-3) — from memory, as tagged in REFERENCES.md.
"""

import math
import types

import numpy as np
import pytest

from orbtool.errors import ModelError
from orbtool.levels import (
    ChargeState,
    DefectLevels,
    Semiconductor,
    TrapRecombination,
    capture_time,
    effective_density_of_states,
    formation_energies,
    intrinsic_density,
    srh_rate,
)
from orbtool.units import KB

SI_GAP, SI_NC, SI_NV, SI_NI = 1.12, 2.8e19, 2.65e19, 9.65e9  # Sze & Ng appendix, from memory


def _si(**kw):
    return Semiconductor.from_densities(SI_GAP, SI_NC, SI_NV, 300.0, ni=SI_NI, **kw)


def test_silicon_constants_300K():
    # kT at 300 K = 0.02585 eV (Sze & Ng appendix quote 0.0259; CODATA k_B gives 0.025852)
    assert KB * 300 == pytest.approx(0.025852, abs=2e-6)
    # N = 2(2π m kT/h²)^{3/2} = 2.51e19 (m/m0)^{3/2} cm^-3 at 300 K (textbook value, from memory)
    assert effective_density_of_states(1.0, 300.0) == pytest.approx(2.51e19, rel=5e-3)
    # Sze & Ng's N_c 2.8e19 corresponds to m_de = 1.08 m0 (from memory)
    assert effective_density_of_states(1.08, 300.0) == pytest.approx(SI_NC, rel=1e-2)
    # REFERENCES.md [derived]: sqrt(N_c N_v) exp(−E_g/2kT) ≈ 1.07e10, not the measured 9.65e9
    assert intrinsic_density(SI_GAP, SI_NC, SI_NV, 300.0) == pytest.approx(1.07e10, rel=1e-2)
    # E_i = E_g/2 + (kT/2) ln(N_v/N_c) (Sze & Ng ch. 1): slightly below mid-gap for Si
    si = _si()
    assert si.intrinsic_level == pytest.approx(0.56 + 0.5 * KB * 300 * math.log(SI_NV / SI_NC), abs=1e-12)
    assert si.ni == SI_NI and si.ni_origin == "given"


def test_capture_time_worked_example():
    # τ = 1/(σ v_th N_t): σ = 1e-15 cm², v_th = 1e7 cm/s (round value, from memory), N_t = 1e15 cm^-3 → 1e-7 s
    assert capture_time(1e-15, 1e7, 1e15) == pytest.approx(1e-7, rel=1e-12)


def test_gold_acceptor_in_silicon_by_hand():
    # Au acceptor at E_c − 0.54 eV in Si (Sze & Ng, trap-level chart, from memory); n-type 1e15, Δn = 1e12
    si = _si()
    rec = TrapRecombination(si, tau_n=2e-8, tau_p=5e-8, doping=1e15, injection=1e12)
    et = SI_GAP - 0.54
    kt = KB * 300.0
    n1 = SI_NI * math.exp((et - si.intrinsic_level) / kt)  # Shockley–Read eq. for n1
    p1 = SI_NI * math.exp((si.intrinsic_level - et) / kt)
    n0 = 0.5e15 + math.sqrt(0.25e30 + SI_NI ** 2)
    n, p = n0 + 1e12, SI_NI ** 2 / n0 + 1e12
    u = (n * p - SI_NI ** 2) / (5e-8 * (n + n1) + 2e-8 * (p + p1))
    assert float(rec.rate(et)) == pytest.approx(u, rel=1e-12)
    assert float(rec.lifetime(et)) == pytest.approx(1e12 / u, rel=1e-12)


@pytest.mark.parametrize("doping, expected", [(1e16, "tau_p"), (-1e16, "tau_n")])
def test_midgap_low_injection_limit(doping, expected):
    # Shockley & Read 1952: a mid-gap trap in low injection gives the minority-carrier capture time
    rec = TrapRecombination(_si(), tau_n=1e-7, tau_p=3e-6, doping=doping, injection=1e8)
    tau = float(rec.lifetime(rec.material.intrinsic_level))
    assert tau == pytest.approx(getattr(rec, expected), rel=1e-4)


def test_high_injection_limit():
    # Δn ≫ n0, p0, n1, p1: τ → τ_n + τ_p (Shockley & Read 1952, high-level limit)
    rec = TrapRecombination(_si(), tau_n=1e-7, tau_p=3e-6, doping=1e10, injection=1e20)
    assert float(rec.lifetime(0.5)) == pytest.approx(3.1e-6, rel=1e-6)


def test_equilibrium_and_symmetry():
    # REFERENCES.md properties: U = 0 at equilibrium; symmetric under n↔p, τ_n↔τ_p, (E_t−E_i)→−(E_t−E_i)
    ni = SI_NI
    n0 = 3.7e14
    de = np.linspace(-0.5, 0.5, 11)
    assert np.all(np.abs(srh_rate(n0, ni * ni / n0, ni, de, 1e-7, 2e-6)) < 1e-9 * ni)
    n, p = 2.0e15, 7.0e12
    assert srh_rate(n, p, ni, de, 1e-7, 2e-6) == pytest.approx(srh_rate(p, n, ni, -de, 2e-6, 1e-7), rel=1e-13)


def test_peak_at_intrinsic_level_for_equal_cross_sections():
    # σ_n = σ_p: n1 + p1 = 2 n_i cosh((E_t − E_i)/kT) is smallest at E_i, so U peaks there (Hall 1952)
    rec = TrapRecombination.from_capture(_si(), 1e-15, 1e-15, 1e13, doping=0.0, injection=1e12)
    scan = rec.scan(2241)  # 0.5 meV steps
    step = scan.above_vbm[1] - scan.above_vbm[0]
    assert abs(scan.above_vbm[np.argmax(scan.ratio)] - rec.material.intrinsic_level) <= step
    assert scan.ratio.max() == pytest.approx(1.0, abs=1e-6)
    # shallow traps: ratio ≈ (n + p + 2 n_i)/(n + p + n1) → tiny near the band edges (by the formula)
    assert scan.ratio[0] < 1e-3 and scan.ratio[-1] < 1e-3
    assert np.all(scan.lifetime > 0)


def test_traps_outside_gap_and_bad_values_raise():
    rec = TrapRecombination(_si(), tau_n=1e-7, tau_p=1e-7, doping=1e15)
    for bad in (-0.01, 1.2, [0.3, 1.5]):
        with pytest.raises(ModelError, match="outside the gap"):
            rec.rate(bad)
    with pytest.raises(ModelError, match="positive"):
        TrapRecombination(_si(), tau_n=0.0, tau_p=1e-7)
    with pytest.raises(ModelError, match="positive"):
        Semiconductor.from_masses(-1.0, 1.0, 1.0)


def test_defect_levels_join_ks_state_levels_and_srh():
    # hand-built diagram (Freysoldt 2014 eq. 4): E_f(+1;0) = 1.0, E_f(0;0) = 1.8 → ε(+1/0) = 0.8 eV;
    # E_f(−1;0) = 3.0 → ε(0/−1) = 1.2 eV (gap 1.12: outside, above the CBM)
    states = [ChargeState(1, -11.0), ChargeState(0, -10.2), ChargeState(-1, -9.0)]
    d = formation_energies(states, {}, vbm=0.0, gap=SI_GAP, exchanged={}, host_total_energy=-12.0, name="X")
    rec = TrapRecombination(_si(), tau_n=1e-7, tau_p=1e-7, doping=1e15, injection=1e10)
    ks = types.SimpleNamespace(above_vbm=0.35, below_cbm=0.77, occupation=1.0)
    dl = DefectLevels.build(state=ks, diagram=d, recombination=rec)
    labels = [e.label for e in dl.entries]
    assert labels == ["Kohn–Sham state", "ε(+1/0)", "ε(0/-1)"]
    e10 = dl.entries[1]
    assert e10.above_vbm == pytest.approx(0.8, abs=1e-12) and e10.in_gap
    assert e10.srh_ratio == pytest.approx(float(rec.midgap_ratio(0.8)), rel=1e-14)
    assert e10.lifetime == pytest.approx(float(rec.lifetime(0.8)), rel=1e-14)
    out = dl.entries[2]
    assert out.above_vbm == pytest.approx(1.2, abs=1e-12) and not out.in_gap
    assert out.srh_ratio is None and "outside the gap" in out.note
    assert dl.deepest.label == "ε(+1/0)"
    assert any("+1/0" in n and "-0.450" in n for n in dl.notes)
    assert dl.to_dict()["levels"][0]["srh_ratio_to_midgap"] == pytest.approx(float(rec.midgap_ratio(0.35)))
    assert "ε(+1/0)" in dl.summary()
    with pytest.raises(ModelError, match="lacks"):
        DefectLevels.build(state=types.SimpleNamespace(above_vbm=0.3), diagram=d)


def test_defect_levels_from_state_only():
    # Kohn–Sham state alone: gap = above + below; the SRH factor equals the direct midgap ratio
    rec = TrapRecombination(_si(), tau_n=1e-7, tau_p=4e-7, doping=-1e16, injection=1e9)
    ks = types.SimpleNamespace(above_vbm=0.95, below_cbm=0.17, occupation=0.0)
    dl = DefectLevels.build("V_X", state=ks, recombination=rec)
    assert dl.gap == pytest.approx(SI_GAP, abs=1e-12)
    [e] = dl.entries
    assert e.kind == "single-particle" and e.depth == pytest.approx(0.17, abs=1e-12)
    # p-type, low injection: U = Δn/[τ_n (1 + p1/p0) + τ_p n1/p0] in the limit p0 ≫ n, Δn (Shockley–Read 1952)
    kt = KB * 300.0
    n1 = SI_NI * math.exp((0.95 - rec.material.intrinsic_level) / kt)
    n1_mid = SI_NI
    expect = (1e-7 + 4e-7 * (1e9 + n1_mid) / 1e16) / (1e-7 + 4e-7 * (1e9 + n1) / 1e16)
    assert e.srh_ratio == pytest.approx(expect, rel=1e-4)
    assert dl.deepest is None and dl.diagram is None


def test_n1_equals_band_edge_form_and_wide_gap_is_stable():
    # with n_i from N_c, N_v: n_i e^{(E_t−E_i)/kT} = N_c e^{−(E_c−E_t)/kT}, p_1 = N_v e^{−(E_t−E_v)/kT}
    # (Sze & Ng, ch. 1, SRH section); checked through the rate at T = 300 K
    m = Semiconductor.from_masses(3.3, 0.28, 1.8, 300.0)  # computed n_i (tiny for a 3.3 eV gap)
    rec = TrapRecombination(m, tau_n=1e-9, tau_p=2e-9, doping=-1e17, injection=1e13)
    kt, et = KB * 300.0, 2.9
    n1 = m.nc * math.exp(-(3.3 - et) / kt)
    p1 = m.nv * math.exp(-et / kt)
    n, p = rec.carriers
    u = (n * p - m.ni ** 2) / (2e-9 * (n + n1) + 1e-9 * (p + p1))
    assert float(rec.rate(et)) == pytest.approx(u, rel=1e-9)
    # a 6 eV gap at 20 K: n_i underflows to 0 in floating point, the rates stay finite and warning-free
    cold = TrapRecombination(Semiconductor.from_masses(6.0, 0.3, 1.0, 20.0), 1e-7, 1e-7, doping=1e16)
    with np.errstate(over="raise", invalid="raise", divide="raise"):
        r = cold.midgap_ratio(np.array([0.1, 3.0, 5.9]))
    assert np.all(np.isfinite(r)) and cold.material.ni == 0.0


def test_depletion_region_generates_at_the_shockley_read_rate():
    """n = p = 0 (a depletion region): U = −n_i² / (τ_p n₁ + τ_n p₁) = −n_i / (τ_p e^{x} + τ_n e^{−x}),
    x = (E_t − E_i)/kT — the Shockley–Read rate (Phys. Rev. 87, 835 (1952)) with n = p = 0, the
    generation rate of Sze & Ng, *Physics of Semiconductor Devices* (3rd ed.), ch. 2 [from memory];
    generation lifetime τ_g = n_i/|U|."""
    m = Semiconductor.from_densities(SI_GAP, SI_NC, SI_NV, 300.0, ni=SI_NI)
    rec = TrapRecombination(m, tau_n=1e-6, tau_p=3e-6, n=0.0, p=0.0)
    assert rec.regime == "generation"
    kt = KB * 300.0
    for et in (0.3, m.intrinsic_level, 0.8):
        x = (et - m.intrinsic_level) / kt
        by_hand = -SI_NI / (3e-6 * math.exp(x) + 1e-6 * math.exp(-x))
        assert float(rec.rate(et)) == pytest.approx(by_hand, rel=1e-12)
        assert float(rec.lifetime(et)) == pytest.approx(3e-6 * math.exp(x) + 1e-6 * math.exp(-x), rel=1e-12)
    assert 0 < float(rec.midgap_ratio(0.3)) < 1
    assert "generation" in rec.summary()
    with pytest.raises(ModelError, match="both"):
        TrapRecombination(m, tau_n=1e-6, tau_p=1e-6, n=0.0)
    with pytest.raises(ModelError, match="non-negative"):
        TrapRecombination(m, tau_n=1e-6, tau_p=1e-6, n=-1.0, p=0.0)
