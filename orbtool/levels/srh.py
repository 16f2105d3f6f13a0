"""Shockley–Read–Hall recombination through a single trap level.

Net recombination rate through traps at ``E_t``

.. math::

   U = \\frac{np - n_i^2}{\\tau_p (n + n_1) + \\tau_n (p + p_1)},\\qquad
   n_1 = n_i e^{(E_t - E_i)/kT},\\quad p_1 = n_i e^{(E_i - E_t)/kT},\\quad
   \\tau_{n,p} = \\frac{1}{\\sigma_{n,p} v_{th} N_t}

(W. Shockley and W. T. Read, Phys. Rev. 87, 835 (1952); R. N. Hall,
Phys. Rev. 87, 387 (1952)). Effective densities of states
``N_{c,v} = 2 (2π m* kT / h²)^{3/2}``, intrinsic density
``n_i = sqrt(N_c N_v) exp(−E_g/2kT)`` and intrinsic level
``E_i = E_g/2 + (kT/2) ln(N_v/N_c)`` above the VBM (S. M. Sze and K. K. Ng,
*Physics of Semiconductor Devices*, 3rd ed. (2007), ch. 1).

Device units are used here, as in that literature: densities in cm⁻³,
cross sections in cm², velocities in cm/s, times in s, energies in eV
(trap levels measured from the VBM).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import constants as _c

from ..errors import ModelError
from ..units import KB

__all__ = ["effective_density_of_states", "intrinsic_density", "capture_time", "srh_rate",
           "Semiconductor", "TrapRecombination", "LifetimeScan"]


def _positive(value, name: str) -> float:
    v = float(value)
    if not (v > 0 and math.isfinite(v)):
        raise ModelError(f"{name} must be positive and finite, got {value!r}")
    return v


def effective_density_of_states(mass: float, temperature: float = 300.0) -> float:
    """``N = 2 (2π m* k T / h²)^{3/2}`` in cm⁻³.

    Parameters
    ----------
    mass : float
        Density-of-states effective mass in units of the free-electron mass
        (include the valley degeneracy, as in Sze & Ng's ``m_de``).
    temperature : float
        K.
    """
    m = _positive(mass, "effective mass") * _c.m_e
    t = _positive(temperature, "temperature")
    return 2.0 * (2.0 * math.pi * m * _c.k * t / _c.h ** 2) ** 1.5 * 1e-6


def intrinsic_density(gap: float, nc: float, nv: float, temperature: float = 300.0) -> float:
    """``n_i = sqrt(N_c N_v) exp(−E_g / 2kT)`` in cm⁻³ (gap in eV, N in cm⁻³)."""
    kt = KB * _positive(temperature, "temperature")
    return math.sqrt(_positive(nc, "N_c") * _positive(nv, "N_v")) * math.exp(-_positive(gap, "gap") / (2 * kt))


def capture_time(cross_section: float, thermal_velocity: float, trap_density: float) -> float:
    """``τ = 1/(σ v_th N_t)`` in s (σ in cm², v_th in cm/s, N_t in cm⁻³)."""
    return 1.0 / (_positive(cross_section, "capture cross section")
                  * _positive(thermal_velocity, "thermal velocity") * _positive(trap_density, "trap density"))


def srh_rate(n, p, ni, trap_minus_intrinsic, tau_n, tau_p, temperature: float = 300.0):
    """Net SRH recombination rate ``U`` in cm⁻³ s⁻¹ (arrays broadcast).

    Parameters
    ----------
    n, p : float or ndarray
        Electron and hole densities, cm⁻³.
    ni : float
        Intrinsic density, cm⁻³.
    trap_minus_intrinsic : float or ndarray
        ``E_t − E_i``, eV.
    tau_n, tau_p : float
        Electron and hole capture times, s.
    temperature : float
        K.
    """
    kt = KB * _positive(temperature, "temperature")
    x = np.asarray(trap_minus_intrinsic, dtype=float) / kt
    n = np.asarray(n, dtype=float)
    p = np.asarray(p, dtype=float)
    log_ni = math.log(ni) if ni > 0 else -math.inf
    return _rate(n, p, ni, log_ni, x, tau_n, tau_p)


def _rate(n, p, ni, log_ni, x, tau_n, tau_p):
    """SRH rate with n1, p1 formed in log space (no 0·∞ when n_i underflows
    in a wide gap at low temperature)."""
    with np.errstate(over="ignore"):
        n1 = np.exp(log_ni + x)
        p1 = np.exp(log_ni - x)
        return (n * p - ni * ni) / (tau_p * (n + n1) + tau_n * (p + p1))


@dataclass(frozen=True)
class Semiconductor:
    """Band-edge data of a host for recombination estimates.

    Attributes
    ----------
    gap : float
        Band gap, eV.
    temperature : float
        K.
    nc, nv : float
        Effective densities of states of conduction and valence band, cm⁻³.
    ni : float
        Intrinsic carrier density, cm⁻³.
    ni_origin : str
        ``"computed"`` (from N_c, N_v, E_g) or ``"given"`` (e.g. a measured value).
    """

    gap: float
    temperature: float
    nc: float
    nv: float
    ni: float
    ni_origin: str = "computed"

    @classmethod
    def from_densities(cls, gap: float, nc: float, nv: float, temperature: float = 300.0,
                       ni: float | None = None) -> "Semiconductor":
        """From N_c, N_v (cm⁻³); ``ni`` (cm⁻³) overrides the computed value."""
        gap = _positive(gap, "gap")
        t = _positive(temperature, "temperature")
        if ni is None:
            return cls(gap, t, float(nc), float(nv), intrinsic_density(gap, nc, nv, t), "computed")
        return cls(gap, t, _positive(nc, "N_c"), _positive(nv, "N_v"), _positive(ni, "n_i"), "given")

    @classmethod
    def from_masses(cls, gap: float, electron_mass: float, hole_mass: float, temperature: float = 300.0,
                    ni: float | None = None) -> "Semiconductor":
        """From density-of-states effective masses (units of mₑ)."""
        t = _positive(temperature, "temperature")
        return cls.from_densities(gap, effective_density_of_states(electron_mass, t),
                                  effective_density_of_states(hole_mass, t), t, ni)

    @property
    def log_ni(self) -> float:
        """``ln n_i`` (n_i in cm⁻³), exact even where ``ni`` underflows to 0."""
        if self.ni > 0:
            return math.log(self.ni)
        return 0.5 * math.log(self.nc * self.nv) - self.gap / (2.0 * self.kt)

    @property
    def kt(self) -> float:
        """k_B T, eV."""
        return KB * self.temperature

    @property
    def intrinsic_level(self) -> float:
        """``E_i`` above the VBM, eV."""
        return 0.5 * self.gap + 0.5 * self.kt * math.log(self.nv / self.nc)

    def equilibrium_carriers(self, doping: float) -> tuple[float, float]:
        """``(n0, p0)`` in cm⁻³ for a net donor density ``doping`` (negative: acceptors), full ionisation."""
        d = float(doping)
        root = math.sqrt(0.25 * d * d + self.ni ** 2)
        if d >= 0:
            n0 = 0.5 * d + root
            return n0, (self.ni ** 2 / n0 if n0 > 0 else 0.0)
        p0 = -0.5 * d + root
        return self.ni ** 2 / p0, p0

    def check_trap(self, above_vbm) -> np.ndarray:
        """Trap levels (eV above the VBM) as an array; outside ``[0, gap]`` is an error."""
        e = np.asarray(above_vbm, dtype=float)
        bad = ~np.isfinite(e) | (e < 0.0) | (e > self.gap)
        if np.any(bad):
            raise ModelError(f"trap level(s) {np.atleast_1d(e)[np.atleast_1d(bad)].tolist()} eV above the VBM lie "
                             f"outside the gap [0, {self.gap:g}] eV; SRH needs a level inside the gap")
        return e


@dataclass(frozen=True)
class LifetimeScan:
    """SRH lifetime versus trap position.

    Attributes
    ----------
    above_vbm : ndarray
        Trap levels, eV above the VBM.
    lifetime : ndarray
        ``Δn / U``, s.
    ratio : ndarray
        ``U(E_t) / U(E_i)``: 1 at the intrinsic level, ≪ 1 for shallow traps.
    """

    above_vbm: np.ndarray
    lifetime: np.ndarray
    ratio: np.ndarray


@dataclass(frozen=True)
class TrapRecombination:
    """SRH recombination in a host under fixed doping and injection.

    Attributes
    ----------
    material : Semiconductor
    tau_n, tau_p : float
        Electron and hole capture times, s.
    doping : float
        Net donor density ``N_D − N_A``, cm⁻³ (negative for p-type).
    injection : float
        Excess carrier density ``Δn = Δp``, cm⁻³.
    n, p : float, optional
        Carrier densities given directly, cm⁻³ (both or neither; they replace
        doping and injection). ``n = p = 0`` is a depletion region: ``np < n_i²``
        and the trap *generates* carriers, ``U = −n_i/(τ_p e^{x} + τ_n e^{−x})``
        with ``x = (E_t − E_i)/kT`` (the Shockley–Read rate with n = p = 0; Sze & Ng,
        ch. 2, generation in a depletion region).
    """

    material: Semiconductor
    tau_n: float
    tau_p: float
    doping: float = 0.0
    injection: float = 1e12
    n: float | None = None
    p: float | None = None

    def __post_init__(self):
        _positive(self.tau_n, "tau_n")
        _positive(self.tau_p, "tau_p")
        if (self.n is None) != (self.p is None):
            raise ModelError("give both carrier densities n and p (cm⁻³), or neither")
        if self.n is None:
            _positive(self.injection, "injection")
        else:
            for name in ("n", "p"):
                v = float(getattr(self, name))
                if not (math.isfinite(v) and v >= 0):
                    raise ModelError(f"{name} must be a finite, non-negative density (cm⁻³), got {v!r}")
        if not math.isfinite(float(self.doping)):
            raise ModelError("doping must be finite")

    @classmethod
    def from_capture(cls, material: Semiconductor, sigma_n: float, sigma_p: float, trap_density: float,
                     thermal_velocity: float = 1e7, doping: float = 0.0, injection: float = 1e12
                     ) -> "TrapRecombination":
        """Capture times from cross sections (cm²), trap density (cm⁻³) and
        ``v_th`` (cm/s; 10⁷ cm/s is the round value of Sze & Ng's examples)."""
        return cls(material, capture_time(sigma_n, thermal_velocity, trap_density),
                   capture_time(sigma_p, thermal_velocity, trap_density), doping, injection)

    @property
    def carriers(self) -> tuple[float, float]:
        """``(n, p)``, cm⁻³: as given, else ``(n0 + Δn, p0 + Δn)``."""
        if self.n is not None:
            return float(self.n), float(self.p)
        n0, p0 = self.material.equilibrium_carriers(self.doping)
        return n0 + self.injection, p0 + self.injection

    @property
    def regime(self) -> str:
        """``"recombination"`` (np > n_i²), ``"generation"`` (np < n_i², e.g. a depletion region) or
        ``"equilibrium"``."""
        n, p = self.carriers
        ni2 = self.material.ni ** 2
        if n * p > ni2 * (1 + 1e-12):
            return "recombination"
        return "generation" if n * p < ni2 * (1 - 1e-12) else "equilibrium"

    def rate(self, above_vbm):
        """``U`` (cm⁻³ s⁻¹) for trap level(s) ``above_vbm`` (eV)."""
        m = self.material
        e = m.check_trap(above_vbm)
        n, p = self.carriers
        return _rate(n, p, m.ni, m.log_ni, (e - m.intrinsic_level) / m.kt, self.tau_n, self.tau_p)

    def lifetime(self, above_vbm):
        """SRH lifetime, s: ``Δn / U`` under injection; for generation (np < n_i²) the generation
        lifetime ``τ_g = n_i / |U|`` (Sze & Ng, ch. 2)."""
        u = self.rate(above_vbm)
        regime = self.regime
        if regime == "generation":
            return self.material.ni / np.abs(u)
        if self.n is not None:
            raise ModelError(f"a recombination lifetime needs the excess density: with n, p given ({regime}) use "
                             "rate() (cm⁻³ s⁻¹), or give doping and injection instead")
        return self.injection / u

    def midgap_ratio(self, above_vbm):
        """``U(E_t)/U(E_i)``: the rate relative to a trap at the intrinsic level.

        One number for "how much worse than shallow": ≈1 for a mid-gap trap,
        ``~exp(−|E_t − E_i|/kT)`` for shallow ones.
        """
        return self.rate(above_vbm) / self.rate(self.material.intrinsic_level)

    def scan(self, points: int = 201) -> LifetimeScan:
        """Lifetime and mid-gap ratio for ``points`` levels spanning the gap."""
        e = np.linspace(0.0, self.material.gap, int(points))
        u = self.rate(e)
        u_mid = self.rate(self.material.intrinsic_level)
        return LifetimeScan(above_vbm=e, lifetime=self.lifetime(e), ratio=u / u_mid)

    def summary(self) -> str:
        """The conditions in one block."""
        m = self.material
        n, p = self.carriers
        return "\n".join([
            f"SRH conditions at {m.temperature:g} K: E_g = {m.gap:.3f} eV, E_i = {m.intrinsic_level:.4f} eV above VBM",
            f"  N_c = {m.nc:.3e}, N_v = {m.nv:.3e}, n_i = {m.ni:.3e} cm^-3 ({m.ni_origin})",
            (f"  carriers given: {self.regime}" if self.n is not None else
             f"  doping N_D − N_A = {self.doping:.3e} cm^-3, injection Δn = {self.injection:.3e} cm^-3"),
            f"  n = {n:.3e}, p = {p:.3e} cm^-3;  τ_n = {self.tau_n:.3e} s, τ_p = {self.tau_p:.3e} s",
            f"  mid-gap (E_i) trap {'generation ' if self.regime == 'generation' else ''}lifetime "
            f"{float(self.lifetime(m.intrinsic_level)):.3e} s"])
