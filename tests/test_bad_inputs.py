"""The bad-input corpus (tests/bad_inputs/corpus.toml): each broken or hostile file must make its
public entry point raise exactly the listed orbtool error, with a message saying what was wrong,
naming the file (and the line where the corpus lists one).

The files are damaged versions of ASE-written files and of the documentation-based fixtures (see
tests/bad_inputs/make_corpus.py); the expected errors are the contract of issue 10.
"""

from __future__ import annotations

import os
import tomllib
from pathlib import Path

import pytest

import orbtool
from orbtool import errors
from orbtool.analysis.states import NoGapError

HERE = Path(__file__).parent / "bad_inputs"
CORPUS = tomllib.loads((HERE / "corpus.toml").read_text(encoding="utf-8"))["input"]
ERRORS = {name: getattr(errors, name) for name in errors.__all__} | {"NoGapError": NoGapError}
#: files of the folder that are not inputs
_NOT_INPUTS = {"corpus.toml", "make_corpus.py", "README.md", ".keep"}


@pytest.fixture(autouse=True)
def _cache(tmp_path, monkeypatch):
    monkeypatch.setenv("ORBTOOL_CACHE_DIR", str(tmp_path / "cache"))


def _locate(host, defect):
    from orbtool.analysis import locate_vacancy
    return locate_vacancy(orbtool.read_structure(host), orbtool.read_structure(defect))


def _states(defect, host):
    from orbtool.analysis import in_gap_states
    return in_gap_states(orbtool.load_case(defect, host=host, grids=False))


CALLS = {
    "read_grid": lambda p, **kw: orbtool.read_grid(p, progress=False, **kw),
    "read_grids": lambda p, **kw: orbtool.read_grids(p, progress=False, **kw),
    "read_pdos": orbtool.read_pdos,
    "read_projections": orbtool.read_projections,
    "read_structure": orbtool.read_structure,
    "read_energy": orbtool.io.read_energy,
    "load_case": orbtool.load_case,
    "load_family": orbtool.load_family,
    "load_session": orbtool.load_session,
    "locate_vacancy": _locate,
    "in_gap_states": _states,
}


def _id(entry):
    return f"{entry['call']}:{entry['args'][-1 if entry['call'] == 'locate_vacancy' else 0]}"


@pytest.mark.parametrize("entry", CORPUS, ids=[_id(e) for e in CORPUS])
def test_bad_input(entry):
    args = [HERE / a for a in entry["args"]]
    want = ERRORS[entry["error"]]
    try:
        CALLS[entry["call"]](*args, **entry.get("kwargs", {}))
    except Exception as exc:  # noqa: BLE001 — the point is to see exactly what escapes
        got = exc
    else:
        pytest.fail(f"{entry['args']}: no error raised ({entry['why']})")
    assert type(got) is want, f"expected {want.__name__}, got {type(got).__name__}: {got}"
    assert entry["match"] in str(got), f"message {str(got)!r} lacks {entry['match']!r}"
    if isinstance(got, errors.InputFormatError):
        named = Path(got.path).resolve()
        first = args[0].resolve()
        assert named == first or first in named.parents, f"error names {got.path}, not {args[0]}"
        assert str(Path(got.path)) in str(got)
        if "line" in entry:
            assert got.line == entry["line"] and f"line {entry['line']}" in str(got)
    elif isinstance(got, (errors.SessionError, NoGapError)):
        assert entry["args"][-1 if isinstance(got, NoGapError) else 0] in str(got), "message does not name the file"


def test_corpus_is_large_small_and_complete():
    """At least 30 inputs, under 1 MB in all, every file used by an entry and every entry's file present."""
    files = {p for p in HERE.rglob("*") if p.is_file() and p.name not in _NOT_INPUTS}
    used = set()
    for e in CORPUS:
        assert set(e) <= {"args", "call", "kwargs", "error", "match", "line", "why"}, e
        assert e["call"] in CALLS and e["error"] in ERRORS and e["match"] and e["why"]
        for a in e["args"]:
            p = HERE / a
            assert p.exists(), a
            used |= {p} if p.is_file() else {f for f in p.rglob("*") if f.is_file()}
    assert len(CORPUS) >= 30
    assert files - used == set(), sorted(str(f.relative_to(HERE)) for f in files - used)
    assert sum(p.stat().st_size for p in HERE.rglob("*") if p.is_file()) < 1_000_000
    kinds = {e["call"] for e in CORPUS}
    assert kinds == set(CALLS), set(CALLS) - kinds


def test_corpus_folder_is_never_written(tmp_path):
    """Running every corpus entry leaves the input folders exactly as they were (no caches,
    temporary files or outputs beside the inputs)."""
    def snapshot():
        return {str(p.relative_to(HERE)): (p.stat().st_size, p.stat().st_mtime_ns)
                for p in HERE.rglob("*")} | {"": os.stat(HERE).st_mtime_ns}
    before = snapshot()
    for e in CORPUS:
        try:
            CALLS[e["call"]](*[HERE / a for a in e["args"]], **e.get("kwargs", {}))
        except errors.OrbtoolError:
            pass
    assert snapshot() == before
