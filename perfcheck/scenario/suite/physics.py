"""Truth physics of the mismatch suite: the effects the expected-series model leaves out.

The model (:mod:`perfcheck.model`, :mod:`perfcheck.physics`) uses the physical IAM of De Soto
et al., no spectral correction, an efficiency that does not depend on irradiance, a
steady-state cell temperature and the mismatch loss the site file states. The suite's plants
differ from it in each of these, with the functions below (small and pure, pvlib names).
"""

from __future__ import annotations

import numpy as np
from scipy.signal import lfilter


def iam_ashrae(aoi: np.ndarray, b: float = 0.05) -> np.ndarray:
    """Incidence-angle modifier of the ASHRAE form [-].

    IAM = 1 - b (1/cos(aoi) - 1), limited to [0, 1]; 0 at and beyond 90 deg.

    Parameters
    ----------
    aoi : angle of incidence [deg].
    b : the b0 parameter [-] (0.05 in ASHRAE Standard 93-77).

    References
    ----------
    A. F. Souka, H. H. Safwat, 1966, Solar Energy 10(4):170-174.
    ASHRAE Standard 93-77 (b0 = 0.05; from memory).
    """
    aoi = np.asarray(aoi, dtype=float)
    with np.errstate(divide="ignore"):
        iam = 1.0 - b * (1.0 / np.cos(np.radians(aoi)) - 1.0)
    return np.where(np.abs(aoi) >= 90.0, 0.0, np.clip(iam, 0.0, 1.0))


def iam_martin_ruiz(aoi: np.ndarray, a_r: float = 0.16) -> np.ndarray:
    """Incidence-angle modifier of Martin & Ruiz (2001) [-].

    IAM = (1 - exp(-cos(aoi)/a_r)) / (1 - exp(-1/a_r)); 0 at and beyond 90 deg.

    Parameters
    ----------
    aoi : angle of incidence [deg].
    a_r : angular losses coefficient [-] (0.16 for a typical glass-covered module).

    References
    ----------
    N. Martin, J. M. Ruiz, 2001, "Calculation of the PV modules angular losses under field
    conditions by means of an analytical model", Solar Energy Materials and Solar Cells
    70(1):25-38, eq. 5.
    """
    aoi = np.asarray(aoi, dtype=float)
    cos = np.cos(np.radians(aoi))
    iam = (1.0 - np.exp(-cos / a_r)) / (1.0 - np.exp(-1.0 / a_r))
    return np.where(np.abs(aoi) >= 90.0, 0.0, iam)


def spectral_factor_sapm(airmass_absolute: np.ndarray, coefficients: tuple) -> np.ndarray:
    """Spectral factor f1 of the Sandia array performance model [-].

    f1 = a0 + a1 AMa + a2 AMa^2 + a3 AMa^3 + a4 AMa^4, at least 0.

    Parameters
    ----------
    airmass_absolute : absolute (pressure-corrected) air mass [-].
    coefficients : (a0, a1, a2, a3, a4) of the module.

    References
    ----------
    D. King, W. Boyson, J. Kratochvil, 2004, "Photovoltaic Array Performance Model",
    SAND2004-3535, eq. 5 and table of coefficients.
    """
    am = np.asarray(airmass_absolute, dtype=float)
    return np.maximum(np.polynomial.polynomial.polyval(am, coefficients), 0.0)


def relative_efficiency_adr(effective_irradiance: np.ndarray, k_d: float = -6.0,
                            k_rs: float = 0.05, k_rsh: float = 0.10) -> np.ndarray:
    """Module efficiency relative to its value at 1000 W/m^2, 25 C, by the ADR model [-].

    s = G/1000; v = ln(s/s0 + 1) / ln(1/s0 + 1), s0 = 10^k_d;
    eta_rel = (1 + k_rs + k_rsh) v - k_rs s - k_rsh v^2 (1 at 1000 W/m^2). The temperature
    dependence is left to the linear power coefficient, so tc_d = 0 here.

    Parameters
    ----------
    effective_irradiance : irradiance reaching the cells [W/m^2].
    k_d : dark irradiance coefficient [-] (log10 of a fraction of 1000 W/m^2).
    k_rs, k_rsh : series and shunt resistance loss coefficients [-].

    References
    ----------
    A. Driesse, J. S. Stein, 2020, "From IEC 61853 power measurements to PV system
    simulations", SAND2020-3877, eq. 7 (the ADR model).
    """
    s = np.maximum(np.asarray(effective_irradiance, dtype=float), 0.0) / 1000.0
    s0 = 10.0 ** k_d
    v = np.log(s / s0 + 1.0) / np.log(1.0 / s0 + 1.0)
    return (1.0 + k_rs + k_rsh) * v - k_rs * s - k_rsh * v**2


def thermal_lag(temp_steady: np.ndarray, interval_s: float, tau_s: float) -> np.ndarray:
    """Module temperature that follows its steady-state value with a first-order lag [C].

    C dT/dt = (T_ss - T)/R, time constant tau = R C, with T_ss held over each interval (the
    exact solution of the lumped-capacitance model): T_k = T_ss,k + (T_k-1 - T_ss,k) e^(-dt/tau).
    The series starts at its steady state.

    Parameters
    ----------
    temp_steady : steady-state module temperature per interval [C].
    interval_s : interval length [s].
    tau_s : thermal time constant [s] (about 5 to 10 minutes for framed modules; from memory).

    References
    ----------
    A. D. Jones, C. P. Underwood, 2001, "A thermal model for photovoltaic systems", Solar
    Energy 70(4):349-359 (first-order lumped model; from memory).
    """
    x = np.asarray(temp_steady, dtype=float)
    a = np.exp(-interval_s / tau_s)
    return lfilter([1.0 - a], [1.0, -a], x, zi=[a * x[0]])[0]
