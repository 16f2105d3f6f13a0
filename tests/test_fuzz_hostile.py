"""Hostile and unlucky inputs of issue 18 that cannot live in the bad-input corpus (FIFOs, devices,
multi-megabyte bombs, byte-order marks, spellings that must be *accepted*) and the warnings for
readable but suspicious data.

Each accepted spelling is checked against the same file written the ordinary way, so the test fails
if the spelling is refused or read as a different number.
"""

from __future__ import annotations

import gzip
import os
import re
import shutil
from pathlib import Path

import numpy as np
import pytest

import orbtool
from orbtool.errors import GeometryError, InputFormatError, OrbtoolWarning
from orbtool.io import _files
from orbtool.io.manifest import check_manifest

FIX = Path(__file__).parent / "fixtures" / "io"
BOM = b"\xef\xbb\xbf"


@pytest.fixture(autouse=True)
def _cache(tmp_path, monkeypatch):
    monkeypatch.setenv("ORBTOOL_CACHE_DIR", str(tmp_path / "cache"))
    monkeypatch.delenv("ORBTOOL_MAX_BYTES", raising=False)


# ------------------------------------------------------------------ FIFOs and endless devices
@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="needs POSIX FIFOs")
def test_fifo_is_refused_by_type_not_opened(tmp_path):
    """A FIFO given as manifest, grid, PDOS or to `inspect` is refused from its file type (opening it
    would block until a writer appears — POSIX open(2), "O_RDONLY on a FIFO")."""
    fifo = tmp_path / "family.toml"
    os.mkfifo(fifo)
    for call in (orbtool.load_family, orbtool.read_grid, orbtool.read_pdos, orbtool.read_projections):
        with pytest.raises(InputFormatError, match="FIFO") as e:
            call(fifo)
        assert str(fifo) in str(e.value)
    from orbtool.cli import main
    assert main(["inspect", str(fifo)]) == 1


@pytest.mark.skipif(not os.path.exists("/dev/zero"), reason="needs /dev/zero")
def test_endless_device_behind_a_symlink_is_refused(tmp_path, capsys):
    """A manifest (or any input) that is a symbolic link to /dev/zero is refused as a character
    device (os.stat follows the link) instead of being read until memory runs out."""
    link = tmp_path / "family.toml"
    link.symlink_to("/dev/zero")
    with pytest.raises(InputFormatError, match="character device"):
        orbtool.load_family(link)
    with pytest.raises(InputFormatError, match="character device"):
        orbtool.read_pdos(link, format="doscar")
    from orbtool.cli import main
    assert main(["inspect", str(link)]) == 1
    assert "character device" in capsys.readouterr().err


def test_text_is_read_in_bounded_chunks(tmp_path):
    """A gzip member expanding far beyond the limit is refused once the limit is passed (deflate
    reaches ~1000:1 on zeros, RFC 1951), not decompressed whole."""
    bomb = tmp_path / "DOSCAR"
    bomb.write_bytes(gzip.compress(b"0" * 5_000_000, compresslevel=9))
    assert bomb.stat().st_size < 50_000
    with pytest.raises(InputFormatError, match="more than 1,000,000 bytes"):
        _files.read_bounded(bomb, 1_000_000, "DOS file")
    assert len(_files.read_bounded(bomb, 6_000_000)) == 5_000_000


# ------------------------------------------------------------------ byte-order marks
def test_bom_accepted_in_toml_manifest(tmp_path):
    """A UTF-8 byte-order mark (Unicode 15, section 23.8: U+FEFF at the start of a UTF-8 file) does
    not break the manifest: the same problems are found with and without it."""
    text = '[family]\nname = "x"\n\n[[case]]\nname = "a"\npath = "."\nmotif = "rocksalt"\n'
    (tmp_path / "plain.toml").write_text(text)
    (tmp_path / "bom.toml").write_bytes(BOM + text.encode())
    plain, bom = check_manifest(tmp_path / "plain.toml"), check_manifest(tmp_path / "bom.toml")
    assert bom[1] == plain[1] == []
    assert bom[0] == plain[0] and bom[0]["case"][0]["motif"] == "rocksalt"


@pytest.mark.parametrize("sub,name,reader", [("vasp_spin", "DOSCAR", orbtool.read_pdos),
                                             ("vasp_nospin", "PROCAR", orbtool.read_projections)])
def test_bom_accepted_in_doscar_and_procar(tmp_path, sub, name, reader):
    """DOSCAR and PROCAR with a UTF-8 byte-order mark read to the same numbers as without."""
    for d, prefix in (("plain", b""), ("bom", BOM)):
        (tmp_path / d).mkdir()
        shutil.copy(FIX / sub / "POSCAR", tmp_path / d / "POSCAR")
        (tmp_path / d / name).write_bytes(prefix + (FIX / sub / name).read_bytes())
    a, b = reader(tmp_path / "plain" / name), reader(tmp_path / "bom" / name)
    assert np.array_equal(a.energies, b.energies)
    key = "values" if hasattr(a, "values") else "weights"
    assert np.array_equal(getattr(a, key), getattr(b, key))


# ------------------------------------------------------------------ Fortran exponent spellings
def test_doscar_fortran_exponents_read_as_numbers(tmp_path):
    """Fortran writes 1.0D-02 for double precision and drops the E when a three-digit exponent fills
    the field (0.1234-100 = 0.1234E-100; Fortran 2018 standard, 13.7.2.3.3, Ew.d editing): both
    spellings give exactly the numbers of the E form."""
    src = (FIX / "vasp_spin" / "DOSCAR").read_text()
    head, body = src.split("\n", 5)[:5], src.split("\n", 5)[5]
    assert "E" in body
    spell_d = "\n".join(head) + "\n" + body.replace("E", "D")
    # exponent without the letter, three digits: 2.0000E-02 -> 2.0000-002
    spell_no_e = "\n".join(head) + "\n" + re.sub(r"E([+-])(\d\d)\b", r"\g<1>0\2", body)
    assert "E" not in spell_no_e.split("\n", 5)[5]
    got = {}
    for name, text in (("plain", src), ("d", spell_d), ("no_e", spell_no_e)):
        (tmp_path / name).mkdir()
        shutil.copy(FIX / "vasp_spin" / "POSCAR", tmp_path / name / "POSCAR")
        (tmp_path / name / "DOSCAR").write_text(text)
        got[name] = orbtool.read_pdos(tmp_path / name / "DOSCAR")
    for name in ("d", "no_e"):
        assert np.array_equal(got[name].energies, got["plain"].energies)
        assert np.array_equal(got[name].values, got["plain"].values)
        assert np.array_equal(got[name].total, got["plain"].total)
        assert got[name].fermi == got["plain"].fermi


def test_tiny_exponent_without_letter():
    """0.1234-100 is 0.1234e-100, not 0.1234 minus 100."""
    from orbtool.io.doscar import _fortran_exponents
    lines = _fortran_exponents(["h"] * 5 + [" -5.0 0.1234-100 1.5D+01 -2.0"], 5)
    assert [float(t) for t in lines[5].split()] == [-5.0, 0.1234e-100, 15.0, -2.0]


# ------------------------------------------------------------------ memory budget from declared sizes
def _cube_header(n: int) -> bytes:
    return ("cube written for the orbtool hostile-input tests\nvalues\n"
            "    1    0.000000    0.000000    0.000000\n"
            f" {n}    0.100000    0.000000    0.000000\n {n}    0.000000    0.100000    0.000000\n"
            f" {n}    0.000000    0.000000    0.100000\n    14    0.000000    0.000000    0.000000    0.000000\n"
            ).encode()


@pytest.mark.parametrize("n,mbytes", [(1000, 3.9), (600, 0.84)])
def test_gzip_cube_refused_from_declared_counts(tmp_path, n, mbytes):
    """A gzip cube declaring n³ values in a few MB (which the 1:1500 expansion rule lets through) is
    refused from the memory budget before any value is decompressed or allocated (n³ float64)."""
    rng = np.random.default_rng(18)
    raw = _cube_header(n) + rng.integers(0, 256, int(mbytes * 1e6), dtype=np.uint8).tobytes()
    path = tmp_path / "big.cube"
    path.write_bytes(gzip.compress(raw, compresslevel=1))
    assert abs(path.stat().st_size / 1e6 - mbytes) < 0.2 * mbytes
    with pytest.raises(InputFormatError, match=f"declares {8 * n ** 3:,d} bytes of data, more than the memory budget"):
        orbtool.read_grid(path, progress=False)
    assert not any((tmp_path / "cache").rglob("*.npy")) if (tmp_path / "cache").exists() else True


def test_memory_budget_is_overridable(tmp_path, monkeypatch):
    """The budget comes from ORBTOOL_MAX_BYTES when set: a small valid cube is refused under a 100-byte
    budget and read under the default one."""
    from ase.build import bulk
    from ase.io import write
    path = tmp_path / "small.cube"
    write(path, bulk("Si", cubic=True), data=np.ones((4, 4, 4)))
    monkeypatch.setenv("ORBTOOL_MAX_BYTES", "100")
    with pytest.raises(InputFormatError, match="memory budget of 100 bytes"):
        orbtool.read_grid(path, progress=False, cache=False)
    monkeypatch.delenv("ORBTOOL_MAX_BYTES")
    assert orbtool.read_grid(path, progress=False, cache=False).shape == (4, 4, 4)
    assert _files.memory_budget() == 2 ** 30 == 512 ** 3 * 8
    assert _files.memory_budget(5) == 5


def test_npz_budget_keyword(tmp_path):
    """read_npz(max_bytes=) decides from the archive's declared sizes."""
    from orbtool.io.native import read_npz
    pd = orbtool.read_pdos(FIX / "vasp_spin" / "DOSCAR", format="doscar")
    orbtool.write_pdos(tmp_path / "p.npz", pd, format="npz")
    with pytest.raises(InputFormatError, match="memory budget of 64 bytes"):
        read_npz(tmp_path / "p.npz", max_bytes=64)
    assert np.array_equal(read_npz(tmp_path / "p.npz").values, pd.values)


# ------------------------------------------------------------------ truncated files: a clear error
def test_half_written_procar_is_an_input_error(tmp_path):
    """A PROCAR cut in the middle (the run is still writing) raises InputFormatError naming the file,
    so a batch can keep it as that case's error."""
    data = (FIX / "vasp_spin" / "PROCAR").read_bytes()
    for frac in (0.3, 0.5, 0.7, 0.9):
        p = tmp_path / f"cut{frac}" / "PROCAR"
        p.parent.mkdir()
        p.write_bytes(data[:int(len(data) * frac)])
        with pytest.raises(InputFormatError) as e:
            orbtool.read_projections(p)
        assert str(p) in str(e.value)


# ------------------------------------------------------------------ warnings for suspicious data
def test_pdos_element_disagreeing_with_structure_warns(tmp_path):
    """A PDOS text column naming Ga at an atom the POSCAR beside it says is As is read, with a warning
    (common practice: a PDOS from another run is the usual cause)."""
    shutil.copy(FIX / "vasp_nospin" / "POSCAR", tmp_path / "POSCAR")  # Ga (0), As (1)
    e = np.linspace(-1, 1, 5)
    body = "\n".join(f"{x} 0.5 0.25" for x in e)
    head = "# orbtool-pdos 1\n# nspin: 1\n# fermi: 0.0\n# columns: energy Ga0:s:up {}\n"
    (tmp_path / "ok.pdos.txt").write_text(head.format("As1:p:up") + body + "\n")
    (tmp_path / "bad.pdos.txt").write_text(head.format("Ga1:p:up") + body + "\n")
    import warnings
    with warnings.catch_warnings():
        warnings.simplefilter("error", OrbtoolWarning)
        orbtool.read_pdos(tmp_path / "ok.pdos.txt")
    with pytest.warns(OrbtoolWarning, match="says atom 1 is Ga, but POSCAR has As"):
        p = orbtool.read_pdos(tmp_path / "bad.pdos.txt")
    assert "warnings" in p.meta


def test_all_zero_parchg_warns(tmp_path):
    """A band-decomposed density whose every value is zero is read with a warning."""
    from ase.build import bulk
    from ase.calculators.vasp import VaspChargeDensity
    si = bulk("Si", cubic=True)
    for name, values in (("PARCHG", np.zeros((4, 4, 4))), ("CHGCAR", np.ones((4, 4, 4)))):
        chg = VaspChargeDensity(None)
        chg.atoms, chg.chg = [si], [values]
        chg.write(str(tmp_path / name), format="chgcar")
    with pytest.warns(OrbtoolWarning, match="every value of the total grid is zero"):
        orbtool.read_grid(tmp_path / "PARCHG", progress=False, cache=False)
    import warnings
    with warnings.catch_warnings():
        warnings.simplefilter("error", OrbtoolWarning)
        orbtool.read_grid(tmp_path / "CHGCAR", progress=False, cache=False)


def test_spin_paired_occupation_one_warns(tmp_path):
    """In a spin-paired run a band holds 0–2 electrons (Kohn–Sham occupations, spin degeneracy 2);
    every band at exactly 1.0 is read with a warning."""
    text = (FIX / "vasp_nospin" / "PROCAR").read_text()
    (tmp_path / "PROCAR").write_text(re.sub(r"# occ\.\s+\S+", "# occ.  1.00000000", text))
    with pytest.warns(OrbtoolWarning, match="every band has occupation 1.0 in a spin-paired run"):
        b = orbtool.read_projections(tmp_path / "PROCAR")
    assert np.all(b.occupations == 1.0)


# ------------------------------------------------------------------ geometry
def _si64():
    from ase.build import bulk
    return bulk("Si", "diamond", a=5.43, cubic=True) * (2, 2, 2)


def test_strained_defect_cell_gets_a_note():
    """A defect cell 1 % larger than the host: the first shell moves outward by ~1 % of the Si–Si
    bond (2.35 Å, ASE's diamond Si at a = 5.43 Å) from the strain alone, and the site says so."""
    from orbtool.analysis import locate_vacancy
    host = _si64()
    defect = host.copy()
    del defect[0]
    plain = locate_vacancy(host, defect)
    assert not any("differs from the host cell" in n for n in plain.notes)
    strained = defect.copy()
    strained.set_cell(strained.cell * 1.01, scale_atoms=True)
    site = locate_vacancy(host, strained)
    note = [n for n in site.notes if "differs from the host cell" in n]
    assert note and "1.00%" in note[0]
    moved = float(re.search(r"first shell by ([+-][0-9.]+) Å", note[0]).group(1))
    assert moved == pytest.approx(0.01 * 5.43 * np.sqrt(3) / 4, abs=1e-3)


def test_overlapping_atoms_named_as_such():
    """An atom pasted twice (0.01 Å apart) in a vacancy cell is reported as overlapping atoms."""
    from orbtool.analysis import locate_vacancy
    host = _si64()
    defect = host.copy()
    del defect[0]
    defect.append("Si")
    defect.positions[-1] = defect.positions[3] + [0.0, 0.01, 0.0]
    with pytest.raises(GeometryError, match="overlapping atoms") as e:
        locate_vacancy(host, defect)
    assert "interstitial" not in str(e.value)
