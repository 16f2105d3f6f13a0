"""Broken inputs must raise InputFormatError naming the file, the line and what was expected.

Valid files come from ASE's writers (cube, CHGCAR) and the hand-written fixtures; each test breaks
one thing the format documentation requires (Gaussian cube layout, VASP manual CHGCAR/DOSCAR/PROCAR
pages, XCrySDen XSF) and checks the error. The fuzz tests mutate valid files at random
(hypothesis) and assert that nothing but InputFormatError ever escapes.
"""

import os
import tempfile
from pathlib import Path

import numpy as np
import pytest
from ase.build import bulk
from ase.calculators.vasp import VaspChargeDensity
from ase.io import write
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import orbtool
from orbtool.errors import InputFormatError

FIX = Path(__file__).parent / "fixtures" / "io"


@pytest.fixture(autouse=True)
def _cache(tmp_path, monkeypatch):
    monkeypatch.setenv("ORBTOOL_CACHE_DIR", str(tmp_path / "cache"))


def _cube_text():
    with tempfile.TemporaryDirectory() as d:
        f = Path(d) / "x.cube"
        write(f, bulk("Si", cubic=True), data=np.random.default_rng(0).random((4, 5, 6)))
        return f.read_text()


def _chgcar_text(spin=False):
    with tempfile.TemporaryDirectory() as d:
        v = VaspChargeDensity(None)
        v.atoms = [bulk("GaAs", "zincblende", a=5.65)]
        v.chg = [np.random.default_rng(1).random((4, 5, 6))]
        if spin:
            v.chgdiff = [np.random.default_rng(2).random((4, 5, 6)) - 0.5]
        v.aug = "augmentation occupancies 1 2\n 0.1 0.2\naugmentation occupancies 2 2\n 0.1 0.2\n"
        v.augdiff = v.aug
        f = Path(d) / "CHGCAR"
        v.write(str(f), format="chgcar")
        return f.read_text()


CUBE = _cube_text()
CUBE_LINES = CUBE.splitlines()
FIRST_VALUE_LINE = 6 + 8 + 1  # 2 comments, 4 header lines, 8 atoms


def _err(tmp_path, name, text, fmt=None, **kw):
    f = tmp_path / name
    f.write_bytes(text if isinstance(text, bytes) else text.encode())
    with pytest.raises(InputFormatError) as err:
        orbtool.io.read_grid(f, format=fmt, cache=False, **kw)
    assert err.value.path == str(f)
    return err.value


def _replace_line(lines, i, new):
    out = list(lines)
    out[i - 1] = new
    return "\n".join(out) + "\n"


def test_cube_truncated(tmp_path):
    e = _err(tmp_path, "t.cube", "\n".join(CUBE_LINES[:-7]) + "\n")
    assert "ended after" in e.reason and e.line == len(CUBE_LINES) - 6


def test_cube_too_many_values(tmp_path):
    e = _err(tmp_path, "m.cube", CUBE.rstrip("\n") + "\n0.5\n")
    assert "more values" in e.reason and e.line == len(CUBE_LINES) + 1


@pytest.mark.parametrize("token", ["nan", "inf", "-inf"])
def test_cube_nonfinite(tmp_path, token):
    e = _err(tmp_path, "n.cube", _replace_line(CUBE_LINES, FIRST_VALUE_LINE + 10, token))
    assert "NaN or inf" in e.reason and e.line == FIRST_VALUE_LINE + 10


@pytest.mark.parametrize("token", ["abc", "1.0e-0x", "1.2.3", "--1.0"])
def test_cube_non_numeric(tmp_path, token):
    e = _err(tmp_path, "a.cube", _replace_line(CUBE_LINES, FIRST_VALUE_LINE + 20, token))
    assert "expected a number" in e.reason and e.line == FIRST_VALUE_LINE + 20


@pytest.mark.parametrize("count", ["0", "-4"])
def test_cube_bad_counts(tmp_path, count):
    line = CUBE_LINES[3].split()
    e = _err(tmp_path, "c.cube", _replace_line(CUBE_LINES, 4, " ".join([count] + line[1:])))
    assert e.line == 4 and ("zero" in e.reason or "mix" in e.reason)


def test_cube_atom_count_disagrees(tmp_path):
    head = CUBE_LINES[2].split()
    e = _err(tmp_path, "n.cube", _replace_line(CUBE_LINES, 3, " ".join(["12"] + head[1:])))
    assert e.line == FIRST_VALUE_LINE and "atom line" in e.reason


def test_cube_huge_declared_grid_refused_before_allocating(tmp_path):
    lines = list(CUBE_LINES)
    for i in (3, 4, 5):
        lines[i] = " ".join(["100000"] + lines[i].split()[1:])
    e = _err(tmp_path, "h.cube", "\n".join(lines) + "\n")
    assert "declares" in e.reason


def test_empty_and_garbage(tmp_path):
    _err(tmp_path, "empty.cube", "")
    e = _err(tmp_path, "empty2.cube", "", fmt="cube")
    assert e.line == 1
    _err(tmp_path, "junk.bin", os.urandom(4096))
    _err(tmp_path, "junk.cube", os.urandom(4096), fmt="cube")
    _err(tmp_path, "CHGCAR", os.urandom(4096), fmt="chgcar")
    _err(tmp_path, "fake.gz", b"\x1f\x8b" + os.urandom(200), fmt="cube")


def test_missing_file_and_folder(tmp_path):
    with pytest.raises(InputFormatError, match="does not exist"):
        orbtool.io.read_grid(tmp_path / "nope.cube")
    with pytest.raises(InputFormatError):
        orbtool.io.read_grid(tmp_path)


def test_chgcar_errors(tmp_path):
    text = _chgcar_text(spin=True)
    lines = text.splitlines()
    dims_line = next(i for i, ln in enumerate(lines, 1) if ln.split() == ["4", "5", "6"])
    e = _err(tmp_path, "CHGCAR", "\n".join(lines[:dims_line + 3]) + "\n")
    assert "ended after" in e.reason
    second = [i for i, ln in enumerate(lines, 1) if ln.split() == ["4", "5", "6"]][1]
    e = _err(tmp_path, "CHGCAR", _replace_line(lines, second, "   4   5   7"))
    assert e.line == second and "grid counts" in e.reason
    e = _err(tmp_path, "CHGCAR", _replace_line(lines, dims_line, "   4   0   6"))
    assert e.line == dims_line
    e = _err(tmp_path, "CHGCAR", _replace_line(lines, dims_line, " 4000 5000 6000"))
    assert "declares" in e.reason
    e = _err(tmp_path, "CHGCAR", _replace_line(lines, 7, "   1   x"))
    assert e.line == 7
    e = _err(tmp_path, "CHGCAR", text + "something else\n")
    assert "unexpected line" in e.reason


def test_never_writes_beside_input(tmp_path):
    f = tmp_path / "in" / "x.cube"
    f.parent.mkdir()
    f.write_text(CUBE)
    orbtool.io.read_grid(f)
    assert sorted(p.name for p in f.parent.iterdir()) == ["x.cube"]


@pytest.mark.parametrize("reader", [
    lambda p: orbtool.io.read_pdos(p, format="doscar"), lambda p: orbtool.io.read_projections(p, format="procar"),
    lambda p: orbtool.io.read_pdos(p, format="qe-pdos"), lambda p: orbtool.io.read_pdos(p, format="cp2k-pdos"),
    lambda p: orbtool.io.read_pdos(p, format="orbtool-pdos"), orbtool.io.read_energy, orbtool.io.read_structure,
    lambda p: orbtool.io.read_projections(p, format="orbtool-projections"),
    lambda p: orbtool.io.read_grid(p, format="xsf"), lambda p: orbtool.io.read_grid(p, format="npz")])
@pytest.mark.parametrize("content", [b"", b"\x00\x01\x02garbage\xff" * 50, b"1 2 3\n4 5 6\n"])
def test_other_readers_refuse_empty_and_garbage(tmp_path, reader, content):
    f = tmp_path / "x.pdos_atm#1(Ga)_wfc#1(s)"
    f.write_bytes(content)
    with pytest.raises(InputFormatError) as err:
        reader(f)
    assert err.value.path is not None


# ------------------------------------------------------------------------- fuzzing
def _sources():
    return {
        "cube": (CUBE.encode(), "x.cube", lambda p: orbtool.io.read_grids(p, format="cube", cache=False,
                                                                             progress=False)),
        "chgcar": (_chgcar_text(spin=True).encode(), "CHGCAR",
                   lambda p: orbtool.io.read_grids(p, format="chgcar", cache=False, progress=False)),
        "doscar": ((FIX / "vasp_spin" / "DOSCAR").read_bytes(), "DOSCAR",
                   lambda p: orbtool.io.read_pdos(p, format="doscar", atoms=None)),
        "procar": ((FIX / "vasp_spin" / "PROCAR").read_bytes(), "PROCAR",
                   lambda p: orbtool.io.read_projections(p, format="procar")),
        "qe": ((FIX / "qe_spin" / "x.pdos_atm#1(Ga)_wfc#2(p)").read_bytes(), "x.pdos_atm#1(Ga)_wfc#2(p)",
               lambda p: orbtool.io.read_pdos(p, format="qe-pdos")),
        "cp2k": ((FIX / "cp2k" / "demo-k1-1.pdos").read_bytes(), "demo-k1-1.pdos",
                 lambda p: orbtool.io.read_pdos(p, format="cp2k-pdos")),
        "xsf": (_xsf_bytes(), "x.xsf", lambda p: orbtool.io.read_grids(p, format="xsf", cache=False)),
        "orbtool-pdos": (_native_bytes("pdos"), "x.pdos.txt", lambda p: orbtool.io.read_pdos(p, format="orbtool-pdos")),
        "orbtool-projections": (_native_bytes("proj"), "x.proj.txt",
                                lambda p: orbtool.io.read_projections(p, format="orbtool-projections")),
    }


def _xsf_bytes():
    with tempfile.TemporaryDirectory() as d:
        write(Path(d) / "x.xsf", bulk("Si"), data=np.random.default_rng(3).random((3, 4, 5)))
        return (Path(d) / "x.xsf").read_bytes()


def _native_bytes(kind):
    with tempfile.TemporaryDirectory() as d:
        f = Path(d) / "x.txt"
        if kind == "pdos":
            orbtool.io.write_pdos(f, orbtool.io.read_pdos(FIX / "qe_spin"), format="orbtool-text")
        else:
            orbtool.io.write_projections(f, orbtool.io.read_projections(FIX / "vasp_nospin" / "PROCAR"),
                                         format="orbtool-text")
        return f.read_bytes()


SOURCES = _sources()

mutation = st.lists(st.tuples(st.sampled_from(["flip", "insert", "delete", "truncate", "dupline"]),
                              st.floats(0, 1), st.binary(min_size=1, max_size=4)), min_size=1, max_size=4)


def _mutate(data: bytes, ops) -> bytes:
    for kind, where, payload in ops:
        i = int(where * max(len(data) - 1, 0))
        if kind == "flip":
            data = data[:i] + payload[:1] + data[i + 1:]
        elif kind == "insert":
            data = data[:i] + payload + data[i:]
        elif kind == "delete":
            data = data[:i] + data[i + len(payload) * 7:]
        elif kind == "truncate":
            data = data[:i]
        else:
            lines = data.split(b"\n")
            j = int(where * max(len(lines) - 1, 0))
            data = b"\n".join(lines[:j + 1] + lines[j:])
    return data


@pytest.mark.parametrize("kind", sorted(SOURCES))
@settings(max_examples=40, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(ops=mutation)
def test_fuzz_only_input_format_errors(kind, ops):
    data, name, read = SOURCES[kind]
    with tempfile.TemporaryDirectory() as d:
        f = Path(d) / name
        f.write_bytes(_mutate(data, ops))
        try:
            read(f)
        except InputFormatError as exc:
            assert exc.path is not None
