"""The admin's pages, the project page's tick boxes and the labels page's buttons at
1024×768, on the demo database: sizes measured in the browser, screenshots kept."""

from __future__ import annotations

import re
from pathlib import Path
from typing import Any

import pytest
from sqlmodel import Session, select

from service.demo import DEMO_PASSWORDS, load_demo
from service.projects.models import Project
from service.samples.models import Sample
from tests.browser.conftest import TABLET

pytestmark = pytest.mark.browser

ADMIN = "admin@larkspur-lab.example"
MANAGER = "manager@larkspur-lab.example"
TOUCH_PX = 44  # the minimum touch target of WCAG 2.2 SC 2.5.5 (AAA)


def _sign_in(context: Any, base_url: str, email: str) -> Any:
    page = context.new_page()
    page.goto(f"{base_url}/sign-in")
    page.get_by_label("Email address").fill(email)
    page.get_by_label("Password").fill(DEMO_PASSWORDS[email][1])
    page.get_by_role("button", name="Sign in").click()
    page.wait_for_url(f"{base_url}/")
    return page


def _tall_enough(locator: Any) -> None:
    box = locator.bounding_box()
    assert box is not None
    assert box["height"] >= TOUCH_PX, box
    assert box["width"] >= TOUCH_PX, box


def test_admin_keeps_the_lab_identity_and_the_accounts(
    live_server: str, chromium: Any, session: Session, artifacts: Path
) -> None:
    load_demo(session)
    session.commit()
    context = chromium.new_context(viewport=TABLET)
    try:
        page = _sign_in(context, live_server, ADMIN)
        page.get_by_role("navigation", name="Main").get_by_role("link", name="Lab").click()
        form = page.get_by_test_id("lab-settings")
        form.get_by_label("Accreditation number").fill("VAC-T-0999")
        form.get_by_role("button", name="Save").click()
        page.wait_for_url(re.compile(r"/admin/lab\?flash=lab-saved"))
        assert "no. VAC-T-0999" in page.get_by_test_id("footer-lab").inner_text()
        page.screenshot(path=str(artifacts / "admin-lab.png"), full_page=True)
        page.get_by_role("navigation", name="Main").get_by_role("link", name="Users").click()
        create = page.get_by_test_id("create-user")
        create.get_by_label("Organisation").select_option(label="Larkspur Soils Laboratory")
        create.get_by_label("Role").select_option("reception")
        create.get_by_label("Full name").fill("Orla Venn")
        create.get_by_label("Email address").fill("desk2@larkspur-lab.example")
        create.get_by_label("Initial password").fill("a counter by the door 7")
        create.get_by_role("button", name="Create the account").click()
        page.wait_for_url(re.compile(r"/admin/users/\d+\?flash=user-created"))
        page.get_by_test_id("edit-user").get_by_label("Status").select_option("no")
        page.get_by_test_id("edit-user").get_by_role("button", name="Save").click()
        page.wait_for_url(re.compile(r"flash=user-saved"))
        assert "deactivated" in page.locator("main").inner_text()
        page.screenshot(path=str(artifacts / "admin-user.png"), full_page=True)
        page.get_by_role("link", name="← All users").click()
        row = page.locator("tr[data-email='desk2@larkspur-lab.example']")
        assert "Deactivated" in row.inner_text()
        page.screenshot(path=str(artifacts / "admin-users.png"), full_page=True)
    finally:
        context.close()


def test_tick_boxes_and_label_buttons_are_a_fingertip_wide(
    live_server: str, chromium: Any, session: Session, artifacts: Path
) -> None:
    load_demo(session)
    session.commit()
    project = session.exec(select(Project).where(Project.number == "FV-2026-021")).one()
    sample = session.exec(select(Sample).where(Sample.project_id == project.id)).first()
    assert sample is not None
    context = chromium.new_context(viewport=TABLET)
    try:
        page = _sign_in(context, live_server, MANAGER)
        page.goto(f"{live_server}/projects/{project.id}")
        boxes = page.locator("input[name=sample_ids]")
        assert boxes.count() >= 1
        _tall_enough(boxes.first)
        boxes.first.check()
        page.get_by_test_id("batch-tests").get_by_label("Method").select_option("falling_head")
        page.screenshot(path=str(artifacts / "project-batch-tests.png"), full_page=True)
        page.get_by_role("button", name="Request the test on the ticked samples").click()
        page.wait_for_url(re.compile(r"flash=tests-requested"))
        page.goto(f"{live_server}/samples/labels?ids={sample.id}")
        _tall_enough(page.get_by_test_id("print-labels"))
        _tall_enough(page.get_by_test_id("labels-back"))
        page.screenshot(path=str(artifacts / "labels-buttons.png"), full_page=True)
        page.get_by_test_id("labels-back").click()
        page.wait_for_url(f"{live_server}/projects/{project.id}")
    finally:
        context.close()
