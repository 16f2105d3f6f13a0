"""The threaded value-block parser gives bit-identical values to the serial one.

The grid readers cut a value block into segments at line ends and may decode the segments in
worker threads (``ORBTOOL_PARSE_THREADS``). Small chunks force many segments, boundaries next to
block ends (spin blocks, augmentation lines) and segments that the fixed-layout decoder refuses
(three-digit exponents, other widths), so every branch of the threaded path is exercised here.
References: ASE's own cube and CHGCAR readers (``ase.io.cube.read_cube_data``,
``ase.calculators.vasp.VaspChargeDensity``) for the values; the serial parse for bit identity.
"""

from __future__ import annotations

import numpy as np
import pytest
from ase.build import bulk
from ase.calculators.vasp import VaspChargeDensity
from ase.io import write
from ase.io.cube import read_cube_data

import orbtool
import orbtool.io._bulk as bulk_mod


@pytest.fixture
def small_chunks(monkeypatch):
    """Small segments, threads for any block size, and a count of segments decoded in threads."""
    monkeypatch.setattr(bulk_mod, "_CHUNK", 2048)
    monkeypatch.setattr(bulk_mod, "_PARALLEL_MIN", 1)
    calls = []
    orig = bulk_mod.ValueReader._whole_fast

    def counted(self, seg):
        res = orig(self, seg)
        calls.append(res is not None)
        return res

    monkeypatch.setattr(bulk_mod.ValueReader, "_whole_fast", counted)
    return calls


def _both(monkeypatch, read):
    out = {}
    for threads in ("1", "2"):
        monkeypatch.setenv("ORBTOOL_PARSE_THREADS", threads)
        out[threads] = read()
    return out["1"], out["2"]


def _bits(a):
    return np.ascontiguousarray(a).view(np.int64)


@pytest.mark.parametrize("signed", [False, True])
def test_cube_threads_bit_identical(tmp_path, monkeypatch, small_chunks, signed):
    rng = np.random.default_rng(5)
    data = rng.lognormal(-4.0, 2.5, (17, 19, 21))
    if signed:  # an orbital: both signs
        data *= rng.choice([-1.0, 1.0], data.shape)
    data[2, 3, 4] = 2.5e-130  # three-digit exponent: that segment goes to the general parser
    f = tmp_path / "g.cube"
    write(f, bulk("Si", cubic=True), data=data)
    serial, threaded = _both(monkeypatch, lambda: orbtool.io.read_grid(f, cache=False, quantity="raw",
                                                                        progress=False).values)
    np.testing.assert_array_equal(_bits(serial), _bits(threaded))
    np.testing.assert_allclose(threaded, read_cube_data(str(f))[0], rtol=1e-10, atol=0)
    assert sum(small_chunks) > 20 and not all(small_chunks)  # threads decoded most; one segment fell back


def test_chgcar_spin_blocks_threads_bit_identical(tmp_path, monkeypatch, small_chunks):
    # two value blocks with augmentation lines between: the block end falls inside a segment
    atoms = bulk("GaAs", "zincblende", a=5.65) * (1, 1, 2)
    rng = np.random.default_rng(6)
    v = VaspChargeDensity(None)
    v.atoms = [atoms]
    v.chg = [rng.random((12, 13, 14)) * 0.1]
    v.chgdiff = [rng.random((12, 13, 14)) * 0.02 - 0.01]
    v.aug = "augmentation occupancies 1 3\n 0.1 0.2 0.3\naugmentation occupancies 2 2\n 0.1 0.2\n"
    v.augdiff = v.aug
    f = tmp_path / "CHGCAR"
    v.write(str(f), format="chgcar")
    serial, threaded = _both(monkeypatch, lambda: [g.values for g in orbtool.io.read_grids(f, cache=False)])
    ref = VaspChargeDensity(str(f))
    for s, t, r in zip(serial, threaded, (ref.chg[0], ref.chgdiff[0])):
        np.testing.assert_array_equal(_bits(s), _bits(t))
        np.testing.assert_allclose(t, r, rtol=1e-10, atol=1e-14)
    assert sum(small_chunks) > 20


def test_threaded_parse_still_names_the_bad_line(tmp_path, monkeypatch, small_chunks):
    data = np.random.default_rng(7).random((10, 10, 12))
    f = tmp_path / "bad.cube"
    write(f, bulk("Si", cubic=True), data=data)
    lines = f.read_text().splitlines()
    k = len(lines) - 40
    lines[k] = lines[k].replace("e-", "x-", 1)
    f.write_text("\n".join(lines) + "\n")
    monkeypatch.setenv("ORBTOOL_PARSE_THREADS", "2")
    with pytest.raises(orbtool.errors.InputFormatError) as err:
        orbtool.io.read_grid(f, cache=False, quantity="raw", progress=False)
    assert f"line {k + 1}" in str(err.value) and "x-" in str(err.value)
