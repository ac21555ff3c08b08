"""A compaction series in a real browser, at a tablet and a phone viewport: from the project
page to its series, open one, add a specimen through the form (decimal keypad, unit picker),
see a refusal beside its field, and read the members table and the three plots.

Check values: the invented series of tests/series/arrange.py (S by hand; the acceptable-zone
approach of Daniel & Benson 1990, J. Geotech. Eng. 116(12), from memory)."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import pytest
from sqlmodel import Session

from service.common import Role
from service.series.service import MemberCreate, SeriesCreate, add_member, create_series
from tests.browser.conftest import PHONE, TABLET
from tests.browser.test_bench_browser import PASSWORD, check_accessibility_basics
from tests.factories import make_user
from tests.series.arrange import SPECIMENS, build

pytestmark = pytest.mark.browser


@pytest.mark.parametrize(("viewport", "name"), [(TABLET, "tablet"), (PHONE, "phone")])
def test_series_page_on_a_tablet_and_a_phone(
    live_server: str, chromium: Any, session: Session, artifacts: Path, viewport: Any, name: str
) -> None:
    world = build(session)
    user = make_user(session, role=Role.TECHNICIAN, email=f"series-{name}@example.test")
    assert world.project.id is not None
    # Seven specimens typed already; the eighth (H) is added through the page.
    series = create_series(
        session, world.project.id, SeriesCreate(name="Existing series"), actor=user
    )
    assert series.id is not None
    for label, w, rho, _k in SPECIMENS[:-1]:
        data = MemberCreate(
            test_id=world.tests[label].id, label=label, water_content=w, dry_density=rho
        )
        add_member(session, series.id, data, actor=user)
    session.commit()
    context = chromium.new_context(viewport=viewport)
    page = context.new_page()
    errors: list[str] = []
    page.on("pageerror", lambda exc: errors.append(str(exc)))
    try:
        page.goto(f"{live_server}/sign-in?next=/projects/{world.project.id}")
        page.get_by_label("Email address").fill(user.email)
        page.get_by_label("Password").fill(PASSWORD)
        page.get_by_role("button", name="Sign in").click()
        page.wait_for_url(f"{live_server}/projects/{world.project.id}")
        page.get_by_role("link", name="Compaction series").click()
        page.wait_for_url(f"{live_server}/projects/{world.project.id}/series")
        check_accessibility_basics(page)
        page.get_by_label("Name", exact=True).fill("Borrow A, standard effort")
        page.get_by_role("button", name="Open the series").click()
        page.wait_for_url(f"{live_server}/series/*")
        page.goto(f"{live_server}/series/{series.id}")

        water = page.get_by_role("textbox", name="Moulding water content")
        assert water.get_attribute("inputmode") == "decimal"
        test_choice = page.get_by_role("combobox", name="Test", exact=True)
        test_choice.select_option(str(world.tests["H"].id))
        page.get_by_role("textbox", name="Specimen name").fill("H")
        water.fill("19.0")
        # a dry density above G_s·ρ_w (2.70 Mg/m³) is refused beside its field, typed kept
        page.get_by_role("textbox", name="Dry density", exact=True).first.fill("2.9")
        page.get_by_role("button", name="Add the specimen").click()
        message = page.locator("#err-dry_density")
        message.wait_for(state="visible")
        assert "2700 kg/m³" in message.inner_text()
        assert page.get_by_role("textbox", name="Moulding water content").input_value() == "19.0"
        page.get_by_role("textbox", name="Dry density", exact=True).first.fill("1.600")
        page.get_by_role("button", name="Add the specimen").click()
        page.get_by_text("Specimen added.").wait_for()

        rows = page.get_by_test_id("series-members").locator("tbody tr")
        assert rows.count() == 8
        h = page.locator('tr[data-label="H"]')
        assert "74.6 %" in h.inner_text()  # S of H by hand: 0.7462
        for plot in ("plot-k-w", "plot-k-rho", "plot-plane"):
            assert page.get_by_test_id(plot).locator("svg").count() == 1
        assert page.locator("#compaction-plane path.zone").count() == 1
        assert "72.1 %" in page.get_by_test_id("zone-summary").inner_text()  # F's S bounds it
        check_accessibility_basics(page)
        page.screenshot(path=str(artifacts / f"series-{name}.png"), full_page=True)
        page.get_by_test_id("plot-plane").screenshot(
            path=str(artifacts / f"series-plane-{name}.png")
        )
    finally:
        context.close()
    assert errors == []
