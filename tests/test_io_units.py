"""Unit conventions of cube files decided from what the data must satisfy.

Reference: the pyscf engine's own integrals of its committed cubes (``engine.json``:
``state_norm_on_grid``, ``density_on_grid``, its electron count), Gaussian's cube convention
(atomic units) for pyscf's ``cubegen`` files, and ASE's writer, which stores the array it is
given (``ase.io.cube.write_cube`` source: ``data.tofile``, no scaling) — so an array per Å³
written by ASE must read back unchanged.
"""

from __future__ import annotations

import json
from pathlib import Path

import ase.io
import numpy as np
import pytest

import orbtool
from orbtool.errors import InputFormatError
from orbtool.io.conventions import decide_convention, electron_counts
from orbtool.units import BOHR

DATA = Path(__file__).parent / "external" / "data"


@pytest.fixture(autouse=True)
def _cache(tmp_path, monkeypatch):
    monkeypatch.setenv("ORBTOOL_CACHE_DIR", str(tmp_path / "cache"))


def _engine(name):
    return json.loads((DATA / name / "engine.json").read_text())


def test_gaussian_style_orbital_detected_as_atomic_units():
    g = orbtool.read_grid(DATA / "vac" / "state.cube")
    assert g.meta["unit_convention"] == "bohr" and g.meta["unit_evidence"] == "integral"
    # the engine's own ∫|ψ|² on this grid (pyscf cubegen, Bohr^-3/2)
    assert g.integrate(square=True) == pytest.approx(_engine("vac")["state_norm_on_grid"], rel=1e-4)


def test_gaussian_style_density_detected_as_atomic_units():
    g = orbtool.read_grid(DATA / "host" / "total" / "density.cube.gz")
    rec = _engine("host")
    assert g.meta["unit_convention"] == "bohr" and g.meta["unit_evidence"] == "integral"
    # the engine's own sum on this grid (158 electrons; the all-electron cusps make it 177.8)
    assert g.integrate() == pytest.approx(rec["density_on_grid"], rel=1e-4)
    assert rec["n_electrons"] in electron_counts(g.atoms, max_charge=1)


def _ase_written(tmp_path, values, atoms, name):
    f = tmp_path / name
    ase.io.write(f, atoms, data=values)
    return f


def test_ase_written_state_density_detected_per_cubic_angstrom(tmp_path):
    psi = orbtool.read_grid(DATA / "vac" / "state.cube")       # Å^-3/2
    f = _ase_written(tmp_path, psi.values ** 2, psi.atoms, "state.cube")
    g = orbtool.read_grid(f)
    assert g.meta["unit_convention"] == "angstrom" and g.meta["unit_evidence"] == "integral"
    assert g.integrate() == pytest.approx(_engine("vac")["state_norm_on_grid"], rel=1e-4)
    # the old reading (atomic units) is what the issue reports: bohr⁻³ = 6.748 times too large
    forced = orbtool.read_grid(f, units="bohr")
    assert forced.integrate() / g.integrate() == pytest.approx(BOHR ** -3, rel=1e-9)
    assert "given by the caller" in forced.meta["unit_convention_reason"]


def test_ase_written_total_density_detected_per_cubic_angstrom(tmp_path):
    rho = orbtool.read_grid(DATA / "vac" / "total" / "density.cube.gz")
    f = _ase_written(tmp_path, rho.values, rho.atoms, "density.cube")
    g = orbtool.read_grid(f, quantity="density")
    assert g.meta["unit_convention"] == "angstrom" and g.meta["unit_evidence"] == "integral"
    assert g.integrate() == pytest.approx(_engine("vac")["density_on_grid"], rel=1e-4)


def test_ase_written_signed_orbital(tmp_path):
    psi = orbtool.read_grid(DATA / "vac" / "state.cube")
    f = _ase_written(tmp_path, psi.values, psi.atoms, "orbital.cube")
    g = orbtool.read_grid(f)
    assert g.unit == "Å^-3/2" and g.meta["unit_convention"] == "angstrom"
    assert g.integrate(square=True) == pytest.approx(_engine("vac")["state_norm_on_grid"], rel=1e-4)


def test_expected_count_decides_and_writer_is_the_fallback():
    # a bare number that fits neither reading: the writer decides, and the reason says so
    r = decide_convention(40.0, "state", comments="Cube file from ASE, written on ...")
    assert r["convention"] == "angstrom" and r["evidence"] == "writer" and "cannot decide" in r["reason"]
    r = decide_convention(40.0, "state", comments="pyscf cube")
    assert r["convention"] == "bohr" and r["evidence"] == "writer"
    # a caller who knows the multiplet (3 bands) decides it
    r = decide_convention(3.0 * BOHR ** 3, "state", expected=3)
    assert r["convention"] == "bohr" and r["evidence"] == "integral"
    assert decide_convention(1.0, "potential")["evidence"] == "writer"


def test_units_reach_load_case_and_manifest(tmp_path):
    case = orbtool.load_case(DATA / "vac", units="angstrom")
    g = case.grids["state"]
    assert g.meta["unit_convention"] == "angstrom"
    assert any("units: given by the caller (units='angstrom')" in p for p in case.provenance)
    man = tmp_path / "family.toml"
    host, vac = (DATA / "host").as_posix(), (DATA / "vac").as_posix()
    man.write_text(f'[family]\nname = "f"\nunits = "bohr"\n\n[[host]]\nname = "h"\npath = "{host}"\n'
                   f'\n[[case]]\nname = "v"\nhost = "h"\npath = "{vac}"\nunits = "angstrom"\n')
    fam = orbtool.load_family(man)
    assert fam["v"].grids["state"].meta["unit_convention"] == "angstrom"
    man.write_text(man.read_text().replace('units = "angstrom"', 'units = "furlongs"'))
    with pytest.raises(InputFormatError, match="units of \\[\\[case\\]\\] #1 must be one of auto, bohr, angstrom"):
        orbtool.load_family(man)


def test_bad_units_value_is_refused():
    with pytest.raises(InputFormatError, match="units must be one of"):
        orbtool.read_grid(DATA / "vac" / "state.cube", units="furlongs", cache=False)


def test_electron_counts_include_valence_and_semicore():
    from ase.build import bulk
    zns = bulk("ZnS", "zincblende", a=5.41).repeat(3)
    del zns[1]
    counts = set(electron_counts(zns, max_charge=0).astype(int))
    # GPAW's setups (gpaw-data): Zn 12 (3d¹⁰4s²), S 6 → 27·12 + 26·6 = 480 for ZnS with V_S (from memory)
    assert 480 in counts
    assert 27 * 2 + 26 * 6 in counts          # Zn 4s² only
    assert np.all(np.diff(sorted(counts)) > 0)
