"""The points of a full walk through the service, each at the viewport where it was seen:
the header on one row (1024 and 1440 px wide), touch targets of the account link, the back
links and the /verify inputs, the assign panel on a lower queue row, /verify by code, the
review plots' trial numbers, the schedule preview in one pass and the search."""

from __future__ import annotations

import re
from pathlib import Path
from typing import Any

import pytest
from sqlmodel import Session

from service.demo import DEMO_PASSWORDS, load_demo
from tests.browser.conftest import TABLET

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


def sign_in(page: Any, base_url: str, email: str, next_path: str) -> None:
    page.goto(f"{base_url}/sign-in?next={next_path}")
    page.get_by_label("Email address").fill(email)
    page.get_by_label("Password").fill(DEMO_PASSWORDS[email][1])
    page.get_by_role("button", name="Sign in").click()
    page.wait_for_url(re.compile(re.escape(base_url + next_path)))


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
