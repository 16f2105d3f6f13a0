"""Band folding in Γ-only supercells, on the committed GPAW family (``tests/external/periodic/data``).

A 3×3×3 supercell of the primitive cell samples, at its Γ point, only the primitive k-points
k = (i/3, j/3, l/3): an indirect gap with its conduction-band minimum at X = (½, 0, ½) (zinc blende
AlP) is not sampled, so the supercell's own Γ gap is too wide; direct-gap hosts (ZnS, NaCl, CsCl …)
are sampled right. orbtool must warn exactly when the two gaps differ (by more than 0.1 eV) and
refer levels to the true edges.

References (all the engine's own numbers, none computed by orbtool):
``<host>/host/engine.json`` ``homo_lumo_spin_paired`` — GPAW's HOMO/LUMO of the Γ-only supercell;
``<host>/bands/bands.json`` ``vbm``/``cbm``/``gap``/``gamma_vbm`` — GPAW's k-resolved band edges of
the bulk crystal (8×8×8 SCF, then a band path). Hosts still being computed are skipped, so the
tests grow with the data.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

import orbtool
from orbtool.analysis import band_edges

PERIODIC = Path(__file__).parent / "external" / "periodic" / "data"
HOSTS = ("AlP", "GaP", "CaO", "SrO", "ZnS", "CdS", "NaCl", "KCl", "CsCl")
TOLERANCE = 0.1          # eV: band_edges' default gap_tolerance


def _json(p: Path) -> dict:
    return json.loads(p.read_text())


def _hosts():
    out = [pytest.param(h, id=h) for h in HOSTS
           if (PERIODIC / h / "host" / "engine.json").is_file() and (PERIODIC / h / "bands" / "bands.json").is_file()]
    return out or [pytest.param(None, marks=pytest.mark.skip(reason="no periodic GPAW host with bands.json yet"))]


@pytest.fixture(scope="module")
def measured():
    """Per host: the engine's Γ-supercell gap, its true gap, and orbtool's edges with the reference."""
    out = {}
    for h in HOSTS:
        host, bands = PERIODIC / h / "host", PERIODIC / h / "bands" / "bands.json"
        if not ((host / "engine.json").is_file() and bands.is_file()):
            continue
        homo, lumo = _json(host / "engine.json")["homo_lumo_spin_paired"]
        proj = orbtool.read_projections(host / "projections.proj.txt.gz")
        out[h] = {"engine_gamma": (homo, lumo), "ref": _json(bands), "plain": band_edges(proj),
                  "true": band_edges(proj, reference=bands)}
    return out


@pytest.mark.parametrize("host", _hosts())
def test_supercell_edges_are_the_engines_gamma_homo_lumo(measured, host):
    m = measured[host]
    homo, lumo = m["engine_gamma"]
    # the projections file holds the engine's eigenvalues to 6 decimals; the electron count fixes the edges
    assert m["plain"].vbm == pytest.approx(homo, abs=2e-6)
    assert m["plain"].cbm == pytest.approx(lumo, abs=2e-6)
    assert m["plain"].sampled is None and m["plain"].warnings == ()


@pytest.mark.parametrize("host", _hosts())
def test_folding_warning_exactly_when_the_gamma_gap_differs(measured, host):
    m = measured[host]
    homo, lumo = m["engine_gamma"]
    ref, e = m["ref"], m["true"]
    engine_differs = abs((lumo - homo) - ref["gap"]) > TOLERANCE          # decided from the engine's numbers
    gap_warnings = [w for w in e.warnings if "differs from the true gap" in w]
    assert bool(gap_warnings) == engine_differs
    # levels are referred to the true gap, on the supercell's scale (the Γ valence-band top, sampled by both)
    assert e.gap == pytest.approx(ref["gap"], abs=1e-9)
    assert e.vbm == pytest.approx(homo + ref["vbm"] - ref["gamma_vbm"], abs=2e-6)
    assert e.sampled == pytest.approx((homo, lumo), abs=2e-6)
    if engine_differs:
        # the warning gives both gaps and their difference (the engine's numbers, 3 decimals)
        assert f"({lumo - homo:.3f} eV at its k-points)" in gap_warnings[0]
        assert f"true gap ({ref['gap']:.3f} eV)" in gap_warnings[0]


def test_the_family_has_both_kinds(measured):
    """AlP (CBM at X, not a supercell Γ point) must warn; the direct-gap hosts (CBM at Γ) must not."""
    if "AlP" not in measured:
        pytest.skip("AlP host or bands not computed")
    alp = measured["AlP"]
    assert alp["ref"]["cbm_k"] == [0.5, 0.0, 0.5]                    # X in the engine's band path
    homo, lumo = alp["engine_gamma"]
    assert (lumo - homo) - alp["ref"]["gap"] > 0.5                   # 2.151 vs 1.578 eV (engine)
    assert any("differs from the true gap" in w for w in alp["true"].warnings)
    direct = [h for h, m in measured.items() if m["ref"]["cbm_k"] == [0.0, 0.0, 0.0]
              and m["ref"]["vbm_k"] == [0.0, 0.0, 0.0]]
    assert direct, "no direct-gap host computed"
    for h in direct:
        assert not [w for w in measured[h]["true"].warnings if "differs from the true gap" in w], h


def test_folded_edges_reach_the_levels_notes_through_load_case():
    """The warning travels with the host data: every in-gap level of a case carries it, and the levels are
    referred to the true edges (AlP/V_P when computed, else ZnS/V_S with a narrower gap given by the user)."""
    from orbtool.analysis import in_gap_states, locate_vacancy
    vac = PERIODIC / "AlP" / "V_P"
    if (vac / "engine.json").is_file():
        host, edges = PERIODIC / "AlP" / "host", PERIODIC / "AlP" / "bands" / "bands.json"
    else:
        vac, host = PERIODIC / "ZnS" / "V_S", PERIODIC / "ZnS" / "host"
        homo, lumo = _json(host / "engine.json")["homo_lumo_spin_paired"]
        edges = lumo - homo - 0.3                                   # a true gap 0.3 eV narrower than Γ's
    case = orbtool.load_case(vac, host=host, edges=edges, grids=False)
    site = locate_vacancy(case.host, case.defect)
    states = in_gap_states(case, site, tol=-0.3)          # resonant levels too (AlP V_P: just above the CBM)
    assert len(states) >= 1
    e = states[0].edges
    assert e.sampled is not None and e.warnings
    for st in states:
        assert st.above_vbm == pytest.approx(st.energy_aligned - e.vbm, abs=1e-12)
        assert any(p.startswith("WARNING (band edges): the supercell's own gap") for p in st.provenance)
        assert any(p.startswith("levels referred to the true band edges") for p in st.provenance)
    assert any(n.startswith("WARNING (band edges)") for n in states.notes)
    assert np.isfinite(e.gap)
