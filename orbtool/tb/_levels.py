"""The result of diagonalising a cluster: :class:`Levels` (energies, vectors, defect level, labels)."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

__all__ = ["Levels"]


@dataclass(frozen=True, eq=False)
class Levels:
    """Cluster levels for a batch of B parameter sets/geometries.

    Attributes
    ----------
    energies : ndarray (B, nlevel)  eigenvalues, eV, ascending.
    vectors : ndarray (B, nbasis, nlevel)  eigenvectors (columns).
    index : ndarray (B,) int  rank of the defect level.
    level : ndarray (B,)  defect-level energy, eV (model scale, not yet referred to the VBM).
    s_weight, p_weight, d_weight : ndarray (B,)  orbital character of the defect level (sum 1).
    shell1_weight : ndarray (B,)  weight on first-shell atoms; ``dangling_weight`` on the dangling hybrids.
    atom_weight : ndarray (B, natom)  weight per cluster atom (averaged over a degenerate multiplet).
    labeller : callable (b) -> list[str] or None  irrep labels of batch entry b (set by the model);
        read them through :attr:`labels`.
    """

    energies: np.ndarray
    vectors: np.ndarray
    index: np.ndarray
    level: np.ndarray
    s_weight: np.ndarray
    p_weight: np.ndarray
    d_weight: np.ndarray
    shell1_weight: np.ndarray
    dangling_weight: np.ndarray
    atom_weight: np.ndarray
    labeller: object = field(default=None, repr=False)
    _cache: dict = field(default_factory=dict, repr=False)

    @property
    def labels(self) -> list:
        """Irrep labels of every level, one list per batch entry (B lists of nlevel str; lower case,
        '?' where the site symmetry is broken or unknown). Degenerate multiplets are labelled as a whole
        (the characters are summed over the multiplet, so the label never depends on which vectors
        the eigensolver returned). No fit is needed: the labels come from the site's point group."""
        if "labels" not in self._cache:
            B, m = self.energies.shape
            if self.labeller is None:
                self._cache["labels"] = [["?"] * m for _ in range(B)]
            else:
                self._cache["labels"] = [list(self.labeller(b)) for b in range(B)]
        return self._cache["labels"]

    @property
    def label(self) -> list:
        """Label of the defect level of each batch entry."""
        return [lab[int(k)] for lab, k in zip(self.labels, self.index)]
