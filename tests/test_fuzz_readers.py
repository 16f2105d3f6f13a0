"""Hypothesis fuzzing of every orbtool reader: damaged files give orbtool errors, in bounded time and memory.

Valid inputs come from outside the project: ASE's writers (cube, XSF, CHGCAR, POSCAR) and the
hand-written fixtures of tests/fixtures/io (typed from the formats' public documentation, see its
README). Each example mutates one valid file — byte flips, truncation at a random offset, swapped
or hostile tokens (NaN, inf, negative or huge counts), a header count replaced by a huge number —
and calls the public reader on it. The contract checked (issue 10, "Reliability"):

* only :class:`orbtool.errors.OrbtoolError` subclasses escape (never IndexError, ValueError from
  numpy, MemoryError, UnicodeDecodeError, RecursionError …);
* every example finishes within the hypothesis ``deadline``;
* the peak of traced allocations (numpy reports its buffers to :mod:`tracemalloc`) stays under
  ``MEMORY_LIMIT``: declared sizes must be checked against the file length before allocating.

Example budgets are fixed and examples derandomized so CI time is bounded and failures reproduce
(``ORBTOOL_FUZZ_EXAMPLES``, ``ORBTOOL_FUZZ_RANDOM=1`` for a longer, exploring run).
"""

from __future__ import annotations

import os
import shutil
import tempfile
import tracemalloc
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, example, given, settings
from hypothesis import strategies as st

import orbtool
from orbtool.errors import OrbtoolError

FIX = Path(__file__).parent / "fixtures" / "io"
#: largest traced allocation peak accepted for a reader on a file of a few kB (common practice: a
#: reader may hold a few copies of its data; 64 MB is far above that and far below a "lying" size)
MEMORY_LIMIT = 64 * 2 ** 20
#: examples per reader; fixed for CI, raise it for a deeper search (ORBTOOL_FUZZ_EXAMPLES=2000)
EXAMPLES = int(os.environ.get("ORBTOOL_FUZZ_EXAMPLES", "40"))
#: derandomized in CI (reproducible); ORBTOOL_FUZZ_RANDOM=1 explores new examples each run
DERANDOMIZE = os.environ.get("ORBTOOL_FUZZ_RANDOM", "") == ""

_WORK = Path(tempfile.mkdtemp(prefix="orbtool-fuzz-"))


@pytest.fixture(scope="module", autouse=True)
def _cleanup():
    yield
    shutil.rmtree(_WORK, ignore_errors=True)


@pytest.fixture(scope="module", autouse=True)
def _warm():
    """Build every valid source and read it once (imports, ASE writers) outside the timed examples."""
    for kind in SOURCES:
        d = Path(tempfile.mkdtemp(dir=_WORK))
        (d / SOURCES[kind][1]).write_bytes(_valid(kind))
        SOURCES[kind][2](d / SOURCES[kind][1])


@pytest.fixture(autouse=True)
def _cache(monkeypatch):
    monkeypatch.setenv("ORBTOOL_CACHE_DIR", str(_WORK / "cache"))


# ------------------------------------------------------------------ valid sources (outside the project)
def _ase_file(name, write):
    d = Path(tempfile.mkdtemp(dir=_WORK))
    f = d / name
    write(f)
    return f.read_bytes()


def _cube():
    from ase.build import bulk
    from ase.io import write
    return _ase_file("x.cube", lambda f: write(f, bulk("Si", cubic=True),
                                               data=np.random.default_rng(0).random((3, 4, 5))))


def _xsf():
    from ase.build import bulk
    from ase.io import write
    return _ase_file("x.xsf", lambda f: write(f, bulk("Si", cubic=True), format="xsf",
                                              data=np.random.default_rng(1).random((3, 4, 5))))


def _chgcar():
    from ase.build import bulk
    from ase.calculators.vasp import VaspChargeDensity

    def w(f):
        v = VaspChargeDensity(None)
        v.atoms = [bulk("GaAs", "zincblende", a=5.65)]
        v.chg = [np.random.default_rng(2).random((3, 4, 5))]
        v.chgdiff = [np.random.default_rng(3).random((3, 4, 5)) - 0.5]
        v.aug = "augmentation occupancies 1 2\n 0.1 0.2\naugmentation occupancies 2 2\n 0.1 0.2\n"
        v.augdiff = v.aug
        v.write(str(f), format="chgcar")
    return _ase_file("CHGCAR", w)


def _poscar():
    from ase.build import bulk
    from ase.io import write
    return _ase_file("POSCAR", lambda f: write(f, bulk("GaAs", "zincblende", a=5.65) * (2, 1, 1),
                                               format="vasp", direct=True))


def _native(kind):
    def make(f):
        if kind == "pdos":
            orbtool.io.write_pdos(f, orbtool.io.read_pdos(FIX / "vasp_spin" / "DOSCAR", format="doscar"),
                                  format="orbtool-text")
        elif kind == "proj":
            orbtool.io.write_projections(f, orbtool.io.read_projections(FIX / "vasp_spin" / "PROCAR",
                                                                        format="procar"), format="orbtool-text")
        else:
            orbtool.io.write_projections(f, orbtool.io.read_projections(FIX / "vasp_nospin" / "PROCAR",
                                                                        format="procar"), format="npz")
    name = {"pdos": "x.pdos.txt", "proj": "x.proj.txt", "npz": "x.npz"}[kind]
    return _ase_file(name, make)


def _grids(fmt):
    return lambda p: orbtool.read_grids(p, format=fmt, cache=False, progress=False)


SOURCES = {
    # name: (valid bytes (lazy), file name, reader)
    "cube": (_cube, "x.cube", _grids("cube")),
    "cube-sniffed": (_cube, "data.bin", lambda p: orbtool.read_grids(p, cache=False, progress=False)),
    "xsf": (_xsf, "x.xsf", _grids("xsf")),
    "chgcar": (_chgcar, "CHGCAR", _grids("chgcar")),
    "doscar": (lambda: (FIX / "vasp_spin" / "DOSCAR").read_bytes(), "DOSCAR",
               lambda p: orbtool.read_pdos(p, format="doscar")),
    "doscar-nospin": (lambda: (FIX / "vasp_nospin" / "DOSCAR").read_bytes(), "DOSCAR",
                      lambda p: orbtool.read_pdos(p)),
    "procar": (lambda: (FIX / "vasp_spin" / "PROCAR").read_bytes(), "PROCAR",
               lambda p: orbtool.read_projections(p, format="procar")),
    "procar-nospin": (lambda: (FIX / "vasp_nospin" / "PROCAR").read_bytes(), "PROCAR",
                      lambda p: orbtool.read_projections(p)),
    "qe-pdos": (lambda: (FIX / "qe_spin" / "x.pdos_atm#1(Ga)_wfc#2(p)").read_bytes(), "x.pdos_atm#1(Ga)_wfc#2(p)",
                lambda p: orbtool.read_pdos(p, format="qe-pdos")),
    "cp2k-pdos": (lambda: (FIX / "cp2k" / "demo-k1-1.pdos").read_bytes(), "demo-k1-1.pdos",
                  lambda p: orbtool.read_pdos(p, format="cp2k-pdos")),
    "orbtool-pdos": (lambda: _native("pdos"), "x.pdos.txt", lambda p: orbtool.read_pdos(p)),
    "orbtool-projections": (lambda: _native("proj"), "x.proj.txt", lambda p: orbtool.read_projections(p)),
    "npz": (lambda: _native("npz"), "x.npz", lambda p: orbtool.read_projections(p)),
    "poscar": (_poscar, "POSCAR", lambda p: orbtool.read_structure(p)),
    "outcar": (lambda: (FIX / "vasp_nospin" / "OUTCAR").read_bytes(), "OUTCAR", lambda p: orbtool.io.read_energy(p)),
    "oszicar": (lambda: (FIX / "vasp_spin" / "OSZICAR").read_bytes(), "OSZICAR", lambda p: orbtool.io.read_energy(p)),
}
def _session_bytes() -> bytes:
    from ase.build import bulk

    from orbtool.grid import Grid
    atoms = bulk("Si", cubic=True)
    grid = Grid(values=np.random.default_rng(5).random((2, 3, 4)), cell=atoms.cell.array, atoms=atoms)
    return _ase_file("s.orbsession", lambda f: orbtool.save_session(
        f, {"grid": grid, "pair": (1, 2.5), "keys": {1: "a"}, "x": np.arange(5.0), "nan": float("nan")}))




SOURCES["session"] = (_session_bytes, "s.orbsession", lambda p: orbtool.load_session(p))
_VALID: dict[str, bytes] = {}


def _valid(kind: str) -> bytes:
    if kind not in _VALID:
        _VALID[kind] = SOURCES[kind][0]()
    return _VALID[kind]


# ------------------------------------------------------------------ mutations
HOSTILE = [b"nan", b"NaN", b"inf", b"-inf", b"0", b"-1", b"-7", b"99999999", b"123456789012", b"1e308",
           b"-1e308", b"9" * 40, b"abc", b"1.2.3", b"0x10", b"\xff\xfe", b"\x00", b"", b"#", b"[", b"\xc3\x28"]
HUGE = [b"100000", b"999999", b"46341", b"2147483648", b"10000000000", b"4000000000000000000"]

op = st.one_of(
    st.tuples(st.just("flip"), st.floats(0, 1), st.integers(1, 255)),
    st.tuples(st.just("truncate"), st.floats(0, 1), st.just(0)),
    st.tuples(st.just("swap"), st.floats(0, 1), st.integers(0, 10 ** 6)),
    st.tuples(st.just("hostile"), st.floats(0, 1), st.integers(0, len(HOSTILE) - 1)),
    st.tuples(st.just("huge"), st.floats(0, 1), st.integers(0, len(HUGE) - 1)),
    st.tuples(st.just("dupline"), st.floats(0, 1), st.integers(1, 3)),
    st.tuples(st.just("dropline"), st.floats(0, 1), st.integers(1, 3)),
)
mutations = st.lists(op, min_size=1, max_size=3)


def _tokens(data: bytes):
    """(start, end) of every whitespace-separated token."""
    out, i, n = [], 0, len(data)
    while i < n:
        while i < n and data[i:i + 1].isspace():
            i += 1
        j = i
        while j < n and not data[j:j + 1].isspace():
            j += 1
        if j > i:
            out.append((i, j))
        i = j
    return out


def mutate(data: bytes, ops) -> bytes:
    """Apply the mutations ``ops`` (see ``op``) to ``data``."""
    for kind, where, arg in ops:
        if kind == "flip" and data:
            i = int(where * (len(data) - 1))
            data = data[:i] + bytes([data[i] ^ arg]) + data[i + 1:]
        elif kind == "truncate":
            data = data[:int(where * len(data))]
        elif kind in ("swap", "hostile", "huge"):
            toks = _tokens(data)
            if kind == "huge":  # a count near the top of the file
                toks = [t for t in toks[:200] if data[t[0]:t[1]].lstrip(b"-+").isdigit()]
            if not toks:
                continue
            a = toks[int(where * (len(toks) - 1))]
            if kind == "swap":
                b = toks[arg % len(toks)]
                a, b = sorted((a, b))
                if a == b:
                    continue
                data = data[:a[0]] + data[b[0]:b[1]] + data[a[1]:b[0]] + data[a[0]:a[1]] + data[b[1]:]
            else:
                new = HOSTILE[arg] if kind == "hostile" else HUGE[arg]
                data = data[:a[0]] + new + data[a[1]:]
        else:
            lines = data.split(b"\n")
            j = int(where * (len(lines) - 1))
            if kind == "dupline":
                lines = lines[:j] + [lines[j]] * (arg + 1) + lines[j + 1:]
            else:
                lines = lines[:j] + lines[j + arg:]
            data = b"\n".join(lines)
    return data


def check_reader(read, path: Path):
    """Run ``read(path)``; only orbtool errors may escape, and traced memory stays bounded."""
    tracemalloc.start()
    try:
        read(path)
    except OrbtoolError as exc:
        assert str(exc)  # a message the user can read
    finally:
        _, peak = tracemalloc.get_traced_memory()
        tracemalloc.stop()
    assert peak < MEMORY_LIMIT, f"peak traced allocation {peak / 2 ** 20:.1f} MB reading {path.name}"


def test_mutation_operators_change_the_input():
    """The fuzzer is only useful if its operators actually damage files (not a tautology check:
    each operator must alter the cube text taken from ASE's writer)."""
    data = _valid("cube")
    for o in [("flip", 0.3, 1), ("truncate", 0.5, 0), ("swap", 0.1, 7), ("hostile", 0.4, 0), ("huge", 0.05, 3),
              ("dupline", 0.5, 1), ("dropline", 0.2, 1)]:
        assert mutate(data, [o]) != data, o
    assert b"4000000000000000000" in mutate(data, [("huge", 0.0, 5)])


@pytest.mark.parametrize("kind", sorted(SOURCES))
def test_valid_source_reads(kind):
    """Sanity: every unmutated source is accepted, so the fuzz examples start from valid files."""
    data, name, read = _valid(kind), SOURCES[kind][1], SOURCES[kind][2]
    d = Path(tempfile.mkdtemp(dir=_WORK))
    (d / name).write_bytes(data)
    read(d / name)


@pytest.mark.parametrize("kind", sorted(SOURCES))
@settings(max_examples=EXAMPLES, deadline=None, derandomize=DERANDOMIZE, database=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(ops=mutations)
def test_fuzz_reader_raises_only_orbtool_errors(kind, ops):
    data, name, read = _valid(kind), SOURCES[kind][1], SOURCES[kind][2]
    d = Path(tempfile.mkdtemp(dir=_WORK))
    f = d / name
    f.write_bytes(mutate(data, ops))
    try:
        check_reader(read, f)
    finally:
        shutil.rmtree(d, ignore_errors=True)


@pytest.mark.parametrize("kind", ["cube", "xsf", "chgcar", "doscar", "procar", "orbtool-projections", "npz",
                                  "cp2k-pdos", "poscar", "session"])
@settings(max_examples=EXAMPLES // 2, deadline=None, derandomize=DERANDOMIZE, database=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(which=st.integers(0, 40), huge=st.sampled_from(HUGE))
def test_fuzz_huge_declared_size(kind, which, huge):
    """Replace one integer of the header with a huge count: refused before allocating."""
    data = _valid(kind)
    if kind in ("npz", "session"):  # the .npy header inside the archive declares the array shape
        data = _lie_in_npz(data, int(huge), member=None if kind == "session" else "weights.npy")
    else:
        toks = [t for t in _tokens(data)[:120] if data[t[0]:t[1]].isdigit()]
        a = toks[which % len(toks)]
        data = data[:a[0]] + huge + data[a[1]:]
    d = Path(tempfile.mkdtemp(dir=_WORK))
    f = d / SOURCES[kind][1]
    f.write_bytes(data)
    try:
        check_reader(SOURCES[kind][2], f)
    finally:
        shutil.rmtree(d, ignore_errors=True)


def _lie_in_npz(data: bytes, n: int, member: str | None = "weights.npy") -> bytes:
    """The archive rebuilt with the first dimension of ``member`` (every array if None) declared as ``n`` in the
    ``.npy`` header (NumPy format NEP 1) while the data stay small; CRCs are recomputed, so only
    the size is a lie."""
    import io
    import re
    import zipfile
    out = io.BytesIO()
    with zipfile.ZipFile(io.BytesIO(data)) as zin, zipfile.ZipFile(out, "w") as zout:
        for name in zin.namelist():
            raw = zin.read(name)
            if name.endswith(".npy") and (member is None or name == member):
                raw = re.sub(rb"'shape': \((\d+),", b"'shape': (%d," % n, raw, count=1)
            zout.writestr(name, raw)
    return out.getvalue()


def test_cp2k_wide_energy_range_bounded_memory(tmp_path):
    """200 states, one of them 700 Ha away: ~1.9 million energy points. Broadening all states at
    once would hold 200 × 1.9e6 doubles (3 GB); the reader must stay far below that."""
    rows = "\n".join(f"{i:8d} {-0.5 + 0.001 * i:16.6f} 2.000000 0.6 0.3 0.1" for i in range(1, 200))
    rows += f"\n{200:8d} {700.0:16.6f} 0.000000 0.6 0.3 0.1\n"
    f = tmp_path / "wide-k1-1.pdos"
    f.write_text("# Projected DOS for atomic kind Ga at iteration step i = 0, E(Fermi) = -0.1 a.u.\n"
                 "#     MO Eigenvalue [a.u.]      Occupation      s      p      d\n" + rows)
    tracemalloc.start()
    try:
        pdos = orbtool.read_pdos(f, format="cp2k-pdos")
    finally:
        _, peak = tracemalloc.get_traced_memory()
        tracemalloc.stop()
    assert pdos.energies.size > 1_800_000
    assert peak < 4 * MEMORY_LIMIT, f"peak {peak / 2 ** 20:.0f} MB"


_RUN = {"POSCAR": FIX / "vasp_spin" / "POSCAR", "DOSCAR": FIX / "vasp_spin" / "DOSCAR",
        "PROCAR": FIX / "vasp_spin" / "PROCAR", "OSZICAR": FIX / "vasp_spin" / "OSZICAR"}


@settings(max_examples=EXAMPLES, deadline=None, derandomize=DERANDOMIZE, database=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(which=st.sampled_from(sorted(_RUN)), ops=mutations)
def test_fuzz_load_case(which, ops):
    """A run folder with one damaged file: load_case reports an orbtool error or skips the file."""
    d = Path(tempfile.mkdtemp(dir=_WORK))
    for name, src in _RUN.items():
        data = src.read_bytes()
        (d / name).write_bytes(mutate(data, ops) if name == which else data)
    try:
        check_reader(lambda p: orbtool.load_case(p, grids=False), d)
    finally:
        shutil.rmtree(d, ignore_errors=True)


# ------------------------------------------------------------------ sessions (damaged, hostile)


def _rezip(data: bytes, edit) -> bytes:
    import io
    import zipfile
    out = io.BytesIO()
    with zipfile.ZipFile(io.BytesIO(data)) as zin, zipfile.ZipFile(out, "w") as zout:
        for name in zin.namelist():
            zout.writestr(name, edit(name, zin.read(name)))
    return out.getvalue()


_MEMBERS = {"session": ["session.json", "arrays/0.npy", "arrays/3.npy"],
            "npz": ["weights.npy", "energies.npy", "orbtool_kind.npy", "meta.npy"]}


@pytest.mark.parametrize("kind", sorted(_MEMBERS))
@settings(max_examples=EXAMPLES, deadline=None, derandomize=DERANDOMIZE, database=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(ops=mutations, which=st.integers(0, 3))
@example(ops=[("hostile", 0.5, 0)], which=0).via("regression: 'nan' in a .npy header raised tokenize.TokenError")
@example(ops=[("hostile", 0.5, 0)], which=1)
def test_fuzz_archive_members(kind, ops, which):
    """Damage inside a well-formed archive (valid CRCs): the JSON tree or a .npy member of a
    session, or a .npy member of an orbtool NPZ."""
    member = _MEMBERS[kind][which % len(_MEMBERS[kind])]
    data = _rezip(_valid(kind), lambda name, raw: mutate(raw, ops) if name == member else raw)
    d = Path(tempfile.mkdtemp(dir=_WORK))
    (d / SOURCES[kind][1]).write_bytes(data)
    try:
        check_reader(SOURCES[kind][2], d / SOURCES[kind][1])
    finally:
        shutil.rmtree(d, ignore_errors=True)


@pytest.mark.parametrize("kind", sorted(SOURCES))
def test_truncation_sweep(kind):
    """Every source cut at 24 evenly spaced offsets and in its last bytes (a run killed while
    writing): an orbtool error or a valid result, never anything else."""
    data, name, read = _valid(kind), SOURCES[kind][1], SOURCES[kind][2]
    cuts = sorted({int(x) for x in np.linspace(0, len(data), 25)[:-1]} | {len(data) - k for k in (1, 2, 5, 17)})
    d = Path(tempfile.mkdtemp(dir=_WORK))
    try:
        for cut in cuts:
            (d / name).write_bytes(data[:cut])
            check_reader(read, d / name)
    finally:
        shutil.rmtree(d, ignore_errors=True)


_SI64 = None


def _si64():
    global _SI64
    if _SI64 is None:
        from ase.build import bulk
        from ase.io import write
        host = bulk("Si", "diamond", a=5.43, cubic=True) * (2, 2, 2)
        defect = host.copy()
        del defect[7]
        _SI64 = (host, _ase_file("POSCAR", lambda f: write(f, defect, format="vasp", direct=True)))
    return _SI64


@settings(max_examples=EXAMPLES // 2, deadline=None, derandomize=DERANDOMIZE, database=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(ops=mutations)
def test_fuzz_structure_into_locate_vacancy(ops):
    """A damaged defect POSCAR (ASE-written 63-atom Si cell) read and handed to locate_vacancy with
    the pristine 64-atom host: whatever the damage, only orbtool errors (GeometryError,
    InputFormatError) come out."""
    from orbtool.analysis import locate_vacancy
    host, data = _si64()
    d = Path(tempfile.mkdtemp(dir=_WORK))
    (d / "POSCAR").write_bytes(mutate(data, ops))
    try:
        check_reader(lambda p: locate_vacancy(host, orbtool.read_structure(p)), d / "POSCAR")
    finally:
        shutil.rmtree(d, ignore_errors=True)
