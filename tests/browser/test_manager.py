"""The lab manager and the reviewer in a real browser, on the demo lab: filter the queue,
assign a technician and apparatus, review a submitted test (plots, checks), approve with the
password and issue the certificate; at a tablet (1024×768) and a phone (390×844) viewport."""

from __future__ import annotations

import re
from pathlib import Path
from typing import Any

import pytest
from sqlmodel import Session, col, select

from service.common import TestState
from service.demo import DEMO_PASSWORDS, load_demo
from service.lab_tests.models import PermeabilityTest
from tests.browser.conftest import PHONE, TABLET, sign_in

pytestmark = pytest.mark.browser

MANAGER = "manager@larkspur-lab.example"
REVIEWER = "reviewer@larkspur-lab.example"

# Every visible form control has an accessible name (WCAG 2.1 SC 1.3.1 and 4.1.2).
UNLABELLED_JS = """
() => [...document.querySelectorAll('input, select, textarea')]
  .filter(el => el.type !== 'hidden')
  .filter(el => !(el.labels && el.labels.length) && !el.getAttribute('aria-label')
                && !el.getAttribute('aria-labelledby'))
  .map(el => el.name || el.id || el.outerHTML.slice(0, 80))
"""
# Targets of at least 44 × 44 CSS px (WCAG 2.1 SC 2.5.5); a checkbox counts with its label,
# which is the box a finger presses.
SMALL_TARGETS_JS = """
() => [...document.querySelectorAll('button, select, input, .site-nav a, a.button, .pager a')]
  .filter(el => el.type !== 'hidden' && el.offsetParent !== null)
  .map(el => [el.name || el.textContent.trim() || el.id,
              (el.type === 'checkbox' && el.closest('label') ? el.closest('label') : el)
                .getBoundingClientRect()])
  .filter(([, box]) => box.height < 44 || box.width < 44)
  .map(([name, box]) => `${name}: ${Math.round(box.width)}x${Math.round(box.height)}`)
"""


def check_basics(page: Any) -> None:
    assert page.evaluate("document.documentElement.lang") == "en"
    assert page.evaluate("document.documentElement.scrollWidth <= window.innerWidth")
    assert page.evaluate(UNLABELLED_JS) == []
    assert page.evaluate(SMALL_TARGETS_JS) == []


@pytest.mark.parametrize(("viewport", "name"), [(TABLET, "tablet"), (PHONE, "phone")])
def test_manager_assigns_and_reviewer_approves_and_issues(
    live_server: str, chromium: Any, session: Session, artifacts: Path, viewport: Any, name: str
) -> None:
    load_demo(session)
    session.commit()
    submitted = session.exec(
        select(PermeabilityTest)
        .where(PermeabilityTest.state == TestState.SUBMITTED.value)
        .order_by(col(PermeabilityTest.id))
    ).first()
    assert submitted is not None
    errors: list[str] = []

    # --- the lab manager: filter the queue, assign a planned test ---
    context = chromium.new_context(viewport=viewport)
    page = context.new_page()
    page.on("pageerror", lambda exc: errors.append(str(exc)))
    try:
        sign_in(page, live_server, MANAGER, "/queue")
        page.get_by_test_id("queue-table").wait_for()
        page.screenshot(path=str(artifacts / f"manager-queue-{name}.png"), full_page=True)

        check_basics(page)

        page.get_by_label("State", exact=True).select_option("planned")
        page.wait_for_url(re.compile(r"/queue\?state=planned$"))
        rows = page.locator("[data-testid=queue-table] tbody tr")
        rows.first.wait_for()
        page.wait_for_function(
            "() => [...document.querySelectorAll('[data-testid=queue-table] tbody tr')]"
            ".every(r => r.querySelector('[data-state]').dataset.state === 'planned')"
        )
        count = rows.count()
        assert count == 5  # the demo has five planned tests
        page.screenshot(path=str(artifacts / f"manager-queue-planned-{name}.png"), full_page=True)

        first = rows.first
        lab_id = first.locator("th a").inner_text()
        first.get_by_role("link", name=f"Assign {lab_id}").click()
        form = page.get_by_test_id("assign-form")
        form.wait_for()
        wanted = form.locator("option", has_text="Lena Aldous").get_attribute("value")
        form.get_by_label("Technician").select_option(wanted)
        form.get_by_label(re.compile("PRM-R01")).check()
        form.get_by_label(re.compile("TMR-01")).check()  # overdue: allowed, marked
        assert "Calibration overdue" in form.inner_text()
        page.screenshot(path=str(artifacts / f"manager-assign-{name}.png"), full_page=True)

        check_basics(page)
        form.get_by_role("button", name="Save assignment").click()
        page.wait_for_url(re.compile(r"assigned=\d+"))
        notice = page.get_by_text(re.compile(f"{lab_id} test 1: assigned to Lena Aldous"))
        notice.wait_for()
        assert "TMR-01" in notice.inner_text()
        page.screenshot(path=str(artifacts / f"manager-assigned-{name}.png"), full_page=True)
    finally:
        context.close()

    # --- the reviewer: open a submitted demo test, approve, issue ---
    context = chromium.new_context(viewport=viewport)
    page = context.new_page()
    page.on("pageerror", lambda exc: errors.append(str(exc)))
    try:
        sign_in(page, live_server, REVIEWER, "/queue?state=submitted")
        page.locator(f"tr[data-test-id='{submitted.id}']").get_by_role(
            "link", name="Review"
        ).click()
        page.wait_for_url(re.compile(rf"/tests/{submitted.id}/review"))
        page.get_by_test_id("plot-k").locator("svg").wait_for()
        checks = page.get_by_test_id("review-checks")
        assert checks.locator("tr[data-check]").count() >= 5
        assert "Pass" in checks.inner_text()
        assert "m/s" in page.get_by_test_id("review-k").inner_text()
        page.screenshot(path=str(artifacts / f"review-submitted-{name}.png"), full_page=True)

        check_basics(page)

        # A wrong password first: refused in place, nothing signed.
        approve = page.get_by_test_id("approve-form")
        approve.get_by_label("Your password").fill("not the password")
        approve.get_by_role("button", name="Approve and sign").click()
        message = page.locator("#err-approve-password")
        message.get_by_text("not correct").wait_for()
        page.screenshot(path=str(artifacts / f"review-refused-{name}.png"), full_page=True)

        approve = page.get_by_test_id("approve-form")
        approve.get_by_label("Your password").fill(DEMO_PASSWORDS[REVIEWER][1])
        approve.get_by_role("button", name="Approve and sign").click()
        page.wait_for_url(re.compile(r"done=approved"))
        page.get_by_test_id("issue-form").wait_for()
        page.get_by_role("button", name="Issue certificate").click()
        page.wait_for_url(re.compile(r"issued=\d+"))
        link = page.get_by_test_id("issued-pdf")
        link.wait_for()
        href = link.get_attribute("href")
        assert href is not None
        assert re.fullmatch(r"/api/v1/certificates/\d+/pdf", href)
        pdf = page.request.get(live_server + href)
        assert pdf.status == 200
        assert pdf.body().startswith(b"%PDF")
        assert "Issued" in page.get_by_test_id("issued-note").inner_text()
        page.screenshot(path=str(artifacts / f"review-issued-{name}.png"), full_page=True)

        check_basics(page)
    finally:
        context.close()
    assert errors == []


@pytest.mark.parametrize(("viewport", "name"), [(TABLET, "tablet"), (PHONE, "phone")])
def test_manager_keeps_the_apparatus_register(
    live_server: str, chromium: Any, session: Session, artifacts: Path, viewport: Any, name: str
) -> None:
    load_demo(session)
    session.commit()
    context = chromium.new_context(viewport=viewport)
    page = context.new_page()
    errors: list[str] = []
    page.on("pageerror", lambda exc: errors.append(str(exc)))
    try:
        sign_in(page, live_server, MANAGER, "/apparatus")
        overdue = page.locator("tr[data-apparatus='TMR-01']")
        assert "Overdue" in overdue.inner_text()
        page.screenshot(path=str(artifacts / f"apparatus-register-{name}.png"), full_page=True)
        check_basics(page)

        page.get_by_role("link", name="Add an item").click()
        page.wait_for_url(re.compile(r"/apparatus/new$"))
        page.get_by_label("Identifier").fill("PRM-R02")
        page.get_by_label("Kind").select_option("rigid_wall_permeameter")
        # Each figure in a decimal-keypad field with a unit picker beside it, big enough for
        # a gloved finger (44 px: helper rules, touch targets).
        for field in ("specimen_area", "port_spacing", "standpipe_area", "resolution"):
            number = page.locator(f"#f-{field}")
            assert number.get_attribute("inputmode") == "decimal", field
            picker = page.locator(f"#f-{field}-unit")
            box = picker.bounding_box()
            assert box is not None, field
            assert box["height"] >= 44, (field, box)
            assert number.bounding_box()["height"] >= 44, field  # type: ignore[index]
        page.get_by_label("Specimen area").fill("81.07 cm")  # a length typed, not an area
        page.get_by_label("Manometer port spacing").fill("150")
        page.locator("#f-port_spacing-unit").select_option("mm")
        page.get_by_label("Resolution").fill("1")
        page.locator("#f-resolution-unit").select_option("mm")
        page.screenshot(path=str(artifacts / f"apparatus-keypad-{name}.png"), full_page=True)
        page.get_by_role("button", name="Add to the register").click()
        page.locator("#err-specimen_area").get_by_text("81.07 cm").wait_for()
        assert page.get_by_label("Manometer port spacing").input_value() == "150"
        assert page.locator("#f-port_spacing-unit").input_value() == "mm"
        assert page.get_by_label("Identifier").input_value() == "PRM-R02"
        page.screenshot(path=str(artifacts / f"apparatus-refused-{name}.png"), full_page=True)
        check_basics(page)

        page.get_by_label("Specimen area").fill("81.07")
        page.locator("#f-specimen_area-unit").select_option("cm**2")
        page.get_by_role("button", name="Add to the register").click()
        page.wait_for_url(re.compile(r"/apparatus\?saved=\d+"))
        assert "PRM-R02" in page.locator("tr[data-apparatus='PRM-R02']").inner_text()
        page.screenshot(path=str(artifacts / f"apparatus-saved-{name}.png"), full_page=True)
    finally:
        context.close()
    assert errors == []
