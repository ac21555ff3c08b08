"""POST /api/v1/reductions: reduce one test's entries to every figure and check; stores nothing."""

from __future__ import annotations

import math
from collections.abc import Callable, Coroutine
from typing import Annotated, Any, Literal

from fastapi import APIRouter, Body, Depends, Request, Response
from fastapi.encoders import jsonable_encoder
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse
from fastapi.routing import APIRoute
from pydantic import BaseModel, ConfigDict, Field

from service.engine import EngineInputError, parse_request, reduce, result_to_dict
from service.security import limit_anonymous_reductions


class _RefusalSafeRoute(APIRoute):
    """Renders payload-shape refusals itself, so a NaN typed into any field is a 422, not a 500."""

    def get_route_handler(self) -> Callable[[Request], Coroutine[Any, Any, Response]]:
        handler = super().get_route_handler()

        async def guarded(request: Request) -> Response:
            try:
                return await handler(request)
            except RequestValidationError as exc:
                detail = _json_safe(jsonable_encoder(exc.errors()))
                return JSONResponse({"detail": detail}, status_code=422)

        return guarded


router = APIRouter(prefix="/api/v1/reductions", tags=["reductions"], route_class=_RefusalSafeRoute)


class QuantityObject(BaseModel):
    """A quantity as an object; ``u`` is the standard uncertainty in the same unit."""

    model_config = ConfigDict(extra="forbid")

    value: float
    unit: str = ""
    u: float | None = None


Quantity = Annotated[
    str | float | QuantityObject,
    Field(description='\'12.5 cm\', or {"value": 12.5, "unit": "cm", "u": 0.05}'),
]
Dimensionless = Annotated[
    float | str | QuantityObject, Field(description="a number, '18.5 %', or an object")
]
Percentage = Annotated[
    float | str | QuantityObject,
    Field(
        description='\'18.5 %\', or {"value": 0.185, "unit": ""} for a fraction; '
        "a bare number is refused"
    ),
]


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid")


class OptionsIn(_Strict):
    reference_temperature: Quantity | None = Field(None, description="default '20 degC'")
    temperature_correction: Literal["iapws", "astm_d5084"] | None = None
    water_density: Literal["temperature", "nominal"] | None = None
    viscosity: Quantity | None = None
    unit_weight: Quantity | None = None


class SpecimenIn(_Strict):
    length: Quantity | None = None
    diameter: Quantity | None = None
    area: Quantity | None = None
    wet_mass: Quantity | None = None
    water_content: Percentage | None = None
    specific_gravity: Dimensionless | None = None
    max_dry_density: Quantity | None = None
    void_ratio: Dimensionless | None = None
    d10: Quantity | None = None
    max_particle_size: Quantity | None = None
    retained_on_lower_sieve: Percentage | None = None
    stiff_material: bool | None = None


class ApparatusIn(_Strict):
    standpipe_area: Quantity | None = None
    standpipe_diameter: Quantity | None = None
    headwater_area: Quantity | None = None
    headwater_diameter: Quantity | None = None
    tailwater_area: Quantity | None = None
    tailwater_diameter: Quantity | None = None
    manometer_spacing: Quantity | None = Field(
        None, description="flow length between manometer ports; replaces specimen length"
    )


class SaturationIn(_Strict):
    back_pressure: Quantity | None = None
    b_value: Dimensionless | None = None


class ReadingIn(_Strict):
    time: Quantity | None = None
    head: Quantity | None = None


class TrialIn(_Strict):
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
    readings: list[ReadingIn] | None = None


class SpecificationIn(_Strict):
    k_max: Quantity | None = None
    decision_rule: Literal["simple", "guard_band"] | None = Field(
        None,
        description="ILAC-G8:09/2019 simple acceptance (w = 0) or guarded acceptance (w = U); "
        "default: the standard's rule set",
    )


class ReductionRequest(_Strict):
    method: Literal["constant_head", "falling_head", "falling_head_rising_tail", "constant_rate"]
    standard: Literal["ASTM D5084", "ASTM D2434", "ASTM D5856", "ISO 17892-11"] | None = None
    options: OptionsIn | None = None
    specimen: SpecimenIn | None = None
    apparatus: ApparatusIn | None = None
    saturation: list[SaturationIn] | None = None
    trials: list[TrialIn]
    specification: SpecificationIn | None = None
    permeameter: Literal["flexible_wall", "rigid_wall"] | None = None


class TrialOut(BaseModel):
    k_m_per_s: float
    k_ref_m_per_s: float
    temperature_factor: float
    gradient: float
    flow_ratio: float | None
    r_squared: float | None
    u_rel: float | None
    discharge_velocity_m_per_s: float
    intrinsic_permeability_m2: float
    slope_std_error_rel: float | None
    head_final_m: float | None
    u_contributions: dict[str, float] | None
    head_term_rel: float | None


class ResultOut(BaseModel):
    k_ref_m_per_s: float
    trials_used: list[int]
    u_rel: float | None
    expanded_u_rel: float | None
    coverage_factor: float | None
    effective_degrees_of_freedom: float | None = Field(
        description="Welch–Satterthwaite ν_eff; null when infinite (no Type A term)"
    )
    decision_rule: Literal["simple", "guard_band"]
    intrinsic_permeability_m2: float
    k_ref_cm_per_s: float
    k_ref_m_per_day: float
    k_ref_ft_per_day: float
    intrinsic_permeability_darcy: float
    u_rel_type_a: float | None


class SpecimenOut(BaseModel):
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


class FlowOut(BaseModel):
    discharge_velocity_m_per_s: float | None
    seepage_velocity_m_per_s: float | None
    reynolds_number: float | None


class PlausibilityOut(BaseModel):
    hazen_k_m_per_s: float | None
    kozeny_carman_k_m_per_s: float | None


class GradientSeriesOut(BaseModel):
    k_through_origin_m_per_s: float
    slope_m_per_s: float
    intercept_m_per_s: float
    r_squared: float
    k_change: float
    non_darcy: bool


class CheckOut(BaseModel):
    id: str
    status: Literal["pass", "warn", "fail", "not_applicable"]
    measured: float | None
    limit: float | None
    message: str
    source: str
    limit_confirmed: bool | None


class ReductionResponse(BaseModel):
    engine_version: str
    rules_version: str
    method: str
    standard: str | None
    permeameter: Literal["flexible_wall", "rigid_wall"] | None
    reference_temperature_c: float
    temperature_correction: str
    trials: list[TrialOut]
    result: ResultOut
    specimen: SpecimenOut
    flow: FlowOut
    plausibility: PlausibilityOut
    gradient_series: GradientSeriesOut | None
    checks: list[CheckOut]
    cautions: list[str]


class ErrorItem(BaseModel):
    loc: list[str | int]
    msg: str
    type: str


class ErrorBody(BaseModel):
    detail: list[ErrorItem]


EXAMPLES: dict[str, dict[str, Any]] = {
    "constant_head": {
        "summary": "Constant head, manometer ports, granular soil (ASTM D2434)",
        "value": {
            "method": "constant_head",
            "standard": "ASTM D2434",
            "specimen": {
                "length": "20 cm",
                "diameter": "10.16 cm",
                "void_ratio": 0.613,
                "d10": "0.30 mm",
                "max_particle_size": "4.75 mm",
                "retained_on_lower_sieve": "20 %",
            },
            "apparatus": {"manometer_spacing": "15.0 cm"},
            "trials": [
                {
                    "volume": {"value": 355, "unit": "mL", "u": 2},
                    "duration": "120 s",
                    "head_difference": "4.50 cm",
                    "temperature": "23.0 degC",
                },
                {
                    "volume": "472 mL",
                    "duration": "120 s",
                    "head_difference": "6.00 cm",
                    "temperature": "23.0 degC",
                },
                {
                    "volume": "590 mL",
                    "duration": "120 s",
                    "head_difference": "7.50 cm",
                    "temperature": "23.1 degC",
                },
            ],
        },
    },
    "falling_head": {
        "summary": "Falling head, constant tailwater (Method B)",
        "value": {
            "method": "falling_head",
            "standard": "ASTM D5856",
            "specimen": {"length": "11.60 cm", "diameter": "7.10 cm"},
            "apparatus": {"standpipe_diameter": "0.60 cm"},
            "trials": [
                {
                    "head_initial": "100.0 cm",
                    "head_final": "70.0 cm",
                    "duration": "3600 s",
                    "temperature": "18.0 degC",
                },
            ],
            "specification": {"k_max": "1e-7 m/s"},
        },
    },
    "falling_head_rising_tail": {
        "summary": "Falling headwater, rising tailwater, unequal burettes (ASTM D5084 Method C)",
        "value": {
            "method": "falling_head_rising_tail",
            "standard": "ASTM D5084",
            "specimen": {
                "length": "7.32 cm",
                "diameter": "7.11 cm",
                "wet_mass": "560.0 g",
                "water_content": "22.4 %",
                "specific_gravity": 2.72,
                "max_dry_density": "1.680 g/cm**3",
            },
            "apparatus": {"headwater_area": "0.710 cm**2", "tailwater_area": "0.950 cm**2"},
            "permeameter": "flexible_wall",
            "saturation": [{"back_pressure": "300 kPa", "b_value": 0.96}],
            "trials": [
                {
                    "head_initial": "125.0 cm",
                    "duration": "1 day",
                    "inflow_volume": "9.75 mL",
                    "outflow_volume": "9.50 mL",
                    "temperature": "21.5 degC",
                },
                {
                    "head_initial": "125.0 cm",
                    "duration": "1 day",
                    "inflow_volume": "9.60 mL",
                    "outflow_volume": "9.40 mL",
                    "temperature": "21.0 degC",
                },
                {
                    "head_initial": "125.0 cm",
                    "duration": "1 day",
                    "inflow_volume": "9.90 mL",
                    "outflow_volume": "9.70 mL",
                    "temperature": "21.5 degC",
                },
                {
                    "head_initial": "125.0 cm",
                    "duration": "1 day",
                    "inflow_volume": "9.70 mL",
                    "outflow_volume": "9.55 mL",
                    "temperature": "22.0 degC",
                },
            ],
            "specification": {"k_max": "1e-9 m/s", "decision_rule": "guard_band"},
        },
    },
    "constant_rate": {
        "summary": "Constant rate of flow with a differential pressure transducer (Method D)",
        "value": {
            "method": "constant_rate",
            "specimen": {"length": "7.30 cm", "diameter": "7.10 cm"},
            "trials": [
                {
                    "flow_rate": "0.020 mL/min",
                    "pressure_difference": "35 kPa",
                    "temperature": "20.0 degC",
                },
            ],
        },
    },
    "readings": {
        "summary": "Multi-reading falling-head run reduced by regression of ln h on t",
        "value": {
            "method": "falling_head",
            "specimen": {"length": "10.0 cm", "diameter": "5.08 cm"},
            "apparatus": {"standpipe_area": "0.300 cm**2"},
            "trials": [
                {
                    "readings": [
                        {"time": "0 s", "head": "120.0 cm"},
                        {"time": "600 s", "head": "110.7 cm"},
                        {"time": "1200 s", "head": "102.0 cm"},
                        {"time": "1800 s", "head": "94.1 cm"},
                        {"time": "2400 s", "head": "86.8 cm"},
                        {"time": "3000 s", "head": "80.0 cm"},
                    ],
                    "temperature": "20.0 degC",
                }
            ],
        },
    },
}


def _json_safe(value: Any) -> Any:
    """The received value with NaN and infinities as text, so the 422 itself can be rendered."""
    if isinstance(value, float) and not math.isfinite(value):
        return str(value)
    if isinstance(value, dict):
        return {str(k): _json_safe(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_json_safe(v) for v in value]
    return value


def error_detail(exc: EngineInputError) -> list[dict[str, Any]]:
    """The engine's refusals in the shape of FastAPI's validation errors (``loc`` from ``body``)."""
    return [
        {
            "loc": ["body", *p.loc],
            "msg": p.msg,
            "type": p.kind,
            "input": _json_safe(p.value),
            "ctx": {"accepted": p.accepted},
        }
        for p in exc.problems
    ]


@router.post(
    "",
    # Open to anonymous callers, within a rate and a body size (service/security.py).
    dependencies=[Depends(limit_anonymous_reductions)],
    response_model=ReductionResponse,
    summary="Reduce one test's entries (stores nothing)",
    responses={422: {"model": ErrorBody, "description": "A field refused, named with its value"}},
)
def create_reduction(
    request: Annotated[ReductionRequest, Body(openapi_examples=EXAMPLES)],
) -> dict[str, Any] | JSONResponse:
    """Reduce the trials of one test to hydraulic conductivity, with every check of its standard.

    Quantities take any unit of the right dimension. Refusals and impossible tests answer
    422 naming the field, the value received and what is accepted.
    """
    payload = request.model_dump(exclude_none=True)
    try:
        return result_to_dict(reduce(parse_request(payload)))
    except EngineInputError as exc:
        return JSONResponse({"detail": error_detail(exc)}, status_code=422)
