"""Units used inside orbtool and the conversions applied at the readers' edge.

Inside orbtool every length is in ångström (Å), every energy in electronvolt
(eV), densities in electrons/Å³ and orbital amplitudes in Å^-3/2. Readers
convert once, when they parse a file; nothing downstream converts again.
Constants are CODATA values taken from :mod:`ase.units` (which follows
CODATA 2014) so that orbtool and ASE agree to the last digit.
"""

from __future__ import annotations

from ase import units as _u

#: 1 bohr in Å.
BOHR = float(_u.Bohr)
#: 1 hartree in eV.
HARTREE = float(_u.Hartree)
#: 1 rydberg in eV.
RYDBERG = float(_u.Rydberg)
#: Boltzmann constant in eV/K.
KB = float(_u.kB)
#: ħ²/mₑ in eV·Å² (Harrison's couplings are η ħ²/(mₑ d²)).
HBAR2_OVER_ME = float(_u._hbar**2 / _u._me / _u._e * 1e20)
#: e²/(4πε₀) in eV·Å (Coulomb energy of two unit charges 1 Å apart).
COULOMB = float(_u._e / (4 * 3.141592653589793 * _u._eps0) * 1e10)

#: Units a :class:`orbtool.grid.Grid` may carry.
GRID_UNITS = (
    "e/Å^3",      # electron density (charge density, partial density of a state)
    "Å^-3/2",     # signed orbital amplitude (wavefunction), |ψ|² in 1/Å³
    "eV",         # electrostatic potential energy of an electron (local potential files)
    "arb",        # anything else, kept as given
)

__all__ = ["BOHR", "HARTREE", "RYDBERG", "KB", "HBAR2_OVER_ME", "COULOMB", "GRID_UNITS"]
