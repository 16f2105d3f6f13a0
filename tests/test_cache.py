"""The grid cache: where it lives, how it is switched off, and that it never
returns values of a file that has since been replaced.

Reference: ASE's cube writer makes the files and ASE's cube reader
(``ase.io.cube.read_cube_data``) gives the values each read must return.
"""

from __future__ import annotations

import os

import numpy as np
import pytest
from ase import Atoms
from ase.io.cube import read_cube_data, write_cube

from orbtool.io import cache as cache_mod
from orbtool.io import read_grid


def _cube(path, values):
    atoms = Atoms("H", positions=[[1.0, 1.0, 1.0]], cell=np.eye(3) * 4.0, pbc=True)
    with open(path, "w") as fh:
        write_cube(fh, atoms, data=values)


@pytest.fixture
def own_cache(tmp_path, monkeypatch):
    d = tmp_path / "cache"
    monkeypatch.setenv("ORBTOOL_CACHE_DIR", str(d))
    monkeypatch.delenv("ORBTOOL_NO_CACHE", raising=False)
    return d


def test_suite_never_uses_the_home_cache():
    # tests/conftest.py points every test at a temporary folder
    assert "orbtool-cache" in str(cache_mod.cache_dir())
    home = os.path.expanduser("~")
    assert not str(cache_mod.cache_dir()).startswith(os.path.join(home, ".cache"))


def test_replaced_file_same_size_and_mtime_is_reread(tmp_path, own_cache):
    rng = np.random.default_rng(1)
    a, b = rng.random((6, 5, 4)), rng.random((6, 5, 4))
    f, other = tmp_path / "x.cube", tmp_path / "other.cube"
    _cube(f, a)
    _cube(other, b)
    assert f.stat().st_size == other.stat().st_size  # same layout, same number format
    first = read_grid(f, quantity="raw")
    assert np.allclose(first.values, read_cube_data(str(f))[0])
    assert list(own_cache.glob("*.npz"))  # the first read filled the cache
    st = f.stat()
    os.replace(other, f)  # replaced by another file of the same size ...
    os.utime(f, ns=(st.st_atime_ns, st.st_mtime_ns))  # ... and the same modification time
    assert f.stat().st_size == st.st_size and f.stat().st_mtime_ns == st.st_mtime_ns
    second = read_grid(f, quantity="raw")
    assert np.allclose(second.values, read_cube_data(str(f))[0])
    assert not np.allclose(second.values, first.values)


def test_edited_in_place_same_size_and_mtime_is_reread(tmp_path, own_cache):
    f = tmp_path / "x.cube"
    _cube(f, np.full((4, 4, 4), 0.25))
    read_grid(f, quantity="raw")
    st = f.stat()
    text = f.read_text().replace("2.500000e-01", "7.500000e-01")  # write_cube uses "%e"
    assert len(text) == st.st_size
    with open(f, "r+") as fh:  # same inode
        fh.write(text)
    os.utime(f, ns=(st.st_atime_ns, st.st_mtime_ns))
    assert f.stat().st_ino == st.st_ino
    again = read_grid(f, quantity="raw")
    assert np.allclose(again.values, read_cube_data(str(f))[0])
    assert np.allclose(again.values, 0.75)


def test_no_cache_variable_switches_it_off(tmp_path, own_cache, monkeypatch):
    f = tmp_path / "x.cube"
    _cube(f, np.arange(27.0).reshape(3, 3, 3))
    monkeypatch.setenv("ORBTOOL_NO_CACHE", "1")
    g = read_grid(f, quantity="raw")
    assert np.allclose(g.values, read_cube_data(str(f))[0])
    assert not own_cache.exists() or not any(own_cache.iterdir())
    monkeypatch.setenv("ORBTOOL_NO_CACHE", "0")  # "0" means on again
    read_grid(f, quantity="raw")
    assert list(own_cache.glob("*.npz"))
