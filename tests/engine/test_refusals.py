"""Every refusal of parse_request names the field, the value and what is accepted."""

from __future__ import annotations

import pytest

from service.engine import EngineInputError, parse_request
from service.engine.errors import field_name
from tests.engine.helpers import cv1
from tests.engine.refusal_cases import REFUSALS


@pytest.mark.parametrize(
    ("name", "build", "mutate", "loc", "kind"), REFUSALS, ids=[r[0] for r in REFUSALS]
)
def test_refusal(name, build, mutate, loc, kind):
    payload = build()
    mutate(payload)
    with pytest.raises(EngineInputError) as info:
        parse_request(payload)
    locs = {(p.loc, p.kind) for p in info.value.problems}
    assert (loc, kind) in locs, info.value.problems
    problem = next(p for p in info.value.problems if p.loc == loc)
    assert problem.msg.startswith(field_name(loc))
    assert "accepted:" in problem.msg
    assert problem.accepted


def test_all_problems_are_reported_together():
    # a refused form shows every bad field at once
    payload = cv1()
    payload["trials"][0]["duration"] = "0 s"
    payload["specimen"]["diameter"] = "12 kg"
    with pytest.raises(EngineInputError) as info:
        parse_request(payload)
    assert {p.loc for p in info.value.problems} >= {
        ("trials", 0, "duration"),
        ("specimen", "diameter"),
    }


def test_bad_default_uncertainty_is_named():
    with pytest.raises(EngineInputError) as info:
        parse_request(cv1(), default_uncertainties={"volume": "2 s"})
    assert info.value.loc == ("default_uncertainties", "volume")
    with pytest.raises(EngineInputError) as info:
        parse_request(cv1(), default_uncertainties={"volumes": "2 mL"})
    assert info.value.loc == ("default_uncertainties", "volumes")


def test_payload_must_be_an_object():
    with pytest.raises(EngineInputError):
        parse_request([1, 2])  # type: ignore[arg-type]


def test_reduce_never_returns_a_non_finite_figure():
    # issue 15: a figure out of float range once reached JSON. Built without parse_request (so
    # past its plausible magnitudes), this specimen gives a finite k of 1e300 m/s but a
    # discharge velocity Q/(A·t) = 1e300/1e-300 that overflows: the engine refuses it.
    from service.engine import reduce
    from service.engine.model import ReductionInput, Specimen, Trial

    inp = ReductionInput(
        method="constant_head",
        specimen=Specimen(area_m2=1e-300, length_m=1e-300),
        trials=(Trial(volume_m3=1e300, duration_s=1.0, head_difference_m=1.0),),
    )
    with pytest.raises(EngineInputError) as info:
        reduce(inp)
    assert info.value.kind == "impossible_test"
