"""The command line: inspect against ASE's own reading of the same file,
exit codes, and output folders that never eat user files."""

import json

import numpy as np
import pytest
from ase.build import bulk
from ase.io import write

from orbtool.cli import main
from orbtool.errors import OrbtoolError
from orbtool.outputs import MARKER, OutputFolder


def _cube(tmp_path):
    atoms = bulk("Si", "diamond", a=5.43, cubic=True)
    data = np.random.default_rng(3).random((6, 7, 8))
    path = tmp_path / "x.cube"
    write(path, atoms, format="cube", data=data)
    return path, atoms, data


def test_inspect_cube_json_matches_ase(tmp_path, capsys):
    path, atoms, data = _cube(tmp_path)
    assert main(["inspect", str(path), "--json", "--units", "bohr"]) == 0
    info = json.loads(capsys.readouterr().out)
    assert info["kind"] == "grid" and info["format"] == "cube"
    g = info["grids"][0]
    assert g["shape"] == [6, 7, 8]
    # reference: ASE's cell volume and the values ASE wrote (cube stores 5 significant digits); read in the
    # cube format's atomic units (e/bohr³, Gaussian cube specification), orbtool reports e/Å³: divide by bohr³
    from ase.units import Bohr
    assert g["volume_A3"] == pytest.approx(atoms.get_volume(), rel=1e-6)
    assert g["max"] == pytest.approx(data.max() / Bohr**3, rel=1e-4)
    assert g["atoms"] == atoms.get_chemical_formula()
    assert g["unit_convention"] == "bohr"
    # with ASE's convention (ase.io.write stores the array as given) the values are the array itself
    assert main(["inspect", str(path), "--json", "--units", "angstrom"]) == 0
    g = json.loads(capsys.readouterr().out)["grids"][0]
    assert g["max"] == pytest.approx(data.max(), rel=1e-4) and g["unit_convention"] == "angstrom"


def test_inspect_text_output(tmp_path, capsys):
    path, _, _ = _cube(tmp_path)
    assert main(["inspect", str(path)]) == 0
    out = capsys.readouterr().out
    assert "grid data, format cube" in out and "6x7x8" in out


def test_errors_exit_1_without_traceback(tmp_path, capsys):
    bad = tmp_path / "broken.cube"
    bad.write_text("not\na\ncube\n")
    assert main(["inspect", str(bad)]) == 1
    err = capsys.readouterr().err
    assert err.startswith("orbtool: error:") and "Traceback" not in err
    assert main(["inspect", str(tmp_path / "missing.cube")]) == 1


def test_usage_errors_exit_2(capsys):
    with pytest.raises(SystemExit) as e:
        main(["frobnicate"])
    assert e.value.code == 2
    with pytest.raises(SystemExit) as e:
        main(["analyze"])  # missing manifest and --out
    assert e.value.code == 2


def test_help_everywhere(capsys):
    for verb in ([], ["inspect"], ["analyze"], ["fit"], ["demo"]):
        with pytest.raises(SystemExit) as e:
            main(verb + ["--help"])
        assert e.value.code == 0
        assert "usage: orbtool" in capsys.readouterr().out


def test_output_folder_refuses_foreign_and_keeps_files(tmp_path):
    d = tmp_path / "results"
    d.mkdir()
    (d / "thesis.tex").write_text("precious")
    with pytest.raises(OrbtoolError, match="--force"):
        OutputFolder(d)
    f = OutputFolder(d, force=True)
    f.write_text("table.csv", "a,b\n")
    assert (d / "thesis.tex").read_text() == "precious"
    assert json.loads((d / MARKER).read_text())["files"] == ["table.csv"]
    # a folder orbtool wrote is reused without --force
    OutputFolder(d).write_text("table.csv", "c,d\n")
    assert (d / "table.csv").read_text() == "c,d\n"
