"""Compute the valence orbital energies ("term values") shipped in orbtool/data/term_values_lda.json.

Method
------
Spherically averaged, spin-restricted Kohn–Sham calculations of the neutral free atoms in their
ground-state configuration (fractional, equal occupation of the partially filled shell, as pyscf's
``AtomSphAverageRKS`` does), local-density approximation (Slater exchange + VWN5 correlation,
``xc="lda,vwn"``), all-electron ANO-RCC basis (B. O. Roos et al., J. Phys. Chem. A 108, 2851 (2004)
and sequels) — uncontracted primitives (l ≤ 2) for the non-relativistic column, the relativistic
contractions truncated to occupied + 3 per l for the relativistic one (see ``basis_for``) — radial ×
angular grid (150, 146) (spherical atoms; a (300, 146) grid changes Ga's levels by < 0.1 meV).
Two columns are written:

* ``nr`` — non-relativistic, directly comparable with the NIST LDA atomic reference data of
  S. Kotochigova, Z. H. Levine, E. L. Shirley, M. D. Stiles and C. W. Clark, NIST Standard Reference
  Database 141 / Phys. Rev. A 55, 191 (1997);
* ``sr`` — scalar-relativistic, spin-free exact two-component Hamiltonian in its one-electron variant
  (pyscf ``scf.sfx2c1e``; W. Liu & D. Peng, J. Chem. Phys. 131, 031104 (2009)).

The valence shell of angular momentum l is the highest occupied shell of that l; for atoms with an
empty valence p shell (H, alkali and alkaline-earth metals) the lowest unoccupied p level of the
neutral atom is stored instead and flagged ``p_unoccupied`` (it is basis-sensitive). The d column is
the highest occupied d shell (the filled semicore d of groups 12–15), absent otherwise.

Run: ``python scripts/make_term_values.py [--out PATH] [ELEMENTS...]`` (about half an hour on one core).
"""

from __future__ import annotations

import argparse
import datetime
import json
import sys
import time
from pathlib import Path

import numpy as np

ELEMENTS = ("H Li Be B C N O F Na Mg Al Si P S Cl K Ca Zn Ga Ge As Se Br Rb Sr Cd In Sn Sb Te I "
            "Cs Ba Hg Tl Pb Bi").split()
HARTREE_EV = 27.211386245988  # CODATA 2018, as scipy.constants
BASIS = "ano-rcc"
EXTRA_CONTRACTIONS = 3  # ANO contractions kept per l beyond the occupied shells
XC = "lda,vwn"
GRID = (150, 146)


def basis_for(symbol: str, mode: str):
    """ANO-RCC functions for one atom.

    ``"uncontracted"``: every distinct primitive with l ≤ 2 (l ≤ 3 for atoms with 4f electrons) as its
    own function (used for the
    non-relativistic column: the ANO-RCC contractions are relativistic and would bias it).
    ``"trimmed"``: per l the occupied shells plus EXTRA_CONTRACTIONS natural-orbital contractions
    (l ≤ 2) and one f; the ANOs are ordered by occupation, so this is the usual truncation. Used for
    the scalar-relativistic column, for which the contractions were made; it agrees with the
    uncontracted basis to ~0.01 eV (Sn 5s/5p, checked when the table was produced).
    ``"full"``: all contractions of the file.
    """
    from pyscf import gto
    from pyscf.data import elements

    shells = gto.basis.load(BASIS, symbol)
    if mode == "full":
        return shells
    if mode == "uncontracted":
        lmax = 3 if elements.CONFIGURATION[elements.charge(symbol)][3] else 2  # f primitives for 4f atoms
        seen, out = set(), []
        for shell in shells:
            for row in shell[1:]:
                if shell[0] <= lmax and (shell[0], row[0]) not in seen:
                    seen.add((shell[0], row[0]))
                    out.append([shell[0], [row[0], 1.0]])
        return out
    config = elements.CONFIGURATION[elements.charge(symbol)]
    keep = {ll: int(np.ceil(config[ll] / (2 * (2 * ll + 1)))) + EXTRA_CONTRACTIONS for ll in range(3)}
    keep[3] = 1
    out = []
    for shell in shells:
        ll = shell[0]
        if ll > 3:
            continue
        rows = [list(r) for r in shell[1:]]
        ncol = min(len(rows[0]) - 1, keep[ll])
        out.append([ll] + [[r[0]] + r[1:1 + ncol] for r in rows])
    return out


BASIS_MODE = {"nr": "uncontracted", "sr": "trimmed"}


def atom_levels(symbol: str, relativistic: bool):
    """Return {l: sorted unique eigenvalues (Ha)}, {l: electrons in l} for one spherical atom."""
    from pyscf import gto, scf
    from pyscf.data import elements
    from pyscf.scf import atom_ks

    mode = BASIS_MODE["sr" if relativistic else "nr"]
    mol = gto.M(atom=f"{symbol} 0 0 0", basis={symbol: basis_for(symbol, mode)}, verbose=0, spin=None)
    mol.spin = mol.nelectron % 2
    mol.build()
    mf = atom_ks.AtomSphAverageRKS(mol)
    mf.atomic_configuration = elements.CONFIGURATION
    mf.xc = XC
    mf.grids.atom_grid = GRID
    mf.max_cycle = 200
    if relativistic:
        mf = scf.sfx2c1e(mf)
    mf.kernel()
    if not mf.converged:
        raise RuntimeError(f"{symbol}: SCF did not converge")
    ao_l = np.concatenate([[mol.bas_angular(i)] * (mol.bas_nctr(i) * (2 * mol.bas_angular(i) + 1))
                           for i in range(mol.nbas)])
    weight_by_l = np.stack([(np.abs(mf.mo_coeff[ao_l == ll]) ** 2).sum(axis=0) for ll in range(4)])
    mo_l = np.argmax(weight_by_l, axis=0)
    levels = {}
    for ll in range(4):
        e = np.sort(mf.mo_energy[mo_l == ll])
        uniq = []
        for v in e:  # (2l+1)-fold degenerate copies collapse to one level
            if not uniq or abs(v - uniq[-1]) > 1e-6:
                uniq.append(float(v))
        levels[ll] = uniq
    config = elements.CONFIGURATION[elements.charge(symbol)]
    return levels, {ll: config[ll] for ll in range(4)}, float(mf.e_tot)


def valence(levels, config):
    """Pick the valence s, p, d levels (Ha) and flags from one atom's levels.

    The valence principal quantum number n is that of the outermost occupied s shell. The valence
    p shell is the np shell: occupied when the p electrons reach shell n, otherwise the lowest
    unoccupied p level (flagged). The d entry is the outermost occupied d shell, if any.
    """
    out, flags = {}, []
    shells = {ll: int(np.ceil(config[ll] / (2 * (2 * ll + 1)))) for ll in range(3)}
    n_valence = shells[0]  # ns is the shells[0]-th s shell: n = shells[0]
    out["s"] = levels[0][shells[0] - 1]
    if n_valence >= 2:
        n_top_p = shells[1] + 1  # p shells start at n = 2
        if shells[1] and n_top_p == n_valence:
            out["p"] = levels[1][shells[1] - 1]
        elif len(levels[1]) > shells[1] and levels[1][shells[1]] < 0:
            out["p"] = levels[1][shells[1]]
            flags.append("p_unoccupied")
    if shells[2]:
        out["d"] = levels[2][shells[2] - 1]
    return out, flags


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("elements", nargs="*", default=list(ELEMENTS))
    ap.add_argument("--columns", default="nr,sr", help="which columns to compute (nr, sr)")
    ap.add_argument("--update", action="store_true", help="update the given columns of an existing --out file")
    ap.add_argument("--out", default=str(Path(__file__).resolve().parents[1] / "orbtool" / "data" /
                                         "term_values_lda.json"))
    ap.add_argument("--orbitals", action="store_true", help="write orbtool/data/valence_orbitals.json instead")
    args = ap.parse_args(argv)
    if args.orbitals:
        return valence_orbitals(args.elements, Path(__file__).resolve().parents[1] / "orbtool" / "data" /
                                "valence_orbitals.json")
    old = json.loads(Path(args.out).read_text()) if args.update else None
    table = dict(old["elements"]) if old else {}
    columns = [c for c in ("nr", "sr") if c in args.columns.split(",")]
    for sym in args.elements:
        entry = dict(table.get(sym, {}))
        for tag, rel in [(c, c == "sr") for c in columns]:
            t0 = time.time()
            levels, config, etot = atom_levels(sym, rel)
            val, flags = valence(levels, config)
            entry[tag] = {k: round(v * HARTREE_EV, 4) for k, v in val.items()}
            entry[tag + "_hartree"] = {k: round(v, 6) for k, v in val.items()}
            entry[tag + "_total_energy_hartree"] = round(etot, 6)
            entry["flags"] = flags
            entry[tag + "_basis"] = {"uncontracted": "ano-rcc primitives l<=2 (l<=3 with 4f), uncontracted",
                                     "trimmed": f"ano-rcc, occupied + {EXTRA_CONTRACTIONS} contractions per "
                                                "l<=2, one f", "full": "ano-rcc, all contractions"}[BASIS_MODE[tag]]
            print(f"{sym:2s} {tag} {time.time() - t0:6.1f}s  " +
                  "  ".join(f"{k} {v:9.4f}" for k, v in entry[tag].items()), flush=True)
        table[sym] = entry
        write(args.out, table)


def valence_orbitals(symbols, out):
    """Write the radial shape of each element's valence s and p orbital (``--orbitals``).

    The valence shell of l is the highest occupied one (the lowest empty p where the atom has none,
    as for the term values); its shape is that shell's ANO-RCC contraction (the atomic natural
    orbitals of B. O. Roos et al., J. Phys. Chem. A 108, 2851 (2004), as shipped with pyscf):
    primitive Gaussian exponents (Bohr⁻²) and contraction coefficients of the normalised
    primitives, in pyscf's convention. orbtool.tb.overlaps computes two-centre overlaps from them.
    """
    import pyscf
    from pyscf import gto
    from pyscf.data import elements

    table = {}
    for sym in symbols:
        config = elements.CONFIGURATION[elements.charge(sym)]
        entry = {}
        for l, name in ((0, "s"), (1, "p")):
            n_occ = -(-config[l] // (2 * (2 * l + 1)))
            column = n_occ - 1 if (l == 0 or config[1] > config_core_p(sym)) else n_occ
            blocks = [b for b in gto.basis.load(BASIS, sym) if b[0] == l]
            rows = np.array(blocks[0][1:], dtype=float)
            entry[name] = {"exponents": rows[:, 0].tolist(), "coefficients": rows[:, 1 + column].tolist(),
                           "contraction": int(column), "occupied": bool(column < n_occ)}
        table[sym] = entry
    doc = {"description": "valence s and p orbital shapes: ANO-RCC contractions (Roos et al. 2004) as shipped "
                          f"with pyscf {pyscf.__version__}; exponents in Bohr^-2, coefficients of normalised "
                          "primitive Gaussians; 'occupied' false = the lowest empty p of the atom",
           "script": "scripts/make_term_values.py --orbitals", "date": datetime.date.today().isoformat(),
           "elements": table}
    Path(out).write_text(json.dumps(doc, indent=1) + "\n")


def config_core_p(symbol):
    """p electrons of the atom's core (noble-gas core, plus nothing else): a valence p shell is occupied
    when the atom has more p electrons than its core."""
    from pyscf.data import elements

    z = elements.charge(symbol)
    core = max(n for n in (0, 2, 10, 18, 36, 54, 86) if n < z) if z > 2 else 0
    return elements.CONFIGURATION[core][1] if core else 0


def write(out, table):
    import pyscf

    doc = {
        "description": "Valence orbital energies (eV, negative = bound) of neutral spherical atoms",
        "method": f"pyscf {pyscf.__version__} AtomSphAverageRKS, xc={XC}, basis={BASIS} (contractions per "
                  f"element and column under '<column>_basis'), grid={GRID}; "
                  "'nr' non-relativistic, 'sr' scalar-relativistic sfx2c1e",
        "script": "scripts/make_term_values.py",
        "date": datetime.date.today().isoformat(),
        "units": "eV (Hartree copies under *_hartree)",
        "elements": table,
    }
    Path(out).write_text(json.dumps(doc, indent=1, ensure_ascii=False) + "\n")


if __name__ == "__main__":
    sys.exit(main())
