"""The client in a real browser on the demo data: the portal (status, k20, compliance, the
depth plot, downloads, verification) and the account page (units, password), at a tablet and
a phone viewport."""

from __future__ import annotations

import re
from pathlib import Path
from typing import Any

import pytest
from sqlmodel import Session, func, select

from service.demo import DEMO_PASSWORDS, load_demo
from service.projects.models import Project
from service.samples.models import Sample
from tests.browser.conftest import PHONE, TABLET
from tests.browser.test_bench_browser import check_accessibility_basics

pytestmark = pytest.mark.browser

CLIENT = "engineer@fennickvale-water.example"
CLIENT_PASSWORD = DEMO_PASSWORDS[CLIENT][1]


def sign_in(page: Any, base_url: str, email: str, password: str, next_path: str) -> None:
    page.goto(f"{base_url}/sign-in?next={next_path}")
    page.get_by_label("Email address").fill(email)
    page.get_by_label("Password").fill(password)
    page.get_by_role("button", name="Sign in").click()
    page.wait_for_url(f"{base_url}{next_path}")


def console_errors(page: Any) -> list[str]:
    errors: list[str] = []
    page.on("console", lambda msg: errors.append(msg.text) if msg.type == "error" else None)
    page.on("pageerror", lambda exc: errors.append(str(exc)))
    return errors


@pytest.mark.parametrize(("viewport", "name"), [(TABLET, "tablet"), (PHONE, "phone")])
def test_client_follows_a_project_and_downloads(
    live_server: str, chromium: Any, session: Session, artifacts: Path, viewport: Any, name: str
) -> None:
    load_demo(session)
    session.commit()
    project = session.exec(select(Project).where(Project.number == "FV-2026-014")).one()
    context = chromium.new_context(viewport=viewport, accept_downloads=True)
    page = context.new_page()
    errors = console_errors(page)
    try:
        sign_in(page, live_server, CLIENT, CLIENT_PASSWORD, "/portal")
        page.get_by_role("link", name=re.compile("FV-2026-014")).click()
        page.wait_for_url(f"{live_server}/portal/projects/{project.id}")
        check_accessibility_basics(page)

        table = page.get_by_test_id("samples")
        shown = session.exec(select(func.count()).where(Sample.project_id == project.id)).one()
        assert shown >= 11  # eleven planned, plus the flexible-wall test's sample
        assert table.locator("tr[data-lab-id]").count() == shown
        # Every status the demo holds shows as a word (the shape and colour come with it).
        statuses = set(table.locator("[data-status]").all_inner_texts())
        assert statuses <= {"Received", "In testing", "Awaiting review", "Approved", "Certified"}
        plot = page.get_by_test_id("k-depth-plot")
        assert plot.locator("svg[role=img] .series").count() >= 1
        assert "log scale" in plot.inner_text()
        page.screenshot(path=str(artifacts / f"portal-project-{name}.png"), full_page=True)

        # Filtering by status swaps the table in place (htmx) and keeps the URL shareable.
        page.get_by_label("Status", exact=True).select_option("certified")
        page.wait_for_url(re.compile(r"status=certified"))
        page.wait_for_function(
            "() => [...document.querySelectorAll('#portal-samples [data-status]')]"
            ".every(el => el.dataset.status === 'certified')"
        )
        rows = page.get_by_test_id("samples").locator("tr[data-lab-id]")
        assert rows.count() >= 1
        assert rows.first.get_by_test_id("k20").inner_text().count("m/s") >= 1
        page.screenshot(path=str(artifacts / f"portal-filtered-{name}.png"), full_page=True)

        # The CSV export downloads with the browser's cookie.
        with page.expect_download() as download_info:
            page.get_by_role("link", name="Results table (CSV)").click()
        csv_path = download_info.value.path()
        assert Path(csv_path).read_text(encoding="utf-8").startswith("project_number,")

        # A current certificate's verification page says it is current.
        page.locator("[data-certificate-state=issued]").first.wait_for()
        row = (
            page.get_by_test_id("certificates")
            .locator("tr", has=page.locator("[data-certificate-state=issued]"))
            .first
        )
        row.get_by_role("link", name=re.compile("^Verify")).click()
        page.wait_for_url(re.compile(r"/verify/[A-Z0-9-]+$"))
        assert "is issued and current" in page.content()
        assert errors == []
    except Exception:
        page.screenshot(path=str(artifacts / f"failed-portal-{name}.png"), full_page=True)
        raise
    finally:
        context.close()


@pytest.mark.parametrize(("viewport", "name"), [(TABLET, "tablet"), (PHONE, "phone")])
def test_units_and_password_on_the_account_page(
    live_server: str, chromium: Any, session: Session, artifacts: Path, viewport: Any, name: str
) -> None:
    load_demo(session)
    session.commit()
    project = session.exec(select(Project).where(Project.number == "FV-2026-014")).one()
    context = chromium.new_context(viewport=viewport)
    page = context.new_page()
    errors = console_errors(page)
    try:
        sign_in(page, live_server, CLIENT, CLIENT_PASSWORD, "/account")
        check_accessibility_basics(page)
        example = page.get_by_test_id("units-example")
        assert "m/s" in example.inner_text()
        page.get_by_label("Show figures in").select_option("us")
        page.get_by_role("button", name="Save units").click()
        page.get_by_text("Display units saved").wait_for()
        assert "ft/day" in page.get_by_test_id("units-example").inner_text()
        page.screenshot(path=str(artifacts / f"account-units-{name}.png"), full_page=True)

        page.goto(f"{live_server}/portal/projects/{project.id}")
        assert "ft/day" in page.get_by_test_id("spec-limit").inner_text()
        assert " ft" in page.get_by_test_id("samples").inner_text()
        page.screenshot(path=str(artifacts / f"portal-project-us-{name}.png"), full_page=True)

        # A refused password change: the message sits beside the field that caused it.
        page.goto(f"{live_server}/account")
        page.get_by_label("Current password").fill("not my password")
        page.get_by_label("New password", exact=True).fill("a brand new password")
        page.get_by_label("New password again").fill("a brand new password")
        page.get_by_role("button", name="Change password").click()
        page.locator("#err-current_password").get_by_text("not your current password").wait_for()
        assert page.get_by_label("Current password").get_attribute("aria-invalid") == "true"
        page.screenshot(
            path=str(artifacts / f"account-password-refused-{name}.png"), full_page=True
        )
        check_accessibility_basics(page)
        # Chromium logs the refused request's 403 as a console error; nothing else may appear.
        assert [e for e in errors if "status of 403" not in e] == []
    except Exception:
        page.screenshot(path=str(artifacts / f"failed-account-{name}.png"), full_page=True)
        raise
    finally:
        context.close()
