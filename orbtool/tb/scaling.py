"""Distance laws for two-centre integrals: V(d) for every Slater–Koster channel.

Three laws share one interface, ``law.radial(d, n=..., q=...) -> (nbond,)`` (a dimensionless factor
equal to 1 at the reference distance ``d0``) and ``law.prefactors(pairs) -> {channel: V(d0) eV}``:

* Harrison's universal form V = η ħ²/(mₑ d²) — W. A. Harrison, *Electronic Structure and the
  Properties of Solids* (Freeman 1980; Dover 1989), Solid State Table; S. Froyen & W. A. Harrison,
  Phys. Rev. B 20, 2420 (1979). orbtool uses the **1979/1980 η set** (ssσ −1.40, spσ +1.84, ppσ
  +3.24, ppπ −0.81), the set paired with Harrison's 1980 term values. d couplings follow Harrison &
  Froyen, Phys. Rev. B 21, 3214 (1980): V_ldm = η_ldm ħ² r_d^{3/2}/(mₑ d^{7/2}), V_ddm = η_ddm ħ² r_d³/(mₑ d⁵).
* a power law V(d0) (d0/d)^n with free n (Harrison's is n = 2);
* an exponential V(d0) exp(−q (d − d0));
* ``"overlap"``: element-aware Wolfsberg–Helmholz couplings from atomic valence-orbital overlaps
  (:mod:`orbtool.tb.overlaps`) at each pair's reference distance, scaled as (d_ref/d)^n when the
  geometry changes.

Each may carry a smooth cutoff: factor 1 below ``r_cut − width`` falling as cos² to 0 at ``r_cut``.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..errors import ModelError
from ..units import HBAR2_OVER_ME

__all__ = ["HARRISON_ETA_1980", "HARRISON_ETA_1999", "HARRISON_ETA_D", "harrison_coupling",
           "DistanceLaw", "make_law"]

#: Froyen & Harrison (1979) / Harrison (1980) η (dimensionless); REFERENCES: two transcriptions agree.
HARRISON_ETA_1980 = {"ss_sigma": -1.40, "sp_sigma": 1.84, "pp_sigma": 3.24, "pp_pi": -0.81}
#: Revised set of Harrison, *Elementary Electronic Structure* (World Scientific 1999); not the default.
HARRISON_ETA_1999 = {"ss_sigma": -1.32, "sp_sigma": 1.42, "pp_sigma": 2.22, "pp_pi": -0.63}
#: d couplings, Harrison & Froyen (1980): η_sd, η_pd as in Harrison's 1980 table; η_dd = (−45, 30, −15/2)/π.
HARRISON_ETA_D = {"sd_sigma": -3.16, "pd_sigma": -2.95, "pd_pi": 1.36,
                  "dd_sigma": -45 / np.pi, "dd_pi": 30 / np.pi, "dd_delta": -7.5 / np.pi}


def harrison_coupling(channel: str, d, eta_set: str = "1980", r_d_left=None, r_d_right=None):
    """Harrison's universal coupling (eV) of one channel at distance ``d`` (Å).

    s/p channels: V = η ħ²/(mₑ d²). sd/pd: V = η ħ² r_d^{3/2}/(mₑ d^{7/2}) (r_d of the d atom);
    dd: V = η ħ² (r_dA r_dB)^{3/2}/(mₑ d⁵). ħ²/mₑ = 7.619964 eV Å² (CODATA via ASE).
    """
    d = np.asarray(d, dtype=float)
    if channel in HARRISON_ETA_D:
        eta = HARRISON_ETA_D[channel]
        if channel.startswith("dd"):
            if r_d_left is None or r_d_right is None:
                raise ModelError(f"Harrison {channel} needs the d-state radius r_d of both atoms")
            return eta * HBAR2_OVER_ME * (r_d_left * r_d_right) ** 1.5 / d ** 5
        rd = r_d_right if r_d_right is not None else r_d_left
        if rd is None:
            raise ModelError(f"Harrison {channel} needs the d-state radius r_d of the d atom")
        return eta * HBAR2_OVER_ME * rd ** 1.5 / d ** 3.5
    table = {"1980": HARRISON_ETA_1980, "1999": HARRISON_ETA_1999}.get(str(eta_set))
    if table is None:
        raise ModelError(f"unknown Harrison η set {eta_set!r}; expected '1980' or '1999'")
    if channel not in table:
        raise ModelError(f"no Harrison η for channel {channel!r}")
    return table[channel] * HBAR2_OVER_ME / d ** 2


def smooth_cutoff(d, r_cut: float | None, width: float):
    """1 for d < r_cut − width, cos² taper to 0 at r_cut, 0 beyond (dimensionless)."""
    d = np.asarray(d, dtype=float)
    if r_cut is None:
        return np.ones_like(d)
    x = np.clip((d - (r_cut - width)) / width, 0.0, 1.0)
    return np.cos(0.5 * np.pi * x) ** 2


@dataclass(frozen=True)
class DistanceLaw:
    """How couplings fall with distance.

    Attributes
    ----------
    kind : {"harrison", "power", "exp"}
        ``harrison`` is the power law with n = 2 and Harrison's prefactors at ``d0``.
    d0 : float
        Reference distance (Å) at which prefactors are given (default: mean first-shell bond length).
    n : float
        Power-law exponent (power / harrison; harrison default 2).
    q : float
        Exponential decay constant (1/Å).
    r_cut, cut_width : float or None
        Smooth cutoff radius and taper width (Å); ``None`` = no cutoff.
    eta_set : str
        Harrison η set used for the prefactors ("1980" default, or "1999").
    v0 : dict
        Optional explicit prefactors {channel: V(d0) eV}; overrides Harrison's.
    """

    kind: str = "harrison"
    d0: float = 2.35
    n: float = 2.0
    q: float = 1.0
    r_cut: float | None = None
    cut_width: float = 0.5
    eta_set: str = "1980"
    v0: dict = field(default_factory=dict)

    def __post_init__(self):
        if self.kind not in ("harrison", "power", "exp", "overlap"):
            raise ModelError(f"unknown scaling {self.kind!r}; expected 'harrison', 'power', 'exp' or 'overlap'")
        if not self.d0 > 0:
            raise ModelError(f"reference distance d0 must be positive, got {self.d0}")

    def radial(self, d, n=None, q=None):
        """Dimensionless factor V(d)/V(d0) including the cutoff."""
        d = np.asarray(d, dtype=float)
        if self.kind == "exp":
            q = self.q if q is None else q
            f = np.exp(-q * (d - self.d0))
        else:
            n = self.n if n is None else n
            f = (self.d0 / d) ** n
        return f * smooth_cutoff(d, self.r_cut, self.cut_width)

    def log_derivative(self, d):
        """∂ ln V / ∂ n (power, harrison) or ∂ ln V / ∂ q (exp) at distance d."""
        d = np.asarray(d, dtype=float)
        return -(d - self.d0) if self.kind == "exp" else np.log(self.d0 / d)

    def prefactor(self, channel: str, r_d_left=None, r_d_right=None) -> float:
        """V at d0 (eV) for one channel: explicit ``v0`` first, else Harrison's universal value."""
        if channel in self.v0:
            return float(self.v0[channel])
        if self.kind == "overlap":
            raise ModelError("the overlap (Wolfsberg–Helmholz) law has no element-free prefactor: it is "
                             "evaluated per atom pair (orbtool.tb.overlaps)")
        return float(harrison_coupling(channel, self.d0, self.eta_set, r_d_left, r_d_right))

    def describe(self) -> str:
        law = {"harrison": f"Harrison η ħ²/(m d²) ({self.eta_set} η set)",
               "power": f"power law (d0/d)^n, n={self.n:g}",
               "exp": f"exponential exp(-q(d-d0)), q={self.q:g}/Å",
               "overlap": f"Wolfsberg–Helmholz K S (H_ii+H_jj)/2, ANO valence overlaps per element pair at the "
                          f"reference distances, (d_ref/d)^n for geometry changes, n={self.n:g}"}[self.kind]
        cut = "" if self.r_cut is None else f", cutoff {self.r_cut:g} Å (taper {self.cut_width:g} Å)"
        return f"{law}, d0={self.d0:.3f} Å{cut}"


def make_law(scaling, default_d0: float, **kw) -> DistanceLaw:
    """A :class:`DistanceLaw` from a name or an existing law (d0 = ``default_d0`` unless given)."""
    if isinstance(scaling, DistanceLaw):
        return scaling
    if not isinstance(scaling, str):
        raise ModelError(f"scaling must be 'harrison', 'power', 'exp' or a DistanceLaw, got {scaling!r}")
    d0 = float(kw.pop("d0", default_d0))
    return DistanceLaw(kind=scaling, d0=d0, **kw)
