"""On a phone-sized viewport (390×844) a technician opens the consolidation stage, follows
"Set up the logger columns for CELL-F1", is refused once (no reading's heading) with the time
kept, picks the units, saves, and takes in a small CSV logger file; screenshots in
test-artifacts/."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import pytest
from sqlmodel import Session

from tests.browser.conftest import PHONE
from tests.browser.test_bench_browser import check_accessibility_basics
from tests.browser.test_stages_browser import PASSWORD, _flexible_test

pytestmark = pytest.mark.browser

# Elapsed hours and volume change in cm³ (an invented consolidation).
LOGGER_CSV = "Elapsed (h),Vol (cm3)\n0.02,0.17\n0.27,0.70\n1.67,1.74\n15,3.10\n24,3.10\n36,3.10\n"


def test_setting_the_logger_columns_then_taking_in_a_file(
    live_server: str, chromium: Any, session: Session, artifacts: Path, tmp_path: Path
) -> None:
    email, test_id = _flexible_test(session)
    logger_file = tmp_path / "cell-f1.csv"
    logger_file.write_text(LOGGER_CSV)
    context = chromium.new_context(viewport=PHONE)
    page = context.new_page()
    errors: list[str] = []
    page.on("pageerror", lambda exc: errors.append(str(exc)))

    def shot(step: str) -> None:
        page.screenshot(path=str(artifacts / f"logger-columns-{step}.png"), full_page=True)

    try:
        page.goto(f"{live_server}/sign-in?next=/tests/{test_id}/stages/consolidation")
        page.get_by_label("Email address").fill(email)
        page.get_by_label("Password").fill(PASSWORD)
        page.get_by_role("button", name="Sign in").click()
        page.wait_for_url(f"**/tests/{test_id}/stages/consolidation")
        page.locator('[name="e.cell_pressure"]').fill("465")
        page.locator('[name="e.back_pressure"]').fill("430")
        page.get_by_test_id("save-stage").click()
        page.get_by_test_id("stage-saved").wait_for()
        link = page.get_by_test_id("set-columns")
        assert link.inner_text().strip() == "Set up the logger columns for CELL-F1"
        link.click()
        page.wait_for_url("**/stages/consolidation/logger-columns")
        check_accessibility_basics(page)
        unit = page.locator('[name="c.volume_change.unit"]')
        box = unit.bounding_box()
        assert box is not None
        assert box["height"] >= 44  # WCAG 2.1, SC 2.5.5 Target Size: 44 x 44 CSS px
        page.get_by_label("Time column · Heading").fill("Elapsed (h)")
        page.locator('[name="time.unit"]').select_option("h")
        # No reading's heading yet: refused, the time as typed kept (htmx swaps the form).
        page.get_by_test_id("save-columns").click()
        page.get_by_test_id("columns-refused").wait_for()
        assert "at least one" in page.get_by_test_id("columns-refused").inner_text()
        assert page.get_by_label("Time column · Heading").input_value() == "Elapsed (h)"
        assert page.locator('[name="time.unit"]').input_value() == "h"
        shot("0-refused")
        unit = page.locator('[name="c.volume_change.unit"]')
        page.get_by_label("Volume change · Heading").fill("Vol (cm3)")
        unit.select_option("cm**3")
        shot("1-form")
        page.get_by_test_id("save-columns").click()
        page.wait_for_url("**/stages/consolidation?columns=1")
        page.get_by_test_id("columns-saved").wait_for()
        assert "Vol (cm3)" in page.get_by_test_id("logger-columns").inner_text()
        page.locator("#f-logger-file").set_input_files(str(logger_file))
        page.get_by_role("button", name="Take in the logger file").click()
        page.wait_for_url("**/stages/consolidation?saved=1")
        page.get_by_test_id("stage-saved").wait_for()
        assert page.locator('[name="g.readings.2.volume_change"]').input_value() == "1.74"
        assert page.locator('[name="g.readings.volume_change.unit"]').input_value() == "cm**3"
        shot("2-file-taken-in")
        assert errors == []
    finally:
        context.close()
