"""Frozen dataclasses the engine takes and returns: SI floats in, SI floats out.

Field names carry their unit (``length_m``); temperatures are in degree Celsius. Each
input record keeps the standard uncertainties it was given in ``u``, keyed by field name.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field

from service.engine import catalogue
from service.engine.checks import Check


@dataclass(frozen=True, slots=True)
class Options:
    """How to reduce: reference temperature, correction method, water-density convention.

    ``reference_temperature_c`` None means the rule set's own (docs/methods.md §4.5).
    """

    reference_temperature_c: float | None = None
    temperature_correction: str = "iapws"
    water_density: str = "temperature"
    viscosity_pa_s: float | None = None
    unit_weight_n_per_m3: float | None = None


@dataclass(frozen=True, slots=True)
class Specimen:
    """The specimen as measured; ``area_m2`` is derived from the diameter when given so."""

    area_m2: float
    length_m: float | None = None
    diameter_m: float | None = None
    wet_mass_kg: float | None = None
    water_content: float | None = None
    specific_gravity: float | None = None
    max_dry_density_kg_per_m3: float | None = None
    void_ratio: float | None = None
    d10_m: float | None = None
    max_particle_size_m: float | None = None
    retained_on_lower_sieve: float | None = None
    stiff_material: bool = False
    u: Mapping[str, float] = field(default_factory=dict)


@dataclass(frozen=True, slots=True)
class Apparatus:
    """Standpipe and burette areas [m²] and manometer port spacing [m]."""

    standpipe_area_m2: float | None = None
    headwater_area_m2: float | None = None
    tailwater_area_m2: float | None = None
    manometer_spacing_m: float | None = None
    u: Mapping[str, float] = field(default_factory=dict)


@dataclass(frozen=True, slots=True)
class SaturationStep:
    """One B-value determination."""

    b_value: float
    back_pressure_pa: float | None = None


@dataclass(frozen=True, slots=True)
class Reading:
    """One reading of a multi-reading falling-head run, with its standard uncertainties."""

    time_s: float
    head_m: float
    time_u_s: float | None = None
    head_u_m: float | None = None


# The trial's numeric fields, named as the catalogue's trial entries name them.
TRIAL_NUMBERS = tuple(dict.fromkeys(e.si_field for e in catalogue.TRIAL if e.si_field))


@dataclass(frozen=True, slots=True)
class Trial:
    """One determination: the fields its method needs, others None."""

    volume_m3: float | None = None
    water_mass_kg: float | None = None
    duration_s: float | None = None
    head_difference_m: float | None = None
    pressure_difference_pa: float | None = None
    inflow_volume_m3: float | None = None
    outflow_volume_m3: float | None = None
    head_initial_m: float | None = None
    head_final_m: float | None = None
    flow_rate_m3_per_s: float | None = None
    temperature_c: float | None = None
    readings: tuple[Reading, ...] | None = None
    u: Mapping[str, float] = field(default_factory=dict)


@dataclass(frozen=True, slots=True)
class ReductionInput:
    """A whole test to reduce, validated and in SI."""

    method: str
    specimen: Specimen
    trials: tuple[Trial, ...]
    standard: str | None = None
    options: Options = field(default_factory=Options)
    apparatus: Apparatus = field(default_factory=Apparatus)
    saturation: tuple[SaturationStep, ...] = ()
    k_max_m_per_s: float | None = None
    permeameter: str | None = None
    decision_rule: str | None = None


@dataclass(frozen=True, slots=True)
class TrialResult:
    """Reduced figures of one trial."""

    k_m_per_s: float
    k_ref_m_per_s: float
    temperature_factor: float
    gradient: float
    flow_ratio: float | None
    r_squared: float | None
    u_rel: float | None
    discharge_velocity_m_per_s: float
    intrinsic_permeability_m2: float
    slope_std_error_rel: float | None = None
    head_final_m: float | None = None
    u_contributions: Mapping[str, float] | None = None
    head_term_rel: float | None = None


@dataclass(frozen=True, slots=True)
class Summary:
    """The representative result of the test."""

    k_ref_m_per_s: float
    trials_used: tuple[int, ...]
    u_rel: float | None
    expanded_u_rel: float | None
    u_rel_type_a: float | None
    intrinsic_permeability_m2: float
    coverage_factor: float | None = None
    effective_degrees_of_freedom: float | None = None


@dataclass(frozen=True, slots=True)
class SpecimenResult:
    """Specimen figures: area and phase relations (None where not computable)."""

    area_m2: float
    volume_m3: float | None
    bulk_density_kg_per_m3: float | None
    dry_density_kg_per_m3: float | None
    void_ratio: float | None
    porosity: float | None
    degree_of_saturation: float | None
    relative_compaction_pct: float | None
    water_density_kg_per_m3: float
    water_density_convention: str


@dataclass(frozen=True, slots=True)
class Flow:
    """Flow figures of the trial with the largest discharge velocity among those used."""

    discharge_velocity_m_per_s: float | None
    seepage_velocity_m_per_s: float | None
    reynolds_number: float | None


@dataclass(frozen=True, slots=True)
class GradientSeries:
    """Discharge velocity against gradient over constant-head runs (None if fewer than 2)."""

    k_through_origin_m_per_s: float
    slope_m_per_s: float
    intercept_m_per_s: float
    r_squared: float
    k_change: float
    non_darcy: bool


@dataclass(frozen=True, slots=True)
class ReductionResult:
    """Everything the engine derives from one :class:`ReductionInput`."""

    engine_version: str
    method: str
    standard: str | None
    reference_temperature_c: float
    temperature_correction: str
    trials: tuple[TrialResult, ...]
    summary: Summary
    specimen: SpecimenResult
    flow: Flow
    hazen_k_m_per_s: float | None
    kozeny_carman_k_m_per_s: float | None
    gradient_series: GradientSeries | None
    checks: tuple[Check, ...]
    rules_version: str = ""
    permeameter: str | None = None
    decision_rule: str = "simple"
