"""``in_gap_states`` reports a level as a defect level only if it is localised at the vacancy, on the
committed GPAW family (``tests/external/periodic/data``).

Criterion (:func:`orbtool.analysis.edges.band_localisation`): weight on the first neighbour shell at
least ``LOCALISATION_FACTOR`` (1.5) times the share an evenly spread state would have there
(n_first / n_atoms; a rule of thumb).

References (the engine's own numbers, none from orbtool): ``engine.json`` ``defect_state`` — the bands
GPAW's wave functions put most within the first-shell distance of the vacant site (grid analysis,
independent of the projections orbtool reads) — and ``homo_lumo_spin_paired`` of the pristine
supercell (its band edges at Γ: a defect-cell level outside them lies among the host's bands).
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest

import orbtool
from orbtool.analysis import align, band_edges, in_gap_states, locate_vacancy
from orbtool.analysis.edges import LOCALISATION_FACTOR, BandEdges

PERIODIC = Path(__file__).parent / "external" / "periodic" / "data"
CASES = (("ZnS", "V_S"), ("NaCl", "V_Cl"), ("CsCl", "V_Cl"), ("KCl", "V_Cl"), ("CdS", "V_S"), ("AlP", "V_P"),
         ("GaP", "V_P"), ("CaO", "V_O"), ("SrO", "V_O"))
WIDEN = 0.8        # eV: host bands within this of the edges are pulled "into the gap" on purpose


def _json(p: Path) -> dict:
    return json.loads(p.read_text())


def _cases():
    out = [pytest.param(h, v, id=f"{h}/{v}") for h, v in CASES
           if (PERIODIC / h / v / "engine.json").is_file() and (PERIODIC / h / "host" / "engine.json").is_file()]
    return out or [pytest.param(None, None, marks=pytest.mark.skip(reason="no periodic GPAW vacancy yet"))]


@pytest.fixture(scope="module")
def loaded():
    memo = {}

    def get(h, v):
        if (h, v) not in memo:
            case = orbtool.load_case(PERIODIC / h / v, host=PERIODIC / h / "host", grids=False)
            site = locate_vacancy(case.host, case.defect)
            rec = _json(PERIODIC / h / v / "engine.json")
            first = rec["bands_written"][0]                            # 1-based engine band of projection band 0
            memo[h, v] = (case, site, align(case, site, method="pdos"), rec,
                          {b - first for b in rec["defect_state"]["bands"]})
        return memo[h, v]
    return get


def _has(states, bands, spin=0):
    return any(st.spin == spin and bands <= set(st.bands) for st in states)


@pytest.mark.parametrize("h,v", _cases())
def test_the_engine_state_is_kept_and_host_bands_are_dropped(loaded, h, v):
    case, site, shift, rec, engine_bands = loaded(h, v)
    true = band_edges(case.host_projections)
    homo, lumo = _json(PERIODIC / h / "host" / "engine.json")["homo_lumo_spin_paired"]
    # edges widened on purpose (as a wrong gap= or a folded reference would): host bands enter the "gap"
    wide = BandEdges(vbm=true.vbm - WIDEN, cbm=true.cbm + WIDEN, gap=true.gap + 2 * WIDEN,
                     by_spin={0: (true.vbm - WIDEN, true.cbm + WIDEN)}, method="test: widened by 0.8 eV")
    states = in_gap_states(case, site, edges=wide, alignment=shift)
    everything = in_gap_states(case, site, edges=wide, alignment=shift, localised=False)
    if not _has(everything, engine_bands):
        pytest.skip(f"{h}/{v}: the engine's state ({rec['defect_state']['energy']:.3f} eV) lies in neither window")
    # the engine's own defect state (grid analysis) is kept ...
    assert _has(states, engine_bands), (h, v, [(s.bands, s.localisation) for s in everything])
    # ... and judged localised with the stated criterion
    (mine,) = [s for s in states if engine_bands <= set(s.bands)]
    assert mine.localisation["localised"] is True
    assert any(p.startswith("localised at the vacancy: first-shell share") for p in mine.provenance)
    # nothing is lost: kept + dropped = every level in the (widened) gap
    assert len(states) + len(states.dropped) == len(everything)
    for _, verdict in states.dropped:
        assert verdict["localised"] is False
        assert verdict["first_shell_share"] < LOCALISATION_FACTOR * verdict["uniform_share"]
    # the host's bands that the widening let in (outside the pristine supercell's engine gap) are dropped
    # (levels inside that gap may be dropped too: AlP V_P has a delocalised doublet there)
    outside = [st for st, _ in states.dropped if not (homo + 0.05 < st.energy_aligned < lumo - 0.05)]
    assert outside, f"{h}/{v}: no host band entered the widened gap"
    # NOT asserted: that every kept level lies inside the engine's gap. Conduction-band states of cation
    # character sit on the cations, and at an anion vacancy the first shell is cations: their share is up
    # to n_first/n_cations = 2 × the uniform share, so some pass the criterion when the gap is widened
    # (measured: NaCl V_Cl, CdS V_S, AlP V_P). With the right edges they lie outside the gap.
    # one note per dropped level, with its numbers, in the result and in every kept level's provenance
    drop_notes = [n for n in states.notes if "is NOT reported as a defect level" in n]
    assert len(drop_notes) == len(states.dropped)
    for (st, verdict), note in zip(states.dropped, drop_notes):
        assert f"first-shell share {verdict['first_shell_share']:.3f} <" in note
        assert f"{verdict['participation']:.1f} of {case.projections.natoms} atoms" in note
    assert all(n in mine.provenance for n in drop_notes)


@pytest.mark.parametrize("h,v", _cases())
def test_with_the_real_edges_the_levels_found_are_localised(loaded, h, v):
    case, site, shift, rec, engine_bands = loaded(h, v)
    states = in_gap_states(case, site, alignment=shift, tol=-0.3)      # the harness's resonant window too
    if not _has(in_gap_states(case, site, alignment=shift, tol=-0.3, localised=False), engine_bands):
        pytest.skip(f"{h}/{v}: the engine's state ({rec['defect_state']['energy']:.3f} eV) is not within 0.3 eV "
                    "of the gap")
    assert _has(states, engine_bands)
    assert all(s.localisation.get("localised") for s in states)


def test_alignment_warning_reaches_every_level(loaded):
    """ZnS V_S: the far-atom valence-band centroid disagrees with the other routes by more than 0.1 eV
    (measured last session: −0.077 vs +0.18 eV); the warning must be in every level's notes."""
    if not (PERIODIC / "ZnS" / "V_S" / "engine.json").is_file():
        pytest.skip("ZnS V_S not computed")
    case, site, _, _, engine_bands = loaded("ZnS", "V_S")
    al = align(case, site)                                # auto: the PDOS route, cross-checked by every route
    shifts = [r["shift"] for r in al.routes]
    assert max(shifts) - min(shifts) > 0.1 and al.warnings
    states = in_gap_states(case, site, alignment=al, tol=-0.3)
    assert states and _has(states, engine_bands)
    for st in states:
        assert any(p.startswith("WARNING (alignment): alignment routes disagree") for p in st.provenance)


def test_levels_without_atom_weights_are_kept_with_a_note(loaded):
    """A calculator that offers no projections cannot be judged: its levels are kept, and it says so."""
    if not (PERIODIC / "ZnS" / "V_S" / "engine.json").is_file():
        pytest.skip("ZnS V_S not computed")
    import ase.io
    case, site, shift, _, _ = loaded("ZnS", "V_S")
    calc = orbtool.case_from_calculator(ase.io.read(PERIODIC / "ZnS" / "host" / "gpaw.txt.gz"),
                                        ase.io.read(PERIODIC / "ZnS" / "V_S" / "gpaw.txt.gz"), name="log")
    states = in_gap_states(calc, site, alignment=shift.shift)
    assert states and not states.dropped
    for st in states:
        assert st.localisation["localised"] is None
        assert any(p.startswith("localisation not judged") for p in st.provenance)


@pytest.mark.parametrize("name", ["vac", "vac_in5", "vac_out5", "vac_na"])
def test_the_pyscf_f_centres_are_kept(name):
    """The engine's F-centre state (``state_index``/``state_spin`` in ``tests/external/data/<name>/engine.json``)
    of every Li14F12-type cluster is a defect level; the host's top valence bands beside it are not."""
    data = Path(__file__).parent / "external" / "data"
    rec = _json(data / name / "engine.json")
    case = orbtool.load_case(data / name, host=data / "host", charge=rec["charge"], grids=False)
    site = locate_vacancy(case.host, case.defect)
    states = in_gap_states(case, site, alignment=align(case, site, method="pdos"), tol=-0.3)
    assert _has(states, {rec["state_index"]}, spin=rec["state_spin"])
    # the levels within 0.3 eV of the VBM are F 2p valence bands (nothing on the Li shell): all dropped
    near_vbm = [st for st, _ in states.dropped if st.above_vbm < 0.3]
    assert all(st.shell_fractions[1] < 0.05 for st, _ in states.dropped)
    assert near_vbm or name == "vac_na"
