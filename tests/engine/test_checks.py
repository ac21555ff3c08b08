"""Rule outcomes beyond CV9: each status path of each check, with the rule's source named."""

from __future__ import annotations

import pytest

from service.engine import checks
from tests.engine.helpers import check, cv1, cv2, cv3, run


def test_every_contract_check_id_is_reported():
    # contract (reductions-api.md): the nine check ids, plus the added darcy_linearity
    ids = [c["id"] for c in run(cv1())["checks"]]
    assert ids == list(checks.CHECK_IDS)


def test_evaluated_checks_name_their_source_and_memory_flags():
    # domain-reference tags [memory] rules; RULES.md: say 'from memory' where recalled
    body = run(dict(cv3(), saturation=[{"b_value": 0.96}], specification={"k_max": "1e-9 m/s"}))
    for c in body["checks"]:
        if c["status"] != "not_applicable":
            assert c["source"], c["id"]
    assert "[from memory" in check(body, "steady_state")["source"]
    assert "[from memory" in check(body, "saturation")["source"]


def test_specification_fail_and_pass():
    # domain-reference §7.4: EU landfill barrier k ≤ 1.0e-9 m/s (Directive 1999/31/EC)
    assert (
        check(run(dict(cv3(), specification={"k_max": "1e-9 m/s"})), "specification")["status"]
        == "fail"
    )
    assert (
        check(run(dict(cv3(), specification={"k_max": "1e-7 cm/s"})), "specification")["status"]
        == "fail"
    )
    assert (
        check(run(dict(cv3(), specification={"k_max": "1e-8 m/s"})), "specification")["status"]
        == "pass"
    )


def test_missing_temperature_is_flagged_and_not_corrected():
    # contract: without a temperature, factor 1 and a check says so
    payload = cv2()
    del payload["trials"][0]["temperature"]
    body = run(payload)
    assert body["trials"][0]["temperature_factor"] == 1.0
    assert check(body, "temperature_range")["status"] == "warn"


def test_d5084_temperature_range_warns_outside_15_30():
    # domain-reference §1: D5084 tests between about 15 °C and 30 °C (read)
    payload = cv3()
    payload["trials"][0]["temperature"] = "12 degC"
    assert check(run(payload), "temperature_range")["status"] == "warn"


def test_flow_ratio_outside_band_fails_under_d5084():
    # domain-reference §6.1.3: outflow/inflow 0.75–1.25 [memory]
    payload = cv3()
    payload["trials"][0]["outflow_volume"] = "6.0 mL"
    assert check(run(payload), "flow_ratio")["status"] == "fail"


def test_d5084_needs_four_determinations():
    # domain-reference §6.1.3: at least four consecutive determinations [memory]
    assert check(run(cv3()), "steady_state")["status"] == "fail"


@pytest.mark.parametrize(("re_number", "status"), [(0.5, "pass"), (3.0, "warn"), (12.0, "fail")])
def test_laminar_flow_thresholds(re_number, status):
    # domain-reference §2.4: pass Re < 1, warn 1–10, fail ≥ 10
    assert checks.laminar_flow(re_number).status == status


def test_hazen_far_off_warns():
    # domain-reference §7.1: flag k/k_Hazen outside 0.1–10 (practice band)
    payload = cv1()
    payload["specimen"]["d10"] = "2.5 mm"
    body = run(payload)
    assert body["plausibility"]["hazen_k_m_per_s"] == pytest.approx(0.0625 / 100 * 100)
    assert check(body, "hazen")["status"] == "warn"


def test_hazen_outside_its_range_is_not_applicable():
    # domain-reference §7.1: 0.1 mm ≤ D10 ≤ 3 mm
    payload = cv1()
    payload["specimen"]["d10"] = "0.01 mm"
    assert check(run(payload), "hazen")["status"] == "not_applicable"


def _series(volumes_ml):
    payload = cv1()
    payload["standard"] = "ASTM D2434"
    payload["trials"] = [
        {
            "volume": f"{v} mL",
            "duration": "120 s",
            "head_difference": f"{h} cm",
            "temperature": "20 degC",
        }
        for v, h in zip(volumes_ml, (3.0, 4.5, 6.0, 7.5), strict=True)
    ]
    return run(payload)


def test_gradient_series_linear_is_darcian():
    # domain-reference §2.3: v proportional to i -> Darcy; fit through the origin
    body = _series([200, 300, 400, 500])
    assert body["gradient_series"]["non_darcy"] is False
    assert body["gradient_series"]["r_squared"] == pytest.approx(1.0)
    assert check(body, "darcy_linearity")["status"] == "pass"


def test_gradient_series_flattening_is_non_darcy():
    # domain-reference §2.3: k falling with increasing i by more than ~10 % flagged
    body = _series([200, 290, 370, 430])
    assert body["gradient_series"]["non_darcy"] is True
    assert check(body, "darcy_linearity")["status"] in ("warn", "fail")


def test_d2434_gradient_above_half_warns():
    # domain-reference §2.3: D2434-68 note, i about 0.2–0.5 [memory]; 9 cm over 15 cm is 0.6
    payload = cv1(head_difference="9 cm")
    payload["standard"] = "ASTM D2434"
    assert check(_series([200, 300, 400, 500]), "gradient_limit")["status"] == "pass"
    assert check(run(payload), "gradient_limit")["status"] == "warn"
