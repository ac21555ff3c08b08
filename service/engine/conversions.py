"""Conversions of hydraulic conductivity and intrinsic permeability between reporting units."""

from __future__ import annotations

from service.engine.water import STANDARD_GRAVITY

SECONDS_PER_DAY = 86400.0
FOOT_M = 0.3048
"""International foot [m], exact."""
DARCY_M2 = 9.869233e-13
"""1 darcy [m²]: 1 cP, 1 cm/s, 1 atm/cm (NIST SP 811 App. B; docs/methods.md §11.2)."""


def k_to_cm_per_s(k_m_per_s: float) -> float:
    """Convert k [m/s] to [cm/s]; 1 cm/s = 1e-2 m/s (docs/methods.md §11.2)."""
    return k_m_per_s * 100.0


def k_to_m_per_day(k_m_per_s: float) -> float:
    """Convert k [m/s] to [m/day]; 1 m/day = 1/86400 m/s (docs/methods.md §11.2)."""
    return k_m_per_s * SECONDS_PER_DAY


def k_to_ft_per_day(k_m_per_s: float) -> float:
    """Convert k [m/s] to [ft/day]; 1 ft/day = 0.3048/86400 m/s (docs/methods.md §11.2)."""
    return k_m_per_s * SECONDS_PER_DAY / FOOT_M


def intrinsic_permeability(
    k_m_per_s: float,
    viscosity_pa_s: float,
    density_kg_per_m3: float | None = None,
    *,
    unit_weight_n_per_m3: float | None = None,
) -> float:
    """Intrinsic permeability from hydraulic conductivity.

    Parameters
    ----------
    k_m_per_s : float
        Hydraulic conductivity k at the temperature of the fluid properties [m/s].
    viscosity_pa_s : float
        Dynamic viscosity η [Pa·s].
    density_kg_per_m3 : float, optional
        Fluid density ρ_w [kg/m³]; used as γ_w = ρ_w·g when no unit weight is given.
    unit_weight_n_per_m3 : float, optional
        Unit weight γ_w [N/m³], overriding ρ_w·g.

    Returns
    -------
    float
        K [m²].

    Notes
    -----
    K = k·η/(ρ_w·g), derived from k = K·ρ_w·g/η (docs/methods.md §11.2).
    """
    if unit_weight_n_per_m3 is None:
        if density_kg_per_m3 is None:
            raise ValueError("give a density or a unit weight")
        unit_weight_n_per_m3 = density_kg_per_m3 * STANDARD_GRAVITY
    return k_m_per_s * viscosity_pa_s / unit_weight_n_per_m3


def m2_to_darcy(permeability_m2: float) -> float:
    """Convert intrinsic permeability [m²] to [darcy]; 1 D = 9.869233e-13 m² (§11.2)."""
    return permeability_m2 / DARCY_M2
