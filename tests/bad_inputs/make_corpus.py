"""Regenerate the bad-input corpus of this folder (run: ``python tests/bad_inputs/make_corpus.py``).

Every file is a small damaged or hostile version of a valid input written by ASE (cube, XSF,
CHGCAR, POSCAR) or taken from the hand-written, documentation-based fixtures in
``tests/fixtures/io``. What each file must make orbtool raise is listed in ``corpus.toml`` (kept
by hand: the expected messages are the contract, not a recording). "Random" offsets come from a
fixed seed so the corpus is reproducible. Files that declare huge sizes are tiny and lie.
"""

from __future__ import annotations

import gzip
import io
import json
import re
import shutil
import zipfile
from pathlib import Path

import numpy as np
from ase.build import bulk
from ase.calculators.vasp import VaspChargeDensity
from ase.io import write

HERE = Path(__file__).parent
FIX = HERE.parent / "fixtures" / "io"
RNG = np.random.default_rng(20261201)
STAMP = (2026, 12, 1, 0, 0, 0)  # fixed archive member times: reproducible bytes


def _zip_write(z: zipfile.ZipFile, name: str, raw: bytes):
    z.writestr(zipfile.ZipInfo(name, date_time=STAMP), raw)


def _text(path: Path, text: str):
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(text)


def _bytes(path: Path, data: bytes):
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_bytes(data)


def _ase(name, fn) -> str:
    buf = HERE / ".tmp"
    buf.mkdir(exist_ok=True)
    try:
        fn(buf / name)
        return (buf / name).read_text()
    finally:
        shutil.rmtree(buf)


def _replace_line(text: str, i: int, new: str) -> str:
    lines = text.splitlines()
    lines[i - 1] = new
    return "\n".join(lines) + "\n"


def _first_token(line: str, new: str) -> str:
    return " ".join([new] + line.split()[1:])


def grids():
    si = bulk("Si", cubic=True)
    cube = _ase("x.cube", lambda f: write(f, si, data=RNG.random((3, 4, 5))))
    cube = re.sub(r"written on [^\n]*", "written for the orbtool corpus", cube, count=1)  # no clock time
    lines = cube.splitlines()
    first_value = 6 + len(si) + 1
    cut = int(RNG.integers(len("\n".join(lines[:first_value])) + 5, len(cube) - 20))
    _text(HERE / "grid" / "truncated_random.cube", cube[:cut])
    _text(HERE / "grid" / "nan_value.cube", _replace_line(cube, first_value + 3, " nan"))
    _text(HERE / "grid" / "inf_value.cube", _replace_line(cube, first_value + 1, " 1.0 -inf 2.0"))
    huge = list(lines)
    for i in (3, 4, 5):
        huge[i] = _first_token(huge[i], "100000")
    _text(HERE / "grid" / "huge_declared.cube", "\n".join(huge) + "\n")
    mixed = list(lines)
    mixed[4] = _first_token(mixed[4], "-" + mixed[4].split()[0])
    _text(HERE / "grid" / "bohr_angstrom_mixed.cube", "\n".join(mixed) + "\n")
    _text(HERE / "grid" / "atom_count_lies.cube", _replace_line(cube, 3, _first_token(lines[2], "12")))
    _text(HERE / "grid" / "zero_atoms.cube", _replace_line(cube, 3, _first_token(lines[2], "0")))
    _text(HERE / "grid" / "too_many_values.cube", cube + " 0.5\n")
    _bytes(HERE / "grid" / "empty.cube", b"")
    _bytes(HERE / "grid" / "garbage.bin", RNG.integers(0, 256, 2048, dtype=np.uint8).tobytes())
    _bytes(HERE / "grid" / "fake_gzip.cube.gz", b"\x1f\x8b\x08\x00" + RNG.integers(0, 256, 300, np.uint8).tobytes())
    good_gz = gzip.compress(cube.encode(), mtime=0)
    _bytes(HERE / "grid" / "truncated_gzip.cube.gz", good_gz[:len(good_gz) // 2])

    def chg(f):
        v = VaspChargeDensity(None)
        v.atoms = [bulk("GaAs", "zincblende", a=5.65)]
        v.chg = [RNG.random((3, 4, 5))]
        v.chgdiff = [RNG.random((3, 4, 5)) - 0.5]
        v.aug = ""
        v.augdiff = ""
        v.write(str(f), format="chgcar")
    chgcar = _ase("CHGCAR", chg)
    cl = chgcar.splitlines()
    dims = [i for i, ln in enumerate(cl, 1) if ln.split() == ["3", "4", "5"]]
    _text(HERE / "grid" / "chgcar_truncated" / "CHGCAR", "\n".join(cl[:dims[0] + 2]) + "\n")
    _text(HERE / "grid" / "chgcar_huge" / "CHGCAR", _replace_line(chgcar, dims[0], " 4000 5000 6000"))
    _text(HERE / "grid" / "chgcar_spin_counts" / "CHGCAR", _replace_line(chgcar, dims[1], "   3   4   6"))
    xsf = _ase("x.xsf", lambda f: write(f, si, format="xsf", data=RNG.random((3, 4, 5))))
    xl = xsf.splitlines()
    gi = next(i for i, ln in enumerate(xl) if "BEGIN_DATAGRID_3D" in ln) + 1
    xh = list(xl)
    xh[gi] = " 90000 90000 90000"
    _text(HERE / "grid" / "huge_declared.xsf", "\n".join(xh) + "\n")
    xn = list(xl)
    xn[gi + 6] = " nan " + " ".join(xn[gi + 6].split()[1:])
    _text(HERE / "grid" / "nan_value.xsf", "\n".join(xn) + "\n")


def spectra():
    dos = (FIX / "vasp_spin" / "DOSCAR").read_text()
    cut = int(RNG.integers(len(dos) // 2, len(dos) - 40))
    _text(HERE / "pdos" / "doscar_truncated" / "DOSCAR", dos[:cut])
    dl = dos.splitlines()
    _text(HERE / "pdos" / "doscar_huge_nedos" / "DOSCAR", _replace_line(dos, 6, dl[5].replace(" 5 ", " 2147483648 ")))
    _text(HERE / "pdos" / "doscar_nan" / "DOSCAR", dos.replace("2.0000E-02", "NaN", 1))
    _text(HERE / "pdos" / "doscar_ions_vs_poscar" / "DOSCAR", dos.replace("   2   2   1   0", "   3   3   1   0", 1))
    shutil.copy(FIX / "vasp_spin" / "POSCAR", HERE / "pdos" / "doscar_ions_vs_poscar" / "POSCAR")
    qe = (FIX / "qe_spin" / "x.pdos_atm#1(Ga)_wfc#2(p)").read_text().splitlines()
    qe[2] = " ".join(qe[2].split()[:-2])
    _text(HERE / "pdos" / "qe_missing_columns" / "x.pdos_atm#1(Ga)_wfc#2(p)", "\n".join(qe) + "\n")
    # CP2K per-kind file whose eigenvalues were written in eV under a header that promises a.u.
    # (hartree): read as hartree they span ~30 000 eV, which the reader refuses
    rows = "\n".join(f"{i:8d} {e:16.6f} {2.0 if e < 0 else 0.0:10.6f} 0.6 0.3 0.1"
                     for i, e in enumerate(np.linspace(-600.0, 520.0, 12), start=1))
    _text(HERE / "pdos" / "cp2k_ev_as_hartree-k1-1.pdos",
          "# Projected DOS for atomic kind Ga at iteration step i = 0, E(Fermi) = -2.5 a.u.\n"
          "#     MO Eigenvalue [a.u.]      Occupation      s      p      d\n" + rows + "\n")
    pro = (FIX / "vasp_nospin" / "PROCAR").read_text()
    _text(HERE / "proj" / "procar_wrong_counts" / "PROCAR",
          pro.replace("# of bands:   3", "# of bands:   5", 1))
    _text(HERE / "proj" / "procar_huge_counts" / "PROCAR",
          pro.replace("# of k-points:  2", "# of k-points:  999999999", 1))
    _text(HERE / "proj" / "procar_nan_energy" / "PROCAR", pro.replace("# energy   -3.00000000", "# energy   nan", 1))
    _bytes(HERE / "proj" / "procar_binary" / "PROCAR", b"PROCAR new format\n" + bytes(range(256)) * 4)


def native():
    import orbtool
    proj = orbtool.read_projections(FIX / "vasp_nospin" / "PROCAR", format="procar")
    tmp = HERE / ".tmp"
    tmp.mkdir(exist_ok=True)
    try:
        orbtool.write_projections(tmp / "p.proj.txt", proj, format="orbtool-text")
        text = (tmp / "p.proj.txt").read_text()
        orbtool.write_projections(tmp / "p.npz", proj, format="npz")
        npz = (tmp / "p.npz").read_bytes()
    finally:
        shutil.rmtree(tmp)
    lines = text.splitlines()
    _text(HERE / "proj" / "rows_missing.proj.txt", "\n".join(lines[:-3]) + "\n")
    _text(HERE / "proj" / "newer_layout.proj.txt",
          text.replace("# orbtool-projections 1", "# orbtool-projections 7", 1))
    _text(HERE / "proj" / "inf_weight.proj.txt", "\n".join(lines[:-1] + [lines[-1].rsplit(" ", 1)[0] + " inf"]) + "\n")
    out = io.BytesIO()
    with zipfile.ZipFile(io.BytesIO(npz)) as zin, zipfile.ZipFile(out, "w") as zout:
        for name in zin.namelist():
            raw = zin.read(name)
            if name == "weights.npy":  # header (NumPy NEP 1) declares 10^10 spins; the data stay small
                raw = re.sub(rb"'shape': \(\d+,", b"'shape': (10000000000,", raw, count=1)
            _zip_write(zout, name, raw)
    _bytes(HERE / "proj" / "lying_shape.npz", out.getvalue())
    out = io.BytesIO()
    with zipfile.ZipFile(out, "w") as z:
        buf = io.BytesIO()
        np.save(buf, np.arange(3.0))
        _zip_write(z, "values.npy", buf.getvalue())
    _bytes(HERE / "proj" / "foreign.npz", out.getvalue())


def structures_and_energies():
    gaas = bulk("GaAs", "zincblende", a=5.65, cubic=True)
    poscar = _ase("POSCAR", lambda f: write(f, gaas, format="vasp", direct=True))
    _text(HERE / "structure" / "POSCAR_truncated", "\n".join(poscar.splitlines()[:9]) + "\n")
    _text(HERE / "structure" / "POSCAR_huge_count", _replace_line(poscar, 7, "  1000000000  4"))
    _bytes(HERE / "structure" / "POSCAR_garbage", RNG.integers(0, 256, 600, dtype=np.uint8).tobytes())
    _bytes(HERE / "structure" / "POSCAR_empty", b"")
    osz = (FIX / "vasp_spin" / "OSZICAR").read_text()
    _text(HERE / "energy" / "OSZICAR_unfinished", "\n".join(ln for ln in osz.splitlines() if "E0=" not in ln) + "\n")
    out = (FIX / "vasp_nospin" / "OUTCAR").read_text()
    _text(HERE / "energy" / "OUTCAR_nan", out.replace("-10.10500000", "NaN"))
    _bytes(HERE / "energy" / "OUTCAR_binary", b"\x00\x01" + RNG.integers(0, 256, 500, dtype=np.uint8).tobytes())
    # geometry pairs: host 64-atom diamond-lattice Si cell (ASE) and broken defect partners
    si = bulk("Si", "diamond", a=5.43, cubic=True) * (2, 2, 2)
    pairs = HERE / "geometry"

    def put(sub, atoms):
        (pairs / sub).mkdir(parents=True, exist_ok=True)
        write(pairs / sub / "POSCAR", atoms, format="vasp", direct=True)
    put("host", si)
    put("no_vacancy", si.copy())
    two = si.copy()
    nb = int(np.argsort(two.get_distances(0, range(len(two)), mic=True))[1])
    pos = two.get_positions()
    # the neighbour of the removed atom moved half way towards it: two equally good vacancy sites
    pos[nb] = pos[nb] + 0.5 * two.get_distance(nb, 0, mic=True, vector=True)
    two.set_positions(pos)
    del two[0]
    put("split_vacancy", two)
    inter = si.copy()
    inter.append("Si")
    inter.positions[-1] = [1.3575, 1.3575, 4.0725]  # tetrahedral interstitial site
    put("interstitial", inter)
    bohr = si.copy()
    del bohr[0]
    bohr.set_cell(bohr.cell / 0.529177, scale_atoms=True)  # Bohr numbers written as Å
    put("cell_in_bohr", bohr)
    # metallic host (partly occupied band 2 of the hand-written PROCAR): no in-gap states defined
    for sub in ("metal/host", "metal/defect"):
        (HERE / sub).mkdir(parents=True, exist_ok=True)
        shutil.copy(FIX / "vasp_nospin" / "POSCAR", HERE / sub / "POSCAR")
        shutil.copy(FIX / "vasp_nospin" / "PROCAR", HERE / sub / "PROCAR")
    (HERE / "run_empty").mkdir(exist_ok=True)
    (HERE / "run_empty" / ".keep").write_text("")
    (HERE / "run_bad_procar").mkdir(exist_ok=True)
    shutil.copy(FIX / "vasp_nospin" / "POSCAR", HERE / "run_bad_procar" / "POSCAR")
    (HERE / "run_bad_procar" / "PROCAR").write_text("\n".join(
        (FIX / "vasp_nospin" / "PROCAR").read_text().splitlines()[:12]) + "\n")


def manifests():
    m = HERE / "manifest"
    _text(m / "deep_nesting.toml", '[[case]]\nname = "a"\npath = "."\n[references]\nx = ' + "[" * 4000
          + "]" * 4000 + "\n")
    _text(m / "deep_tables.toml", '[[case]]\nname = "a"\npath = "."\n[references]\nx = '
          + "{ a = " * 40 + "1" + " }" * 40 + "\n")
    _text(m / "too_many_tables.toml", '[[case]]\nname = "a"\npath = "."\n' + "[[host]]\n" * 5001)
    _text(m / "many_problems.toml", '[family]\nname = "x"\ncolour = "red"\n\n[[host]]\nname = "H"\npath = "nowhere"\n'
          '\n[[case]]\nname = "c"\npath = "."\nhost = "Z"\ncharge = "one"\n\n[[case]]\nname = "c"\npath = "."\n')
    _text(m / "invalid.toml", '[[case]]\nname = "a"\npath = "."\ncharge = 1 +\n')
    _bytes(m / "binary.toml", RNG.integers(128, 256, 400, dtype=np.uint8).tobytes())
    _bytes(m / "empty.toml", b"")
    _text(m / "host_list.toml", 'host = ["GaAs"]\n[[case]]\nname = "a"\npath = "."\n')


def sessions():
    import orbtool
    s = HERE / "session"
    s.mkdir(exist_ok=True)
    good = s / ".good.orbsession"
    orbtool.save_session(good, {"x": np.arange(4.0), "label": "v"})
    with zipfile.ZipFile(good) as z:
        doc = json.loads(z.read("session.json"))
        arrays = {n: z.read(n) for n in z.namelist() if n.startswith("arrays/")}
    good.unlink()
    doc["created"] = "2026-12-01T00:00:00+00:00"

    def rezip(doc, arrays) -> bytes:
        out = io.BytesIO()
        with zipfile.ZipFile(out, "w") as z:
            _zip_write(z, "session.json", json.dumps(doc).encode())
            for n, raw in arrays.items():
                _zip_write(z, n, raw)
        return out.getvalue()
    data = rezip(doc, arrays)
    _bytes(s / "truncated.orbsession", data[:int(RNG.integers(40, len(data) - 40))])
    _bytes(s / "garbage.orbsession", RNG.integers(0, 256, 700, dtype=np.uint8).tobytes())
    _bytes(s / "newer_schema.orbsession", rezip({**doc, "schema": 99, "orbtool": "9.0"}, arrays))
    _bytes(s / "array_missing.orbsession", rezip(doc, {}))
    _bytes(s / "no_content.orbsession", rezip({k: v for k, v in doc.items() if k != "content"}, arrays))
    _bytes(s / "wrong_format.orbsession", rezip({**doc, "format": "something-else"}, arrays))
    lying = {n: re.sub(rb"'shape': \(\d+,", b"'shape': (100000000000,", raw, count=1) for n, raw in arrays.items()}
    _bytes(s / "lying_shape.orbsession", rezip(doc, lying))


def _lie_about_sizes(data: bytes, size: int) -> bytes:
    """A ZIP archive whose local and central headers declare every member ``size`` bytes long
    (APPNOTE.TXT 4.3.7 / 4.3.12: uncompressed size at offsets 22 and 24); the data stay small."""
    raw = bytearray(data)
    for sig, off in ((b"PK\x03\x04", 22), (b"PK\x01\x02", 24)):
        i = raw.find(sig)
        while i >= 0:
            raw[i + off:i + off + 4] = size.to_bytes(4, "little")
            i = raw.find(sig, i + 4)
    return bytes(raw)


def round_two():
    """Inputs of issue 18 (second hostile probe)."""
    m = HERE / "manifest"
    case = '[[case]]\nname = "a"\npath = "."\n'
    _text(m / "label_name.toml", case + '[case.labels]\nname = "someone else"\n')
    _text(m / "label_charge.toml", case + "[case.labels]\ncharge = 7\n")
    _text(m / "charge_minus_400.toml", case + "charge = -400\n")
    _text(m / "charge_30_digits.toml", case + "charge = 123456789012345678901234567890\n")
    _text(m / "defect_list.toml", case + "[case.labels]\ndefect = [1, 2]\n")
    _text(m / "cation_table.toml", case + "[case.labels]\ncation = { a = 1 }\n")
    _text(m / "mu_string.toml", case + '[references]\nmu = "rich"\n')
    _text(m / "mu_not_number.toml", case + '[references]\nmu = { S = "x" }\n')
    _text(m / "mu_nan.toml", case + "[references]\nmu = { S = nan }\n")
    # PDOS text of orbtool's own layout with a silently wrong column
    good = ("# orbtool-pdos 1\n# nspin: 1\n# fermi: 0.0\n# units: energy eV, dos states/eV per spin channel\n"
            "# columns: energy {cols}\n")
    energies = np.linspace(-2.0, 2.0, 9)
    rows = np.column_stack([energies, 0.5 + 0.1 * np.cos(energies), 0.2 + 0.05 * energies ** 2])
    body = "\n".join(" ".join(f"{x:.6f}" for x in r) for r in rows) + "\n"
    _text(HERE / "pdos" / "duplicated_column.pdos.txt", good.format(cols="Si0:s:up Si0:s:up") + body)
    neg = rows.copy()
    neg[4, 2] = -0.4
    _text(HERE / "pdos" / "negative_dos.pdos.txt", good.format(cols="Si0:s:up Si0:p:up")
          + "\n".join(" ".join(f"{x:.6f}" for x in r) for r in neg) + "\n")
    # a run folder: 63-atom Si cell (64-atom cell minus one) with a PDOS channel for atom 9999
    cell63 = bulk("Si", "diamond", a=5.43, cubic=True) * (2, 2, 2)
    del cell63[0]
    run = HERE / "run_pdos_atom_9999"
    run.mkdir(exist_ok=True)
    write(run / "POSCAR", cell63, format="vasp", direct=True)
    _text(run / "pdos.txt", good.format(cols="Si1:s:up Sn9999:p:up") + body)
    # PROCAR whose every weight is zero
    pro = (FIX / "vasp_nospin" / "PROCAR").read_text()
    _text(HERE / "proj" / "procar_zero_weights" / "PROCAR",
          re.sub(r"(?m)^([ \t]*(?:\d+|tot))((?:[ \t]+[0-9.]+)+)$",
                 lambda mt: mt.group(1) + re.sub(r"[0-9.]+", "0.000", mt.group(2)), pro))
    # NPZ whose orbtool_version is not an integer, and one that declares 1.9 GB
    import orbtool
    pd = orbtool.read_pdos(FIX / "vasp_spin" / "DOSCAR", format="doscar")
    tmp = HERE / ".tmp"
    tmp.mkdir(exist_ok=True)
    try:
        orbtool.write_pdos(tmp / "p.npz", pd, format="npz")
        npz = (tmp / "p.npz").read_bytes()
    finally:
        shutil.rmtree(tmp)
    for stem, value in (("version_abc", np.array("abc")), ("version_list", np.array([1, 2])),
                        ("version_nan", np.array(np.nan))):
        out = io.BytesIO()
        with zipfile.ZipFile(io.BytesIO(npz)) as zin, zipfile.ZipFile(out, "w") as zout:
            for name in zin.namelist():
                raw = zin.read(name)
                if name == "orbtool_version.npy":
                    buf = io.BytesIO()
                    np.save(buf, value)
                    raw = buf.getvalue()
                _zip_write(zout, name, raw)
        _bytes(HERE / "native" / f"{stem}.npz", out.getvalue())
    out = io.BytesIO()
    with zipfile.ZipFile(io.BytesIO(npz)) as zin, zipfile.ZipFile(out, "w", zipfile.ZIP_DEFLATED) as zout:
        for name in zin.namelist():
            _zip_write(zout, name, zin.read(name))
    with zipfile.ZipFile(out) as z:
        n_members = len(z.namelist())
    _bytes(HERE / "native" / "declares_1_9_GB.npz", _lie_about_sizes(out.getvalue(), 1_900_000_000 // n_members))
    # sessions: 990-deep list; archive declaring 1.5 GB
    s = HERE / "session"
    deep = '{"format": "orbtool-session", "schema": 1, "orbtool": "0", "created": "2026-12-01T00:00:00+00:00", ' \
           '"content": ' + "[" * 990 + "]" * 990 + "}"
    out = io.BytesIO()
    with zipfile.ZipFile(out, "w") as z:
        _zip_write(z, "session.json", deep.encode())
    _bytes(s / "deep_990.orbsession", out.getvalue())
    out = io.BytesIO()
    with zipfile.ZipFile(out, "w", zipfile.ZIP_DEFLATED) as z:
        _zip_write(z, "session.json", json.dumps({"format": "orbtool-session", "schema": 1, "content": None}).encode())
        buf = io.BytesIO()
        np.save(buf, np.zeros(4))
        for i in range(8):
            _zip_write(z, f"arrays/{i}.npy", buf.getvalue())
    _bytes(s / "declares_1_5_GB.orbsession", _lie_about_sizes(out.getvalue(), 1_500_000_000 // 9))
    # a vacancy cell with one atom written twice, 0.01 Å apart
    si = bulk("Si", "diamond", a=5.43, cubic=True) * (2, 2, 2)
    dup = si.copy()
    del dup[0]
    del dup[1]
    dup.append("Si")
    dup.positions[-1] = dup.positions[5] + [0.01, 0.0, 0.0]
    (HERE / "geometry" / "overlapping_atoms").mkdir(parents=True, exist_ok=True)
    write(HERE / "geometry" / "overlapping_atoms" / "POSCAR", dup, format="vasp", direct=True)


if __name__ == "__main__":
    grids()
    spectra()
    native()
    structures_and_energies()
    manifests()
    sessions()
    round_two()
    total = sum(f.stat().st_size for f in HERE.rglob("*") if f.is_file())
    print(f"corpus: {sum(1 for f in HERE.rglob('*') if f.is_file())} files, {total:,d} bytes")
