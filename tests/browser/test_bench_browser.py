"""The technician at the bench in a real browser: sign in, type a falling-head test, time a
trial with the stopwatch, and watch k appear; at a tablet and a phone viewport."""

from __future__ import annotations

import re
from pathlib import Path
from typing import Any

import pytest
from sqlmodel import Session

from service.common import Role
from tests.browser.conftest import PHONE, TABLET
from tests.factories import make_user

pytestmark = pytest.mark.browser

PASSWORD = "correct horse 42"

# Every visible form control must have an accessible name from a <label>, aria-label or
# aria-labelledby (WCAG 2.1 success criteria 1.3.1 and 4.1.2).
UNLABELLED_JS = """
() => [...document.querySelectorAll('input, select, textarea')]
  .filter(el => el.type !== 'hidden')
  .filter(el => !(el.labels && el.labels.length) && !el.getAttribute('aria-label')
                && !el.getAttribute('aria-labelledby'))
  .map(el => el.name || el.id || el.outerHTML.slice(0, 80))
"""


def sign_in(page: Any, base_url: str, email: str) -> None:
    page.goto(f"{base_url}/sign-in?next=/bench")
    page.get_by_label("Email address").fill(email)
    page.get_by_label("Password").fill(PASSWORD)
    page.get_by_role("button", name="Sign in").click()
    page.wait_for_url(f"{base_url}/bench")


# Touch targets of at least 44 × 44 CSS px (WCAG 2.1 success criterion 2.5.5, target size).
SMALL_TARGETS_JS = """
() => [...document.querySelectorAll('button, input, select, .site-nav a, a.button')]
  .filter(el => el.type !== 'hidden' && el.offsetParent !== null)
  .map(el => [el.name || el.textContent.trim() || el.id, el.getBoundingClientRect()])
  .filter(([, box]) => box.height < 44 || box.width < 44)
  .map(([name, box]) => `${name}: ${Math.round(box.width)}x${Math.round(box.height)}`)
"""


def check_accessibility_basics(page: Any) -> None:
    # Nothing wider than the viewport: no sideways scrolling on a phone.
    assert page.evaluate("document.documentElement.scrollWidth <= window.innerWidth")
    assert page.evaluate("document.documentElement.lang") == "en"
    assert page.evaluate(UNLABELLED_JS) == []
    assert page.evaluate(SMALL_TARGETS_JS) == []


@pytest.mark.parametrize(("viewport", "name"), [(TABLET, "tablet"), (PHONE, "phone")])
def test_bench_live_reduction_with_stopwatch(
    live_server: str, chromium: Any, session: Session, artifacts: Path, viewport: Any, name: str
) -> None:
    user = make_user(session, role=Role.TECHNICIAN, email=f"bench-{name}@example.test")
    session.commit()
    context = chromium.new_context(viewport=viewport)
    page = context.new_page()
    errors: list[str] = []
    page.on("console", lambda msg: errors.append(msg.text) if msg.type == "error" else None)
    # Chromium logs every 4xx as a console error; the refused entry answers 422 on purpose.
    page.on("pageerror", lambda exc: errors.append(str(exc)))
    try:
        sign_in(page, live_server, user.email)
        check_accessibility_basics(page)
        page.get_by_label("Length").fill("11.6 cm")
        page.get_by_label("Diameter", exact=True).fill("7.1 cm")
        page.get_by_label("Standpipe diameter").fill("0.60 cm")
        trial = page.locator("#trial-0")
        trial.get_by_label("Head at start").fill("100 cm")
        trial.get_by_label("Head at end").fill("70 cm")
        trial.get_by_label("Temperature").fill("18 degC")

        # Stopwatch: one tap to start, one to stop, and the duration field is filled.
        toggle = trial.get_by_role("button", name="Start timing")
        toggle.click()
        page.wait_for_timeout(1200)
        trial.get_by_role("button", name="Stop timing").click()
        duration = trial.get_by_label("Duration").input_value()
        assert re.fullmatch(r"\d+\.\d", duration), duration
        assert float(duration) >= 1.0

        # The live result arrives without pressing anything.
        k_ref = page.get_by_test_id("k-ref")
        k_ref.wait_for(timeout=15000)
        assert "m/s" in k_ref.inner_text()
        # The stopwatch run is a few seconds long, so this k is large, but a k it is.
        page.get_by_test_id("trial-table").wait_for()

        # Type a real duration over it: the figure follows, and the 3600 s value is kept.
        trial.get_by_label("Duration").fill("3600 s")
        page.wait_for_function(
            "() => document.querySelector('[data-testid=k-ref]')?.textContent.includes('10⁻⁸')"
        )
        page.screenshot(path=str(artifacts / f"bench-result-{name}.png"), full_page=True)
        check_accessibility_basics(page)

        # A refused entry: the message appears beside the field, everything typed stays.
        trial.get_by_label("Head at end").fill("70 C")
        message = page.locator("#err-trials-0-head_final")
        message.get_by_text("not a length").wait_for(timeout=15000)
        assert trial.get_by_label("Head at end").get_attribute("aria-invalid") == "true"
        assert trial.get_by_label("Head at start").input_value() == "100 cm"
        assert trial.get_by_label("Duration").input_value() == "3600 s"
        page.screenshot(path=str(artifacts / f"bench-refused-{name}.png"), full_page=True)
        check_accessibility_basics(page)
        assert [e for e in errors if "status of 422" not in e] == []
    finally:
        context.close()


def test_method_change_and_added_trial_keep_typed_values(
    live_server: str, chromium: Any, session: Session, artifacts: Path
) -> None:
    user = make_user(session, role=Role.TECHNICIAN, email="bench-rows@example.test")
    session.commit()
    context = chromium.new_context(viewport=TABLET)
    page = context.new_page()
    try:
        sign_in(page, live_server, user.email)
        page.get_by_label("Length").fill("20 cm")
        page.get_by_role("button", name="Add a trial").click()
        page.locator("#trial-3").wait_for()
        assert page.get_by_label("Length").input_value() == "20 cm"
        page.get_by_label("Method").select_option("constant_head")
        page.locator("#trial-0").get_by_label("Volume collected").wait_for()
        assert page.get_by_label("Length").input_value() == "20 cm"
        assert page.locator("fieldset.trial").count() == 4
        check_accessibility_basics(page)
    finally:
        context.close()


@pytest.mark.parametrize(("viewport", "name"), [(TABLET, "tablet"), (PHONE, "phone")])
def test_sign_in_and_home_pages(
    live_server: str, chromium: Any, session: Session, artifacts: Path, viewport: Any, name: str
) -> None:
    user = make_user(session, role=Role.TECHNICIAN, email=f"home-{name}@example.test")
    session.commit()
    context = chromium.new_context(viewport=viewport)
    page = context.new_page()
    try:
        page.goto(f"{live_server}/")
        page.wait_for_url(f"{live_server}/sign-in")
        check_accessibility_basics(page)
        page.get_by_label("Email address").fill(user.email)
        page.get_by_label("Password").fill("wrong password")
        page.get_by_role("button", name="Sign in").click()
        page.get_by_role("alert").wait_for()
        assert page.get_by_label("Email address").input_value() == user.email
        page.screenshot(path=str(artifacts / f"sign-in-refused-{name}.png"), full_page=True)
        page.get_by_label("Password").fill(PASSWORD)
        page.get_by_role("button", name="Sign in").click()
        page.wait_for_url(f"{live_server}/")
        page.get_by_role("heading", name="My tests").wait_for()
        check_accessibility_basics(page)
        page.screenshot(path=str(artifacts / f"home-technician-{name}.png"), full_page=True)
        page.get_by_role("button", name="Sign out").click()
        page.wait_for_url(f"{live_server}/sign-in?flash=signed-out")
        assert page.get_by_text("You are signed out.").is_visible()
    except Exception:
        page.screenshot(path=str(artifacts / f"failed-sign-in-{name}.png"), full_page=True)
        raise
    finally:
        context.close()
