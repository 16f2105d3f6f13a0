"""Per-kind projected DOS files of the Gaussian-and-plane-waves code (CP2K ``&PDOS``).

Layout (CP2K manual, ``FORCE_EVAL/DFT/PRINT/PDOS``): one file per atomic kind,
``<project>-k<N>-1.pdos`` (``-ALPHA_k<N>-1.pdos`` / ``-BETA_k<N>-1.pdos`` for the two
spins), starting ``# Projected DOS for atomic kind El at iteration step i = n,
E(Fermi) = x a.u.``, a column line ``# MO Eigenvalue [a.u.] Occupation s p d …``
(or m-resolved names with ``COMPONENTS``), then one row per molecular orbital:
index, eigenvalue (hartree), occupation and the projection on each l (or lm)
of that kind. These are per-state weights, not a DOS: orbtool broadens them
with normalised Gaussians (width ``sigma``, eV) on a regular energy grid; a
closed-shell file counts two electrons per state.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np

from ..errors import InputFormatError
from ..spectra import ProjectedDOS
from ..units import HARTREE
from ._files import read_text
from ._numbers import table, to_float

__all__ = ["read_cp2k_pdos"]

_HEAD = re.compile(r"#\s*Projected DOS for atomic kind\s+(\S+)\s+at iteration step i =\s*\d+,\s*"
                   r"E\(Fermi\)\s*=\s*(\S+)\s*a\.u\.")
_NAMES = {"s": "s", "p": "p", "d": "d", "f": "f", "px": "px", "py": "py", "pz": "pz",
          "d-2": "dxy", "d-1": "dyz", "d0": "dz2", "d+1": "dxz", "d+2": "dx2-y2",
          **{f"f{m:+d}".replace("+0", "0"): f"f{m}" for m in range(-3, 4)}}


def _read_one(path):
    lines = read_text(path).splitlines()
    if len(lines) < 3:
        raise InputFormatError(path, len(lines) + 1, "expected two header lines and at least one row")
    m = _HEAD.search(lines[0])
    if m is None:
        raise InputFormatError(path, 1, "expected '# Projected DOS for atomic kind El at iteration step i = n, "
                               "E(Fermi) = x a.u.'", field="header")
    kind, fermi = m.group(1), to_float(m.group(2), path, 1, "E(Fermi)") * HARTREE
    cols = lines[1].lstrip("#").split()
    try:
        start = cols.index("Occupation") + 1
    except ValueError:
        raise InputFormatError(path, 2, "expected a column line with 'Occupation'", field="columns") from None
    orbs = []
    for c in cols[start:]:
        if c not in _NAMES:
            raise InputFormatError(path, 2, f"unknown orbital column {c!r}", field="columns")
        orbs.append(_NAMES[c])
    body = lines[2:]
    while body and not body[-1].strip():
        body.pop()
    if not body:
        raise InputFormatError(path, 3, "no orbital rows after the two header lines", field="orbital rows")
    data = table(body, path, 3, 3 + len(orbs), "orbital rows")
    return kind, fermi, orbs, data


def _element(kind: str) -> str:
    m = re.match(r"[A-Z][a-z]?", kind)
    return m.group(0) if m else "X"


def read_cp2k_pdos(path, sigma: float = 0.1, step: float = 0.01) -> ProjectedDOS:
    """Read one ``*-k<N>-1.pdos`` file or a folder of them; broaden onto an energy grid.

    Parameters
    ----------
    path : file or folder
    sigma : Gaussian broadening (standard deviation), eV
    step : energy-grid spacing, eV

    Returns
    -------
    ProjectedDOS with per-kind channels (``atom = -1``, element from the kind name), energies eV.
    """
    if not sigma > 0 or not step > 0:
        raise InputFormatError(path, None, "sigma and step must be positive", field="sigma")
    p = Path(path)
    files = sorted(f for f in p.iterdir() if f.name.endswith(".pdos")) if p.is_dir() else [p]
    if not files:
        raise InputFormatError(p, None, "no '*.pdos' files found")
    parts = []
    for f in files:
        spin = 1 if "BETA" in f.name else 0
        parts.append((spin, f, *_read_one(f)))
    spins = {s for s, *_ in parts}
    nspin = 2 if spins == {0, 1} else 1
    if nspin == 1 and any("ALPHA" in f.name or "BETA" in f.name for _, f, *_ in parts):
        raise InputFormatError(p, None, "only one spin (ALPHA or BETA) of a spin-polarised run was found",
                               field="spin")
    eig = np.concatenate([d[:, 1] for *_, d in parts]) * HARTREE
    lo, hi = eig.min() - 5 * sigma, eig.max() + 5 * sigma
    n = int(np.ceil((hi - lo) / step)) + 1
    if n > 2_000_000:
        raise InputFormatError(p, None, f"energy range {hi - lo:.1f} eV needs {n} points at step {step} eV",
                               field="step")
    grid = lo + step * np.arange(n)
    half = min(int(np.ceil(10 * sigma / step)), n)
    per_state = 2.0 if nspin == 1 else 1.0
    channels, values = [], []
    fermis = []
    for spin, f, kind, fermi, orbs, data in parts:
        fermis.append(fermi)
        e = data[:, 1] * HARTREE
        w = data[:, 3:] * per_state
        dos = np.zeros((w.shape[1], n))
        # each Gaussian is evaluated only within ±10 σ of its state (the tail beyond is below
        # e^-50 of the peak), in blocks of states, so time and memory scale with the states,
        # not with states × energy points
        offs = np.arange(-half, half + 1)
        centre = np.rint((e - lo) / step).astype(np.int64)
        rows = max(1, 4_000_000 // offs.size)
        for k in range(0, e.size, rows):
            idx = centre[k:k + rows, None] + offs
            ok = (idx >= 0) & (idx < n)
            idx = np.clip(idx, 0, n - 1)
            gauss = np.exp(-0.5 * ((grid[idx] - e[k:k + rows, None]) / sigma) ** 2) / (sigma * np.sqrt(2 * np.pi))
            gauss *= ok
            for j in range(w.shape[1]):
                dos[j] += np.bincount(idx.ravel(), weights=(w[k:k + rows, j, None] * gauss).ravel(), minlength=n)
        for j, orb in enumerate(orbs):
            channels.append((-1, _element(kind), orb, spin))
            values.append(dos[j])
    return ProjectedDOS(energies=grid, values=np.array(values), channels=tuple(channels), total=None,
                        fermi=fermis[0], nspin=nspin, source=str(p),
                        meta={"format": "cp2k-pdos", "broadening_sigma_eV": sigma, "step_eV": step,
                              "kinds": sorted({x[2] for x in parts})})
