"""The points of a full walk through the service, each at the viewport where it was seen:
the header on one row (1024 and 1440 px wide), touch targets of the account link, the back
links and the /verify inputs, the assign panel on a lower queue row, /verify by code, the
review plots' trial numbers, the schedule preview in one pass and the search."""

from __future__ import annotations

import re
from pathlib import Path
from typing import Any

import pytest
from sqlmodel import Session, col, select

from service.certificates.models import Certificate
from service.common import OrganisationKind, Role
from service.demo import load_demo
from tests.browser.conftest import PHONE, TABLET, sign_in
from tests.factories import make_location, make_organisation, make_project, make_user
from tests.web.manager.conftest import PASSWORD, Lab, lab, submitted_test

__all__ = ["lab"]  # the fixture, used by name

pytestmark = pytest.mark.browser

WIDE = {"width": 1440, "height": 900}
MANAGER = "manager@larkspur-lab.example"

# The tops of the header's parts (brand, menu items, search, account): one row when they
# all sit within a touch target's height of each other.
HEADER_ROWS_JS = """
() => {
  const parts = [...document.querySelectorAll(
    '.site-header .brand, .site-nav li, .search-form, .account')];
  const tops = parts.map(el => el.getBoundingClientRect().top);
  return Math.max(...tops) - Math.min(...tops);
}
"""


def height_of(page: Any, selector: str) -> float:
    box = page.locator(selector).first.bounding_box()
    assert box is not None, selector
    return float(box["height"])


@pytest.mark.parametrize(("viewport", "name"), [(TABLET, "tablet"), (WIDE, "wide")])
def test_the_header_stays_on_one_row(
    live_server: str, chromium: Any, session: Session, artifacts: Path, viewport: Any, name: str
) -> None:
    load_demo(session)
    session.commit()
    context = chromium.new_context(viewport=viewport)
    page = context.new_page()
    try:
        sign_in(page, live_server, MANAGER, "/queue")
        page.screenshot(path=str(artifacts / f"walk-header-{name}.png"))
        assert page.evaluate(HEADER_ROWS_JS) < 44
        assert page.evaluate(NAV_CLIPPED_JS) <= 0  # every menu item shown, none scrolled away
        assert height_of(page, ".account a") >= 44  # the user-name link
        page.goto(f"{live_server}/apparatus/new")
        assert height_of(page, "main p a >> nth=0") >= 44  # ← Apparatus register
    finally:
        context.close()


NAV_CLIPPED_JS = """
() => { const nav = document.querySelector('.site-nav');
        return nav ? nav.scrollWidth - nav.clientWidth : 0; }
"""


def shot(page: Any, artifacts: Path, step: str, name: str, *, full: bool = False) -> None:
    # caret="initial": see tests/browser/test_reception.py (htmx would copy style="" back).
    page.screenshot(
        path=str(artifacts / f"walk-{step}-{name}.png"), full_page=full, caret="initial"
    )


IN_VIEW_JS = """
(selector) => { const box = document.querySelector(selector).getBoundingClientRect();
                return box.top > -2 && box.bottom < window.innerHeight; }
"""


@pytest.mark.parametrize(("viewport", "name"), [(TABLET, "tablet"), (PHONE, "phone")])
def test_the_assign_panel_opens_where_the_user_is(
    live_server: str, chromium: Any, session: Session, artifacts: Path, viewport: Any, name: str
) -> None:
    load_demo(session)
    session.commit()
    context = chromium.new_context(viewport=viewport)
    page = context.new_page()
    try:
        sign_in(page, live_server, MANAGER, "/queue")
        lowest = page.locator("a", has_text="Assign").last
        lowest.scroll_into_view_if_needed()
        assert page.evaluate("window.scrollY") > 300  # well down the page
        lowest.click()
        page.get_by_test_id("assign-form").wait_for()
        page.wait_for_timeout(300)  # the scroll after the swap
        shot(page, artifacts, "assign-open", name)
        assert page.evaluate(IN_VIEW_JS, "[data-testid=assign-form] h2")
        assert page.evaluate("document.activeElement.name") == "technician_id"
        panel = page.get_by_test_id("assign-form")
        panel.get_by_label("Technician").select_option("")
        panel.get_by_role("button", name="Save assignment").click()
        error = page.get_by_test_id("assign-form").locator("#err-technician_id")
        error.get_by_text("Choose a technician").wait_for()
        assert error.is_visible()
        assert page.locator(".flash--ok").count() == 0  # no green "assigned to nobody"
        shot(page, artifacts, "assign-nobody", name)
    finally:
        context.close()


@pytest.mark.parametrize(("viewport", "name"), [(TABLET, "tablet"), (PHONE, "phone")])
def test_a_certificate_is_checked_by_its_code(
    live_server: str, chromium: Any, session: Session, artifacts: Path, viewport: Any, name: str
) -> None:
    load_demo(session)
    session.commit()
    certificate = session.exec(
        select(Certificate).where(Certificate.state == "issued").order_by(col(Certificate.id))
    ).first()
    assert certificate is not None
    context = chromium.new_context(viewport=viewport)
    page = context.new_page()
    try:
        page.goto(f"{live_server}/verify")
        assert height_of(page, "#f-code") >= 44
        assert height_of(page, "#f-pdf") >= 44
        shot(page, artifacts, "verify-form", name, full=True)
        typed = certificate.verification_code.replace("-", "").lower()
        page.get_by_label("Verification code").fill(typed)
        page.get_by_role("button", name="Check the code").click()
        page.wait_for_url(f"{live_server}/verify/{certificate.verification_code}")
        status = page.get_by_test_id("verify-status")
        assert status.get_attribute("data-state") == "issued"
        shot(page, artifacts, "verify-result", name, full=True)
    finally:
        context.close()


def test_review_plots_number_trials_as_the_table(
    live_server: str, chromium: Any, session: Session, artifacts: Path, lab: Lab
) -> None:
    ks = (3.0e-10, 2.0e-10, 2.1e-10, 1.95e-10, 2.05e-10)
    test = submitted_test(session, lab, k_values=ks, excluded=(1,))
    context = chromium.new_context(viewport=WIDE)
    page = context.new_page()
    try:
        page.goto(f"{live_server}/sign-in?next=/tests/{test.id}/review")
        page.get_by_label("Email address").fill(lab.reviewer.email)
        page.get_by_label("Password").fill(PASSWORD)
        page.get_by_role("button", name="Sign in").click()
        page.wait_for_url(f"{live_server}/tests/{test.id}/review")
        ticks = page.locator("#review-k-plot text.tick[text-anchor=middle]").all_text_contents()
        assert ticks == ["2", "3", "4", "5"]
        for testid in ("plot-k", "plot-ln-head-trials", "plot-k-time"):
            figure = page.get_by_test_id(testid)
            figure.scroll_into_view_if_needed()
            figure.screenshot(path=str(artifacts / f"walk-review-{testid}-wide.png"))
    finally:
        context.close()


SCHEDULE_ALL_WRONG = (
    "client_sample_id,location,depth_top,depth_bottom,sample_type\n"
    "U1,BH-01,1.0 m,2.0 m,crate\n"
    "U2,BH-01,1.0 m,2.0 m,tube\n"
    "U3,BH-99,1.0 m,2.0 m,tube\n"
    "U4,BH-01,3.0 m,2.0 m,tube\n"
    "u2,BH-01,4.0 m,5.0 m,tube\n"
)


def test_the_schedule_preview_checks_every_row_at_once(
    live_server: str, chromium: Any, session: Session, artifacts: Path
) -> None:
    lab_org = make_organisation(session, kind=OrganisationKind.LAB, name="Hillcrest Soils Lab")
    project = make_project(session, number="P-411", name="North dyke seepage study")
    make_location(session, project=project, name="BH-01")
    user = make_user(session, role=Role.TECHNICIAN, organisation=lab_org, email="walk@example.test")
    session.commit()
    context = chromium.new_context(viewport=TABLET)
    page = context.new_page()
    try:
        target = f"/reception?project_id={project.id}&entry=schedule"
        page.goto(f"{live_server}/sign-in?next=/reception")
        page.get_by_label("Email address").fill(user.email)
        page.get_by_label("Password").fill(PASSWORD)
        page.get_by_role("button", name="Sign in").click()
        page.wait_for_url(f"{live_server}/reception")
        page.goto(live_server + target)
        page.get_by_label("Paste the schedule").fill(SCHEDULE_ALL_WRONG)
        page.get_by_role("button", name="Check the schedule").click()
        preview = page.get_by_test_id("schedule-preview")
        preview.wait_for()
        status = {
            row.get_attribute("data-row"): row.get_attribute("class")
            for row in preview.locator("tbody tr").all()
        }
        assert status == {
            "2": "row-bad",
            "3": "row-ok",
            "4": "row-bad",
            "5": "row-bad",
            "6": "row-bad",
        }
        assert "is also row 3" in preview.locator('tr[data-row="6"]').inner_text()
        shot(page, artifacts, "schedule-one-pass", "tablet", full=True)
    finally:
        context.close()


def test_search_finds_part_of_a_project_number(
    live_server: str, chromium: Any, session: Session, artifacts: Path
) -> None:
    load_demo(session)
    session.commit()
    context = chromium.new_context(viewport=TABLET)
    page = context.new_page()
    try:
        sign_in(page, live_server, MANAGER, "/queue")
        page.locator("#site-search").fill("FV-2026")
        page.get_by_role("button", name="Find").click()
        page.wait_for_url(re.compile(r"/search\?q=FV-2026"))
        results = page.get_by_test_id("search-results")
        assert results.locator("li").count() >= 2
        assert "project FV-2026" in results.inner_text()
        shot(page, artifacts, "search-project", "tablet", full=True)
    finally:
        context.close()
