"""One rule for *the defect state*, applied by every consumer: the fit targets (``orbtool.tb.targets_from_case``)
take the same whole multiplet :func:`orbtool.family.analyze_case` reports, with its own size and electron count;
the mechanism's defect level is a whole multiplet whatever basis the eigensolver returned.

Data: the bundled demo family (MODEL DATA from orbtool's sp³ tight-binding supercell generator, whose projections
and occupations are an outside calculation as far as the analysis is concerned). Where a test needs a lower,
delocalised level that the demo does not have, it adds one to the real list of in-gap states; the rule it
checks is the project's own (STATE_RULE), the point is that every consumer applies the same one.
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pytest

import orbtool
from orbtool.analysis import in_gap_states, locate_vacancy
from orbtool.analysis import states as states_module
from orbtool.family import analyze_case
from orbtool.story import choose_defect_state
from orbtool.tb import targets_from_case

DEMO = Path(orbtool.__file__).parent / "demo" / "data"


@pytest.fixture(scope="module")
def demo_case():
    case = orbtool.load_case(DEMO / "defects" / "SnS-rocksalt" / "V_S" / "q0", host=DEMO / "hosts" / "SnS-rocksalt",
                             grids=False, name="SnS-rocksalt_V_S_q0")
    site = locate_vacancy(case.host, case.defect)
    return case, site, list(in_gap_states(case, site=site))


def test_targets_take_the_state_analyze_case_reports(demo_case):
    case, site, found = demo_case
    assert len(found) >= 2                      # a1g and the threefold multiplet above it (demo README)
    ana = analyze_case(case)
    (t,) = targets_from_case(case, site=site)
    assert t.above_vbm == pytest.approx(ana.state.above_vbm, abs=1e-12)
    assert t.degeneracy == ana.state.degeneracy == len(ana.state.bands)
    assert t.occupation == pytest.approx(ana.state.occupation, abs=1e-12)


def _shifted(state, above_vbm, first):
    shift = above_vbm - state.above_vbm
    return dataclasses.replace(state, above_vbm=above_vbm, energy=state.energy + shift,
                               energy_aligned=state.energy_aligned + shift, below_cbm=state.below_cbm - shift,
                               shell_fractions={1: first, 2: 0.05, "rest": 0.95 - first})


@pytest.mark.parametrize("localised", ["single", "multiplet"])
def test_targets_follow_the_rule_not_the_lowest_level(demo_case, monkeypatch, localised):
    """A delocalised level lies lowest in the gap; the defect state is the one with the largest first-shell
    weight — for the fit as for the family table. When that state is the threefold multiplet, the target
    carries its three bands and all its electrons (the multiplet is one object, not its first band)."""
    case, site, found = demo_case
    single = next(s for s in found if s.degeneracy == 1)
    triple = next(s for s in found if s.degeneracy == 3)
    low = _shifted(single, 0.2, 0.02)           # lowest, delocalised
    if localised == "multiplet":
        triple = dataclasses.replace(triple, shell_fractions={1: 0.97, 2: 0.02, "rest": 0.01})
    fake = [low, single, triple]

    def patched(case_, site=None, **kw):
        tol = kw.get("tol", 0.05)
        return [s for s in fake if s.above_vbm > tol]
    monkeypatch.setattr(states_module, "in_gap_states", patched)
    want = choose_defect_state(fake)
    assert want is not low
    (t,) = targets_from_case(case, site=site)
    assert t.above_vbm == pytest.approx(want.above_vbm, abs=1e-12)
    assert t.degeneracy == want.degeneracy == (3 if localised == "multiplet" else 1)
    assert t.occupation == pytest.approx(want.occupation, abs=1e-12)
    ana = analyze_case(case)
    assert ana.state is want or ana.state.above_vbm == pytest.approx(want.above_vbm, abs=1e-12)


def test_resonant_level_is_a_target_chosen_by_character(demo_case, monkeypatch):
    """No level in the gap, a level 0.1 eV below the VBM with most of its weight on the first shell: it is the
    defect state (RESONANT_WINDOW, RESONANT_MIN_SHELL) and its own energy is the fit target."""
    case, site, found = demo_case
    res = _shifted(found[0], -0.1, 0.8)
    far = _shifted(found[0], -0.25, 0.3)        # within the window but not localised

    def patched(case_, site=None, **kw):
        tol = kw.get("tol", 0.05)
        return [s for s in (far, res) if s.above_vbm > tol]
    monkeypatch.setattr(states_module, "in_gap_states", patched)
    (t,) = targets_from_case(case, site=site)
    assert t.above_vbm == pytest.approx(-0.1, abs=1e-12)
    ana = analyze_case(case)
    assert ana.resonant and ana.state.above_vbm == pytest.approx(-0.1, abs=1e-12)


def test_mechanism_defect_multiplet_does_not_depend_on_the_basis(monkeypatch):
    """The mechanism (figure, report, summary) marks the defect level by its multiplet's first member and
    labels it as a whole, whatever basis the eigensolver returned (see test_multiplets_any_kernel)."""
    import sys

    sys.path.insert(0, str(Path(__file__).parent))
    from test_multiplets_any_kernel import _site, rotating_eigh

    from orbtool.mechanism import mechanism
    from orbtool.tb import ClusterModel, Target, _evaluate, fit

    site = _site("Td")
    result = fit(ClusterModel.around(site, "sp"), [Target("v", above_vbm=1.0, site=site)], free=["vbm"])
    ref = mechanism(result)
    members = _evaluate.multiplet_members(ref.levels, ref.defect_index)
    assert len(members) > 1 and members[0] == ref.defect_index     # a degenerate defect level, first member
    for seed in range(3):
        monkeypatch.setattr(_evaluate, "_eigh", rotating_eigh(seed))
        m = mechanism(result)
        assert m.defect_index == ref.defect_index
        assert m.summary() == ref.summary()
        assert m.multiplets() == ref.multiplets()
        np.testing.assert_allclose(m.levels, ref.levels, atol=1e-12)
