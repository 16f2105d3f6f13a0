"""The plane-wave code's band-projection file (PROCAR).

Layout (VASP manual, "PROCAR" page)::

    PROCAR lm decomposed
    # of k-points:    4         # of bands:   12         # of ions:    2

     k-point     1 :    0.00000000 0.00000000 0.00000000     weight = 0.25000000

    band     1 # energy   -6.12345678 # occ.  2.00000000

    ion      s     py     pz     px    dxy    dyz    dz2    dxz  x2-y2    tot
        1  0.123  0.001 ...                                             0.140
        2  ...
    tot    ...

A spin-polarised file repeats everything from the ``# of k-points`` line for
spin down. Non-collinear files follow each ion table with three more (m_x,
m_y, m_z) and LORBIT = 12 files with phase tables; both are skipped (only the
first table of a band is read). Fortran fixed-width k-point coordinates may
run together (``-0.50000000-0.25000000``); they are split by pattern.
"""

from __future__ import annotations

import re

import numpy as np

from .._validate import occupation_warning
from ..errors import InputFormatError
from ..spectra import BandProjections
from ._files import read_text
from ._numbers import floats, table, to_float

__all__ = ["read_procar"]

_COUNTS = re.compile(r"#\s*of k-points:\s*(\d+)\s+#\s*of bands:\s*(\d+)\s+#\s*of ions:\s*(\d+)")
_KPT = re.compile(r"^\s*k-point\s+(\d+)\s*:(.*?)weight\s*=\s*(\S+)")
_BAND = re.compile(r"^\s*band\s+(\d+)\s*#\s*energy\s+(\S+)\s*#\s*occ\.\s*(\S+)")
_FLOAT = re.compile(r"[-+]?\d*\.\d+(?:[eE][-+]?\d+)?")
_ORB = {"s": "s", "p": "p", "d": "d", "f": "f", "py": "py", "pz": "pz", "px": "px", "dxy": "dxy", "dyz": "dyz",
        "dz2": "dz2", "dxz": "dxz", "dx2": "dx2-y2", "x2-y2": "dx2-y2", "dx2-y2": "dx2-y2",
        "fy3x2": "f-3", "fxyz": "f-2", "fyz2": "f-1", "fz3": "f0", "fxz2": "f1", "fzx2": "f2", "fx3": "f3"}


class _Lines:
    def __init__(self, lines, path):
        self.lines, self.path, self.i = lines, path, 0

    def seek(self, pred, what):
        """Advance to the next line satisfying ``pred``; return it (index in self.i)."""
        n = len(self.lines)
        while self.i < n:
            ln = self.lines[self.i]
            if pred(ln):
                return ln
            self.i += 1
        raise InputFormatError(self.path, n, f"file ended before {what}", field=what)


def _starts(word):
    return lambda ln: ln.lstrip().startswith(word)


def read_procar(path, atoms=None) -> BandProjections:
    """Read a PROCAR into :class:`BandProjections` (energies eV, weights dimensionless).

    Parameters
    ----------
    path : file (optionally compressed)
    atoms : ase.Atoms, optional
        The structure; by default a CONTCAR/POSCAR beside the file when its atom count fits.
    """
    lines = read_text(path).splitlines()
    if not lines or not lines[0].startswith("PROCAR"):
        raise InputFormatError(path, 1, "expected the first line to start with 'PROCAR'", field="header")
    _check_last_line(lines, path)
    fast = _read_fast(lines, path)
    spins, orbitals = fast if fast is not None else _read_careful(lines, path)
    nspin = len(spins)
    kp, kw = spins[0][0], spins[0][1]
    if nspin == 2 and not np.allclose(spins[1][0], kp):
        raise InputFormatError(path, None, "the two spin blocks have different k-points", field="k-point")
    energies = np.stack([s[2] for s in spins])
    occ = np.stack([s[3] for s in spins])
    weights = np.stack([s[4] for s in spins])
    if not kw.sum() > 0:
        raise InputFormatError(path, None, "k-point weights sum to zero", field="k-point weight")
    if not np.any(weights):
        raise InputFormatError(path, None, "every projection weight is zero: the file holds no projections "
                               "(was the projection switched off?), so no state character can be read",
                               field="weights")
    meta = {"format": "procar", "nspin": nspin}
    occupation_warning(occ, nspin, path, meta)
    if atoms is None:
        from .doscar import find_structure_beside
        atoms, found = find_structure_beside(path)
        if atoms is not None and len(atoms) != weights.shape[3]:
            atoms = None
    return BandProjections(kpoints=kp, kweights=kw, energies=energies, occupations=occ, weights=weights,
                           orbitals=tuple(_ORB[o] for o in orbitals), atoms=atoms, fermi=None, source=str(path),
                           meta=meta)


def _check_last_line(lines, path):
    """A file cut inside its last table row (a run still writing) is refused: the last row must have
    as many fields as the ``ion ...`` header above it."""
    n = len(lines)
    while n and not lines[n - 1].strip():
        n -= 1
    if not n:
        return
    last = lines[n - 1].split()
    if not (last[0] == "tot" or last[0].isdigit()):
        return
    for i in range(n - 2, max(n - 2000, 0) - 1, -1):
        if lines[i].lstrip().startswith("ion"):
            want = len(lines[i].split())
            if len(last) != want:
                raise InputFormatError(path, n, f"the last line has {len(last)} fields, the table header {want}: "
                                       "the file ends inside a line (a run still writing?)", field="ion table")
            return


def _read_careful(lines, path):
    """Line-by-line reader: slower, but it names the first line that breaks the layout."""
    cur = _Lines(lines, path)
    cur.i = 1
    spins = []
    orbitals = None
    dims = None
    while True:
        # a spin block
        try:
            ln = cur.seek(_starts("# of k-points"), "the '# of k-points' line")
        except InputFormatError:
            if spins:
                break
            raise
        m = _COUNTS.search(ln)
        if m is None:
            raise InputFormatError(path, cur.i + 1, "expected '# of k-points: N # of bands: N # of ions: N'",
                                   field="counts")
        nk, nb, nat = (int(g) for g in m.groups())
        if min(nk, nb, nat) < 1:
            raise InputFormatError(path, cur.i + 1, f"counts must be positive, got {nk}, {nb}, {nat}", field="counts")
        if dims is not None and dims != (nk, nb, nat):
            raise InputFormatError(path, cur.i + 1, f"second spin block has counts {(nk, nb, nat)}, the first "
                                   f"{dims}", field="counts")
        if len(spins) == 2:
            raise InputFormatError(path, cur.i + 1, "more than two spin blocks", field="counts")
        dims = (nk, nb, nat)
        if len(lines) < nk * nb * (nat + 3):
            raise InputFormatError(path, len(lines), f"file too short for {nk} k-points × {nb} bands × {nat} ions",
                                   field="counts")
        cur.i += 1
        kp = np.empty((nk, 3))
        kw = np.empty(nk)
        en = np.empty((nk, nb))
        oc = np.empty((nk, nb))
        wt = None
        for k in range(nk):
            ln = cur.seek(_starts("k-point"), f"k-point {k + 1}")
            km = _KPT.match(ln)
            coords = _FLOAT.findall(km.group(2)) if km else []
            if km is None or int(km.group(1)) != k + 1 or len(coords) != 3:
                raise InputFormatError(path, cur.i + 1, f"expected 'k-point {k + 1} : k1 k2 k3 weight = w'",
                                       field="k-point")
            kp[k] = [float(c) for c in coords]
            kw[k] = to_float(km.group(3), path, cur.i + 1, "k-point weight")
            cur.i += 1
            for b in range(nb):
                ln = cur.seek(lambda s: s.lstrip().startswith(("band", "k-point", "# of k-points")), f"band {b + 1}")
                bm = _BAND.match(ln)
                if bm is None or int(bm.group(1)) != b + 1:
                    raise InputFormatError(path, cur.i + 1, f"expected 'band {b + 1} # energy E # occ. f' of "
                                           f"k-point {k + 1}", field="band")
                en[k, b] = to_float(bm.group(2), path, cur.i + 1, "band energy")
                oc[k, b] = to_float(bm.group(3), path, cur.i + 1, "occupation")
                cur.i += 1
                ln = cur.seek(lambda s: s.strip() != "", "the 'ion' header")
                head = ln.split()
                if not head or head[0] != "ion" or head[-1] != "tot":
                    raise InputFormatError(path, cur.i + 1, "expected the 'ion s py … tot' header", field="ion table")
                names = head[1:-1]
                if orbitals is None:
                    bad = [x for x in names if x not in _ORB]
                    if bad or not names:
                        raise InputFormatError(path, cur.i + 1, f"unknown orbital columns {bad}", field="ion table")
                    orbitals = names
                    wt = np.empty((nk, nb, nat, len(names)))
                elif names != orbitals:
                    raise InputFormatError(path, cur.i + 1, f"orbital columns {names} differ from {orbitals}",
                                           field="ion table")
                elif wt is None:
                    wt = np.empty((nk, nb, nat, len(names)))
                rows = lines[cur.i + 1:cur.i + 1 + nat]
                if len(rows) < nat:
                    raise InputFormatError(path, len(lines), "file ended inside an ion table", field="ion table")
                block = table(rows, path, cur.i + 2, len(names) + 2, f"ion table of band {b + 1}, k-point {k + 1}")
                if not np.array_equal(block[:, 0], np.arange(1, nat + 1)):
                    raise InputFormatError(path, cur.i + 2, f"ion numbers must run 1..{nat}", field="ion table")
                wt[k, b] = block[:, 1:-1]
                cur.i += 1 + nat
                # skip the 'tot' row and any non-collinear or phase tables up to the next band
                while cur.i < len(lines) and not lines[cur.i].lstrip().startswith(("band", "k-point", "# of k-points")):
                    cur.i += 1
        spins.append((kp, kw, en, oc, wt))
    return spins, orbitals


def _read_fast(lines, path):
    """Every ion table parsed in one call; None if anything looks off (the careful reader then runs)."""
    starts = [i for i, ln in enumerate(lines) if ln.startswith("# of k-points")]
    if not 1 <= len(starts) <= 2:
        return None
    bounds = starts + [len(lines)]
    spins, orbitals, dims = [], None, None
    for sb in range(len(starts)):
        m = _COUNTS.search(lines[starts[sb]])
        if m is None:
            return None
        nk, nb, nat = (int(g) for g in m.groups())
        if min(nk, nb, nat) < 1 or (dims is not None and dims != (nk, nb, nat)):
            return None
        dims = (nk, nb, nat)
        seg = range(starts[sb] + 1, bounds[sb + 1])
        kl = [i for i in seg if lines[i].lstrip().startswith("k-point")]
        bl = [i for i in seg if lines[i].startswith("band")]
        if len(kl) != nk or len(bl) != nk * nb:
            return None
        if np.any(np.diff(np.searchsorted(bl, kl + [bounds[sb + 1]])) != nb):
            return None
        kp, kw = np.empty((nk, 3)), np.empty(nk)
        for k, i in enumerate(kl):
            km = _KPT.match(lines[i])
            coords = _FLOAT.findall(km.group(2)) if km else []
            if km is None or int(km.group(1)) != k + 1 or len(coords) != 3:
                return None
            kp[k] = [float(c) for c in coords]
            kw[k] = float(km.group(3))
        en, oc = np.empty(nk * nb), np.empty(nk * nb)
        rows = []
        for j, i in enumerate(bl):
            bm = _BAND.match(lines[i])
            if bm is None or int(bm.group(1)) != j % nb + 1:
                return None
            try:
                en[j], oc[j] = float(bm.group(2)), float(bm.group(3))
            except ValueError:
                return None
            h = i + 1
            while h < len(lines) and not lines[h].strip():
                h += 1
            head = lines[h].split() if h < len(lines) else []
            if len(head) < 3 or head[0] != "ion" or head[-1] != "tot":
                return None
            if orbitals is None:
                orbitals = head[1:-1]
                if any(o not in _ORB for o in orbitals):
                    return None
            elif head[1:-1] != orbitals:
                return None
            rows.extend(lines[h + 1:h + 1 + nat])
        ncol = len(orbitals) + 2
        try:
            arr = floats(rows, path, 1, "ion tables")
        except InputFormatError:
            return None
        if len(rows) != nk * nb * nat or arr.size != len(rows) * ncol or \
                not (np.isfinite(en).all() and np.isfinite(oc).all()):
            return None
        arr = arr.reshape(nk, nb, nat, ncol)
        if not np.array_equal(arr[..., 0], np.broadcast_to(np.arange(1, nat + 1), (nk, nb, nat))):
            return None
        spins.append((kp, kw, en.reshape(nk, nb), oc.reshape(nk, nb), arr[..., 1:-1]))
    return spins, orbitals
