"""PDOS moments and recursion coefficients against tight-binding models built
with pythtb (a reference library, not orbtool).

External references
-------------------
* Moments theorem: μ₁ = ε_i and μ₂ − μ₁² = Σ_j |H_ij|² for the LDOS of orbital i
  (F. Cyrot-Lackmann, J. Phys. Chem. Solids 29, 1235 (1968); Adv. Phys. 16, 393
  (1967)). With a Gaussian broadening σ the variance grows by exactly σ²
  (variances of a convolution add); σ = 2·10⁻⁴ eV makes that 4·10⁻⁸ eV².
  A uniform k mesh larger than the hopping range samples ⟨i|H²|i⟩ exactly.
* Recursion: the end site of a semi-infinite chain with on-site ε and hopping
  t has a_n = ε, b_n = |t| and the semicircle LDOS
  n(E) = √(4t² − (E − ε)²)/(2πt²) (R. Haydock, V. Heine & M. J. Kelly,
  J. Phys. C 5, 2845 (1972)). A finite chain of N sites gives the same
  coefficients exactly for n < N (its Hamiltonian is already tridiagonal).
"""

import numpy as np
import pytest
from pythtb import tb_model

from orbtool.analysis.moments import channel_moments, dos_moments
from orbtool.analysis.recursion import recursion_coefficients
from orbtool.errors import InputFormatError
from orbtool.spectra import ProjectedDOS

EPS_A, EPS_B, T1, T2 = 0.7, -0.4, -2.7, 0.11


def honeycomb():
    """Two-site honeycomb (boron-nitride-like) with first and second neighbours."""
    lat = [[1.0, 0.0], [0.5, np.sqrt(3.0) / 2.0]]
    m = tb_model(2, 2, lat, [[1 / 3, 1 / 3], [2 / 3, 2 / 3]])
    m.set_onsite([EPS_A, EPS_B])
    for R in ([0, 0], [-1, 0], [0, -1]):
        m.set_hop(T1, 0, 1, R)
    for R in ([1, 0], [0, 1], [1, -1]):          # each gives two A–A (and two B–B) neighbours
        m.set_hop(T2, 0, 0, R)
        m.set_hop(-T2, 1, 1, R)
    return m


def broadened(evals, weights, energies, sigma):
    """Σ w δ_σ(E − e) on a grid, depositing each Gaussian only within ±8σ."""
    out = np.zeros_like(energies)
    h = energies[1] - energies[0]
    span = int(np.ceil(8 * sigma / h))
    centre = np.rint((evals - energies[0]) / h).astype(int)
    cols = centre[:, None] + np.arange(-span, span + 1)[None, :]
    g = np.exp(-0.5 * ((energies[cols] - evals[:, None]) / sigma) ** 2) / (sigma * np.sqrt(2 * np.pi))
    np.add.at(out, cols.ravel(), (weights[:, None] * g).ravel())
    return out


def honeycomb_pdos(sigma=2e-4):
    m = honeycomb()
    kmesh = m.k_uniform_mesh([12, 12])
    evals, evecs = m.solve_all(kmesh, eig_vectors=True)      # (nband, nk), (nband, nk, norb)
    e = evals.ravel()
    w = np.abs(evecs.reshape(-1, 2)) ** 2 / kmesh.shape[0]
    energies = np.arange(-10.0, 10.0, sigma / 2)
    vals = np.stack([broadened(e, w[:, i], energies, sigma) for i in range(2)])
    return ProjectedDOS(energies, vals, [(0, "B", "s", 0), (1, "N", "s", 0)], fermi=0.0)


def test_first_and_second_moment_equal_onsite_and_squared_hoppings():
    pdos = honeycomb_pdos()
    a = channel_moments(pdos, atoms=0)
    b = channel_moments(pdos, atoms=1)
    # Cyrot-Lackmann 1968: μ₁ = ε_i, μ₂ − μ₁² = Σ|t|² (3 first and 6 second neighbours)
    assert a.weight == pytest.approx(1.0, abs=1e-9)
    assert a.centre == pytest.approx(EPS_A, abs=1e-6)
    assert b.centre == pytest.approx(EPS_B, abs=1e-6)
    assert a.variance == pytest.approx(3 * T1**2 + 6 * T2**2, abs=1e-6)
    assert b.variance == pytest.approx(3 * T1**2 + 6 * T2**2, abs=1e-6)
    # a window that cuts the band cannot hold the full weight
    part = channel_moments(pdos, (-10.0, EPS_A), atoms=0)
    assert part.weight < 0.9


def test_moments_of_a_gaussian_line():
    # a normal distribution: skewness 0, kurtosis 3 (any statistics text)
    e = np.linspace(-5, 5, 20001)
    d = np.exp(-0.5 * ((e - 0.25) / 0.4) ** 2)
    m = dos_moments(e, d)
    assert m.centre == pytest.approx(0.25, abs=1e-10)
    assert m.width == pytest.approx(0.4, rel=1e-8)
    assert m.skewness == pytest.approx(0.0, abs=1e-8)
    assert m.kurtosis == pytest.approx(3.0, rel=1e-6)


@pytest.mark.parametrize("method", ["lanczos", "chebyshev"])
def test_finite_chain_from_pythtb_gives_exact_coefficients(method):
    eps, t, n = 0.3, -1.2, 100
    chain = tb_model(0, 1, [[1.0]], [[float(i)] for i in range(n)])
    chain.set_onsite([eps] * n)
    for i in range(n - 1):
        chain.set_hop(t, i, i + 1)
    evals, evecs = chain.solve_all(eig_vectors=True)
    weights = np.abs(evecs[:, 0]) ** 2                       # end-site projection of each eigenstate
    rec = recursion_coefficients(evals, weights, 40, method=method, discrete=True)
    # Haydock, Heine & Kelly 1972: a_n = ε, b_n = |t|
    assert np.allclose(rec.a, eps, atol=1e-9)
    assert np.allclose(rec.b, abs(t), atol=1e-9)


@pytest.mark.parametrize("method", ["lanczos", "chebyshev"])
def test_semi_infinite_chain_semicircle(method):
    eps, t = -0.5, 0.9
    e = np.linspace(eps - 2 * t, eps + 2 * t, 40001)
    d = np.sqrt(np.clip(4 * t * t - (e - eps) ** 2, 0, None)) / (2 * np.pi * t * t)
    rec = recursion_coefficients(e, d, 12, method=method)
    assert np.allclose(rec.a, eps, atol=1e-6)
    # the square-root band edges limit the trapezoid rule to ~h^1.5
    assert np.allclose(rec.b, t, atol=1e-5)
    # the fraction closed by the constant-tail terminator rebuilds the semicircle
    inner = slice(200, -200)
    assert np.allclose(rec.ldos(e[inner]), d[inner], atol=1e-3 * d.max())
    assert rec.rebuild_error(e[inner], d[inner])["relative"] < 1e-3
    # without a terminator and with a finite broadening the fraction is only a sum of 12 poles
    assert rec.rebuild_error(e[inner], d[inner], broadening=0.05, terminator="none")["relative"] > 1e-2
    assert "a_n" in rec.summary()


def test_thirty_levels_stay_accurate():
    # unit semicircle (Haydock et al. 1972: b_n = 1); 30 levels is far beyond what raw
    # power moments (Catalan numbers here) allow in double precision
    e = np.linspace(-2, 2, 40001)
    d = np.sqrt(np.clip(4 - e**2, 0, None)) / (2 * np.pi)
    rec = recursion_coefficients(e, d, 30, method="chebyshev")
    assert rec.levels == 30
    assert np.allclose(rec.b, 1.0, atol=1e-4)


def test_bad_windows_and_inputs():
    e = np.linspace(-1, 1, 101)
    d = np.ones_like(e)
    with pytest.raises(InputFormatError, match="outside the data"):
        dos_moments(e, d, window=(-2.0, 0.5))
    with pytest.raises(InputFormatError, match="outside the data"):
        recursion_coefficients(e, d, 4, window=(0.0, 3.0))
    with pytest.raises(InputFormatError, match="no weight"):
        dos_moments(e, np.zeros_like(e))
    with pytest.raises(InputFormatError, match="method"):
        recursion_coefficients(e, d, 4, method="hankel")
    with pytest.raises(InputFormatError, match="non-negative"):
        recursion_coefficients(e, d - 2, 4)
    pdos = ProjectedDOS(e, d[None, :], [(0, "Si", "s", 0)])
    with pytest.raises(InputFormatError, match="no PDOS channel"):
        channel_moments(pdos, atoms=3)
