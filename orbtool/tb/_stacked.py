"""All cases of a family fit evaluated in one batch (hybrid models of equal size; internal).

The per-case loop of the fitter costs Python overhead per case and parameter set; for the reduced
hybrid model the Hamiltonians of every case and every finite-difference parameter set are built as one
(B, ncase, n, n) array and diagonalised with one batched ``eigvalsh``. The algebra is the one of
``CompiledCluster._hybrid_h`` (see ``_evaluate.py``); the fitter checks both paths agree.
"""

from __future__ import annotations

import numpy as np

from ._evaluate import fixed_level_index


class StackedHybrid:
    """Stacked evaluator; build with :meth:`make` (returns None when the cases do not qualify)."""

    @classmethod
    def make(cls, problem):
        cases = list(problem.by_case)
        comp = [problem.compiled[c] for c in cases]
        models = [cc.model for cc in comp]
        if any(m.orbitals != "hybrid" or m.host_bands is not None for m in models):
            return None
        shapes = {(len(m.elements), len(m.pairs)) for m in models}
        laws = {(m.law.kind, m.law.d0, m.law.r_cut, m.law.cut_width) for m in models}
        if len(shapes) != 1 or len(laws) != 1 or any(not np.array_equal(m.pairs, models[0].pairs) for m in models):
            return None
        self = cls()
        self.cases, self.law = cases, models[0].law
        self.B_ss = np.stack([cc.B_ss[0] for cc in comp])  # (ncase, npair)
        self.B_sp = np.stack([cc.B_sp[0] for cc in comp])
        self.B_pp = np.stack([cc.B_pp[0] for cc in comp])
        self.d = np.stack([cc.c.pair_distance[0] for cc in comp])
        self.eps_s = np.array([[m.onsite[e][0] for e in m.elements] for m in models])  # (ncase, natom)
        self.eps_p = np.array([[m.onsite[e][1] for e in m.elements] for m in models])
        self.pairs = models[0].pairs
        natom = len(models[0].elements)
        self.index = np.array([fixed_level_index(m, natom) for m in models])
        col = problem.index

        def column(base, c):
            return col.get(f"{base}@{c}", col.get(base))

        xname = "q" if self.law.kind == "exp" else "n"
        self.cols = {b: np.array([column(b, c) for c in cases]) for b in ("vbm", "coupling_scale", xname,
                                                                          "s_fraction")}
        self.xname = xname
        self.shift_cols = np.array([[column(f"shift_{e}", c) for e in m.elements] for c, m in zip(cases, models)])
        return self

    def values(self, X):
        """(B, ncase, 3): level above VBM, s fraction, first-shell fraction (= 1)."""
        X = np.atleast_2d(X)
        vbm = X[:, self.cols["vbm"]]
        scale = X[:, self.cols["coupling_scale"]]
        x = X[:, self.cols[self.xname]]
        f = np.clip(X[:, self.cols["s_fraction"]], 0.0, 1.0)
        shift = X[:, self.shift_cols]  # (B, ncase, natom)
        if self.law.kind == "exp":
            g = self.law.radial(self.d[None], q=x[..., None])
        else:
            g = self.law.radial(self.d[None], n=x[..., None])
        fe = f[..., None]
        beta = scale[..., None] * g * (fe * self.B_ss + np.sqrt(fe * (1 - fe)) * self.B_sp + (1 - fe) * self.B_pp)
        B, nc = f.shape
        natom = self.eps_s.shape[1]
        H = np.zeros((B, nc, natom, natom))
        i, j = self.pairs.T
        H[..., i, j] = beta
        H[..., j, i] = beta
        k = np.arange(natom)
        H[..., k, k] = fe * self.eps_s + (1 - fe) * self.eps_p + shift
        E = np.linalg.eigvalsh(H)
        level = np.take_along_axis(E, self.index[None, :, None], axis=2)[..., 0]
        return np.stack([level - vbm, f, np.ones_like(f)], axis=-1)
