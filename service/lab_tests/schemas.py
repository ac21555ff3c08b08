"""Request and response schemas of the test lifecycle (requests, specimen, trials, sign-offs).

The models that carry a test's entries (a trial, a reading, the specimen, the conditions,
and every section of the stateless reduction request) are built from the method catalogue:
one field per entry, described with its label, unit and example. A new catalogue entry
appears in them, and in the OpenAPI documentation, without a change here.
"""

from __future__ import annotations

from datetime import date, datetime
from typing import TYPE_CHECKING, Annotated, Any, Literal

from pydantic import BaseModel, ConfigDict, Field, create_model, field_validator

from service.common import Preparation, TestMethod
from service.lab_tests.reduction import Check, Entry, Scope, catalogue

REFERENCE_TEMPERATURES_C = (10.0, 20.0, 27.0)
if TYPE_CHECKING:
    StandardId = str
    MethodId = str
    PermeameterId = str
else:
    StandardId = Literal[catalogue.standard_ids()]
    MethodId = Literal[catalogue.method_ids()]
    PermeameterId = Literal[catalogue.permeameter_ids()]
Correction = Literal["iapws", "astm_d5084"]
MAX_READINGS = 5000


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


def _described(entry: Entry) -> str:
    unit = f" [{entry.units.si}]" if entry.units else ""
    example = f", e.g. '{entry.example}'" if entry.example else ""
    return f"{entry.label}{unit}{example}. {entry.help}".strip()


def entry_field(entry: Entry, *, typed_only: bool = False) -> tuple[Any, Any]:
    """A model field for one catalogue entry: its type and its description."""
    examples = [entry.example] if entry.example else None
    info = Field(None, title=entry.label, description=_described(entry), examples=examples)
    if entry.is_flag:
        return bool | None, info
    if entry.choices:
        return Literal[entry.choices] | None, info
    if entry.is_text:
        return Annotated[str, Field(max_length=100)] | None, info
    return (Typed if typed_only else Quantity) | None, info


def entries_model(
    name: str,
    entries: tuple[Entry, ...],
    *,
    doc: str,
    typed_only: bool = False,
    base: type[BaseModel] = _Strict,
    **extra: Any,
) -> type[BaseModel]:
    """A request model with one optional field per entry (and the `extra` fields)."""
    fields: dict[str, Any] = {e.id: entry_field(e, typed_only=typed_only) for e in entries}
    fields.update(extra)
    return create_model(name, __base__=base, __doc__=doc, **fields)


def _all(scope: Scope) -> tuple[Entry, ...]:
    return catalogue.entries(scope)


if TYPE_CHECKING:  # the models below are built at run time; for mypy they take any field

    class _Entries(_Strict):
        def __init__(self, **data: Any) -> None: ...


if TYPE_CHECKING:

    class ReadingIn(_Entries): ...

    class TrialEntries(_Entries): ...

else:
    ReadingIn = entries_model("ReadingIn", _all(Scope.READING), doc="One reading of a run.")
    TrialEntries = entries_model(
        "TrialEntries",
        _all(Scope.TRIAL),
        doc="One trial in the reduction contract's shape, stored exactly as sent.",
        readings=(list[ReadingIn] | None, Field(None, max_length=MAX_READINGS)),
    )


if TYPE_CHECKING:

    class OptionsIn(_Entries): ...

    class SpecimenIn(_Entries): ...

    class ApparatusIn(_Entries): ...

    class SaturationIn(_Entries): ...

    class SpecificationIn(_Entries): ...

else:
    OptionsIn = entries_model("OptionsIn", _all(Scope.OPTION), doc="How to reduce.")
    SpecimenIn = entries_model(
        "SpecimenIn",
        tuple(e for e in _all(Scope.SPECIMEN) if e.si_field or e.replaces),
        doc="The specimen as measured.",
    )
    ApparatusIn = entries_model(
        "ApparatusIn", _all(Scope.APPARATUS), doc="The permeameter's geometry."
    )
    SaturationIn = entries_model(
        "SaturationIn", _all(Scope.SATURATION), doc="One back-pressure step and its B-value."
    )
    SpecificationIn = entries_model(
        "SpecificationIn", _all(Scope.SPECIFICATION), doc="The limit the result is held to."
    )


class ReductionRequest(_Strict):
    """One test's entries in the reduction contract's shape (POST /api/v1/reductions)."""

    method: MethodId
    standard: StandardId | None = None
    options: OptionsIn | None = None
    specimen: SpecimenIn | None = None
    apparatus: ApparatusIn | None = None
    saturation: list[SaturationIn] | None = None
    trials: list[TrialEntries]
    specification: SpecificationIn | None = None
    permeameter: PermeameterId | None = Field(
        None, description="flexible_wall or rigid_wall; under ASTM D5084 the default is flexible"
    )


# --- Requests -------------------------------------------------------------------------

_CONDITIONS = tuple(e for e in _all(Scope.TEST) if e.is_quantity and e.id not in ("spec_k_max",))


class _TestFieldsBase(_Strict):
    standard: StandardId | None = None
    reference_temperature_c: float = Field(
        20.0, description="reference temperature of k_ref: 20 °C, or 10 or 27 °C"
    )
    temperature_correction: Correction = "iapws"
    spec_k_max: Annotated[str, Field(max_length=60)] | None = Field(
        None, description="specification limit on k_ref, e.g. '1e-9 m/s'; default: the project's"
    )
    permeant: Annotated[str, Field(max_length=100)] | None = None
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


if TYPE_CHECKING:

    class _TestFields(_TestFieldsBase):
        def __init__(self, **data: Any) -> None: ...

else:
    _TestFields = entries_model(
        "_TestFields",
        _CONDITIONS,
        doc="A test's request and conditions.",
        typed_only=True,
        base=_TestFieldsBase,
    )


class TestCreate(_TestFields):
    """Request a permeability test on a sample."""

    method: TestMethod


class TestUpdate(_TestFields):
    """Change a test's request, conditions or assignment; `version` is the one you read."""

    version: int = Field(ge=1)
    method: TestMethod | None = None
    reference_temperature_c: float = 20.0


# Specimen entries a form types with a unit (the specific gravity is a plain number).
SPECIMEN_TYPED = tuple(
    e for e in _all(Scope.SPECIMEN) if e.is_quantity and e.on_forms and not e.is_number
)


class _SpecimenBase(_Strict):
    version: int | None = Field(None, ge=1)
    preparation: Preparation | None = None
    specific_gravity: float | None = Field(None, gt=1.0, le=5.0)
    stiff_material: bool | None = None
    description: Annotated[str, Field(max_length=300)] | None = None


if TYPE_CHECKING:

    class SpecimenWrite(_SpecimenBase):
        def __init__(self, **data: Any) -> None: ...

else:
    SpecimenWrite = entries_model(
        "SpecimenWrite",
        SPECIMEN_TYPED,
        doc="Record or change the specimen; only the fields sent change (null clears one). "
        "`version` is required once the specimen exists.",
        typed_only=True,
        base=_SpecimenBase,
    )


class SaturationStepCreate(_Strict):
    back_pressure: Typed = Field(description="e.g. '345 kPa'")
    b_value: float = Field(ge=0.0, le=1.1, description="Skempton's B after this step")


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
    """One refused or missing entry: its path, its name in words, what was sent, what is
    accepted."""

    loc: list[str | int]
    msg: str
    type: str
    field: str = ""
    label: str = ""
    value: Any = None
    accepted: str = ""


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


class LiveReduction(BaseModel):
    """The test's reduction as it stands; `pending` names what is still missing for one."""

    engine_version: str
    trials: list[TrialOutput]
    result: dict[str, Any] | None
    checks: list[Check]
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
