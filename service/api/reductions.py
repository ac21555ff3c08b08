"""POST /api/v1/reductions: reduce one test's entries to every figure and check; stores nothing.

The request model and its examples come from the method catalogue (through the lab-tests
door); refusals are 422 problem details naming each field (service/api/problems.py)."""

from __future__ import annotations

from typing import Annotated, Any, Literal

from fastapi import APIRouter, Body, Depends
from pydantic import BaseModel, Field

from service.deps import SessionDep
from service.errors import InvalidInput
from service.lab_tests.reduction import (
    Check,
    Flow,
    GradientSeries,
    SpecimenResult,
    TrialResult,
    catalogue,
    reduce_payload,
)
from service.lab_tests.schemas import ReductionRequest
from service.security import limit_anonymous_reductions

router = APIRouter(prefix="/api/v1/reductions", tags=["reductions"])


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


class PlausibilityOut(BaseModel):
    hazen_k_m_per_s: float | None
    kozeny_carman_k_m_per_s: float | None


class ReductionResponse(BaseModel):
    """The contract's response; the figures of trials, specimen, flow and checks have the
    engine's own shape."""

    engine_version: str
    rules_version: str
    method: str
    standard: str | None
    permeameter: Literal["flexible_wall", "rigid_wall"] | None
    reference_temperature_c: float
    temperature_correction: str
    trials: list[TrialResult]
    result: ResultOut
    specimen: SpecimenResult
    flow: Flow
    plausibility: PlausibilityOut
    gradient_series: GradientSeries | None
    checks: list[Check]
    cautions: list[str]


EXAMPLES: dict[str, dict[str, Any]] = {
    method.id: {
        "summary": f"{method.name}: {method.summary}",
        "value": catalogue.example_request(method.id),
    }
    for method in catalogue.METHODS
}
EXAMPLES["readings"] = {
    "summary": "A falling-head run of timed readings, reduced by regression of ln h on t",
    "value": catalogue.example_request("falling_head", readings=True),
}


@router.post(
    "",
    # Open to anonymous callers, within a rate and a body size (service/security.py).
    dependencies=[Depends(limit_anonymous_reductions)],
    response_model=ReductionResponse,
    summary="Reduce one test's entries (stores nothing)",
    responses={
        422: {
            "content": {"application/problem+json": {}},
            "description": "Problem details: a field refused, named with its value and what "
            "is accepted (errors[].loc, label, msg, value, accepted)",
        }
    },
)
def create_reduction(
    request: Annotated[ReductionRequest, Body(openapi_examples=EXAMPLES)],
    session: SessionDep,
) -> dict[str, Any]:
    """Reduce the trials of one test to hydraulic conductivity, with every check of its standard.

    Checks are judged by the laboratory's accredited scope as it stands (`rules_version`).
    Quantities take any unit of the right dimension. Refusals and impossible tests answer
    422 naming the field, the value received and what is accepted.
    """
    reduced = reduce_payload(request.model_dump(exclude_none=True), session=session)
    if reduced.result is None:
        raise InvalidInput(problems=reduced.problems)
    return reduced.result
