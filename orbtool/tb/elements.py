"""Valence orbital energies ("term values") of the free atoms, with their provenance.

Sources (``source=``)
---------------------
``"lda-sr"`` (default)
    Scalar-relativistic LDA eigenvalues of spherically averaged neutral atoms, computed by
    ``scripts/make_term_values.py`` with pyscf (Slater + VWN5, ANO-RCC basis, spin-free X2C for the
    relativistic Hamiltonian); basis truncation costs ≈ 0.01–0.03 eV. Covers the main-group elements
    H–Bi (no noble gases) and Zn, Cd, Hg.
``"lda-nr"``
    The same without relativity (uncontracted basis); it reproduces the NIST LDA atomic reference
    data (Kotochigova et al., Phys. Rev. A 55, 191 (1997)) to ≤ 2 meV through Kr and ≤ 25 meV for the
    5p/6p rows (valence s and p levels, tests/test_tb_elements.py). Use it to compare with
    non-relativistic references; for 5p/6p elements the relativistic column is the physically right one.
``"harrison1980"``
    Harrison's 1980 Solid State Table (transcribed, 16 elements); the values paired with the 1980 η set.

Energies are in eV, negative = bound (ε_s < ε_p). ``d`` is present only where the atom has an
occupied d shell (the filled semicore d of groups 12–15).
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from functools import lru_cache
from importlib import resources

from ..errors import ModelError

__all__ = ["TermValues", "term_values", "available_elements", "valence_electrons", "SOURCES",
           "common_source"]

SOURCES = ("lda-sr", "lda-nr", "harrison1980")
_FILES = {"lda-sr": "term_values_lda.json", "lda-nr": "term_values_lda.json",
          "harrison1980": "term_values_harrison1980.json"}

# s + p valence electrons of the neutral atom (group counting; common practice).
_VALENCE = {"H": 1, "Li": 1, "Be": 2, "B": 3, "C": 4, "N": 5, "O": 6, "F": 7, "Na": 1, "Mg": 2, "Al": 3,
            "Si": 4, "P": 5, "S": 6, "Cl": 7, "K": 1, "Ca": 2, "Zn": 2, "Ga": 3, "Ge": 4, "As": 5, "Se": 6,
            "Br": 7, "Rb": 1, "Sr": 2, "Cd": 2, "In": 3, "Sn": 4, "Sb": 5, "Te": 6, "I": 7, "Cs": 1,
            "Ba": 2, "Hg": 2, "Tl": 3, "Pb": 4, "Bi": 5}


@dataclass(frozen=True)
class TermValues:
    """Valence orbital energies of one free atom.

    Attributes
    ----------
    element : str
    s, p : float
        ε_s and ε_p (eV); ``p`` may be the lowest *unoccupied* p level (see ``note``).
    d : float or None
        ε_d of the outermost occupied d shell (eV), or None.
    source : str
        Source key (see module docstring).
    note : str
        Provenance and caveats.
    """

    element: str
    s: float
    p: float | None
    d: float | None
    source: str
    note: str

    def get(self, l: int) -> float:
        """ε for angular momentum l (0, 1, 2); ModelError when the table has none."""
        v = (self.s, self.p, self.d)[l]
        if v is None:
            raise ModelError(f"term-value table {self.source!r} has no {'spd'[l]} level for {self.element}")
        return float(v)


@lru_cache(maxsize=None)
def _load(fname: str) -> dict:
    text = resources.files("orbtool.data").joinpath(fname).read_text(encoding="utf-8")
    return json.loads(text)


def available_elements(source: str = "lda-sr") -> tuple[str, ...]:
    """Elements present in one term-value source."""
    if source not in _FILES:
        raise ModelError(f"unknown term-value source {source!r}; expected one of {SOURCES}")
    return tuple(_load(_FILES[source])["elements"])


def term_values(element: str, source: str = "lda-sr") -> TermValues:
    """Term values of ``element`` from ``source``; ModelError naming the source when missing."""
    if source not in _FILES:
        raise ModelError(f"unknown term-value source {source!r}; expected one of {SOURCES}")
    doc = _load(_FILES[source])
    entry = doc["elements"].get(element)
    if entry is None:
        raise ModelError(f"no term values for element {element!r} in source {source!r} "
                         f"(available: {', '.join(doc['elements'])}); pass onsite={{...}} explicitly "
                         f"or choose another term_values source")
    if source.startswith("lda"):
        vals = entry.get(source[-2:])
        if vals is None:
            raise ModelError(f"the {source!r} column has no value for {element} (see orbtool/data/TERM_VALUES.md)")
        flags = entry.get("flags", [])
        note = doc["method"] + ("; p is the lowest unoccupied level" if "p_unoccupied" in flags else "")
    else:
        vals = entry
        note = doc["source"] + " " + doc["provenance"]
    return TermValues(element, float(vals["s"]), vals.get("p"), vals.get("d"), source, note)


def common_source(elements, preferred: str = "auto") -> str:
    """The term-value source for a set of elements.

    ``"auto"`` picks ``"harrison1980"`` (the values that go with the 1980 η set) when every element is
    in that table, otherwise ``"lda-sr"``. Sources are never mixed inside one model.
    """
    if preferred != "auto":
        if preferred not in _FILES:
            raise ModelError(f"unknown term-value source {preferred!r}; expected 'auto' or one of {SOURCES}")
        return preferred
    if set(elements) <= set(available_elements("harrison1980")):
        return "harrison1980"
    return "lda-sr"


def valence_electrons(element: str) -> int:
    """s + p valence electrons of the neutral atom (group counting)."""
    try:
        return _VALENCE[element]
    except KeyError:
        raise ModelError(f"no valence-electron count for {element!r}; pass electrons=... explicitly") from None
