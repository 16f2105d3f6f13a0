"""Hypothesis fuzzing of the family manifest (``orbtool.load_family``, schema in docs/manifest.md).

Starting from a valid manifest (the example of docs/manifest.md, pointing at run folders holding an
ASE-written POSCAR), each example damages the TOML text — byte flips, truncation, swapped tokens,
values of the wrong type, deeply nested arrays or inline tables, oversized files — and checks the
contract of issue 10: only :class:`orbtool.errors.OrbtoolError` escapes, in bounded time
(hypothesis ``deadline``) and bounded memory (traced allocations). The documented limits
(``orbtool.io.manifest.MAX_MANIFEST_BYTES``, ``MAX_NESTING``, ``MAX_TABLES``) are checked at and
just beyond their values.
"""

from __future__ import annotations

import shutil
import tempfile
import tracemalloc
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from test_fuzz_readers import DERANDOMIZE, EXAMPLES, mutate, mutations  # noqa: E402  (shared byte-level mutations)

import orbtool
from orbtool.errors import InputFormatError, OrbtoolError
from orbtool.io import manifest as mf

MEMORY_LIMIT = 64 * 2 ** 20  # common practice, as in test_fuzz_readers

VALID = """\
[family]
name = "III-V anion vacancies"
description = "fuzz base"

[references]
mu = { Ga = -3.03, As = -4.66 }
band_edges = { GaAs = { vbm = 5.12, cbm = 6.64 } }

[[host]]
name = "GaAs"
path = "hosts/GaAs"

[[case]]
name = "V_As_q0"
path = "runs/V_As_q0"
host = "GaAs"
charge = 0
motif = "zincblende"
defect = "V_As"

[case.labels]
supercell = "2x1x1"

[[case]]
name = "V_As_q1"
path = "runs/V_As_q1"
host = "GaAs"
charge = 1
"""

_WORK = Path(tempfile.mkdtemp(prefix="orbtool-fuzz-manifest-"))


def _family_folder() -> Path:
    """Run folders with POSCARs written by ASE (host: 2-cell GaAs; defects: one As removed)."""
    from ase.build import bulk
    from ase.io import write
    root = _WORK / "family"
    if root.exists():
        return root
    host = bulk("GaAs", "zincblende", a=5.65) * (2, 1, 1)
    defect = host.copy()
    del defect[1]
    for sub, atoms in (("hosts/GaAs", host), ("runs/V_As_q0", defect), ("runs/V_As_q1", defect)):
        (root / sub).mkdir(parents=True)
        write(root / sub / "POSCAR", atoms, format="vasp", direct=True)
    return root


@pytest.fixture(scope="module", autouse=True)
def _setup():
    root = _family_folder()
    (root / "family.toml").write_text(VALID)
    orbtool.load_family(root / "family.toml", grids=False)  # warm imports outside timed examples
    yield
    shutil.rmtree(_WORK, ignore_errors=True)


def _load(text: str | bytes):
    root = _family_folder()
    f = Path(tempfile.mkdtemp(dir=root)) / "family.toml"
    f.write_bytes(text if isinstance(text, bytes) else text.encode())
    # the manifest sits one folder below the runs: make its relative paths resolve
    data = f.read_bytes().replace(b'"hosts/', b'"../hosts/').replace(b'"runs/', b'"../runs/')
    f.write_bytes(data)
    tracemalloc.start()
    try:
        return orbtool.load_family(f, grids=False)
    finally:
        _, peak = tracemalloc.get_traced_memory()
        tracemalloc.stop()
        assert peak < MEMORY_LIMIT, f"peak traced allocation {peak / 2 ** 20:.1f} MB"
        shutil.rmtree(f.parent, ignore_errors=True)


def _expect_orbtool_error(text):
    try:
        _load(text)
    except OrbtoolError as exc:
        assert str(exc)


def test_valid_manifest_loads():
    fam = _load(VALID)
    assert [c.name for c in fam.cases] == ["V_As_q0", "V_As_q1"]
    assert fam.cases[1].charge == 1


# ------------------------------------------------------------------ TOML values of any type
def _toml(v, depth=0) -> str:
    """A TOML value (inline) for a Python value (TOML v1.0.0 specification, inline forms)."""
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, (int, float)):
        return repr(v) if v == v and abs(v) != float("inf") else ("nan" if v != v else ("inf" if v > 0 else "-inf"))
    if isinstance(v, str):
        return '"' + v.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(v, list):
        return "[" + ", ".join(_toml(x, depth + 1) for x in v) + "]"
    return "{" + ", ".join(f"k{i} = {_toml(x, depth + 1)}" for i, x in enumerate(v.values())) + "}"


scalars = st.one_of(st.integers(-2 ** 63, 2 ** 63 - 1), st.floats(), st.booleans(),
                    st.text(alphabet=st.characters(blacklist_categories=("Cs", "Cc")), max_size=20))
values = st.recursive(scalars, lambda kids: st.lists(kids, max_size=4) | st.dictionaries(
    st.text("abc", min_size=1, max_size=3), kids, max_size=3), max_leaves=12)
#: line indices just after each table header (0: top level), and every key line
_SPOTS = [0] + [i + 1 for i, ln in enumerate(VALID.splitlines()) if ln.startswith("[")] + \
    [i for i, ln in enumerate(VALID.splitlines()) if " = " in ln]
KEYS = ["name", "path", "host", "charge", "labels", "description", "motif", "defect", "mu", "family",
        "references", "case", "host", "unknown_key"]


@settings(max_examples=4 * EXAMPLES, deadline=None, derandomize=DERANDOMIZE, database=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(key=st.sampled_from(KEYS), value=values, where=st.sampled_from(_SPOTS), replace=st.booleans())
def test_fuzz_wrong_types(key, value, where, replace):
    """Any key of the schema given any TOML value, at the top or in any table, added or replacing
    an existing value: a listed problem, never a crash."""
    lines = VALID.splitlines()
    if replace and "=" in lines[where]:
        key = lines[where].split("=")[0].strip()
        lines[where] = f"{key} = {_toml(value)}"
    else:
        lines.insert(where, f"{key} = {_toml(value)}")
    _expect_orbtool_error("\n".join(lines) + "\n")


@settings(max_examples=2 * EXAMPLES, deadline=None, derandomize=DERANDOMIZE, database=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(ops=mutations)
def test_fuzz_damaged_text(ops):
    _expect_orbtool_error(mutate(VALID.encode(), ops))


@settings(max_examples=EXAMPLES // 2, deadline=None, derandomize=DERANDOMIZE, database=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(depth=st.integers(1, 5000), brace=st.booleans(), top=st.sampled_from(["", "[references]\n", "[[case]]\n"]))
def test_fuzz_deep_nesting(depth, brace, top):
    """Nested arrays or inline tables of any depth: refused beyond the documented limit, no RecursionError."""
    val = ("{a = " * depth + "1" + "}" * depth) if brace else ("[" * depth + "1" + "]" * depth)
    _expect_orbtool_error(VALID + "\n" + top + f"deep = {val}\n")


# ------------------------------------------------------------------ documented limits
def test_nesting_limit_is_enforced():
    """A value nested MAX_NESTING deep in [references] is accepted; one level deeper is refused."""
    ok = VALID.replace("[references]\n", "[references]\nx = " + "[" * (mf.MAX_NESTING - 2) + "1"
                       + "]" * (mf.MAX_NESTING - 2) + "\n")
    _load(ok)
    deep = VALID.replace("[references]\n", "[references]\nx = " + "[" * mf.MAX_NESTING + "1"
                         + "]" * mf.MAX_NESTING + "\n")
    with pytest.raises(InputFormatError, match="nested"):
        _load(deep)
    with pytest.raises(InputFormatError, match="nested"):
        _load(VALID + "\nx = " + "[" * 3000 + "]" * 3000 + "\n")


def test_size_limit_is_enforced():
    big = VALID + "# " + "x" * (mf.MAX_MANIFEST_BYTES - len(VALID)) + "\n"
    assert len(big.encode()) > mf.MAX_MANIFEST_BYTES
    with pytest.raises(InputFormatError, match="larger than"):
        _load(big)


def test_table_count_limit_is_enforced():
    many = VALID + "".join(f'[[case]]\nname = "c{i}"\npath = "runs/V_As_q0"\n' for i in range(mf.MAX_TABLES))
    with pytest.raises(InputFormatError, match="tables"):
        _load(many)
