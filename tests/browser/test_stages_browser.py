"""A technician walks a whole flexible-wall test through its stages on a phone-sized viewport
(390×844) and a tablet (1024×768): set-up, saturation, consolidation, permeation and after
the test, each saved from the stage form with a decimal keypad and a unit picker, one
refusal shown beside its field with the typed value kept; screenshots of each stage in
test-artifacts/."""

from __future__ import annotations

from datetime import date, timedelta
from pathlib import Path
from typing import Any

import pytest
from sqlmodel import Session

from service.apparatus.models import Apparatus
from service.common import ApparatusKind, OrganisationKind, Role
from service.lab_tests.models import TestApparatus
from tests.browser.conftest import PHONE, TABLET
from tests.browser.test_bench_browser import check_accessibility_basics
from tests.factories import make_organisation, make_project, make_sample, make_test, make_user

pytestmark = pytest.mark.browser

PASSWORD = "correct horse 42"  # tests.factories.make_user's default


def _flexible_test(session: Session) -> tuple[str, int]:
    lab = make_organisation(session, kind=OrganisationKind.LAB, name="Invented Soils Lab")
    client = make_organisation(session, name="Invented Water Board")
    project = make_project(session, client=client, number="P-2026-31", name="Clay core")
    sample = make_sample(session, project=project, lab_id="26-0520", due_date=date(2026, 12, 18))
    technician = make_user(
        session,
        role=Role.TECHNICIAN,
        organisation=lab,
        email="tech-stages@example.test",
        full_name="Sam Invented",
    )
    cell = Apparatus(
        identifier="CELL-F1",
        kind=ApparatusKind.FLEXIBLE_WALL_PERMEAMETER,
        calibrated_on=date.today() - timedelta(days=30),
        calibration_due=date.today() + timedelta(days=300),
    )
    session.add(cell)
    session.flush()
    test = make_test(
        session,
        sample=sample,
        method="falling_head_rising_tail",
        standard="ASTM D5084",
        technician_id=technician.id,
    )
    assert test.id is not None
    assert cell.id is not None
    session.add(TestApparatus(test_id=test.id, apparatus_id=cell.id))
    session.commit()
    assert technician.email is not None
    return technician.email, test.id


def _fill_rows(page: Any, group: str, start: int, rows: list[dict[str, str]]) -> None:
    for offset, row in enumerate(rows):
        for entry, value in row.items():
            page.locator(f'[name="g.{group}.{start + offset}.{entry}"]').fill(value)


@pytest.mark.parametrize(("viewport", "name"), [(PHONE, "phone"), (TABLET, "tablet")])
def test_a_whole_flexible_wall_test_through_its_stages(
    live_server: str, chromium: Any, session: Session, artifacts: Path, viewport: Any, name: str
) -> None:
    email, test_id = _flexible_test(session)
    context = chromium.new_context(viewport=viewport)
    page = context.new_page()
    errors: list[str] = []
    page.on("pageerror", lambda exc: errors.append(str(exc)))

    def shot(step: str) -> None:
        page.screenshot(path=str(artifacts / f"stages-{name}-{step}.png"), full_page=True)

    def save() -> None:
        # Saved, the stage page loads again (HX-Redirect); refused, the form comes back.
        with page.expect_response(lambda r: r.request.method == "POST") as posted:
            page.get_by_test_id("save-stage").click()
        answer = posted.value
        assert answer.status == 200, page.get_by_test_id("stage-refused").inner_text()
        page.wait_for_load_state("load")
        page.get_by_test_id("stage-saved").wait_for()

    try:
        page.goto(f"{live_server}/sign-in?next=/tests/{test_id}")
        page.get_by_label("Email address").fill(email)
        page.get_by_label("Password").fill(PASSWORD)
        page.get_by_role("button", name="Sign in").click()
        page.wait_for_url(f"{live_server}/tests/{test_id}")
        # The stepper arrives on the test page by itself.
        page.get_by_test_id("stage-stepper").wait_for()
        shot("0-test-page")
        page.get_by_test_id("step-setup").click()
        page.wait_for_url(f"**/tests/{test_id}/stages/setup")
        check_accessibility_basics(page)
        assert page.locator('[name="e.diameter"]').get_attribute("inputmode") == "decimal"
        page.get_by_label("Membrane").fill("latex, 0.30 mm")
        page.get_by_label("Filter papers").fill("one at each end")
        page.get_by_label("Porous stones").fill("boiled and de-aired")
        page.locator('[name="e.diameter"]').fill("7.10")
        page.locator('[name="e.diameter.unit"]').select_option("cm")
        page.locator('[name="e.length"]').fill("75,0")  # a decimal comma: refused
        page.locator('[name="e.length.unit"]').select_option("mm")
        page.locator('[name="e.wet_mass"]').fill("590.0")
        page.locator('[name="e.water_content"]').fill("18.5")
        page.locator('[name="e.specific_gravity"]').fill("2.70")
        page.get_by_test_id("save-stage").click()
        page.get_by_test_id("stage-refused").wait_for()
        assert page.locator("#err-e-length").inner_text().strip()
        assert page.locator('[name="e.length"]').input_value() == "75,0"
        assert page.get_by_label("Membrane").input_value() == "latex, 0.30 mm"
        shot("1-setup-refused")
        page.locator('[name="e.length"]').fill("75.0")
        save()
        shot("1-setup-saved")

        page.get_by_test_id("next-stage").click()
        page.wait_for_url("**/stages/saturation")
        _fill_rows(
            page,
            "increments",
            0,
            [
                {"elapsed": "0", "cell_pressure": "50", "back_pressure": "30"},
                {"elapsed": "60", "cell_pressure": "250", "back_pressure": "230"},
                {"elapsed": "360", "cell_pressure": "450", "back_pressure": "430"},
            ],
        )
        _fill_rows(
            page,
            "b_checks",
            0,
            [
                {"back_pressure": b, "cell_pressure_before": c0, "cell_pressure_after": c1,
                 "pore_pressure_before": u0, "pore_pressure_after": u1}
                for b, c0, c1, u0, u1 in (
                    ("230", "250", "300", "230", "270.5"),
                    ("330", "350", "400", "330", "376"),
                    ("430", "450", "500", "430", "478"),
                )
            ],
        )  # fmt: skip
        save()
        page.get_by_test_id("plot-saturation").wait_for()
        assert "0.96" in page.get_by_test_id("stage-outcome").inner_text()
        check_accessibility_basics(page)
        shot("2-saturation")

        page.get_by_test_id("next-stage").click()
        page.wait_for_url("**/stages/consolidation")
        page.locator('[name="e.cell_pressure"]').fill("465")
        page.locator('[name="e.back_pressure"]').fill("430")
        readings = [("1", "0.17"), ("16", "0.70"), ("100", "1.74"), ("900", "3.10"),
                    ("1440", "3.10"), ("2160", "3.10")]  # fmt: skip
        _fill_rows(
            page, "readings", 0, [{"elapsed": t, "volume_change": v} for t, v in readings[:3]]
        )
        save()
        # Three more rows came with the save: the rest of the readings.
        _fill_rows(
            page, "readings", 3, [{"elapsed": t, "volume_change": v} for t, v in readings[3:]]
        )
        save()
        outcome = page.get_by_test_id("stage-outcome").inner_text()
        assert "reached" in outcome
        assert "isotropic" in outcome
        page.get_by_test_id("plot-root_time").wait_for()
        shot("3-consolidation")

        page.get_by_test_id("next-stage").click()
        page.wait_for_url("**/stages/permeation")
        page.locator('[name="e.permeation_method"]').select_option("falling_head_rising_tail")
        page.locator('[name="e.headwater_area"]').fill("0.71")
        page.locator('[name="e.tailwater_area"]').fill("0.95")
        _fill_rows(
            page,
            "zero_flow",
            0,
            [{"headwater_reading": "4.98", "tailwater_reading": "6.72",
              "headwater_pressure": "435", "tailwater_pressure": "435"}],
        )  # fmt: skip
        page.locator('[name="g.readings.elapsed.unit"]').select_option("h")
        panel = [
            ("0", "1.00", "20.00"),
            ("4", "1.37", "19.64"),
            ("8", "1.73", "19.29"),
            ("12", "2.09", "18.93"),
            ("16", "2.45", "18.58"),
            ("20", "2.81", "18.23"),
        ]
        rows = [
            {"elapsed": t, "headwater_reading": hw, "tailwater_reading": tw,
             "headwater_pressure": "445", "tailwater_pressure": "435", "temperature": "20.4"}
            for t, hw, tw in panel
        ]  # fmt: skip
        _fill_rows(page, "readings", 0, rows[:3])
        save()
        _fill_rows(page, "readings", 3, rows[3:])
        save()
        page.get_by_test_id("plot-k_time").wait_for()
        page.get_by_test_id("plot-k_pore").wait_for()
        outcome = page.get_by_test_id("stage-outcome").inner_text()
        assert "Zero-flow head" in outcome
        assert "m/s" in outcome
        check_accessibility_basics(page)
        shot("4-permeation")

        page.get_by_test_id("next-stage").click()
        page.wait_for_url("**/stages/post_test")
        page.locator('[name="e.post_diameter"]').fill("7.08")
        page.locator('[name="e.post_length"]').fill("7.46")
        page.locator('[name="e.post_wet_mass"]').fill("607.0")
        page.locator('[name="e.post_dry_mass"]').fill("497.9")
        save()
        assert "Degree of saturation" in page.get_by_test_id("stage-outcome").inner_text()
        shot("5-post-test")

        page.goto(f"{live_server}/tests/{test_id}/stages")
        for stage in ("setup", "saturation", "consolidation", "permeation", "post_test"):
            assert "recorded" in page.get_by_test_id(f"step-{stage}").inner_text()
        shot("6-summary")
        assert errors == []
    finally:
        context.close()
