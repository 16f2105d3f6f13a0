"""Geometry edits around a located vacancy, for what-if questions.

Every function takes a :class:`~orbtool.analysis.vacancy_site.VacancySite`
and returns a NEW ``ase.Atoms`` built from a copy of the relaxed defect cell;
the site, its host and defect structures are never modified. Each result
records what was done in ``atoms.info["orbtool_edit"]`` (a tuple of strings).
The :class:`VacancySite` methods of the same names call these.
"""

from __future__ import annotations

import numpy as np
from ase.data import atomic_numbers

from ..errors import GeometryError

__all__ = ["scale_shell", "breathe", "distort", "swap_element"]


def _edited(site, displacements: dict, note: str):
    atoms = site.defect.copy()
    pos = atoms.get_positions()
    for idx, dv in displacements.items():
        pos[idx] += dv
    atoms.set_positions(pos)
    atoms.info = dict(atoms.info)
    atoms.info["orbtool_edit"] = tuple(atoms.info.get("orbtool_edit", ())) + (note,)
    return atoms


def _shell_moves(site, shell: int, pattern) -> dict:
    if not 1 <= shell <= len(site.shells):
        raise GeometryError(f"shell must be between 1 and {len(site.shells)} (shells found), got {shell}")
    moves: dict[int, np.ndarray] = {}
    for nb, dv in zip(site.shells[shell - 1], pattern):
        if nb.index in moves:
            raise GeometryError(f"atom {nb.index} appears twice in shell {shell} (two periodic images): "
                                "the cell is too small to move the shell rigidly; use a larger supercell")
        moves[nb.index] = np.asarray(dv, float)
    return moves


def scale_shell(site, factor: float, shell: int = 1):
    """New Atoms with one shell's distances to the site multiplied by ``factor``.

    Each atom of the shell moves along its site→atom vector:
    r → factor · r (relaxed positions as the starting point).
    """
    factor = float(factor)
    if not factor > 0:
        raise GeometryError(f"scale factor must be positive, got {factor}")
    vec = [nb.vector for nb in site.shells[shell - 1]] if 1 <= shell <= len(site.shells) else []
    moves = _shell_moves(site, shell, [(factor - 1.0) * v for v in vec])
    return _edited(site, moves, f"scale_shell({factor:g}, shell={shell})")


def breathe(site, fraction: float):
    """New Atoms with the first shell moved radially by ``fraction`` × its distance to the site.

    ``fraction = -0.05`` moves every first neighbour 5 % of its distance inward.
    """
    fraction = float(fraction)
    if not fraction > -1.0:
        raise GeometryError(f"breathe fraction must be > -1 (atoms would cross the site), got {fraction}")
    atoms = scale_shell(site, 1.0 + fraction, shell=1)
    atoms.info["orbtool_edit"] = atoms.info["orbtool_edit"][:-1] + (f"breathe({fraction:g})",)
    return atoms


def distort(site, mode, amplitude: float):
    """New Atoms with the first shell displaced along a pattern.

    Parameters
    ----------
    mode : str or (n_first, 3) array
        A key of :meth:`distortion_modes` or an explicit pattern (normalised here).
    amplitude : float, Å
        Norm of the whole first-shell displacement (Σ_i |Δr_i|²)^½.
    """
    if isinstance(mode, str):
        modes = site.distortion_modes()
        if mode not in modes:
            raise GeometryError(f"unknown distortion mode {mode!r}; this site has {sorted(modes)}")
        pattern = modes[mode]
    else:
        pattern = np.asarray(mode, float)
        if pattern.shape != (len(site.first_shell), 3):
            raise GeometryError(f"a distortion pattern must have shape ({len(site.first_shell)}, 3) "
                                f"(one vector per first-shell atom), got {pattern.shape}")
    norm = np.linalg.norm(pattern)
    if not norm > 0:
        raise GeometryError("a distortion pattern must not be all zero")
    moves = _shell_moves(site, 1, float(amplitude) * pattern / norm)
    label = mode if isinstance(mode, str) else "custom"
    return _edited(site, moves, f"distort({label}, {float(amplitude):g})")


def swap_element(site, old: str, new: str, shell: int | None = None):
    """New Atoms with every ``old`` atom replaced by ``new``.

    ``shell=None`` swaps in the whole defect cell (a chemistry change of the
    compound); ``shell=k`` only in neighbour shell k. Positions are kept.
    """
    for el in (old, new):
        if el not in atomic_numbers:
            raise GeometryError(f"{el!r} is not a chemical symbol (expected e.g. 'Zn', 'O')")
    symbols = list(site.defect.get_chemical_symbols())
    if shell is None:
        targets = [i for i, s in enumerate(symbols) if s == old]
    else:
        if not 1 <= shell <= len(site.shells):
            raise GeometryError(f"shell must be between 1 and {len(site.shells)}, got {shell}")
        targets = sorted({nb.index for nb in site.shells[shell - 1] if nb.element == old})
    if not targets:
        where = "the defect cell" if shell is None else f"shell {shell}"
        there = set(symbols) if shell is None else {nb.element for nb in site.shells[shell - 1]}
        raise GeometryError(f"no {old} atom in {where}; elements there: {sorted(there)}")
    for i in targets:
        symbols[i] = new
    atoms = _edited(site, {}, f"swap_element({old}->{new}, shell={shell})")
    atoms.set_chemical_symbols(symbols)
    return atoms
