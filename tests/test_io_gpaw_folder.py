"""A folder of GPAW output exactly as the engine and ASE write it loads in one call and gives the levels
of the converted route.

As written (no conversion): ``structure.extxyz`` (``ase.io.write``), GPAW's text log, cubes from
``ase.io.write(..., data=...)`` (bohr header, values per Å³ / eV as GPAW hands them out), PDOS and band
projections as text. Converted route, what a user's conversion script did before: a POSCAR and the
grids turned into orbtool NPZ with the convention stated by hand (``units="angstrom"``).

References (the engine's own numbers in ``tests/external/periodic/data/<host>/<case>/engine.json``):
``defect_state`` (the engine's defect band and its eigenvalue), ``state_cube.integral`` (the engine's
∫ of the array it gave ``ase.io.write``), ``potential_cube.mean``.
"""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import numpy as np
import pytest

import orbtool
from orbtool.analysis import align, in_gap_states, locate_vacancy

pytestmark = pytest.mark.slow           # two cases with cubes, twice: ~2 min on a busy machine

PERIODIC = Path(__file__).parent / "external" / "periodic" / "data"


@pytest.fixture(autouse=True)
def _cache(tmp_path, monkeypatch):
    monkeypatch.setenv("ORBTOOL_CACHE_DIR", str(tmp_path / "cache"))


def _as_written(src: Path, dst: Path) -> Path:
    """The engine's and ASE's files only (the generator's POSCAR is a conversion: left out)."""
    dst.mkdir(parents=True)
    for f in src.iterdir():
        if f.name not in ("POSCAR", "engine.json"):
            shutil.copy(f, dst / f.name)
    return dst


def _converted(src: Path, dst: Path) -> Path:
    """What a conversion script gives: POSCAR, the text spectra, the cubes as NPZ with the units stated."""
    dst.mkdir(parents=True)
    for name in ("POSCAR", "pdos.pdos.txt.gz", "projections.proj.txt.gz"):
        shutil.copy(src / name, dst / name)
    for cube in src.glob("*.cube.gz"):
        role = cube.name.split(".")[0]
        q = {"state": "state", "potential": "potential"}[role]
        g = orbtool.read_grid(cube, quantity=q, units="angstrom")
        orbtool.io.write_grid(dst / f"{role}.npz", g, format="npz")
    return dst


@pytest.mark.parametrize("host,vac", [("ZnS", "V_S"), ("NaCl", "V_Cl")])
def test_engine_folder_in_one_call_gives_the_converted_levels(tmp_path, host, vac):
    src_v, src_h = PERIODIC / host / vac, PERIODIC / host / "host"
    if not (src_v / "state.cube.gz").is_file():
        pytest.skip("no state cube")
    rec = json.loads((src_v / "engine.json").read_text())
    raw = orbtool.load_case(_as_written(src_v, tmp_path / "raw" / vac),
                            host=_as_written(src_h, tmp_path / "raw" / "host"))
    conv = orbtool.load_case(_converted(src_v, tmp_path / "conv" / vac),
                             host=_converted(src_h, tmp_path / "conv" / "host"))
    # the raw folder's structure came from the extxyz; the cubes' convention was decided, not given
    assert any("structure.extxyz" in p for p in raw.provenance), raw.provenance
    assert raw.grids["state"].meta["unit_evidence"] == "integral"
    assert raw.grids["state"].integrate() == pytest.approx(rec["state_cube"]["integral"], rel=1e-3)
    assert conv.grids["state"].integrate() == pytest.approx(rec["state_cube"]["integral"], rel=1e-3)
    assert float(raw.grids["potential"].values.mean()) == pytest.approx(rec["potential_cube"]["mean"], abs=1e-4)
    np.testing.assert_allclose(raw.defect.get_positions(), conv.defect.get_positions(), atol=1e-6)
    # the same alignment and the same levels
    site_r, site_c = locate_vacancy(raw.host, raw.defect), locate_vacancy(conv.host, conv.defect)
    a_r, a_c = align(raw, site_r), align(conv, site_c)
    assert a_r.shift == pytest.approx(a_c.shift, abs=1e-6)
    lv_r, lv_c = in_gap_states(raw, site_r), in_gap_states(conv, site_c)
    assert [s.bands for s in lv_r] == [s.bands for s in lv_c] and len(lv_r) >= 1
    np.testing.assert_allclose([s.energy_aligned for s in lv_r], [s.energy_aligned for s in lv_c], atol=1e-6)
    # and they hold the engine's defect state, at the engine's eigenvalue (projection file: 6 decimals)
    first = rec["bands_written"][0]
    want = {b - first for b in rec["defect_state"]["bands"]}
    (st,) = [s for s in lv_r if want <= set(s.bands)]
    assert st.energy == pytest.approx(rec["defect_state"]["energy"], abs=2e-6)


def test_extxyz_and_the_engine_log_alone_give_band_energies(tmp_path):
    """No projection file: the structure comes from the extxyz (no eigenvalues in it) and the band
    energies and occupations from GPAW's own text log beside it, whose atoms are the same."""
    src = PERIODIC / "ZnS" / "V_S"
    rec = json.loads((src / "engine.json").read_text())
    folder = tmp_path / "V_S"
    folder.mkdir()
    for name in ("structure.extxyz", "gpaw.txt.gz"):
        shutil.copy(src / name, folder / name)
    case = orbtool.load_case(folder, grids=False)
    assert any("structure from structure.extxyz" in p for p in case.provenance)
    assert any("band energies and occupations from gpaw.txt.gz" in p for p in case.provenance)
    p = case.projections
    assert p.nbands == rec["nbands_engine"] and p.fermi == pytest.approx(rec["fermi"], abs=1e-4)
    # the engine's defect state, at its eigenvalue (the log prints 5 decimals)
    (b,) = rec["defect_state"]["bands"]
    assert p.energies[0, 0, b - 1] == pytest.approx(rec["defect_state"]["energy"], abs=1e-5)
    # a log whose atoms are not the structure's is not used
    other = tmp_path / "mixed"
    other.mkdir()
    shutil.copy(src / "structure.extxyz", other / "structure.extxyz")
    shutil.copy(PERIODIC / "ZnS" / "host" / "gpaw.txt.gz", other / "gpaw.txt.gz")
    mixed = orbtool.load_case(other, grids=False)
    assert mixed.projections is None
    assert any("not the atoms of the structure file" in p for p in mixed.provenance)
