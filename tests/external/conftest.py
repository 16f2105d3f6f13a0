"""Shared loaders for the external-engine fixtures (``tests/external/data``).

Everything here reads the committed files with orbtool's own readers; the
numbers the tests compare against come from ``engine.json``, which the
generator wrote straight from the engine (pyscf) objects. Cases are loaded
on first use and kept for the session.
"""

from __future__ import annotations

import pytest
from external_cases import DATA, engine_record, host_of


class _Lazy(dict):
    """A dict that builds a missing entry with ``make(key)`` on first access."""

    def __init__(self, make):
        super().__init__()
        self._make = make

    def __missing__(self, key):
        value = self[key] = self._make(key)
        return value


@pytest.fixture(scope="session")
def engine():
    return _Lazy(engine_record)


@pytest.fixture(scope="session")
def cases():
    """DefectCase of a defect variant, assembled by orbtool.io.load_case from the run folders."""
    io = pytest.importorskip("orbtool.io")
    if not hasattr(io, "load_case"):
        pytest.skip("orbtool.io.load_case not available yet")
    return _Lazy(lambda c: io.load_case(DATA / c, host=DATA / host_of(c), charge=engine_record(c)["charge"], name=c,
                                        labels={"variant": c}))


@pytest.fixture(scope="session")
def sites(cases):
    from orbtool.analysis import locate_vacancy
    return _Lazy(lambda c: locate_vacancy(cases[c].host, cases[c].defect))
