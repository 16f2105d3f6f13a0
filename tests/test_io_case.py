"""load_case and load_family on folders laid out as the plane-wave code writes them
(POSCAR/CONTCAR, DOSCAR, PROCAR, PARCHG.gz, LOCPOT.gz, OSZICAR), with grids written by ASE's
charge-density writer and the DOS/projection files from the hand-written fixtures."""

import gzip
import shutil
from pathlib import Path

import numpy as np
import pytest
from ase.build import bulk
from ase.calculators.vasp import VaspChargeDensity
from ase.io import write

import orbtool
from orbtool.errors import InputFormatError

FIX = Path(__file__).parent / "fixtures" / "io"


@pytest.fixture(autouse=True)
def _cache(tmp_path, monkeypatch):
    monkeypatch.setenv("ORBTOOL_CACHE_DIR", str(tmp_path / "cache"))


def _grid_file(path, atoms, data, gz=True):
    v = VaspChargeDensity(None)
    v.atoms, v.chg = [atoms], [data]
    tmp = path.with_suffix(".tmp")
    v.write(str(tmp), format="chgcar")
    with open(tmp, "rb") as src, gzip.open(path, "wb") as dst:
        shutil.copyfileobj(src, dst)
    tmp.unlink()


def _run(folder, host=False, relaxed=True):
    folder.mkdir(parents=True)
    src = FIX / "vasp_spin"
    for name in ("POSCAR", "DOSCAR", "PROCAR", "OSZICAR"):
        shutil.copy(src / name, folder / name)
    atoms = bulk("GaAs", "zincblende", a=5.65)
    if relaxed:
        moved = atoms.copy()
        moved.positions[1] += [0.01, 0.0, -0.01]
        write(folder / "CONTCAR", moved, format="vasp", direct=True)
    rng = np.random.default_rng(7)
    if not host:
        _grid_file(folder / "PARCHG.gz", atoms, rng.random((4, 4, 4)))
    _grid_file(folder / "LOCPOT.gz", atoms, rng.random((4, 4, 4)) - 5.0)
    return folder


def test_load_case_recognises_everything(tmp_path):
    d = _run(tmp_path / "V_As_q0")
    h = _run(tmp_path / "host", host=True, relaxed=False)
    (d / "notes.txt").write_text("free text")
    case = orbtool.io.load_case(d, host=h, charge=1, labels={"defect": "V_As"})
    assert case.name == "V_As_q0" and case.charge == 1 and case.labels == {"defect": "V_As"}
    # CONTCAR (relaxed) preferred over POSCAR
    np.testing.assert_allclose(case.defect.positions[1] - bulk("GaAs", "zincblende", a=5.65).positions[1],
                               [0.01, 0.0, -0.01], atol=1e-9)
    assert set(case.grids) == {"state", "potential"} and set(case.host_grids) == {"potential"}
    assert case.grids["potential"].unit == "eV" and case.grids["state"].unit == "e/Å^3"
    assert case.defect_pdos.nspin == 2 and case.projections.weights.shape[3] == 2
    assert case.total_energy == pytest.approx(-9.8771234)  # final E0 of the fixture OSZICAR
    text = "\n".join(case.provenance)
    for word in ("CONTCAR", "DOSCAR", "PROCAR", "PARCHG.gz", "LOCPOT.gz", "OSZICAR", "skipped notes.txt"):
        assert word in text
    assert not list(d.glob("*.npz"))


def test_load_case_errors(tmp_path):
    with pytest.raises(InputFormatError, match="does not exist"):
        orbtool.io.load_case(tmp_path / "missing")
    (tmp_path / "empty").mkdir()
    with pytest.raises(InputFormatError, match="no structure"):
        orbtool.io.load_case(tmp_path / "empty")


MANIFEST = """
[family]
name = "test family"
description = "two charge states"

[references]
mu = { Ga = -3.0, As = -4.7 }
dielectric = 12.9

[[host]]
name = "GaAs"
path = "host"

[[case]]
name = "V_As_q0"
host = "GaAs"
path = "runs/q0"
charge = 0
defect = "V_As"
anion = "As"

[[case]]
name = "V_As_q1"
host = "GaAs"
path = "runs/q1"
charge = 1
defect = "V_As"
anion = "As"

[case.labels]
supercell = "primitive"
"""


def test_load_family(tmp_path):
    _run(tmp_path / "host", host=True, relaxed=False)
    _run(tmp_path / "runs" / "q0")
    _run(tmp_path / "runs" / "q1")
    (tmp_path / "family.toml").write_text(MANIFEST)
    fam = orbtool.io.load_family(tmp_path / "family.toml")
    assert fam.names == ["V_As_q0", "V_As_q1"] and fam.name == "test family"
    assert fam.references["mu"]["As"] == -4.7
    assert fam["V_As_q1"].charge == 1 and fam["V_As_q1"].labels["supercell"] == "primitive"
    assert len(fam.where(defect="V_As")) == 2
    assert fam["V_As_q0"].host_grids["potential"] is fam["V_As_q1"].host_grids["potential"]  # host read once


def test_manifest_reports_every_problem_with_lines(tmp_path):
    _run(tmp_path / "host", host=True, relaxed=False)
    _run(tmp_path / "runs" / "q0")
    bad = MANIFEST.replace('path = "runs/q1"', 'path = "runs/missing"').replace(
        'name = "V_As_q1"', 'name = "V_As_q0"').replace('charge = 1', 'charge = "one"\ncolour = "red"').replace(
        'host = "GaAs"\npath = "runs/missing"', 'host = "InP"\npath = "runs/missing"')
    (tmp_path / "family.toml").write_text(bad)
    with pytest.raises(InputFormatError) as err:
        orbtool.io.load_family(tmp_path / "family.toml")
    msg = str(err.value)
    lines = bad.splitlines()

    def line_of(text):
        return [i for i, ln in enumerate(lines, 1) if ln.strip().startswith(text)][-1]

    expected = [("path = \"runs/missing\"", "does not exist"), ("name = \"V_As_q0\"", "duplicate case name"),
                ("charge = \"one\"", "integer"), ("colour", "unknown key 'colour'"), ("host = \"InP\"", "'InP'")]
    for start, words in expected:
        n = line_of(start)
        assert any(f"line {n}:" in ln and words in ln for ln in msg.splitlines()), (start, msg)
    assert "5 problem(s)" in msg


def test_manifest_toml_syntax_error(tmp_path):
    (tmp_path / "f.toml").write_text("[family]\nname = \n")
    with pytest.raises(InputFormatError) as err:
        orbtool.io.load_family(tmp_path / "f.toml")
    assert err.value.line == 2
