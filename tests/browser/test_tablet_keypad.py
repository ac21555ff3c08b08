"""A trial entered on a touch screen with no hardware keyboard: figures typed on the decimal
keypad, units chosen in the pickers, "next" moving on field by field, the duration from the
stopwatch; every target at least 44 × 44 px; at a tablet and a phone viewport, with
screenshots in test-artifacts/.

CV2 of /work/shared/reference/domain-reference.md §10: D = 7.10 cm, L = 11.60 cm (typed as
116 mm), h1 = 100.0 cm, h2 = 70.0 cm, Δt = 3600 s (typed as 60 min), T = 18.0 °C on a standpipe
of a = 0.282743 cm² give k20 = 8.6261e-8 m/s."""

from __future__ import annotations

import re
from pathlib import Path
from typing import Any

import pytest
from sqlmodel import Session, select

from service.apparatus.models import Apparatus
from service.lab_tests.models import TestApparatus
from tests.browser.conftest import PHONE, TABLET
from tests.browser.test_bench_browser import check_accessibility_basics
from tests.browser.test_technician import PASSWORD, planned_test

pytestmark = pytest.mark.browser

# What a decimal keypad can send (the number field's pattern).
KEYPAD = re.compile(r"[0-9.,eE+\-]*")
# Touch targets of at least 44 × 44 CSS px (WCAG 2.1 success criterion 2.5.5).
TOUCH = 44


def keypad(page: Any, digits: str) -> None:
    """Type on the on-screen decimal keypad: digits and a point only, never a unit."""
    assert KEYPAD.fullmatch(digits), digits
    page.keyboard.type(digits)


def focused(page: Any) -> str:
    return str(page.evaluate("document.activeElement && document.activeElement.id"))


def big_enough(locator: Any) -> None:
    box = locator.bounding_box()
    assert box is not None
    assert box["width"] >= TOUCH, box
    assert box["height"] >= TOUCH, box


@pytest.mark.parametrize(("viewport", "name"), [(TABLET, "tablet"), (PHONE, "phone")])
def test_a_trial_by_keypad_picker_and_stopwatch(
    live_server: str, chromium: Any, session: Session, artifacts: Path, viewport: Any, name: str
) -> None:
    email, test_id = planned_test(session, f"keypad-{name}")
    permeameter = session.exec(select(Apparatus).where(Apparatus.identifier == "PERM-R2")).one()
    session.add(TestApparatus(test_id=test_id, apparatus_id=permeameter.id or 0))
    session.commit()
    context = chromium.new_context(viewport=viewport, has_touch=True, is_mobile=name == "phone")
    page = context.new_page()
    errors: list[str] = []
    page.on("console", lambda msg: errors.append(msg.text) if msg.type == "error" else None)
    page.on("pageerror", lambda exc: errors.append(str(exc)))

    def shot(step: str) -> None:
        page.screenshot(
            path=str(artifacts / f"keypad-{step}-{name}.png"), full_page=True, caret="initial"
        )

    try:
        page.goto(f"{live_server}/sign-in?next=/tests/{test_id}")
        page.get_by_label("Email address").fill(email)
        page.get_by_label("Password").fill(PASSWORD)
        page.get_by_role("button", name="Sign in").click()
        page.wait_for_url(f"{live_server}/tests/{test_id}")
        check_accessibility_basics(page)

        # Specimen: a tap, the keypad, "next"; the length in millimetres from the picker.
        specimen = page.locator("#specimen-section")
        specimen.get_by_label("Diameter", exact=True).tap()
        keypad(page, "7.10")
        page.keyboard.press("Enter")
        assert focused(page) == "f-specimen-length"
        keypad(page, "116")
        specimen.locator("#f-specimen-length-unit").select_option("mm")
        big_enough(specimen.get_by_label("Length", exact=True))
        big_enough(specimen.locator("#f-specimen-length-unit"))
        shot("1-specimen")
        specimen.get_by_role("button", name="Save specimen").tap()
        page.get_by_text("Specimen saved.").wait_for()

        # Trial: heads on the keypad, "next" from field to field.
        trial = page.locator("#trial-form")
        trial.get_by_label("Head at start").tap()
        keypad(page, "100.0")
        page.keyboard.press("Enter")
        assert focused(page) == "f-trial-head_final"
        keypad(page, "70.0")
        page.keyboard.press("Enter")
        assert focused(page) == "f-trial-duration"

        # The stopwatch beside the duration fills it, in seconds.
        start = trial.get_by_role("button", name="Start timing")
        big_enough(start)
        start.tap()
        page.wait_for_timeout(1200)
        trial.get_by_role("button", name="Stop timing").tap()
        timed = trial.get_by_label("Duration", exact=True).input_value()
        assert re.fullmatch(r"\d+\.\d", timed), timed
        assert float(timed) >= 1.0
        assert trial.locator("#f-trial-duration-unit").input_value() == "s"
        shot("2-stopwatch")

        # The run itself lasted an hour: typed over as 60 min with the picker.
        trial.get_by_label("Duration", exact=True).tap()
        trial.get_by_label("Duration", exact=True).fill("")
        keypad(page, "60")
        trial.locator("#f-trial-duration-unit").select_option("min")
        trial.get_by_label("Temperature").tap()
        keypad(page, "18.0")
        assert trial.locator("#f-trial-temperature-unit").input_value() == "degC"
        page.wait_for_timeout(800)  # the live result arrives as the figures are typed
        page.keyboard.press("Enter")
        # The last field hands over to the button.
        assert page.evaluate("document.activeElement.dataset.testid") == "save-trial", (
            page.evaluate("document.activeElement.outerHTML.slice(0, 120)")
        )
        for box in ("#f-trial-head_initial", "#f-trial-head_initial-unit", "#f-trial-duration"):
            big_enough(trial.locator(box))
        # CV2 (domain-reference §10): k20 = 8.6261e-8 m/s.
        page.wait_for_function(
            "() => document.querySelector('[data-testid=live-k20]')?.textContent"
            ".includes('8.63 × 10⁻⁸')",
            timeout=15000,
        )
        check_accessibility_basics(page)
        shot("3-trial-live")
        page.locator("#trial-new").screenshot(
            path=str(artifacts / f"keypad-3-trial-form-{name}.png"), caret="initial"
        )
        trial.get_by_test_id("save-trial").tap()
        page.get_by_text("Trial 1 saved.").wait_for()
        saved = page.get_by_test_id("saved-trials").inner_text()
        assert "Head at start" in saved
        assert "60 min" in saved
        # The next trial's duration picker starts where this one left off (this permeameter).
        assert page.locator("#f-trial-duration-unit").input_value() == "min"
        check_accessibility_basics(page)
        shot("4-saved")
        assert errors == []
    except Exception:
        shot("failed")
        raise
    finally:
        context.close()
