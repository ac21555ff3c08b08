"""Properties of liquid water at atmospheric pressure and the temperature correction of k.

Viscosity: IAPWS R12-08 (2008) formulation, implemented from its published coefficients
(docs/methods.md §4.2). Density: Tanaka et al. (2001) air-free water formula, within
0.0015 kg/m³ of IAPWS-95 from 0 °C to 40 °C (§4.3). Alternative factor: the ASTM D5084
empirical R_T (§4.6).
"""

from __future__ import annotations

import math

STANDARD_GRAVITY = 9.80665
"""Standard gravity g [m/s²], exact by definition (CGPM 1901)."""

NOMINAL_WATER_DENSITY = 1000.0
"""Nominal density of water [kg/m³] (the 1.000 g/cm³ convention, common practice)."""

KELVIN_OFFSET = 273.15

# IAPWS R12-08 reducing constants and coefficients (the release, Tables 1 and 2).
_T_STAR = 647.096  # K
_RHO_STAR = 322.0  # kg/m³
_ETA_STAR = 1.0e-6  # Pa·s
_H0 = (1.67752, 2.20462, 0.6366564, -0.241605)
_H1 = (
    (0, 0, 0.520094),
    (1, 0, 0.0850895),
    (2, 0, -1.08374),
    (3, 0, -0.289555),
    (0, 1, 0.222531),
    (1, 1, 0.999115),
    (2, 1, 1.88797),
    (3, 1, 1.26613),
    (5, 1, 0.120573),
    (0, 2, -0.281378),
    (1, 2, -0.906851),
    (2, 2, -0.772479),
    (3, 2, -0.489837),
    (4, 2, -0.257040),
    (0, 3, 0.161913),
    (1, 3, 0.257399),
    (0, 4, -0.0325372),
    (3, 4, 0.0698452),
    (4, 5, 0.00872102),
    (3, 6, -0.00435673),
    (5, 6, -0.000593264),
)

# Tanaka et al. (2001), Metrologia 38:301, air-free water (docs/methods.md §4.3).
_A1 = -3.983035  # °C
_A2 = 301.797  # °C
_A3 = 522528.9  # °C²
_A4 = 69.34881  # °C
_A5 = 999.974950  # kg/m³

MIN_TEMPERATURE_C = 0.0
MAX_TEMPERATURE_C = 40.0
"""Range of test temperatures the engine accepts [°C] (the density formula's range)."""


def viscosity_iapws(temperature_k: float, density: float) -> float:
    """Dynamic viscosity of water, IAPWS 2008 without critical enhancement.

    Parameters
    ----------
    temperature_k : float
        Absolute temperature T [K].
    density : float
        Density ρ [kg/m³].

    Returns
    -------
    float
        Dynamic viscosity η [Pa·s].

    Notes
    -----
    η = η*·η̄0(T̄)·η̄1(T̄, ρ̄) with T̄ = T/647.096 K, ρ̄ = ρ/322 kg/m³, η* = 1 µPa·s;
    η̄0 = 100·√T̄ / Σ H_i/T̄^i; η̄1 = exp[ρ̄·Σ H_ij·(1/T̄ − 1)^i·(ρ̄ − 1)^j]; η̄2 = 1.
    Source: IAPWS R12-08 (2008), eqs. (10)–(12) (docs/methods.md §4.2).
    """
    tr = temperature_k / _T_STAR
    dr = density / _RHO_STAR
    eta0 = 100.0 * math.sqrt(tr) / (_H0[0] + _H0[1] / tr + _H0[2] / tr**2 + _H0[3] / tr**3)
    x = 1.0 / tr - 1.0
    y = dr - 1.0
    xs = (1.0, x, x * x, x**3, x**4, x**5)
    ys = (1.0, y, y * y, y**3, y**4, y**5, y**6)
    total = 0.0
    for i, j, h in _H1:
        total += h * xs[i] * ys[j]
    return _ETA_STAR * eta0 * math.exp(dr * total)


def density_tanaka(temperature_c: float) -> float:
    """Density of air-free water at 101.325 kPa.

    Parameters
    ----------
    temperature_c : float
        Temperature t [°C], 0 to 40.

    Returns
    -------
    float
        Density ρ_w [kg/m³].

    Notes
    -----
    ρ_w(t) = a5·[1 − (t + a1)²·(t + a2) / (a3·(t + a4))].
    Source: Tanaka et al. (2001), Metrologia 38:301 (docs/methods.md §4.3,
    verified numerically against IAPWS-95).
    """
    t = temperature_c
    return _A5 * (1.0 - (t + _A1) ** 2 * (t + _A2) / (_A3 * (t + _A4)))


def water_viscosity(temperature_c: float) -> float:
    """Dynamic viscosity of liquid water at 101.325 kPa [Pa·s].

    Parameters
    ----------
    temperature_c : float
        Temperature t [°C].

    Notes
    -----
    η(t) = η_IAPWS2008(t + 273.15 K, ρ_Tanaka(t)) (docs/methods.md §4.2–§4.3).
    """
    return viscosity_iapws(temperature_c + KELVIN_OFFSET, density_tanaka(temperature_c))


def viscosity_ratio(temperature_c: float, reference_c: float = 20.0) -> float:
    """Temperature correction factor R = η(T) / η(T_ref) [-].

    Parameters
    ----------
    temperature_c : float
        Test temperature T [°C].
    reference_c : float
        Reference temperature T_ref [°C] (20 °C for ASTM D2434, D5084, D5856).

    Notes
    -----
    k_ref = R·k_T (docs/methods.md §4.1; viscosity ratio only, as ASTM).
    """
    return water_viscosity(temperature_c) / water_viscosity(reference_c)


def r_t_d5084(temperature_c: float) -> float:
    """ASTM D5084 empirical correction factor to 20 °C [-].

    Parameters
    ----------
    temperature_c : float
        Test temperature T [°C]; the formula is meant for about 15–30 °C.

    Notes
    -----
    R_T = 2.2902·0.9842^T / T^0.1702 (T in °C). Gives 1.00024 at 20 °C.
    Source: ASTM D5084 (docs/methods.md §4.6).
    """
    return float(2.2902 * 0.9842**temperature_c / temperature_c**0.1702)


def temperature_factor(
    temperature_c: float | None, reference_c: float = 20.0, method: str = "iapws"
) -> float:
    """Factor R that turns k at the test temperature into k at the reference temperature [-].

    Parameters
    ----------
    temperature_c : float or None
        Test temperature [°C]; None means no correction (R = 1).
    reference_c : float
        Reference temperature [°C].
    method : {"iapws", "astm_d5084"}
        ``iapws``: η(T)/η(T_ref) (§4.3); ``astm_d5084``: R_T of §4.2 (reference 20 °C only).
    """
    if temperature_c is None:
        return 1.0
    if method == "astm_d5084":
        return r_t_d5084(temperature_c)
    return viscosity_ratio(temperature_c, reference_c)


def water_density(temperature_c: float | None, convention: str = "temperature") -> float:
    """Density of water used for mass→volume and pressure→head [kg/m³].

    Parameters
    ----------
    temperature_c : float or None
        Water temperature [°C]; None uses 20 °C.
    convention : {"temperature", "nominal"}
        ``temperature``: Tanaka formula at the temperature; ``nominal``: 1000 kg/m³.
    """
    if convention == "nominal":
        return NOMINAL_WATER_DENSITY
    return density_tanaka(20.0 if temperature_c is None else temperature_c)
