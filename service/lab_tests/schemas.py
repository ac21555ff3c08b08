"""Request and response schemas of the test lifecycle (requests, specimen, trials, sign-offs)."""

from __future__ import annotations

from datetime import date, datetime
from typing import Annotated, Any, Literal

from pydantic import BaseModel, ConfigDict, Field, field_validator

from service.common import Preparation, TestMethod

REFERENCE_TEMPERATURES_C = (10.0, 20.0, 27.0)
Standard = Literal["ASTM D5084", "ASTM D2434", "ASTM D5856", "ISO 17892-11"]
Correction = Literal["iapws", "astm_d5084"]


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", allow_inf_nan=False)


class QuantityIn(_Strict):
    """A quantity as an object; ``u`` is the standard uncertainty in the same unit."""

    value: float
    unit: str = Field("", max_length=30)
    u: float | None = Field(None, ge=0)


Typed = Annotated[
    str, Field(max_length=40, description="a number and its unit as typed, e.g. '7.11 cm'")
]
Quantity = Annotated[
    Typed | float | QuantityIn,
    Field(description='\'12.5 cm\', or {"value": 12.5, "unit": "cm", "u": 0.05}'),
]


# --- Requests -------------------------------------------------------------------------


class _TestFields(_Strict):
    standard: Standard | None = None
    target_dry_density: Typed | None = Field(None, description="e.g. '1.68 g/cm**3'")
    reference_temperature_c: float = Field(
        20.0, description="reference temperature of k_ref: 20 °C, or 10 or 27 °C"
    )
    temperature_correction: Correction = "iapws"
    spec_k_max: Annotated[str, Field(max_length=60)] | None = Field(
        None, description="specification limit on k_ref, e.g. '1e-9 m/s'; default: the project's"
    )
    permeant: Annotated[str, Field(max_length=100)] | None = None
    cell_pressure: Typed | None = Field(None, description="flexible wall: e.g. '550 kPa'")
    back_pressure: Typed | None = Field(None, description="e.g. '515 kPa'")
    effective_confining: Typed | None = Field(None, description="e.g. '35 kPa'")
    technician_id: int | None = None
    apparatus_ids: list[int] | None = Field(
        None, description="register items used: permeameter, balance, thermometer, timer ..."
    )

    @field_validator("reference_temperature_c")
    @classmethod
    def _reference_allowed(cls, value: float) -> float:
        if value not in REFERENCE_TEMPERATURES_C:
            allowed = ", ".join(f"{t:g}" for t in REFERENCE_TEMPERATURES_C)
            raise ValueError(f"{value:g} is not offered; accepted: {allowed} (°C)")
        return value


class TestCreate(_TestFields):
    """Request a permeability test on a sample."""

    __test__ = False
    method: TestMethod


class TestUpdate(_TestFields):
    """Change a test's request, conditions or assignment; `version` is the one you read."""

    __test__ = False
    version: int = Field(ge=1)
    method: TestMethod | None = None
    reference_temperature_c: float = 20.0


class SpecimenWrite(_Strict):
    """Record or change the specimen; only the fields sent change (null clears one).

    `version` is required once the specimen exists."""

    version: int | None = Field(None, ge=1)
    preparation: Preparation | None = None
    diameter: Typed | None = None
    length: Typed | None = None
    wet_mass: Typed | None = None
    water_content: Typed | None = Field(None, description="'22.4 %' or '0.224'")
    specific_gravity: float | None = Field(None, gt=1.0, le=5.0)
    max_dry_density: Typed | None = None
    d10: Typed | None = None
    max_particle_size: Typed | None = None
    retained_on_lower_sieve: Typed | None = Field(None, description="'40 %'")
    stiff_material: bool | None = None
    final_diameter: Typed | None = Field(None, description="after consolidation")
    final_length: Typed | None = Field(None, description="after consolidation")
    description: Annotated[str, Field(max_length=300)] | None = None


class SaturationStepCreate(_Strict):
    back_pressure: Typed = Field(description="e.g. '345 kPa'")
    b_value: float = Field(ge=0.0, le=1.1, description="Skempton's B after this step")


class ReadingIn(_Strict):
    time: Quantity | None = None
    head: Quantity | None = None


class TrialEntries(_Strict):
    """One trial in the reduction contract's shape, stored exactly as sent."""

    volume: Quantity | None = None
    water_mass: Quantity | None = None
    duration: Quantity | None = None
    head_difference: Quantity | None = None
    pressure_difference: Quantity | None = None
    inflow_volume: Quantity | None = None
    outflow_volume: Quantity | None = None
    head_initial: Quantity | None = None
    head_final: Quantity | None = None
    flow_rate: Quantity | None = None
    temperature: Quantity | None = None
    readings: list[ReadingIn] | None = Field(None, max_length=5000)


class TrialCreate(TrialEntries):
    """A new trial; send it with an `Idempotency-Key` header."""


class TrialUpdate(TrialEntries):
    """Change a trial's entries: the fields sent replace theirs, null removes one."""

    version: int = Field(ge=1)


class TrialExclusion(_Strict):
    version: int = Field(ge=1)
    reason: str = Field("", max_length=300, description="required to exclude")


class SignOffRequest(_Strict):
    """Re-enter your password to sign; `version` (optional) must match the test you reviewed."""

    password: str = Field(max_length=200)
    version: int | None = Field(None, ge=1)
    note: str = Field("", max_length=1000)


class SendBackRequest(_Strict):
    reason: str = Field(max_length=1000)
    version: int | None = Field(None, ge=1)


class CorrectionRequest(_Strict):
    reason: str = Field(max_length=1000)


# --- Responses ------------------------------------------------------------------------


class ReadingRead(BaseModel):
    seq: int
    time_s: float
    time_text: str
    head_m: float
    head_text: str


class TrialRead(BaseModel):
    id: int
    test_id: int
    seq: int
    idempotency_key: str
    entries: dict[str, Any]
    duration_s: float | None
    temperature_c: float | None
    volume_m3: float | None
    head_difference_m: float | None
    head_initial_m: float | None
    head_final_m: float | None
    excluded: bool
    exclusion_reason: str
    k_m_per_s: float | None
    k_ref_m_per_s: float | None
    gradient: float | None
    recorded_by_id: int | None
    recorded_at: datetime
    version: int
    readings: list[ReadingRead] = []


class SpecimenRead(BaseModel):
    id: int
    preparation: str
    diameter_m: float | None
    diameter_text: str
    length_m: float | None
    length_text: str
    wet_mass_kg: float | None
    wet_mass_text: str
    water_content: float | None
    water_content_text: str
    specific_gravity: float | None
    max_dry_density_kg_per_m3: float | None
    max_dry_density_text: str
    d10_m: float | None
    d10_text: str
    max_particle_size_m: float | None
    max_particle_size_text: str
    retained_on_lower_sieve_pct: float | None
    stiff_material: bool
    final_diameter_m: float | None
    final_diameter_text: str
    final_length_m: float | None
    final_length_text: str
    description: str
    recorded_by_id: int | None
    updated_at: datetime
    version: int


class SaturationStepRead(BaseModel):
    seq: int
    back_pressure_kpa: float
    back_pressure_text: str
    b_value: float
    recorded_at: datetime


class SignOffRead(BaseModel):
    id: int
    user_id: int
    role: str
    meaning: str
    content_hash: str
    test_version: int
    note: str
    signed_at: datetime


class ApparatusRef(BaseModel):
    id: int
    identifier: str
    kind: str
    resolution_text: str
    calibration_due: date | None


class TestSummary(BaseModel):
    __test__ = False
    id: int
    sample_id: int
    series: int
    revision: int
    method: str
    standard: str
    state: str
    technician_id: int | None
    due_date: date | None
    result_k_ref_m_per_s: float | None
    supersedes_id: int | None
    superseded_by_id: int | None
    version: int


class TestRead(TestSummary):
    correction_reason: str
    reviewer_id: int | None
    permeant: str
    reference_temperature_c: float
    temperature_correction: str
    target_dry_density_kg_per_m3: float | None
    target_dry_density_text: str
    spec_k_max_m_per_s: float | None
    spec_k_max_text: str
    cell_pressure_kpa: float | None
    cell_pressure_text: str
    back_pressure_kpa: float | None
    back_pressure_text: str
    effective_confining_kpa: float | None
    effective_confining_text: str
    default_uncertainties: dict[str, Any]
    result: dict[str, Any] | None
    engine_version: str
    input_hash: str
    sent_back_reason: str
    requested_at: datetime
    started_at: datetime | None
    submitted_at: datetime | None
    approved_at: datetime | None
    issued_at: datetime | None
    requested_by_id: int | None
    apparatus: list[ApparatusRef]
    specimen: SpecimenRead | None
    saturation: list[SaturationStepRead]
    trials: list[TrialRead]
    sign_offs: list[SignOffRead]


class ProblemRead(BaseModel):
    loc: list[str | int]
    msg: str
    type: str


class TrialOutput(BaseModel):
    """The engine's figures for one included trial (contract fields plus its trial id)."""

    trial_id: int
    seq: int
    k_m_per_s: float
    k_ref_m_per_s: float
    temperature_factor: float
    gradient: float
    flow_ratio: float | None
    r_squared: float | None
    u_rel: float | None


class CheckRead(BaseModel):
    id: str
    status: str
    measured: float | None
    limit: float | None
    message: str
    source: str


class LiveReduction(BaseModel):
    """The test's reduction as it stands; `pending` names what is still missing for one."""

    engine_version: str
    trials: list[TrialOutput]
    result: dict[str, Any] | None
    checks: list[CheckRead]
    pending: list[ProblemRead]


class TrialWritten(BaseModel):
    trial: TrialRead
    test_state: str
    test_version: int
    reduction: LiveReduction


class RecomputeRead(BaseModel):
    test_id: int
    matches: bool
    result_matches: bool
    input_matches: bool
    stored_engine_version: str
    current_engine_version: str
    stored_input_hash: str
    recomputed_input_hash: str
    stored_k_ref_m_per_s: float | None
    recomputed_k_ref_m_per_s: float | None
    differences: list[str]
