"""The periodic GPAW family (``tests/external/periodic/data``) read as a user has it: a folder of
GPAW output as the engine and ASE write it, and the calculator ``ase.io.read`` rebuilds from
GPAW's own text log — both in one call each, giving the same levels.

References: the engine's own numbers in each ``engine.json`` (``state_cube.integral`` — the engine's
∫ of the state density it wrote; ``potential_cube.mean``; ``atomic_electrostatic_potentials`` —
GPAW's ``get_atomic_electrostatic_potentials``; ``fermi``; ``bands_written``) and
``<host>/bands/bands.json`` (the k-resolved true band edges). Cases still being computed are
skipped, so the tests grow with the data.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

import orbtool
from orbtool.analysis import band_edges, locate_vacancy

pytestmark = pytest.mark.slow        # ~1 min per host/vacancy pair on a busy 2-core machine

PERIODIC = Path(__file__).parent / "external" / "periodic" / "data"
HOSTS = {"ZnS": "S", "CdS": "S", "NaCl": "Cl", "KCl": "Cl", "CsCl": "Cl", "AlP": "P", "GaP": "P", "CaO": "O",
         "SrO": "O"}


def _done(folder: Path) -> bool:
    return (folder / "engine.json").is_file()


def _engine(folder: Path) -> dict:
    return json.loads((folder / "engine.json").read_text())


def _pairs():
    out = []
    for h, an in HOSTS.items():
        host, vac = PERIODIC / h / "host", PERIODIC / h / f"V_{an}"
        if _done(host) and _done(vac):
            out.append(pytest.param(host, vac, id=f"{h}/V_{an}"))
    return out or [pytest.param(None, None, marks=pytest.mark.skip(reason="no periodic GPAW pair computed yet"))]


def _vacancies():
    out = [pytest.param(PERIODIC / h / f"V_{an}", id=f"{h}/V_{an}") for h, an in HOSTS.items()
           if _done(PERIODIC / h / f"V_{an}") and (PERIODIC / h / f"V_{an}" / "state.cube.gz").is_file()]
    return out or [pytest.param(None, marks=pytest.mark.skip(reason="no GPAW state cube yet"))]


@pytest.fixture(autouse=True)
def _cache(tmp_path, monkeypatch):
    monkeypatch.setenv("ORBTOOL_CACHE_DIR", str(tmp_path / "cache"))


@pytest.mark.parametrize("vac", _vacancies())
def test_ase_written_state_cube_is_per_cubic_angstrom(vac):
    rec = _engine(vac)["state_cube"]
    g = orbtool.read_grid(vac / "state.cube.gz", quantity="state")
    assert g.meta["unit_convention"] == "angstrom" and g.meta["unit_evidence"] == "integral"
    # the engine's own integral of the array it handed to ase.io.write
    assert g.integrate() == pytest.approx(rec["integral"], rel=1e-3)
    # by file name, through load_case, the same
    case = orbtool.load_case(vac)
    assert case.grids["state"].integrate() == pytest.approx(rec["integral"], rel=1e-3)


@pytest.mark.parametrize("host,vac", _pairs())
def test_potential_cube_in_ev_as_ase_wrote_it(host, vac):
    for folder in (host, vac):
        if not (folder / "potential.cube.gz").is_file():
            pytest.skip("no potential cube")
        g = orbtool.load_case(folder).grids["potential"]
        assert g.unit == "eV" and g.meta["unit_convention"] == "angstrom"
        # the engine's mean of the potential it wrote (eV, potential energy of an electron)
        assert float(g.values.mean()) == pytest.approx(_engine(folder)["potential_cube"]["mean"], abs=1e-4)


@pytest.mark.parametrize("host,vac", _pairs())
def test_alignment_routes_against_the_engine_atomic_potentials(host, vac):
    case = orbtool.load_case(vac, host=host)
    site = locate_vacancy(case.host, case.defect)
    vh, vd = _engine(host).get("atomic_electrostatic_potentials"), _engine(vac).get("atomic_electrostatic_potentials")
    if vh is None or vd is None:
        pytest.skip("this GPAW version gives no per-atom potentials")
    res = orbtool.analysis.alignment.align_routes(case, site, atomic_potentials=(vh, vd))
    routes = {r["route"]: r for r in res.routes}
    assert {"atomic-potentials", "pdos-valence"} <= set(routes)
    ref = routes["atomic-potentials"]
    for name, r in routes.items():
        assert np.isfinite(r["shift"]) and np.isfinite(r["spread"]), name
    if "potential-atoms" in routes:
        # the grid route samples the same potential as GPAW's atom-centred average (1 Å spheres vs
        # GPAW's compensation-charge shape): agreement within their spreads, and within 0.1 eV
        r = routes["potential-atoms"]
        assert abs(r["shift"] - ref["shift"]) < max(0.1, 2 * (r["spread"] + ref["spread"]))
    spread = max(r["shift"] for r in res.routes) - min(r["shift"] for r in res.routes)
    assert bool(res.warnings) == (spread > 0.1)


def _log_case(host, vac):
    import ase.io
    return orbtool.case_from_calculator(ase.io.read(host / "gpaw.txt.gz"), ase.io.read(vac / "gpaw.txt.gz"),
                                        name=vac.name)


@pytest.mark.parametrize("host,vac", _pairs())
def test_engine_log_calculator_gives_the_files_levels(host, vac):
    files = orbtool.load_case(vac, host=host)
    calc = _log_case(host, vac)
    for c_proj, f_proj, folder in ((calc.host_projections, files.host_projections, host),
                                   (calc.projections, files.projections, vac)):
        first, last = _engine(folder)["bands_written"]              # 1-based engine band numbers
        # the log prints eigenvalues with 5 decimals, the projections file with 6
        np.testing.assert_allclose(c_proj.energies[0, 0, first - 1:last], f_proj.energies[0, 0], atol=2e-5)
        np.testing.assert_allclose(c_proj.occupations[0, 0, first - 1:last], f_proj.occupations[0, 0], atol=2e-5)
        assert c_proj.fermi == pytest.approx(_engine(folder)["fermi"], abs=1e-4)
    e_c, e_f = band_edges(calc.host_projections), band_edges(files.host_projections)
    assert e_c.vbm == pytest.approx(e_f.vbm, abs=2e-5) and e_c.cbm == pytest.approx(e_f.cbm, abs=2e-5)
    # the same in-gap levels (same alignment given to both: the routes are compared separately; the log has
    # no projections, so localisation cannot be judged there: every level in the gap is compared)
    from orbtool.analysis import in_gap_states
    site = locate_vacancy(files.host, files.defect)
    lv_f = [s.energy for s in in_gap_states(files, site, alignment=0.0, localised=False)]
    lv_c = [s.energy for s in in_gap_states(calc, site, alignment=0.0, localised=False)]
    assert len(lv_c) == len(lv_f)
    np.testing.assert_allclose(sorted(lv_c), sorted(lv_f), atol=2e-5)


@pytest.mark.parametrize("host,vac", _pairs())
def test_true_band_edges_and_the_gamma_gap(host, vac):
    bands = host.parent / "bands" / "bands.json"
    if not bands.is_file():
        pytest.skip("no k-resolved band edges yet")
    ref = json.loads(bands.read_text())
    case = orbtool.load_case(vac, host=host, edges=bands)
    e = band_edges(case.host_projections)
    # the true gap of the k-resolved run; its scale tied to the supercell's at Γ (sampled by both)
    assert e.gap == pytest.approx(ref["gap"], abs=1e-9)
    assert e.vbm - e.sampled[0] == pytest.approx(ref["vbm"] - ref["gamma_vbm"], abs=1e-9)
    sampled_gap = e.sampled[1] - e.sampled[0]
    assert bool([w for w in e.warnings if "true gap" in w]) == (abs(sampled_gap - ref["gap"]) > 0.1)


@pytest.mark.parametrize("host,vac", _pairs())
def test_inspect_and_load_the_engine_log_alone(host, vac, tmp_path, capsys):
    from orbtool.cli import main
    assert main(["inspect", str(vac / "gpaw.txt.gz"), "--json"]) == 0
    info = json.loads(capsys.readouterr().out)
    rec = _engine(vac)
    assert info["kind"] == "structure" and info["format"] == "ase:gpaw-out" and info["atoms"] == rec["natoms"]
    assert info["engine_output"] and info["bands"] == rec["nbands_engine"]
    assert info["fermi_eV"] == pytest.approx(rec["fermi"], abs=1e-4)
    # the log alone is a case: structure, band energies and occupations from its calculator
    case = orbtool.load_case(vac / "gpaw.txt.gz", host=host / "structure.extxyz")
    assert case.projections.nbands == rec["nbands_engine"] and case.projections.orbitals == ()
    assert case.total_energy == pytest.approx(rec["total_energy"], abs=1e-4)
    # a structure file's energy-only calculator (extxyz) is no source of eigenvalues
    assert case.host_projections is None
