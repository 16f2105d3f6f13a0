"""Element-aware two-centre couplings: overlaps of real atomic valence orbitals, Wolfsberg–Helmholz.

Harrison's universal couplings depend on the distance only; a heavier cation's more diffuse orbitals
overlap more at the same distance, which they cannot know. Here each element's valence s and p
orbital is its ANO-RCC atomic natural orbital (B. O. Roos et al., J. Phys. Chem. A 108, 2851 (2004);
contracted Gaussians stored in ``orbtool/data/valence_orbitals.json`` by
``scripts/make_term_values.py --orbitals``), two-centre overlaps S_ssσ, S_spσ, S_ppσ, S_ppπ come
from the Gaussian product theorem (S. F. Boys, Proc. R. Soc. A 200, 542 (1950); Obara–Saika
recurrences for l ≤ 1), and the coupling is the Wolfsberg–Helmholz relation
H_ij = K S_ij (H_ii + H_jj)/2 with K = 1.75 (M. Wolfsberg & L. Helmholz, J. Chem. Phys. 20, 837
(1952); K as in R. Hoffmann, J. Chem. Phys. 39, 1397 (1963), from memory).

Sign convention (Slater–Koster, direction from the left atom A to the right atom B along +z):
S_spσ = ⟨s_A|p_z,B⟩ < 0, S_ppσ = ⟨p_z,A|p_z,B⟩ < 0 at bonding distances, S_ssσ, S_ppπ > 0; with
bound (negative) on-site energies the couplings take Harrison's physical signs. The orbitals are
treated as orthogonal in the cluster (the overlap only sets the coupling's size).
"""

from __future__ import annotations

import json
from functools import lru_cache
from importlib import resources

import numpy as np

from ..errors import ModelError

__all__ = ["valence_orbital", "overlaps", "wolfsberg_helmholz", "K_WH"]

K_WH = 1.75
BOHR = 0.52917721090  # Å (CODATA 2018, as ase.units.Bohr)


@lru_cache(maxsize=None)
def _table() -> dict:
    text = resources.files("orbtool.data").joinpath("valence_orbitals.json").read_text(encoding="utf-8")
    return json.loads(text)["elements"]


@lru_cache(maxsize=None)
def valence_orbital(element: str, l: int) -> tuple:
    """(exponents Bohr⁻², coefficients of normalised primitives scaled so the orbital is normalised)."""
    entry = _table().get(element)
    if entry is None:
        raise ModelError(f"no valence-orbital shape for {element!r} (orbtool/data/valence_orbitals.json); "
                         "use scaling='harrison' for it")
    d = entry["sp"[l]]
    a = np.array(d["exponents"], dtype=float)
    c = np.array(d["coefficients"], dtype=float)
    S = _prim(a[:, None], a[None, :], 0.0, l, l, "sigma")
    return a, c / np.sqrt(c @ S @ c)


def _prim(a, b, R, la, lb, kind):
    """Overlap of normalised primitive Gaussians (A at 0, B at R ẑ, R in Bohr)."""
    p = a + b
    K = (np.pi / p) ** 1.5 * np.exp(-a * b / p * R * R)
    na = (2 * a / np.pi) ** 0.75 * (2 * np.sqrt(a)) ** la
    nb = (2 * b / np.pi) ** 0.75 * (2 * np.sqrt(b)) ** lb
    if la == 0 and lb == 0:
        v = K
    elif la == 0 and lb == 1:
        v = K * (-a * R / p)
    elif la == 1 and lb == 0:
        v = K * (b * R / p)
    elif kind == "sigma":
        v = K * (-a * b * R * R / p ** 2 + 0.5 / p)
    else:
        v = K * 0.5 / p
    return na * nb * v


def overlaps(left: str, right: str, d) -> dict:
    """Two-centre overlaps of the valence orbitals of ``left`` (at 0) and ``right`` (at d ẑ, d in Å).

    Returns {"ss_sigma", "sp_sigma" (s on left, p on right), "ps_sigma" (p on left, s on right, as
    ⟨s_right|p_left⟩ in the Slater–Koster sense, i.e. the sp_sigma of the reversed pair),
    "pp_sigma", "pp_pi"} (dimensionless, arrays shaped like d)."""
    R = np.asarray(d, dtype=float) / BOHR
    out = {}
    for name, la, lb, kind in (("ss_sigma", 0, 0, "sigma"), ("sp_sigma", 0, 1, "sigma"),
                               ("ps_sigma", 1, 0, "sigma"), ("pp_sigma", 1, 1, "sigma"), ("pp_pi", 1, 1, "pi")):
        a, ca = valence_orbital(left, la)
        b, cb = valence_orbital(right, lb)
        P = _prim(a[:, None, None], b[None, :, None], R.reshape(1, 1, -1), la, lb, kind)
        out[name] = np.einsum("i,j,ijk->k", ca, cb, P).reshape(R.shape)
    out["ps_sigma"] = -out["ps_sigma"]  # ⟨p_z,A|s_B⟩ = −(s on B, p on A along B→A)
    return out


def wolfsberg_helmholz(left: str, right: str, d, eps_left, eps_right, k: float = K_WH) -> tuple:
    """Couplings (eV) of one pair by H_ij = K S_ij (H_ii + H_jj)/2.

    ``eps_left``/``eps_right`` = (ε_s, ε_p) in eV. Returns (forward, reverse) channel dicts as the
    cluster's prefactor convention wants them: forward = lower-l orbital on the left atom."""
    S = overlaps(left, right, d)
    es_l, ep_l = eps_left[0], eps_left[1]
    es_r, ep_r = eps_right[0], eps_right[1]
    fwd = {"ss_sigma": k * S["ss_sigma"] * (es_l + es_r) / 2, "sp_sigma": k * S["sp_sigma"] * (es_l + ep_r) / 2,
           "pp_sigma": k * S["pp_sigma"] * (ep_l + ep_r) / 2, "pp_pi": k * S["pp_pi"] * (ep_l + ep_r) / 2}
    rev = dict(fwd)
    rev["sp_sigma"] = k * S["ps_sigma"] * (ep_l + es_r) / 2
    return ({c: float(v) for c, v in fwd.items()}, {c: float(v) for c, v in rev.items()})
