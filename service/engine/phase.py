"""Specimen phase relations: densities, void ratio, porosity, degree of saturation, compaction."""

from __future__ import annotations

import math
from dataclasses import dataclass


@dataclass(frozen=True, slots=True)
class PhaseRelations:
    """Phase relations of one specimen; None where the inputs do not allow it.

    Attributes carry SI units in their names; ratios are fractions unless ``_pct``.
    """

    volume_m3: float | None
    bulk_density_kg_per_m3: float | None
    dry_density_kg_per_m3: float | None
    void_ratio: float | None
    porosity: float | None
    degree_of_saturation: float | None
    relative_compaction_pct: float | None
    water_density_kg_per_m3: float


def cylinder_area(diameter_m: float) -> float:
    """Cross-section of a cylindrical specimen or standpipe [m²].

    Parameters
    ----------
    diameter_m : float
        Diameter D [m].

    Notes
    -----
    A = π·D²/4 (docs/methods.md §5).
    """
    return math.pi * diameter_m * diameter_m / 4.0


def phase_relations(
    *,
    area_m2: float,
    length_m: float | None,
    wet_mass_kg: float | None,
    water_content: float | None,
    specific_gravity: float | None,
    max_dry_density_kg_per_m3: float | None,
    void_ratio: float | None,
    water_density_kg_per_m3: float,
) -> PhaseRelations:
    """Bulk and dry density, void ratio, porosity, saturation and relative compaction.

    Parameters
    ----------
    area_m2 : float
        Specimen cross-section A [m²].
    length_m : float or None
        Specimen height H [m].
    wet_mass_kg : float or None
        Wet mass M [kg].
    water_content : float or None
        Water content w [-] (fraction, 0.224 for 22.4 %).
    specific_gravity : float or None
        Specific gravity of solids G_s [-].
    max_dry_density_kg_per_m3 : float or None
        Reference maximum dry density ρ_d,max [kg/m³].
    void_ratio : float or None
        Void ratio e [-] when declared rather than computed; it takes precedence.
    water_density_kg_per_m3 : float
        ρ_w used in e = G_s·ρ_w/ρ_d − 1 [kg/m³] (1000 or ρ_w(20 °C), the stated convention).

    Notes
    -----
    V = A·H; ρ = M/V; ρ_d = ρ/(1 + w); e = G_s·ρ_w/ρ_d − 1; n = e/(1 + e); S = w·G_s/e;
    RC = 100·ρ_d/ρ_d,max. Source: standard soil-mechanics identities (docs/methods.md §5).

    Raises
    ------
    ValueError
        When the computed void ratio is not positive (dry density above G_s·ρ_w).
    """
    volume = area_m2 * length_m if length_m is not None else None
    bulk = wet_mass_kg / volume if (wet_mass_kg is not None and volume is not None) else None
    dry = bulk / (1.0 + water_content) if (bulk is not None and water_content is not None) else None
    e = void_ratio
    if e is None and dry is not None and specific_gravity is not None:
        e = specific_gravity * water_density_kg_per_m3 / dry - 1.0
        if e <= 0.0:
            raise ValueError(
                f"the dry density {dry:.0f} kg/m³ is not below G_s·ρ_w = "
                f"{specific_gravity * water_density_kg_per_m3:.0f} kg/m³, so the void ratio "
                f"would be {e:.3f}"
            )
    n = e / (1.0 + e) if e is not None else None
    sat = (
        water_content * specific_gravity / e
        if (e is not None and water_content is not None and specific_gravity is not None)
        else None
    )
    rc = (
        100.0 * dry / max_dry_density_kg_per_m3
        if (dry is not None and max_dry_density_kg_per_m3 is not None)
        else None
    )
    return PhaseRelations(
        volume_m3=volume,
        bulk_density_kg_per_m3=bulk,
        dry_density_kg_per_m3=dry,
        void_ratio=e,
        porosity=n,
        degree_of_saturation=sat,
        relative_compaction_pct=rc,
        water_density_kg_per_m3=water_density_kg_per_m3,
    )
