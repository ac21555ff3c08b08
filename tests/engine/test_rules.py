"""Rule sets: per-standard defaults and limits, a laboratory's own book, and clean user texts.

What the rule sets hold and why: docs/methods.md §7. ISO 17892-11 limits are from memory there.
"""

from __future__ import annotations

import re

import pytest
from iapws import IAPWS95  # test-only outside reference

from service.engine.rules import BUILT_IN, BUILT_IN_VERSION, ISO, STANDARDS
from tests.engine.helpers import check, constant_rate, cv1, cv2, cv3, cv4, run

# Notes that belong in docs/methods.md and the code, never in what users read (helper rules).
INTERNAL = re.compile(r"memory|no source|\(read\)|\[read\]|practice|verify|TODO", re.IGNORECASE)


def test_every_standard_has_its_own_rule_set():
    for standard in (*STANDARDS, None):
        assert BUILT_IN.for_standard(standard).standard == standard


def test_every_limit_is_tagged_and_every_rule_names_a_source():
    for rule_set in BUILT_IN.sets.values():
        assert rule_set.reference_temperature_provenance in {"read", "memory", "practice"}
        assert rule_set.determinations >= 1
        for check_id, rule in rule_set.rules.items():
            assert rule.id == check_id
            assert rule.source
            assert not rule.confirmed
            assert rule.failure in {"fail", "warn"}
            ids = [limit.id for limit in rule.limits]
            assert len(ids) == len(set(ids)), rule.id
            for limit in rule.limits:
                assert limit.provenance in {"read", "memory", "practice"}, (rule.id, limit.id)
                assert limit.label


def test_rule_sources_carry_no_internal_notes():
    for rule_set in BUILT_IN.sets.values():
        for rule in rule_set.rules.values():
            assert not INTERNAL.search(rule.source), rule.source
            for limit in rule.limits:
                assert not INTERNAL.search(limit.label), limit.label


@pytest.mark.parametrize("standard", [*STANDARDS, None])
@pytest.mark.parametrize("build", [cv1, cv2, cv3, cv4])
def test_messages_and_sources_users_see_carry_no_internal_notes(standard, build):
    payload = dict(build(), standard=standard, specification={"k_max": "1e-9 m/s"})
    payload["saturation"] = [{"b_value": 0.9}, {"b_value": 0.9}]
    for found in run(payload)["checks"]:
        assert not INTERNAL.search(found["message"]), found
        assert not INTERNAL.search(found["source"]), found


def test_iso_17892_11_corrects_to_its_own_reference_temperature():
    # ISO 17892-11 reference temperature 10 °C (from memory; methods.md §7.5): a trial at
    # 20 °C is corrected by η(20 °C)/η(10 °C), here from the iapws package
    ratio = IAPWS95(T=293.15, P=0.101325).mu / IAPWS95(T=283.15, P=0.101325).mu
    body = run(dict(cv2(), standard=ISO))
    assert body["reference_temperature_c"] == 10.0
    trial = cv2()["trials"][0]
    trial["temperature"] = "20 degC"
    body = run(dict(cv2(), standard=ISO, trials=[trial]))
    assert body["trials"][0]["temperature_factor"] == pytest.approx(ratio, rel=5e-6)
    # an explicit reference temperature still wins over the rule set's
    body = run(dict(cv2(), standard=ISO, options={"reference_temperature": "20 degC"}))
    assert body["reference_temperature_c"] == 20.0


def test_iso_17892_11_rules_are_applied_not_just_labelled():
    # issue 11: every ISO rule used to be not applicable or advisory
    flexible = run(dict(cv2(), standard=ISO, permeameter="flexible_wall"))
    assert check(flexible, "saturation")["status"] == "fail"
    coarse = cv2()
    coarse["specimen"]["max_particle_size"] = "20 mm"
    assert check(run(dict(coarse, standard=ISO)), "specimen_size")["status"] == "fail"
    statuses = {c["id"]: c["status"] for c in run(dict(cv2(), standard=ISO))["checks"]}
    assert statuses["head_change"] == "pass"


def test_astm_r_t_formula_is_refused_under_a_10c_reference():
    # the ASTM D5084 R_T formula corrects to 20 °C only (domain-reference §4.2)
    from service.engine import EngineInputError, parse_request, reduce

    payload = dict(cv2(), standard=ISO, options={"temperature_correction": "astm_d5084"})
    with pytest.raises(EngineInputError) as info:
        reduce(parse_request(payload))
    assert info.value.loc == ("options", "temperature_correction")


def test_a_laboratory_book_changes_the_outcome_and_is_recorded():
    # The lab's accredited scope narrows the D5084 band to 10 % and confirms it: a spread of
    # 6.5 % still passes (CV9(b)), 14.3 % now fails; the result names the book's version.
    from service.engine import parse_request, reduce, result_to_dict

    lab = BUILT_IN.with_limit(
        "ASTM D5084", "steady_state", "band", 0.10, version="lab scope 3"
    ).confirmed("ASTM D5084", "steady_state", "ASTM D5084-16a §9.5", version="lab scope 3")
    steady = constant_rate([3.2e-9, 2.9e-9, 3.3e-9, 3.0e-9], "ASTM D5084")
    spread = constant_rate([3.6e-9, 3.3e-9, 3.0e-9, 2.7e-9], "ASTM D5084")

    def reduced(payload, book=None):
        return result_to_dict(reduce(parse_request(payload), book))

    assert check(reduced(spread), "steady_state")["status"] == "pass"
    body = reduced(spread, lab)
    found = check(body, "steady_state")
    assert found["status"] == "fail"
    assert found["limit"] == 0.10
    assert found["limit_confirmed"] is True
    assert found["source"] == "ASTM D5084-16a §9.5"
    assert body["rules_version"] == "lab scope 3"
    assert check(reduced(steady, lab), "steady_state")["status"] == "pass"
    assert check(body, "flow_ratio")["limit_confirmed"] in (False, None)
    assert reduced(steady)["rules_version"] == BUILT_IN_VERSION


def test_a_laboratory_book_sets_its_own_defaults():
    # A lab that reads its ISO 17892-11 copy as 20 °C and decides by guarded acceptance
    from dataclasses import replace

    from service.engine import parse_request, reduce

    iso = replace(
        BUILT_IN.for_standard(ISO), reference_temperature_c=20.0, decision_rule="guard_band"
    )
    lab = BUILT_IN.with_set(iso, version="lab scope 4")
    result = reduce(parse_request(dict(cv2(), standard=ISO)), lab)
    assert result.reference_temperature_c == 20.0
    assert result.decision_rule == "guard_band"
    assert result.rules_version == "lab scope 4"
    assert BUILT_IN.for_standard(ISO).reference_temperature_c == 10.0  # the built-in is untouched


def test_unknown_limit_is_refused_when_building_a_book():
    with pytest.raises(KeyError):
        BUILT_IN.with_limit("ASTM D5084", "steady_state", "bandwidth", 0.1, version="x")
