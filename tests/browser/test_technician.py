"""The technician at the permeameter in a real browser: open a planned test from 'My tests',
record the specimen, pick the apparatus, enter two trials (one timed with the stopwatch)
while k and k20 update live, save them, and submit with the password; at a tablet and a
phone viewport, with a screenshot of each step in test-artifacts/."""

from __future__ import annotations

import re
from datetime import date, timedelta
from pathlib import Path
from typing import Any

import pytest
from sqlmodel import Session

from service.apparatus.models import Apparatus
from service.common import ApparatusKind, OrganisationKind, Role
from tests.browser.conftest import PHONE, TABLET
from tests.browser.test_bench_browser import check_accessibility_basics
from tests.factories import make_organisation, make_project, make_sample, make_test, make_user

pytestmark = pytest.mark.browser

PASSWORD = "correct horse 42"  # tests.factories.make_user's default


def _item(session: Session, identifier: str, kind: ApparatusKind, **fields: Any) -> Apparatus:
    item = Apparatus(
        identifier=identifier,
        kind=kind,
        calibrated_on=date.today() - timedelta(days=30),
        calibration_due=date.today() + timedelta(days=300),
        **fields,
    )
    session.add(item)
    session.flush()
    return item


def planned_test(session: Session, name: str) -> tuple[str, int]:
    """An invented lab with one planned falling-head test for a technician; (email, test id)."""
    lab = make_organisation(session, kind=OrganisationKind.LAB, name="Invented Soils Lab")
    client = make_organisation(session, name="Invented Dam Board")
    project = make_project(session, client=client, number="P-2026-07", name="Clay liner cell 3")
    sample = make_sample(session, project=project, lab_id="26-0412", due_date=date(2026, 12, 11))
    technician = make_user(
        session,
        role=Role.TECHNICIAN,
        organisation=lab,
        email=f"tech-{name}@example.test",
        full_name="Robin Tester",
    )
    # CV2's permeameter: standpipe bore 0.60 cm, a = 0.282743 cm² (domain-reference §10 CV2).
    _item(
        session,
        "PERM-R2",
        ApparatusKind.RIGID_WALL_PERMEAMETER,
        description="rigid wall, 71 mm",
        standpipe_area_text="0.282743 cm**2",
        standpipe_area_m2=2.82743e-5,
    )
    _item(session, "BAL-03", ApparatusKind.BALANCE, resolution_text="0.01 g", resolution_si=1e-5)
    _item(session, "THERM-07", ApparatusKind.THERMOMETER)
    _item(session, "CAL-02", ApparatusKind.CALIPER)
    _item(session, "TIME-01", ApparatusKind.TIMER)
    test = make_test(
        session,
        sample=sample,
        method="falling_head",
        technician_id=technician.id,
        due_date=sample.due_date,
    )
    session.commit()
    assert technician.email is not None
    assert test.id is not None
    return technician.email, test.id


def live_k20(page: Any) -> str:
    return str(page.get_by_test_id("live-k20").inner_text())


@pytest.mark.parametrize(("viewport", "name"), [(TABLET, "tablet"), (PHONE, "phone")])
def test_technician_records_and_submits_a_test(
    live_server: str, chromium: Any, session: Session, artifacts: Path, viewport: Any, name: str
) -> None:
    email, test_id = planned_test(session, name)
    context = chromium.new_context(viewport=viewport)
    page = context.new_page()
    errors: list[str] = []
    page.on(
        "console",
        lambda msg: errors.append(msg.text + str(msg.location)) if msg.type == "error" else None,
    )
    page.on("pageerror", lambda exc: errors.append(str(exc)))

    def shot(step: str) -> None:
        # caret="initial": Playwright's caret hiding leaves style="" on every input, which
        # htmx later copies while settling a swap, and the page's CSP (style-src 'self')
        # reports each copy as a violation.
        page.screenshot(
            path=str(artifacts / f"technician-{step}-{name}.png"), full_page=True, caret="initial"
        )

    try:
        page.goto(f"{live_server}/sign-in")
        page.get_by_label("Email address").fill(email)
        page.get_by_label("Password").fill(PASSWORD)
        page.get_by_role("button", name="Sign in").click()
        page.wait_for_url(f"{live_server}/")
        page.get_by_role("link", name=re.compile("26-0412")).click()
        page.wait_for_url(f"{live_server}/tests/{test_id}")
        assert page.locator("#test-header [data-state=planned]").is_visible()
        check_accessibility_basics(page)
        shot("1-planned")

        # Specimen: units typed beside the numbers; the test starts running.
        specimen = page.locator("#specimen-section")
        specimen.get_by_label("Diameter", exact=True).fill("7.10 cm")
        specimen.get_by_label("Length", exact=True).fill("116 mm")
        specimen.get_by_label("Wet mass").fill("912.4 g")
        specimen.get_by_label("Water content").fill("24.1 %")
        specimen.get_by_label("Specific gravity").fill("2.71")
        specimen.get_by_role("button", name="Save specimen").click()
        page.get_by_text("Specimen saved.").wait_for()
        page.locator("#test-header [data-state=running]").wait_for()
        assert specimen.get_by_label("Length", exact=True).input_value() == "116"
        assert specimen.locator("#f-specimen-length-unit").input_value() == "mm"

        # Apparatus: the permeameter's geometry shows as soon as it is chosen.
        apparatus = page.locator("#apparatus-section")
        apparatus.get_by_label("Permeameter").select_option(label="PERM-R2 · rigid wall, 71 mm")
        page.get_by_test_id("standpipe-area").wait_for()
        assert "0.282743 cm²" in page.get_by_test_id("standpipe-area").inner_text()
        apparatus.get_by_label("Balance").select_option(label="BAL-03")
        apparatus.get_by_label("Thermometer").select_option(label="THERM-07")
        apparatus.get_by_label("Caliper").select_option(label="CAL-02")
        apparatus.get_by_label("Timer").select_option(label="TIME-01")
        apparatus.get_by_role("button", name="Save apparatus").click()
        page.get_by_text("Apparatus saved.").wait_for()
        assert page.get_by_test_id("assigned-apparatus").locator("li").count() == 5
        shot("2-specimen-apparatus")

        # Trial 1: heads typed, the duration from the stopwatch (one tap, one tap).
        trial = page.locator("#trial-form")
        trial.get_by_label("Head at start").fill("100.0 cm")
        trial.get_by_label("Head at end").fill("99.9 cm")
        trial.get_by_label("Temperature").fill("19.5 degC")
        trial.get_by_role("button", name="Start timing").click()
        page.wait_for_timeout(1500)
        trial.get_by_role("button", name="Stop timing").click()
        duration = trial.get_by_label("Duration", exact=True).input_value()
        assert re.fullmatch(r"\d+\.\d", duration), duration
        assert float(duration) >= 1.5
        page.get_by_test_id("live-k20").wait_for(timeout=15000)
        first = live_k20(page)
        assert "m/s" in first
        # Typing changes the live figure without pressing anything.
        trial.get_by_label("Head at end").fill("99.8 cm")
        page.wait_for_function(
            "before => document.querySelector('[data-testid=live-k20]')?.textContent !== before",
            arg=first,
            timeout=15000,
        )
        shot("3-trial-live")
        trial.get_by_role("button", name="Save trial").click()
        page.get_by_text("Trial 1 saved.").wait_for()
        assert page.locator("#trial-form").get_by_label("Head at start").input_value() == ""

        # Trial 2: typed duration; k and k20 appear while typing.
        trial = page.locator("#trial-form")
        trial.get_by_label("Head at start").fill("100.0 cm")
        trial.get_by_label("Head at end").fill("70.0 cm")
        trial.get_by_label("Duration", exact=True).fill("1 h")
        trial.get_by_label("Temperature").fill("18.0 degC")
        # CV2 (domain-reference §10): these entries give k20 = 8.6261e-8 m/s.
        page.wait_for_function(
            "() => document.querySelector('[data-testid=live-k20]')?.textContent"
            ".includes('8.63 × 10⁻⁸')",
            timeout=15000,
        )
        trial.get_by_role("button", name="Save trial").click()
        page.get_by_text("Trial 2 saved.").wait_for()
        assert page.get_by_test_id("saved-trials").locator("> li").count() == 2
        check_accessibility_basics(page)
        shot("4-two-trials")

        # Sign-off: a wrong password is named beside the field and changes nothing.
        submit = page.locator("#submit-section")
        submit.get_by_label("Your password, to sign").fill("not my password")
        submit.get_by_role("button", name="Sign and submit").click()
        page.locator("#err-submit-password").get_by_text("not correct").wait_for()
        assert page.locator("#test-header [data-state=running]").is_visible()
        shot("5-wrong-password")
        submit = page.locator("#submit-section")
        submit.get_by_label("Your password, to sign").fill(PASSWORD)
        submit.get_by_role("button", name="Sign and submit").click()
        page.locator("#test-header [data-state=submitted]").wait_for(timeout=15000)
        assert page.get_by_test_id("sign-offs").is_visible()
        check_accessibility_basics(page)
        shot("6-submitted")
        # Chromium logs each refused request (the wrong password answers 403 on purpose).
        assert [e for e in errors if "status of 403" not in e] == []
    except Exception:
        shot("failed")
        raise
    finally:
        context.close()
