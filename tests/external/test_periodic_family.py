"""The leave-one-host-out harness on the committed GPAW family and the pyscf clusters.

Source of truth: the engines' own numbers (GPAW ``engine.json`` of each case, written by
``tests/external/periodic/generate.py``; pyscf ``engine.json`` in ``tests/external/data``).
Acceptance of the knobs (issue "knobs that hold on real DFT"): right sign and within 0.15 eV.
Rows that fail today are strict xfails whose reason carries the numbers measured when they were
written (see ``tests/external/periodic/README.md``); they turn into passes when the model improves.
"""

from __future__ import annotations

import importlib.util
import sys
from pathlib import Path

import numpy as np
import pytest

HERE = Path(__file__).resolve().parent
_spec = importlib.util.spec_from_file_location("orbtool_periodic_harness", HERE / "periodic" / "harness.py")
harness = importlib.util.module_from_spec(_spec)
sys.modules[_spec.name] = harness
_spec.loader.exec_module(harness)

TOLERANCE = 0.15  # eV, the acceptance

#: rows that fail the acceptance today: row name -> (engine shift, predicted shift) measured, eV
FAILING_TODAY = {
    "pyscf Li→Na (Li14F12⁺ cluster)": (-0.428, +0.071),
    "ZnS→CdS V_S": (-0.312, -0.752),
    "AlP V_P r0.95": (-0.132, +0.099),
    "AlP V_P r1.05": (+0.186, -0.071),
}

DEFECTS = [c for c in harness.EXPECTED_CASES if "/V_" in c]
#: cases whose engine-chosen state (largest share of |ψ̃|² near the vacant site among the bands within
#: E_F ± 3 eV) lies well outside the gap — a resonance orbtool must not call an in-gap level. Measured
#: here: GaP V_P a₁ 1.5 eV below the VBM; AlP V_P at 1.05 d: a₁ in the valence band (its ideal and
#: 0.95 d cases pick the t₂ at the conduction-band edge); the cation vacancies ZnS V_Zn and NaCl V_Na:
#: an anion-p resonance 1–2 eV inside the valence band (CsCl V_Cs: its hole state at the VBM, in the window).
RESONANT_CASES = ("GaP/V_P", "AlP/V_P_r1.05", "NaCl/V_Na", "ZnS/V_Zn")
NEIGHBOURS = {"zincblende": 4, "rocksalt": 6, "cesiumchloride": 8}


@pytest.fixture(scope="module")
def observed():
    return {}


@pytest.fixture(scope="module")
def rows(observed):
    out = harness.periodic_rows(cache=observed) + harness.pyscf_rows()
    return {r.case: r for r in out}


def _obs(observed, case):
    if not harness.present(case):
        pytest.skip(f"{case} not committed")
    if case not in observed:
        observed[case] = harness.observe_periodic(case, window=6.0 if case in RESONANT_CASES else None)
    return observed[case]


def test_expected_cases_are_committed():
    missing = [c for c in harness.EXPECTED_CASES if not harness.present(c)]
    assert not missing, f"expected periodic cases missing from tests/external/periodic/data: {missing}"


@pytest.mark.parametrize("case", DEFECTS)
def test_vacancy_found_where_the_engine_made_it(observed, case):
    o = _obs(observed, case)
    rec = o.engine
    assert o.site.element == rec["removed_element"]
    assert o.site.host_index == rec["removed_index"]
    assert sorted(nb.index for nb in o.site.first_shell) == sorted(rec["first_shell_defect_cell"])
    assert len(o.site.first_shell) == NEIGHBOURS[rec["structure"]]


@pytest.mark.parametrize("case", DEFECTS)
def test_engine_defect_state_reproduced(observed, case):
    """orbtool's in_gap_states holds the engine's defect multiplet: energy on the defect cell's scale
    within 1e-4 eV (the text files round to 1 µeV) and the same occupation within 0.01 e — or, for a
    state the engine finds outside the gap, orbtool declines it as an in-gap level and still finds it
    (energy and occupation) with a wide window, outside the gap."""
    from orbtool.story import RESONANT_WINDOW

    if not harness.present(case):
        pytest.skip(f"{case} not committed")
    if case in RESONANT_CASES:
        with pytest.raises(AssertionError, match="not among orbtool's in-gap states"):
            harness.observe_periodic(case)
        o = harness.observe_periodic(case, window=6.0)
    else:
        o = _obs(observed, case)
    st = o.engine["defect_state"]
    assert o.degeneracy == len(st["bands"])
    assert o.energy == pytest.approx(st["energy"], abs=1e-4)
    assert o.occupation == pytest.approx(st["occupation"], abs=0.01)
    inside = -RESONANT_WINDOW < o.above_vbm < o.states[0].edges.gap + RESONANT_WINDOW
    # in the gap, or resonant just outside it (ZnS at 0.95 d: the a1 level falls 0.09 eV below the VBM), within
    # the window orbtool.story allows for a level chosen by character
    assert inside == (case not in RESONANT_CASES), (case, o.above_vbm, o.states[0].edges.gap)


def test_cd_caution_for_the_zns_cds_pair():
    text = " ".join(harness.cautions(["ZnS", "CdS"]))
    assert "Cd" in text and "toxic" in text
    assert "not measurements" in text
    assert not any("toxic" in c for c in harness.cautions(["NaCl", "KCl"]))


def _names():
    names = [f"{a}→{b} V_{harness.HOSTS[a][1]}" for a, b in harness.PAIRS]
    for h in harness.BREATHING:
        names += [f"{h} V_{harness.HOSTS[h][1]} {k}" for k in ("ideal", "r0.95", "r1.05")]
    names += ["pyscf Li→Na (Li14F12⁺ cluster)"] + [f"pyscf F-centre {k}" for k in ("ideal", "in5", "out5")]
    return names


def _param(name):
    if name in FAILING_TODAY:
        e, p = FAILING_TODAY[name]
        return pytest.param(name, marks=pytest.mark.xfail(strict=True, reason=(
            f"measured {name}: engine shift {e:+.3f} eV, model {p:+.3f} eV (error {p - e:+.3f} eV)")))
    return name


@pytest.mark.parametrize("name", [_param(n) for n in _names()])
def test_knob_prediction(rows, name):
    if name not in rows:
        pytest.skip(f"{name}: its cases are not in harness.EXPECTED_CASES")
    r = rows[name]
    assert np.isfinite(r.predicted)
    if r.sign_right is not None:
        assert r.sign_right, (name, r.engine, r.predicted)
    assert abs(r.error) <= TOLERANCE, (name, r.engine, r.predicted)


def test_fit_summaries_quote_the_harness(rows):
    """orbtool/data/knob_validation.json (read by FitResult.summary) holds today's harness numbers for
    orbtool's default model: rerun `python tests/external/periodic/harness.py --write` when they move."""
    import json

    from orbtool.tb.fit import knob_validation_lines

    rec = json.loads(harness.KNOBS.read_text())
    now = harness.knob_record([r for r in rows.values()], harness.VARIANTS[harness.DEFAULT])
    for kind in ("swap", "breathing"):
        assert rec[kind]["n"] == now[kind]["n"], kind
        assert rec[kind]["rms"] == pytest.approx(now[kind]["rms"], abs=0.01), kind
    assert "the cation knob was checked on" in knob_validation_lines()[0]
