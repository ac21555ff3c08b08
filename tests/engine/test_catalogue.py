"""The method catalogue: one declaration per entry, and what is derived from it."""

from __future__ import annotations

from dataclasses import replace

import pytest

from service.common import TestMethod
from service.engine import EngineInputError, catalogue, parse_request
from service.engine.catalogue import Scope
from tests.engine.helpers import cv1, cv2, run


def test_methods_match_the_database_enumeration():
    # the stored test's CHECK constraint lists TestMethod; the catalogue must offer the same
    assert set(catalogue.method_ids()) == {m.value for m in TestMethod}


def test_each_method_has_one_name_and_one_short_name():
    names = [m.name for m in catalogue.METHODS]
    assert len(set(names)) == len(names)
    assert (
        catalogue.method_name("falling_head_rising_tail") == "Falling headwater, rising tailwater"
    )


def test_every_trial_entry_a_method_names_is_declared():
    for method in catalogue.METHODS:
        for need in method.needs:
            assert set(need.ids) <= set(method.trial), (method.id, need)
        for need in method.apparatus_needs:
            for entry_id in need.ids:
                catalogue.entry(Scope.APPARATUS, entry_id)


@pytest.mark.parametrize(
    ("loc", "numbers", "label"),
    [
        (("trials", 2, "head_final"), None, "Trial 3 · Head at end"),
        (("trials", 1, "duration"), [3, 5], "Trial 5 · Duration"),
        (("specimen", "length"), None, "Specimen · Length"),
        (("trials", 0, "readings", 3, "head"), None, "Trial 1 · Reading 4 · Head"),
        (("saturation", 0, "b_value"), None, "Saturation step 1 · B-value"),
        (("specification", "k_max"), None, "Specification limit on k"),
        ((), None, "Request"),
    ],
)
def test_a_field_is_named_by_its_label_and_position(loc, numbers, label):
    assert catalogue.label_of(loc, numbers) == label


@pytest.mark.parametrize("method_id", catalogue.method_ids())
def test_the_example_request_of_each_method_reduces(method_id):
    body = run(catalogue.example_request(method_id))
    assert body["result"]["k_ref_m_per_s"] > 0


def test_a_readings_example_reduces():
    body = run(catalogue.example_request("falling_head", readings=True))
    assert body["trials"][0]["r_squared"] > 0.99


def test_missing_entries_are_worded_from_the_needs():
    payload = cv1()
    del payload["trials"][0]["volume"]
    with pytest.raises(EngineInputError) as info:
        parse_request(payload)
    (problem,) = info.value.problems
    assert problem.loc == ("trials", 0, "volume")
    assert problem.accepted == (
        "the volume collected, the water mass collected, or both the inflow volume and the "
        "outflow volume"
    )
    assert problem.reason == "is required for the constant head method"


def test_a_rising_head_is_refused_naming_the_head_at_start():
    payload = cv2()
    payload["trials"][0]["head_final"] = "120 cm"
    with pytest.raises(EngineInputError) as info:
        parse_request(payload)
    assert info.value.problems[0].reason.startswith("must be below the head at start")


def test_form_hints_come_from_the_needs():
    method = catalogue.method("constant_head")
    assert method.hint("head_difference") == "or the pressure difference"
    assert method.hint("temperature") == "optional"
    assert method.hint("duration") == ""


def test_an_entry_without_an_engine_field_is_checked_not_reduced(monkeypatch):
    # a made-up trial entry: accepted and unit-checked, but the engine does not use it
    extra = catalogue.Entry(
        "tail_level", catalogue.units.LENGTH, Scope.TRIAL, "Tailwater level", example="3 cm"
    )
    monkeypatch.setitem(catalogue.CATALOGUE, Scope.TRIAL, (*catalogue.TRIAL, extra))
    methods = tuple(
        replace(m, trial=(*m.trial, "tail_level")) if m.id == "falling_head" else m
        for m in catalogue.METHODS
    )
    monkeypatch.setattr(catalogue, "METHODS", methods)
    payload = cv2()
    payload["trials"][0]["tail_level"] = "3 kg"
    with pytest.raises(EngineInputError) as info:
        parse_request(payload)
    assert info.value.loc == ("trials", 0, "tail_level")
    payload["trials"][0]["tail_level"] = "3 cm"
    assert parse_request(payload).trials[0].head_final_m == pytest.approx(0.70)
