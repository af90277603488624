"""Truth physics of the scenario suite, each against a published form or pvlib's own code."""

from __future__ import annotations

import numpy as np
import pvlib
from numpy.testing import assert_allclose

from perfcheck.scenario.suite import physics
from perfcheck.scenario.suite.generate import spectral_coefficients

AOI = np.array([0.0, 20.0, 40.0, 60.0, 70.0, 80.0, 85.0, 89.0, 90.0, 95.0])


def test_ashrae_iam_published_form() -> None:
    # Souka & Safwat 1966 / ASHRAE 93-77: IAM = 1 - b0 (1/cos - 1); at 60 deg with b0 = 0.05:
    # 1 - 0.05 (2 - 1) = 0.95, worked by hand.
    assert_allclose(physics.iam_ashrae(np.array([0.0, 60.0]), 0.05), [1.0, 0.95], atol=1e-12)
    # pvlib.iam.ashrae is the reference implementation (same limits: 0 beyond 90 deg)
    assert_allclose(physics.iam_ashrae(AOI, 0.06), pvlib.iam.ashrae(AOI, 0.06), atol=1e-12)


def test_martin_ruiz_iam_published_form() -> None:
    # Martin & Ruiz 2001, eq. 5: at 60 deg with a_r = 0.16,
    # (1 - exp(-0.5/0.16)) / (1 - exp(-1/0.16)) = 0.957925... (worked by hand)
    expected = (1 - np.exp(-0.5 / 0.16)) / (1 - np.exp(-1 / 0.16))
    assert_allclose(physics.iam_martin_ruiz(np.array([60.0]), 0.16), [expected], rtol=1e-12)
    assert_allclose(physics.iam_martin_ruiz(AOI, 0.18), pvlib.iam.martin_ruiz(AOI, 0.18),
                    atol=1e-12)


def test_sapm_spectral_factor_against_king_and_pvlib() -> None:
    # King et al. 2004 (SAND2004-3535) eq. 5: a fourth-order polynomial in absolute air mass,
    # close to 1 at AM1.5 for a c-Si module (the reference spectrum is AM1.5): within 2 %.
    coeffs = spectral_coefficients("Canadian_Solar_CS5P_220M___2009_")
    assert abs(float(physics.spectral_factor_sapm(np.array([1.5]), coeffs)[0]) - 1.0) < 0.02
    am = np.array([1.0, 1.5, 2.0, 3.0, 5.0, 10.0])
    module = dict(zip([f"A{k}" for k in range(5)], coeffs, strict=True))
    assert_allclose(physics.spectral_factor_sapm(am, coeffs),
                    pvlib.spectrum.spectral_factor_sapm(am, module), rtol=1e-12)


def test_adr_relative_efficiency_worked_example() -> None:
    # Driesse & Stein 2020 (SAND2020-3877), worked example in pvlib's documentation of
    # pvefficiency_adr: k_d -6, k_rs 0.05, k_rsh 0.10 give 0.92797293 at 200 W/m^2, 25 C,
    # and exactly 1 at 1000 W/m^2.
    assert_allclose(physics.relative_efficiency_adr(np.array([1000.0, 200.0]), -6.0, 0.05, 0.10),
                    [1.0, 0.92797293], rtol=1e-8)
    g = np.array([50.0, 100.0, 400.0, 800.0, 1100.0])
    assert_allclose(physics.relative_efficiency_adr(g, -5.5, 0.07, 0.15),
                    pvlib.pvarray.pvefficiency_adr(g, 25.0, 1.0, -5.5, 0.0, 0.07, 0.15),
                    rtol=1e-12)


def test_thermal_lag_is_the_exact_first_order_step_response() -> None:
    # The lumped-capacitance model's step response (Jones & Underwood 2001; any text on
    # first-order systems): T(t) = T_new + (T_old - T_new) exp(-t/tau), sampled exactly.
    steady = np.r_[np.full(3, 20.0), np.full(30, 45.0)]
    lagged = physics.thermal_lag(steady, 60.0, 420.0)
    t = np.arange(1, 31) * 60.0
    assert_allclose(lagged[:3], 20.0)
    assert_allclose(lagged[3:], 45.0 - 25.0 * np.exp(-t / 420.0), rtol=1e-12)
