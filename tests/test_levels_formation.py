"""Formation energies, transition levels and chemical-potential ranges, checked by hand.

Formalism: S. B. Zhang & J. E. Northrup, PRL 67, 2339 (1991); C. Freysoldt et al., Rev. Mod. Phys. 86, 253
(2014), eq. 1 (formation energy) and eq. 4 (transition level ε(q/q') = [E_f(q;0) − E_f(q';0)]/(q' − q)).
"""

import functools
import json
import math

import numpy as np
import pytest
from ase.build import bulk
from hypothesis import given, settings
from hypothesis import strategies as st

from orbtool.case import DefectCase
from orbtool.errors import InputFormatError, ModelError
from orbtool.levels import ChargeState, charge_correction, formation_energies, stability_region

# hand-built example: an O vacancy (one O removed, n_O = −1) in a 0/+1 pair
E_HOST = -812.345678
E_DEF0 = -805.123456
E_DEF1 = -808.987654
MU_O = -4.918273
E_VBM = 3.141593
CORR1 = 0.271828


def _by_hand():
    # Freysoldt 2014 eq. 1 at E_F = 0, written out term by term
    ef0 = E_DEF0 - E_HOST - (-1) * MU_O  # = 2.303949
    ef1 = E_DEF1 - E_HOST - (-1) * MU_O + 1 * E_VBM + CORR1  # = 1.853172
    return ef0, ef1, (ef1 - ef0) / (0 - 1)  # eq. 4 with q = +1, q' = 0


def test_worked_transition_level_to_1e12():
    ef0, ef1, eps10 = _by_hand()
    states = [ChargeState(0, E_DEF0), ChargeState(1, E_DEF1, correction=CORR1)]
    d = formation_energies(states, {"O": MU_O}, vbm=E_VBM, gap=1.5, exchanged={"O": -1},
                           host_total_energy=E_HOST, name="V_O")
    assert d.formation_energy(0) == pytest.approx(ef0, abs=1e-12)
    assert d.formation_energy(1) == pytest.approx(ef1, abs=1e-12)
    assert eps10 == pytest.approx(0.450777, abs=1e-9)  # the arithmetic itself, done on paper
    [t] = d.transitions
    assert (t.charge_from, t.charge_to) == (1, 0)
    assert t.above_vbm == pytest.approx(eps10, abs=1e-12)
    assert t.below_cbm == pytest.approx(1.5 - eps10, abs=1e-12)
    assert t.in_gap and t.label == "ε(+1/0)"
    assert d.level(1, 0) == pytest.approx(eps10, abs=1e-12)
    ranges = d.stable_ranges()
    assert ranges[1] == pytest.approx((0.0, eps10), abs=1e-12)
    assert ranges[0] == pytest.approx((eps10, 1.5), abs=1e-12)
    # E_f(q, E_F) = E_f(q, 0) + q E_F; the lowest one switches at ε
    ef = np.array([0.2, 0.7])
    e, q = d.lowest(ef)
    assert q.tolist() == [1, 0]
    assert e == pytest.approx([ef1 + 0.2, ef0], abs=1e-12)
    json.dumps(d.to_dict())
    assert "ε(+1/0)" in d.summary()


def test_negative_u_skips_the_middle_state():
    # three states with ε(+1/0) above ε(0/−1): the neutral state is never lowest and the envelope
    # goes straight from +1 to −1 at ε(+1/−1) = [E_f(+1;0) − E_f(−1;0)]/2 (Freysoldt 2014, sec. V.C)
    states = [ChargeState(1, -10.0), ChargeState(0, -8.0), ChargeState(-1, -7.5)]
    d = formation_energies(states, {}, vbm=0.0, gap=3.0, exchanged={}, host_total_energy=-12.0)
    # E_f(0) at VBM: +1 → 2.0, 0 → 4.0, −1 → 4.5 ; ε(+/0) = 2.0, ε(0/−) = 0.5, ε(+/−) = (2.0 − 4.5)/(−2) = 1.25
    assert [(t.charge_from, t.charge_to) for t in d.transitions] == [(1, -1)]
    assert d.transitions[0].above_vbm == pytest.approx(1.25, abs=1e-12)
    assert d.stable_ranges()[0] is None
    assert any("never the lowest" in n for n in d.notes)
    # the two one-electron levels and U = ε(0/−) − ε(+/0) = 0.5 − 2.0 = −1.5 eV (hand arithmetic above)
    t = d.transitions[0]
    assert t.electrons == 2 and t.negative_u
    assert t.one_electron == (("ε(+1/0)", pytest.approx(2.0, abs=1e-12)), ("ε(0/-1)", pytest.approx(0.5, abs=1e-12)))
    assert t.u == pytest.approx(-1.5, abs=1e-12)
    assert any(n.startswith("negative U") and "-1.500 eV" in n for n in d.notes)


def test_negative_u_level_gets_no_one_electron_srh_and_says_so():
    """SRH (Shockley & Read, Phys. Rev. 87, 835 (1952)) describes one-electron capture and emission; a
    two-electron level ε(+1/−1) must not get the one-level formula. Its one-electron levels are listed,
    the note names negative U with U's value, and no SRH ratio is given for any of them."""
    from orbtool.levels import DefectLevels, Semiconductor, TrapRecombination
    states = [ChargeState(1, -10.0), ChargeState(0, -8.0), ChargeState(-1, -7.5)]
    d = formation_energies(states, {}, vbm=0.0, gap=3.0, exchanged={}, host_total_energy=-12.0)
    rec = TrapRecombination(Semiconductor.from_masses(3.0, 0.3, 0.3), tau_n=1e-6, tau_p=1e-6)
    dl = DefectLevels.build("V", diagram=d, recombination=rec)
    two = next(e for e in dl.entries if e.label == "ε(+1/-1)")
    assert two.srh_ratio is None and "negative U (U = -1.500 eV)" in two.note and "SRH not computed" in two.note
    ones = [e for e in dl.entries if e.kind == "one-electron"]
    assert [e.label for e in ones] == ["ε(+1/0)", "ε(0/-1)"]
    assert all(e.srh_ratio is None for e in ones)
    assert any(n.startswith("negative U") for n in dl.notes)
    assert "negative U" in dl.summary()


def test_two_electron_level_without_the_middle_state_is_not_given_an_srh_factor():
    # only q = +2 and 0 computed (as in the demo family): ε(+2/0) exchanges two electrons, U is unknown
    states = [ChargeState(2, -10.0), ChargeState(0, -8.0)]
    d = formation_energies(states, {}, vbm=0.0, gap=3.0, exchanged={}, host_total_energy=-12.0)
    [t] = d.transitions
    assert t.electrons == 2 and t.u is None and t.one_electron == ()
    assert any("intermediate charge state(s) [1] were not computed" in n for n in d.notes)
    from orbtool.levels import DefectLevels, Semiconductor, TrapRecombination
    rec = TrapRecombination(Semiconductor.from_masses(3.0, 0.3, 0.3), tau_n=1e-6, tau_p=1e-6)
    dl = DefectLevels.build("V", diagram=d, recombination=rec)
    assert dl.entries[0].srh_ratio is None and "SRH not computed" in dl.entries[0].note


def test_levels_outside_gap_are_reported_not_clipped():
    states = [ChargeState(2, -8.0), ChargeState(1, -9.0)]
    # E_f(0): +2 → 4.0 ; +1 → 3.0 ; ε(+2/+1) = (4 − 3)/(1 − 2) = −1.0 (below the VBM)
    d = formation_energies(states, {}, vbm=0.0, gap=2.0, exchanged={}, host_total_energy=-12.0)
    [t] = d.transitions
    assert t.above_vbm == pytest.approx(-1.0) and not t.in_gap
    assert d.stable_ranges() == {2: None, 1: (0.0, 2.0)}
    assert any("below the VBM" in n for n in d.notes)


def test_from_defect_case_counts_removed_atoms():
    host = bulk("MgO", "rocksalt", a=4.2, cubic=True)
    defect = host.copy()
    del defect[[a.index for a in defect if a.symbol == "O"][0]]
    c0 = DefectCase(name="V_O^0", defect=defect, host=host, charge=0, total_energy=E_DEF0, host_total_energy=E_HOST)
    c1 = c0.replace(name="V_O^+", charge=1, total_energy=E_DEF1)
    corr = charge_correction(1, host.cell[:], 9.8)
    s1 = ChargeState.from_case(c1, correction=corr)
    assert s1.exchanged == {"O": -1}
    assert s1.correction == corr.energy and s1.correction_detail is corr
    d = formation_energies([c0, s1], {"O": MU_O, "Mg": -1.0}, vbm=E_VBM, gap=7.8)
    ef1 = E_DEF1 - E_HOST + MU_O + E_VBM + corr.energy
    assert d.formation_energy(1) == pytest.approx(ef1, abs=1e-12)
    with pytest.raises(InputFormatError, match="correction is for"):
        ChargeState.from_case(c0, correction=corr)


def test_binary_region_closed_form_and_linprog_agree():
    # Ga2O3 with ΔH = −11.3 eV: Ga-rich Δμ_Ga = 0 → Δμ_O = −11.3/3; O-rich Δμ_O = 0 → Δμ_Ga = −11.3/2
    # (Zhang & Northrup 1991 bounds, by hand)
    r = stability_region("Ga2O3", -11.3)
    assert r.method.startswith("closed form")
    assert r.bounds["Ga"] == pytest.approx((-11.3 / 2, 0.0), abs=1e-12)
    assert r.bounds["O"] == pytest.approx((-11.3 / 3, 0.0), abs=1e-12)
    rich = r.rich("Ga", references={"Ga": -3.0, "O": -4.9})
    assert rich.delta == pytest.approx({"Ga": 0.0, "O": -11.3 / 3}, abs=1e-12)
    assert rich.absolute == pytest.approx({"Ga": -3.0, "O": -4.9 - 11.3 / 3}, abs=1e-12)
    # a competing sub-oxide GaO (ΔH = −4.5 eV) that cuts the Ga-rich end: Δμ_Ga + Δμ_O ≤ −4.5 with
    # 2Δμ_Ga + 3Δμ_O = −11.3 gives Δμ_Ga ≤ −2.2 (by hand: Δμ_O = −4.5 − Δμ_Ga → −Δμ_Ga − 13.5 = −11.3)
    r2 = stability_region("Ga2O3", -11.3, [("GaO", -4.5)])
    r3 = stability_region("Ga2O3", -11.3, [("GaO", -4.5)], method="linprog")
    assert r2.bounds["Ga"] == pytest.approx((-5.65, -2.2), abs=1e-9)
    for e in ("Ga", "O"):
        assert r3.bounds[e] == pytest.approx(r2.bounds[e], abs=1e-8)


def test_ternary_region_corners_by_hand():
    # ZnSnN2 (ΔH = −1.0) with Zn3N2 (−0.3) and Sn3N4 (−0.5). Corner with Δμ_Zn = 0 on Zn3N2:
    # 2Δμ_N = −0.3 → Δμ_N = −0.15, Δμ_Sn = −1.0 + 0.3 = −0.7 (by hand)
    r = stability_region("ZnSnN2", -1.0, [("Zn3N2", -0.3), ("Sn3N4", -0.5)])
    assert r.method == "linear programming"
    corners = {tuple(np.round(v, 9)) for v in r.vertices}
    assert (0.0, -0.7, -0.15) in corners
    # Δμ_N = 0 on Sn3N4: Δμ_Sn = −0.5/3, Δμ_Zn = −1 + 0.5/3 (by hand)
    assert tuple(np.round([-1 + 0.5 / 3, -0.5 / 3, 0.0], 9)) in corners
    assert r.bounds["N"] == pytest.approx((-0.5, 0.0), abs=1e-8)
    assert r.at({"Zn": -0.1, "Sn": -0.5}).delta["N"] == pytest.approx((-1.0 + 0.6) / 2, abs=1e-12)


def test_bad_inputs_raise_clear_errors():
    states = [ChargeState(0, -1.0), ChargeState(0, -2.0)]
    with pytest.raises(InputFormatError, match="more than once"):
        formation_energies(states, {"O": -4.0}, vbm=0, gap=1, exchanged={"O": -1}, host_total_energy=-3.0)
    with pytest.raises(InputFormatError, match="no host total energy"):
        formation_energies([ChargeState(0, -1.0)], {"O": -4.0}, vbm=0, gap=1, exchanged={"O": -1})
    with pytest.raises(InputFormatError, match="different host energies"):
        formation_energies([ChargeState(0, -1.0, -3.0), ChargeState(1, -1.0, -3.5)], {"O": -4.0}, vbm=0, gap=1,
                           exchanged={"O": -1})
    with pytest.raises(ModelError, match="chemical potential missing"):
        formation_energies([ChargeState(0, -1.0, -3.0)], {"Mg": -1.0}, vbm=0, gap=1, exchanged={"O": -1})
    with pytest.raises(ModelError, match="gap must be positive"):
        formation_energies([ChargeState(0, -1.0, -3.0)], {"O": -1.0}, vbm=0, gap=0, exchanged={"O": -1})
    with pytest.raises(InputFormatError, match="integer"):
        ChargeState(0.5, -1.0)
    with pytest.raises(InputFormatError, match="finite"):
        ChargeState(0, math.nan)
    r = stability_region("ZnO", -3.6)
    with pytest.raises(ModelError, match="outside the stability region.*elemental Zn"):
        r.at({"Zn": 0.2})
    with pytest.raises(ModelError, match="ΔH_f"):
        r.at({"Zn": -1.0, "O": -1.0})
    with pytest.raises(ModelError, match="negative"):
        stability_region("ZnO", 0.4)
    with pytest.raises(ModelError, match="not stable"):
        stability_region("ZnO", -3.6, [("ZnO2", -9.0)])
    with pytest.raises(ModelError, match="lacks"):
        stability_region("ZnO", -3.6, [("ZnS", -2.0)])
    host = bulk("MgO", "rocksalt", a=4.2)
    with pytest.raises(InputFormatError, match="no defect total energy"):
        ChargeState.from_case(DefectCase(name="x", defect=host))


def test_checked_chemical_potentials_flow_into_formation_energy():
    # ZnO, ΔH = −3.6 eV: O-poor (Zn-rich) Δμ_O = −3.6 (Zhang & Northrup 1991 bound, by hand);
    # E_f(V_O, q = 0) = E_def − E_host + μ_O with μ_O = E_O2/2 + Δμ_O
    r = stability_region("ZnO", -3.6)
    mu = r.rich("Zn", references={"Zn": -1.26, "O": -4.93})
    d = formation_energies([ChargeState(0, -50.0, -55.0)], mu, vbm=0.0, gap=3.4, exchanged={"O": -1})
    assert d.formation_energy(0) == pytest.approx(-50.0 + 55.0 + (-4.93 - 3.6), abs=1e-12)
    assert d.transitions == () and any("Zn-rich" in n for n in d.notes)
    with pytest.raises(ModelError, match="no absolute values"):
        formation_energies([ChargeState(0, -50.0, -55.0)], r.rich("Zn"), vbm=0.0, gap=3.4, exchanged={"O": -1})


@settings(max_examples=60, deadline=None)
@given(st.lists(st.floats(-5, 5, allow_nan=False), min_size=2, max_size=6),
       st.lists(st.integers(-3, 3), min_size=2, max_size=6, unique=True))
def test_envelope_matches_brute_force_minimum(offsets, charges):
    # the lowest-energy envelope (Freysoldt 2014, fig. 2) must equal min_q E_f(q, E_F) on a dense grid,
    # and each reported ε(q/q') must equal eq. 4 for that pair
    k = min(len(offsets), len(charges))
    states = [ChargeState(q, e) for q, e in zip(charges[:k], offsets[:k])]
    d = formation_energies(states, {}, vbm=0.0, gap=2.0, exchanged={}, host_total_energy=0.0)
    ef = np.linspace(-4, 6, 2001)
    brute = np.min([e + q * ef for q, e in zip(charges[:k], offsets[:k])], axis=0)
    low, _ = d.lowest(ef)
    assert np.allclose(low, brute, atol=1e-12)
    for (q, lo, hi) in d.envelope:
        mid = 0.5 * (max(lo, -50) + min(hi, 50))
        assert d.formation_energy(q, mid) == pytest.approx(float(d.lowest(mid)[0]), abs=1e-9)
    for t in d.transitions:
        e_from = dict(zip(charges[:k], offsets[:k]))[t.charge_from]
        e_to = dict(zip(charges[:k], offsets[:k]))[t.charge_to]
        assert t.above_vbm == pytest.approx((e_from - e_to) / (t.charge_to - t.charge_from), abs=1e-9)


def test_plain_numbers_are_accepted():
    # same hand-built example as above (Freysoldt 2014 eq. 4), given as plain tuples and as a dict
    ef0, ef1, eps10 = _by_hand()
    kw = dict(vbm=E_VBM, gap=1.5, exchanged={"O": -1}, host_total_energy=E_HOST)
    d1 = formation_energies([(0, E_DEF0), (1, E_DEF1, CORR1)], {"O": MU_O}, **kw)
    assert d1.transitions[0].above_vbm == pytest.approx(eps10, abs=1e-12)
    d2 = formation_energies({0: E_DEF0, 1: E_DEF1}, {"O": MU_O}, **kw)
    assert d2.transitions[0].above_vbm == pytest.approx(eps10 + CORR1, abs=1e-12)  # no correction: shifts by it
    with pytest.raises(InputFormatError, match="cannot read a charge state"):
        formation_energies(["q=0"], {"O": MU_O}, **kw)


@functools.lru_cache(maxsize=1)
def _ternary():
    return stability_region("ZnSnN2", -1.0, [("Zn3N2", -0.3), ("Sn3N4", -0.5)])


@settings(max_examples=40, deadline=None)
@given(st.lists(st.floats(0.0, 1.0), min_size=5, max_size=5), st.floats(0.01, 0.5))
def test_region_membership_matches_its_corners(weights, push):
    # the region is the convex hull of its corners (a polytope, Zhang & Northrup 1991): convex combinations
    # are accepted, the LP bounds are the corner extremes, and stepping past Δμ_i = 0 is refused
    r = _ternary()
    w = np.array(weights[: len(r.vertices)]) + 1e-9
    point = (w / w.sum()) @ r.vertices
    got = r.at(dict(zip(r.elements, point)))
    assert list(got.delta.values()) == pytest.approx(point, abs=1e-12)
    for k, e in enumerate(r.elements):
        assert r.bounds[e] == pytest.approx((r.vertices[:, k].min(), r.vertices[:, k].max()), abs=1e-8)
    rich = r.rich("N").delta
    bad = {"Zn": rich["Zn"] - push, "Sn": rich["Sn"]}  # N from the host equation: Δμ_N = rich + push/2 > 0
    with pytest.raises(ModelError, match="elemental N"):
        r.at(bad)


def test_cases_with_dielectric_get_their_correction():
    # with ε given, each charged case is corrected by the Ewald image term q²α/(2εL) (Makov & Payne 1995;
    # simple cubic α = 2.8373, Leslie & Gillan 1985); the neutral case by nothing
    host = bulk("MgO", "rocksalt", a=4.2, cubic=True).repeat(2)  # 8.4 Å simple-cubic supercell
    defect = host.copy()
    del defect[[a.index for a in defect if a.symbol == "O"][0]]
    c0 = DefectCase(name="V_O^0", defect=defect, host=host, charge=0, total_energy=E_DEF0, host_total_energy=E_HOST)
    c2 = c0.replace(name="V_O^2+", charge=2, total_energy=E_DEF1)
    d = formation_energies([c0, c2], {"O": MU_O}, vbm=E_VBM, gap=7.8, dielectric=9.8)
    expected = 4 * 2.8373 * 14.399645 / (2 * 9.8 * 8.4)
    assert d.terms[2]["E_corr"] == pytest.approx(expected, rel=5e-5)
    assert d.terms[0]["E_corr"] == 0.0
    assert d.corrections[2].used == ("image",)
