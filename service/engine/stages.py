"""Stages of a flexible-wall test before and after permeation: saturation, consolidation, post-test.

Saturation: back-pressure increments and B checks (Skempton 1954), judged by the existing
saturation check. Consolidation: volume change against time, the end of consolidation from
the root-time plot, and the specimen's dimensions and pore volume at permeation. After the
test: water content and degree of saturation through the phase relations of ``phase.py``.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from service.engine import checks
from service.engine.errors import EngineInputError, InputProblem, Loc
from service.engine.model import SaturationStep
from service.engine.phase import PhaseRelations, cylinder_area, phase_relations
from service.engine.rules import BUILT_IN, FLEXIBLE_WALL, RuleBook

# --- saturation ----------------------------------------------------------------------------

B_RANGE = (0.0, 1.1)
"""B-values the reduction request accepts (``saturation[].b_value``); a check outside it
points to a reading error."""


@dataclass(frozen=True, slots=True)
class BackPressureIncrement:
    """One saturation increment: cell and back pressure raised together.

    Attributes
    ----------
    time_s : float or None
        When it was applied, since the stage started [s].
    cell_pressure_pa, back_pressure_pa : float
        Cell pressure σ₃ and back pressure u_b after the increment [Pa].
    """

    cell_pressure_pa: float
    back_pressure_pa: float
    time_s: float | None = None

    @property
    def effective_stress_pa(self) -> float:
        """Effective confining stress σ₃ − u_b held during the increment [Pa]."""
        return self.cell_pressure_pa - self.back_pressure_pa


@dataclass(frozen=True, slots=True)
class BCheckReading:
    """The readings of one B check, drainage closed.

    Attributes
    ----------
    back_pressure_pa : float
        Back pressure the specimen was saturated at before the check [Pa].
    cell_pressure_before_pa, cell_pressure_after_pa : float
        Cell pressure before and after the undrained increment [Pa].
    pore_pressure_before_pa, pore_pressure_after_pa : float
        Pore pressure before the increment and once it has settled [Pa].
    time_s : float or None
        When the check was made [s].
    """

    back_pressure_pa: float
    cell_pressure_before_pa: float
    cell_pressure_after_pa: float
    pore_pressure_before_pa: float
    pore_pressure_after_pa: float
    time_s: float | None = None


@dataclass(frozen=True, slots=True)
class BCheck:
    """One B check reduced: Δσ₃, Δu and B."""

    back_pressure_pa: float
    cell_pressure_increment_pa: float
    pore_pressure_increment_pa: float
    b_value: float
    time_s: float | None


@dataclass(frozen=True, slots=True)
class SaturationSeries:
    """B against back pressure, and the saturation check evaluated on it.

    Attributes
    ----------
    b_checks : tuple of BCheck
        In the order made.
    last_change : float or None
        B of the last check minus B of the one before [-] (the stiff-material allowance).
    steps : tuple of SaturationStep
        The series as the reduction request's ``saturation`` list.
    check : checks.Check
        The ``saturation`` check: B ≥ 0.95, or unchanged B on a declared stiff material.
    """

    b_checks: tuple[BCheck, ...]
    last_change: float | None
    steps: tuple[SaturationStep, ...]
    check: checks.Check


def b_value(cell_pressure_increment_pa: float, pore_pressure_increment_pa: float) -> float:
    """Skempton's pore-pressure coefficient B [-].

    Parameters
    ----------
    cell_pressure_increment_pa : float
        Δσ₃, the undrained increase of cell pressure [Pa], greater than zero.
    pore_pressure_increment_pa : float
        Δu, the resulting increase of pore pressure [Pa].

    Notes
    -----
    B = Δu/Δσ₃ under an isotropic total-stress increment with drainage closed.
    Source: Skempton, A.W. (1954), "The pore-pressure coefficients A and B",
    Géotechnique 4(4):143–147.
    """
    return pore_pressure_increment_pa / cell_pressure_increment_pa


def b_checks(readings: Sequence[BCheckReading]) -> tuple[BCheck, ...]:
    """Reduce each B check's readings to Δσ₃, Δu and B (Skempton 1954).

    Parameters
    ----------
    readings : sequence of BCheckReading
        In the order made.

    Raises
    ------
    EngineInputError
        Naming ``b_checks[j].cell_pressure_after`` when the cell pressure did not rise, or
        ``b_checks[j].pore_pressure_after`` when B falls outside 0 to 1.1.
    """
    problems: list[InputProblem] = []
    out: list[BCheck] = []

    def refuse(j: int, field: str, value: float, accepted: str, reason: str, kind: str) -> None:
        problems.append(InputProblem(("b_checks", j, field), reason, value, accepted, kind))

    for j, r in enumerate(readings):
        d_sigma = r.cell_pressure_after_pa - r.cell_pressure_before_pa
        d_u = r.pore_pressure_after_pa - r.pore_pressure_before_pa
        if not d_sigma > 0.0:
            refuse(
                j,
                "cell_pressure_after",
                r.cell_pressure_after_pa,
                "a cell pressure above the one before the check (Δσ₃ > 0)",
                f"is not above the pressure before, {r.cell_pressure_before_pa:g} Pa",
                "impossible_test",
            )
            continue
        b = b_value(d_sigma, d_u)
        if not B_RANGE[0] <= b <= B_RANGE[1]:
            refuse(
                j,
                "pore_pressure_after",
                r.pore_pressure_after_pa,
                "a pore-pressure rise between 0 and 1.1 times the cell-pressure rise",
                f"gives B = {b:.3f}",
                "out_of_range",
            )
            continue
        out.append(BCheck(r.back_pressure_pa, d_sigma, d_u, b, r.time_s))
    if problems:
        raise EngineInputError(problems)
    return tuple(out)


def saturation_series(
    readings: Sequence[BCheckReading],
    *,
    stiff_material: bool,
    standard: str | None,
    permeameter: str | None = FLEXIBLE_WALL,
    rules: RuleBook | None = None,
) -> SaturationSeries:
    """B against back pressure and the verdict of the saturation check.

    Parameters
    ----------
    readings : sequence of BCheckReading
        The B checks in the order made.
    stiff_material : bool
        Declared stiff (B may stay below 0.95 when fully saturated).
    standard : str or None
        E.g. ``"ASTM D5084"``.
    permeameter : {"flexible_wall", "rigid_wall"} or None
        The permeameter used; a B check belongs to the flexible-wall test.
    rules : RuleBook, optional
        The rule book whose saturation rule applies (default: the built-in one); its
        ``b_min`` and ``b_change`` limits decide.

    Notes
    -----
    The verdict is :func:`service.engine.checks.saturation`: B ≥ 0.95, or for a stiff
    material B that changed by at most ``b_change`` between the last two checks
    (ASTM D5084, from memory; the 0.01 tolerance common practice; docs/methods.md §8.5).
    Black & Lee (1973) explain why a stiff, saturated skeleton gives B < 1 (from memory).
    """
    reduced = b_checks(readings)
    b_list = [c.b_value for c in reduced]
    last_change = b_list[-1] - b_list[-2] if len(b_list) >= 2 else None
    return SaturationSeries(
        b_checks=reduced,
        last_change=last_change,
        steps=tuple(SaturationStep(c.b_value, c.back_pressure_pa) for c in reduced),
        check=checks.saturation(
            b_list,
            stiff_material,
            (rules or BUILT_IN).for_standard(standard).rule("saturation"),
            permeameter,
        ),
    )


# --- consolidation -------------------------------------------------------------------------

CONSOLIDATION_RATE_FRACTION = 0.05
"""Default end-of-consolidation rule: the slope of ΔV against √t over the last readings at
most 5 % of the initial slope (≈ 99 % consolidation for Terzaghi's solution; the choice of
5 % is common practice, no source)."""


@dataclass(frozen=True, slots=True)
class VolumeReading:
    """One reading of the consolidation stage.

    Attributes
    ----------
    time_s : float
        Time since the consolidation pressure was applied [s].
    volume_change_m3 : float
        Cumulative volume of water expelled from the specimen since then [m³]
        (positive for compression).
    """

    time_s: float
    volume_change_m3: float


@dataclass(frozen=True, slots=True)
class ConsolidationEnd:
    """End of consolidation judged from the root-time plot.

    Attributes
    ----------
    complete : bool
        The volume change has levelled off (final slope ≤ fraction of the initial slope).
    volume_change_m3 : float
        Volume change at the last reading [m³].
    initial_slope, final_slope : float or None
        dΔV/d√t of the early straight line and of the last readings [m³/√s].
    slope_ratio : float or None
        final_slope/initial_slope [-].
    t100_s : float or None
        Time where the early straight line reaches the last volume change [s].
    rate_fraction : float
        The fraction the rule used.
    """

    complete: bool
    volume_change_m3: float
    initial_slope: float | None
    final_slope: float | None
    slope_ratio: float | None
    t100_s: float | None
    rate_fraction: float


def _line(xs: Sequence[float], ys: Sequence[float]) -> tuple[float, float]:
    """Least-squares line y = a + b·x: returns (a, b)."""
    n = len(xs)
    x_mean = sum(xs) / n
    y_mean = sum(ys) / n
    sxx = sum((x - x_mean) ** 2 for x in xs)
    sxy = sum((x - x_mean) * (y - y_mean) for x, y in zip(xs, ys, strict=True))
    slope = sxy / sxx
    return y_mean - slope * x_mean, slope


def consolidation_end(
    readings: Sequence[VolumeReading],
    *,
    rate_fraction: float = CONSOLIDATION_RATE_FRACTION,
    early_fraction: float = 0.5,
) -> ConsolidationEnd:
    """Judge the end of consolidation from volume change against square-root time.

    Parameters
    ----------
    readings : sequence of VolumeReading
        At least four, times rising.
    rate_fraction : float
        Complete when the final slope is at most this fraction of the initial slope [-].
    early_fraction : float
        Readings up to this fraction of the last volume change make the early line [-].

    Notes
    -----
    Early line: least squares of ΔV = a + b·√t through the readings with
    |ΔV − ΔV_first| ≤ early_fraction·|ΔV_last − ΔV_first| (at least the first two).
    Final slope: least squares through the last three readings. Complete when
    final/initial ≤ rate_fraction.
    t100: √t100 = (ΔV_last − a)/b, the intersection of the early line with the level of the
    last reading.

    For Terzaghi's solution U(T) = 1 − Σ 2/M²·exp(−M²T), M = π(2m + 1)/2, the initial slope
    is dU/d√T = 2/√π and the late slope 4·√T·exp(−π²T/4), so the ratio is
    2·√(πT)·exp(−π²T/4): 5 % at T ≈ 1.85, U ≈ 99.2 % (derived). The root-time plot and its
    intersection construction for t100 follow BS 1377-8:1990 cl. 7 and Head, Manual of
    Soil Laboratory Testing, Vol. 3 (from memory); ASTM D5084 asks that consolidation be
    shown complete from volume change against time (from memory, low confidence); the
    5 % rule is common practice, no source.

    Raises
    ------
    EngineInputError
        Fewer than four readings, or times that do not rise.
    """
    problems: list[InputProblem] = []
    if len(readings) < 4:
        raise EngineInputError.single(
            ("readings",),
            len(readings),
            "at least four volume-change readings",
            "too few readings to judge the end of consolidation",
            "too_few",
        )
    for j, r in enumerate(readings):
        if r.time_s < 0.0 or (j > 0 and r.time_s <= readings[j - 1].time_s):
            problems.append(
                InputProblem(
                    loc=("readings", j, "time"),
                    value=r.time_s,
                    accepted="times of zero or more that rise from reading to reading",
                    reason="is negative or does not come after the previous reading",
                    kind="time_order",
                )
            )
    if problems:
        raise EngineInputError(problems)
    roots = [math.sqrt(r.time_s) for r in readings]
    volumes = [r.volume_change_m3 for r in readings]
    last = volumes[-1]
    span = last - volumes[0]
    if span == 0.0:
        return ConsolidationEnd(True, last, None, None, None, None, rate_fraction)
    early = [j for j, v in enumerate(volumes) if abs(v - volumes[0]) <= early_fraction * abs(span)]
    if len(early) < 2:
        early = [0, 1]
    a, b = _line([roots[j] for j in early], [volumes[j] for j in early])
    _, late = _line(roots[-3:], volumes[-3:])
    if b == 0.0:
        return ConsolidationEnd(False, last, b, late, None, None, rate_fraction)
    ratio = late / b
    t100 = ((last - a) / b) ** 2 if (last - a) / b > 0.0 else None
    return ConsolidationEnd(ratio <= rate_fraction, last, b, late, ratio, t100, rate_fraction)


DIMENSION_METHODS = ("isotropic", "measured_axial")


@dataclass(frozen=True, slots=True)
class SpecimenDimensions:
    """Specimen dimensions after a volume change.

    Attributes
    ----------
    length_m, area_m2, diameter_m, volume_m3 : float
        At permeation [m, m², m, m³].
    volumetric_strain, axial_strain : float
        ε_v = ΔV/V0 and ε_a = ΔH/H0, compression positive [-].
    method : {"isotropic", "measured_axial"}
        How the length was found.
    """

    length_m: float
    area_m2: float
    diameter_m: float
    volume_m3: float
    volumetric_strain: float
    axial_strain: float
    method: str


def dimensions_after_volume_change(
    *,
    length_m: float,
    diameter_m: float,
    volume_change_m3: float,
    axial_change_m: float | None = None,
) -> SpecimenDimensions:
    """Dimensions at permeation from the measured volume change.

    Parameters
    ----------
    length_m, diameter_m : float
        Height H0 and diameter D0 as prepared [m].
    volume_change_m3 : float
        Decrease of specimen volume ΔV since preparation [m³] (negative for swelling): the
        sum over the stages that changed it.
    axial_change_m : float or None
        Measured decrease of height ΔH [m]; None to assume isotropic strain.

    Notes
    -----
    V0 = π·D0²·H0/4; ε_v = ΔV/V0. Isotropic: ε_a = ε_v/3 (small strains); measured:
    ε_a = ΔH/H0. Then H = H0·(1 − ε_a) and A = V/H = A0·(1 − ε_v)/(1 − ε_a), the usual
    triaxial area correction (Head, Manual of Soil Laboratory Testing, Vol. 3; BS 1377-8 —
    from memory). ASTM D5084 requires k from the dimensions at permeation; that it allows
    them from the volume change with isotropic strain is from memory, low confidence.

    Raises
    ------
    EngineInputError
        When the volume or height would not stay above zero.
    """
    area0 = cylinder_area(diameter_m)
    volume0 = area0 * length_m
    eps_v = volume_change_m3 / volume0
    if axial_change_m is None:
        eps_a = eps_v / 3.0
        method = "isotropic"
    else:
        eps_a = axial_change_m / length_m
        method = "measured_axial"
    if not (eps_v < 1.0 and eps_a < 1.0):
        field = "volume_change" if eps_v >= 1.0 else "axial_change"
        raise EngineInputError.single(
            (field,),
            volume_change_m3 if field == "volume_change" else axial_change_m,
            "a change smaller than the specimen's volume and height",
            "would leave no specimen",
            "impossible_test",
        )
    length = length_m * (1.0 - eps_a)
    volume = volume0 * (1.0 - eps_v)
    area = volume / length
    return SpecimenDimensions(
        length_m=length,
        area_m2=area,
        diameter_m=math.sqrt(4.0 * area / math.pi),
        volume_m3=volume,
        volumetric_strain=eps_v,
        axial_strain=eps_a,
        method=method,
    )


def _phase(loc: Loc, value: float, **inputs: Any) -> PhaseRelations:
    """Phase relations, a void ratio that is not positive refused as an input error."""
    try:
        return phase_relations(void_ratio=None, **inputs)
    except ValueError as exc:
        raise EngineInputError.single(
            loc, value, "masses, dimensions and G_s of one specimen", str(exc), "impossible_test"
        ) from None


@dataclass(frozen=True, slots=True)
class PermeationState:
    """The specimen as permeated: dimensions, dry density, void ratio and pore volume."""

    dimensions: SpecimenDimensions
    phase: PhaseRelations
    pore_volume_m3: float | None


def dry_mass(wet_mass_kg: float, water_content: float) -> float:
    """Dry mass of solids from a wet mass and its water content [kg].

    Notes
    -----
    M_s = M/(1 + w) (docs/methods.md §5, standard identity).
    """
    return wet_mass_kg / (1.0 + water_content)


def water_content_from_masses(wet_mass_kg: float, dry_mass_kg: float) -> float:
    """Water content by oven drying [-].

    Notes
    -----
    w = (M − M_s)/M_s (docs/methods.md §5; ASTM D2216 / ISO 17892-1, from memory).
    """
    return (wet_mass_kg - dry_mass_kg) / dry_mass_kg


def permeation_state(
    dimensions: SpecimenDimensions,
    *,
    dry_mass_kg: float,
    specific_gravity: float | None,
    water_density_kg_per_m3: float,
) -> PermeationState:
    """Dry density, void ratio, porosity and pore volume at permeation.

    Parameters
    ----------
    dimensions : SpecimenDimensions
        From :func:`dimensions_after_volume_change`.
    dry_mass_kg : float
        Mass of solids M_s [kg] (unchanged by the stages).
    specific_gravity : float or None
        G_s [-]; without it no void ratio or pore volume.
    water_density_kg_per_m3 : float
        ρ_w of the G_s convention [kg/m³].

    Notes
    -----
    ρ_d = M_s/V, e = G_s·ρ_w/ρ_d − 1, n = e/(1 + e) from
    :func:`service.engine.phase.phase_relations` (given M_s as the mass and w = 0);
    V_v = n·V. Source: docs/methods.md §5.
    """
    phase = _phase(
        ("dry_mass",),
        dry_mass_kg,
        area_m2=dimensions.area_m2,
        length_m=dimensions.length_m,
        wet_mass_kg=dry_mass_kg,
        water_content=0.0,
        specific_gravity=specific_gravity,
        max_dry_density_kg_per_m3=None,
        water_density_kg_per_m3=water_density_kg_per_m3,
    )
    pore = phase.porosity * dimensions.volume_m3 if phase.porosity is not None else None
    return PermeationState(dimensions=dimensions, phase=phase, pore_volume_m3=pore)


# --- after the test ------------------------------------------------------------------------


@dataclass(frozen=True, slots=True)
class PostTestState:
    """Final water content and phase relations of the specimen taken out of the cell."""

    water_content: float
    phase: PhaseRelations


def post_test_state(
    *,
    length_m: float,
    diameter_m: float,
    wet_mass_kg: float,
    dry_mass_kg: float,
    specific_gravity: float | None,
    water_density_kg_per_m3: float,
    max_dry_density_kg_per_m3: float | None = None,
) -> PostTestState:
    """Water content, densities, void ratio and degree of saturation after the test.

    Parameters
    ----------
    length_m, diameter_m : float
        Final height and diameter [m].
    wet_mass_kg, dry_mass_kg : float
        Final wet mass and oven-dry mass of the whole specimen [kg].
    specific_gravity : float or None
        G_s [-].
    water_density_kg_per_m3 : float
        ρ_w of the G_s convention [kg/m³].
    max_dry_density_kg_per_m3 : float or None
        For relative compaction [kg/m³].

    Notes
    -----
    w = (M − M_s)/M_s, then :func:`service.engine.phase.phase_relations` with A = π·D²/4.
    A final degree of saturation well below 100 % after back-pressure saturation points to
    a wrong G_s, mass or dimension (docs/methods.md §5, practice).

    Raises
    ------
    EngineInputError
        When the dry mass is not below the wet mass.
    """
    if not 0.0 < dry_mass_kg <= wet_mass_kg:
        raise EngineInputError.single(
            ("dry_mass",),
            dry_mass_kg,
            "an oven-dry mass above zero and not above the wet mass",
            f"is not between 0 and the wet mass {wet_mass_kg:g} kg",
            "impossible_test",
        )
    w = water_content_from_masses(wet_mass_kg, dry_mass_kg)
    phase = _phase(
        ("dry_mass",),
        dry_mass_kg,
        area_m2=cylinder_area(diameter_m),
        length_m=length_m,
        wet_mass_kg=wet_mass_kg,
        water_content=w,
        specific_gravity=specific_gravity,
        max_dry_density_kg_per_m3=max_dry_density_kg_per_m3,
        water_density_kg_per_m3=water_density_kg_per_m3,
    )
    return PostTestState(water_content=w, phase=phase)
