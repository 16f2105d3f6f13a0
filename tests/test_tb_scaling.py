"""Distance laws against their closed forms (Harrison 1980 / Froyen & Harrison 1979 for the universal
form; the power and exponential laws as defined in orbtool.tb.scaling)."""

import numpy as np
import pytest

from orbtool.errors import ModelError
from orbtool.tb.scaling import HARRISON_ETA_1999, DistanceLaw, harrison_coupling, smooth_cutoff

HB = 7.619964  # ħ²/mₑ in eV Å² (CODATA, REFERENCES constants)


def test_universal_form_scales_as_inverse_square():
    d = np.array([1.5, 2.0, 2.35, 3.0, 4.0])
    for ch, eta in {"ss_sigma": -1.40, "sp_sigma": 1.84, "pp_sigma": 3.24, "pp_pi": -0.81}.items():
        np.testing.assert_allclose(harrison_coupling(ch, d), eta * HB / d ** 2, rtol=1e-6)
    # the revised 1999 set (Harrison, Elementary Electronic Structure) is available on request
    assert harrison_coupling("pp_pi", 2.0, eta_set="1999") == pytest.approx(HARRISON_ETA_1999["pp_pi"] * HB / 4)
    # d couplings: Harrison & Froyen (1980) V_pdσ = η ħ² r_d^{3/2}/(m d^{7/2}), V_ddσ = η ħ² r_d³/(m d⁵)
    assert harrison_coupling("pd_sigma", 2.5, r_d_right=1.0) == pytest.approx(-2.95 * HB / 2.5 ** 3.5, rel=1e-6)
    assert harrison_coupling("dd_sigma", 2.5, r_d_left=1.0, r_d_right=0.8) == pytest.approx(
        -45 / np.pi * HB * 0.8 ** 1.5 / 2.5 ** 5, rel=1e-6)
    with pytest.raises(ModelError, match="r_d"):
        harrison_coupling("sd_sigma", 2.5)


def test_power_exponential_and_cutoff():
    d = np.linspace(1.8, 3.2, 8)
    power = DistanceLaw("power", d0=2.35, n=3.3)
    np.testing.assert_allclose(power.radial(d), (2.35 / d) ** 3.3)
    expo = DistanceLaw("exp", d0=2.35, q=1.7)
    np.testing.assert_allclose(expo.radial(d), np.exp(-1.7 * (d - 2.35)))
    # cos² taper: 1 below r_cut − w, 1/2 at the middle of the taper, 0 at and beyond r_cut
    assert smooth_cutoff(np.array([2.0, 2.75, 3.0, 3.5]), 3.0, 0.5).tolist() == pytest.approx([1, 0.5, 0, 0])
    cut = DistanceLaw("power", d0=2.35, n=2, r_cut=3.0, cut_width=0.5)
    assert cut.radial(np.array([2.75]))[0] == pytest.approx(0.5 * (2.35 / 2.75) ** 2)
    # ∂ ln V/∂n = ln(d0/d) for the power law (used for Hellmann–Feynman derivatives)
    h = 1e-6
    num = (np.log(DistanceLaw("power", d0=2.35, n=2 + h).radial(d)) - np.log(power.radial(d, n=2))) / h
    np.testing.assert_allclose(num, power.log_derivative(d), atol=1e-5)
    with pytest.raises(ModelError, match="unknown scaling"):
        DistanceLaw("yukawa")
