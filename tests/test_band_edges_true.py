"""Band edges: occupations respected (smearing is not a metal), true edges from a band-structure
file or the user with a warning when the supercell's gap differs, and the localisation test.

References: the pyscf engine's HOMO/LUMO (``tests/external/data/*/engine.json``) and its Löwdin
weights of the F-centre state (``state_lowdin_atoms``); Fermi–Dirac occupations with the chemical
potential fixed by the electron count (what smearing codes do: common practice).
"""

from __future__ import annotations

import json
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

import orbtool
from orbtool.analysis import band_edges, locate_vacancy
from orbtool.analysis.edges import NoGapError, band_localisation

DATA = Path(__file__).parent / "external" / "data"


def _engine(name):
    rec = json.loads((DATA / name / "engine.json").read_text())
    for key in ("homo_eV", "lumo_eV"):          # one value per spin channel; the host is closed-shell
        rec[key] = max(rec[key]) if key == "homo_eV" else min(rec[key])
    return rec


def _smeared(proj, kt, electrons):
    """Fermi–Dirac occupations (spin-paired, 2 per state) with μ fixed by bisection on the count."""
    e = proj.energies

    def occ(mu):
        return 2.0 / (1.0 + np.exp(np.clip((e - mu) / kt, -200, 200)))
    lo, hi = float(e.min()) - 1, float(e.max()) + 1
    for _ in range(200):
        mu = 0.5 * (lo + hi)
        lo, hi = (mu, hi) if occ(mu).sum() < electrons else (lo, mu)
    return replace(proj, occupations=occ(0.5 * (lo + hi)))


@pytest.fixture(scope="module")
def host():
    return orbtool.read_projections(DATA / "host" / "projections.proj.txt.gz")


def test_smearing_is_not_a_metal(host):
    rec = _engine("host")
    n = float(host.occupations.sum())
    smeared = _smeared(host, kt=1.2, electrons=n)   # a wide smearing across the 5.9 eV gap
    frac = smeared.occupations / 2
    assert ((frac > 0.05) & (frac < 0.95)).any()          # the old rule called this host metallic
    e = band_edges(smeared)
    # the engine's own HOMO and LUMO (eV)
    assert e.vbm == pytest.approx(rec["homo_eV"], abs=1e-5)
    assert e.cbm == pytest.approx(rec["lumo_eV"], abs=1e-5)
    assert any("smearing, not a metal" in p for p in e.provenance)


def test_a_fractional_electron_count_is_a_metal(host):
    n = float(host.occupations.sum())
    with pytest.raises(NoGapError, match="not a whole number"):
        band_edges(_smeared(host, kt=1.2, electrons=n - 1.0))


def test_true_edges_from_a_band_structure_file(tmp_path, host):
    rec = _engine("host")
    f = tmp_path / "bands.json"
    # a k-resolved host with a CBM 0.8 eV below the sampled one (folding), on the same scale
    f.write_text(json.dumps({"vbm": rec["homo_eV"], "cbm": rec["lumo_eV"] - 0.8, "note": "test layout"}))
    e = band_edges(host, reference=f)
    assert e.gap == pytest.approx(rec["lumo_eV"] - 0.8 - rec["homo_eV"], abs=1e-9)
    assert e.sampled == pytest.approx((rec["homo_eV"], rec["lumo_eV"]), abs=1e-5)
    assert len(e.warnings) == 1 and "differs from the true gap" in e.warnings[0]
    # through load_case: the file travels with the host data and band_edges finds it
    case = orbtool.load_case(DATA / "vac", host=DATA / "host", edges=f)
    e2 = band_edges(case.host_projections)
    assert (e2.vbm, e2.cbm) == (e.vbm, e.cbm) and e2.warnings == e.warnings
    assert any("true band edges from the band-structure file bands.json" in p for p in case.provenance)


def test_true_gap_from_the_user(host):
    rec = _engine("host")
    same = band_edges(host, reference=rec["lumo_eV"] - rec["homo_eV"])
    assert same.warnings == () and same.cbm == pytest.approx(rec["lumo_eV"], abs=1e-5)
    wider = band_edges(host, reference={"vbm": rec["homo_eV"] - 0.5, "cbm": rec["lumo_eV"]})
    assert any("true VBM" in w for w in wider.warnings)      # a VBM 0.5 eV off: wrong scale or not at Γ


def test_bad_band_structure_files(tmp_path, host):
    from orbtool.errors import InputFormatError
    f = tmp_path / "bands.json"
    f.write_text(json.dumps({"vbm": 1.0, "cbm": 0.5}))
    with pytest.raises(InputFormatError, match="not above vbm"):
        band_edges(host, reference=f)
    f.write_text(json.dumps({"vbm": 0.0, "cbm": 1.0, "gap": 2.0}))
    with pytest.raises(InputFormatError, match="disagrees"):
        band_edges(host, reference=f)
    f.write_text("{not json")
    with pytest.raises(InputFormatError, match="not valid JSON"):
        band_edges(host, reference=f)


def test_localisation_of_the_engine_state():
    case = orbtool.load_case(DATA / "vac", host=DATA / "host")
    site = locate_vacancy(case.host, case.defect)
    first = [nb.index for nb in site.first_shell]
    rec = _engine("vac")
    # the engine's own Löwdin weights of its F-centre state: localised on the six first-shell Li
    loc = band_localisation(rec["state_lowdin_atoms"], first)
    assert loc["localised"] and loc["first_shell_share"] == pytest.approx(0.5597, abs=1e-3)
    # the host's valence states just below the gap are not (share below 1.5 × the uniform 6/26)
    p = case.projections
    deep = [b for b in range(p.nbands)
            if p.occupations[0, 0, b] > 0 and p.energies[0, 0, b] < rec["state_energy_eV"] - 5]
    shares = [band_localisation(p.character(b, 0).sum(axis=1), first) for b in deep[-12:]]
    assert not any(s["localised"] for s in shares)
    assert band_localisation(np.zeros(len(case.defect)), first)["localised"] is None


def test_only_localised_states_are_defect_levels():
    from orbtool.analysis import in_gap_states
    from orbtool.analysis.edges import BandEdges, localised_states
    case = orbtool.load_case(DATA / "vac", host=DATA / "host")
    site = locate_vacancy(case.host, case.defect)
    rec = _engine("vac")
    # edges opened wide on purpose so that the top valence bands (F 2p, below −10 eV) count as "in the gap"
    wide = BandEdges(vbm=-10.9, cbm=-4.3, gap=6.6, by_spin={0: (-10.9, -4.3)}, method="test: widened")
    states = in_gap_states(case, site, edges=wide, alignment=0.0, localised=False)
    kept, dropped = localised_states(states, site)
    # the engine's F-centre state (its own index and spin) is the one defect level
    assert [(s.band, s.spin) for s, _ in kept] == [(rec["state_index"], rec["state_spin"])]
    assert len(dropped) >= 6 and all(s.energy < -10 for s, _ in dropped)
    assert all("first-shell share" in v["criterion"] for _, v in dropped)
    # in_gap_states applies the same criterion by default
    default = in_gap_states(case, site, edges=wide, alignment=0.0)
    assert [(s.band, s.spin) for s in default] == [(s.band, s.spin) for s, _ in kept]
    assert [s.bands for s, _ in default.dropped] == [s.bands for s, _ in dropped]
