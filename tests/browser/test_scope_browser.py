"""The accredited scope page in a real browser on the demo lab, at a tablet (1024×768) and a
phone (390×844): labelled controls, touch targets of 44 px, no sideways scrolling; a limit is
confirmed with the decimal keypad's figures and saved as a new version."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import pytest
from sqlmodel import Session, select

from service.demo import load_demo
from service.scope.models import ScopeRule, ScopeVersion
from tests.browser.conftest import PHONE, TABLET
from tests.browser.test_manager import MANAGER, check_basics, sign_in

pytestmark = pytest.mark.browser


@pytest.mark.parametrize(("viewport", "name"), [(TABLET, "tablet"), (PHONE, "phone")])
def test_manager_confirms_a_limit_on_the_scope_page(
    live_server: str, chromium: Any, session: Session, artifacts: Path, viewport: Any, name: str
) -> None:
    load_demo(session)
    session.commit()
    errors: list[str] = []
    context = chromium.new_context(viewport=viewport)
    page = context.new_page()
    page.on("pageerror", lambda exc: errors.append(str(exc)))
    try:
        sign_in(page, live_server, MANAGER, "/scope")
        page.get_by_test_id("scope").wait_for()
        check_basics(page)
        d5084 = page.locator('fieldset[data-standard="ASTM D5084"]')
        d5084.locator("summary").click()
        rule = d5084.locator('fieldset[data-rule="gradient_limit"]')
        assert "limit not yet confirmed by the laboratory" in rule.inner_text()
        rule.get_by_label("Confirmed against our copy of the standard").check()
        rule.get_by_label("Clause").fill("Table 2")
        field = rule.get_by_label("Largest gradient below the fourth row (number)")
        assert field.get_attribute("inputmode") == "decimal"
        field.fill("30")
        check_basics(page)
        page.screenshot(path=str(artifacts / f"scope-{name}.png"), full_page=False)
        page.get_by_role("button", name="Save the scope").click()
        page.get_by_text("Saved: a new version of the scope").wait_for()
        page.screenshot(path=str(artifacts / f"scope-saved-{name}.png"), full_page=False)
    finally:
        context.close()
    assert errors == []
    session.expire_all()
    assert max(v.number for v in session.exec(select(ScopeVersion))) == 2
    confirmed = session.exec(select(ScopeRule).where(ScopeRule.rule_id == "gradient_limit")).one()
    assert confirmed.clause == "Table 2"
