"""The test page when the network drops, in a real browser with the network cut
(context.set_offline): entries saved offline are kept on the tablet, survive a reload, and
land exactly once when the connection returns; a test sent back meanwhile shows the
conflict with both versions and discards nothing the technician typed."""

from __future__ import annotations

import time
from pathlib import Path
from typing import Any

import pytest
from sqlmodel import Session, col, func, select

from service.audit import checkpoints
from service.audit.service import apply_changes
from service.common import OrganisationKind, Role, TestState
from service.lab_tests import service as lab_tests
from service.lab_tests.models import PermeabilityTest, SaturationStep, Trial
from service.lab_tests.schemas import SendBackRequest
from tests.browser.conftest import PHONE, TABLET
from tests.browser.test_bench_browser import check_accessibility_basics
from tests.browser.test_technician import PASSWORD, planned_test
from tests.factories import make_organisation, make_user

pytestmark = pytest.mark.browser

# Falling-head trials, each typed with its units (invented figures; the three differ so each
# trial is a distinct entry).
TRIALS = (
    ("100.0 cm", "70.0 cm", "1 h", "18.0 degC"),
    ("100.0 cm", "71.0 cm", "1 h", "18.5 degC"),
    ("100.0 cm", "69.5 cm", "1 h", "19.0 degC"),
)


def _d5084_test(session: Session, name: str) -> tuple[str, int]:
    """A planned flexible-wall (ASTM D5084) falling-head test: the page has the trial form
    and the saturation-step form."""
    email, test_id = planned_test(session, name)
    test = session.get(PermeabilityTest, test_id)
    assert test is not None
    test.standard = "ASTM D5084"
    session.add(test)
    session.commit()
    return email, test_id


def _count(session: Session, model: Any, test_id: int) -> int:
    session.rollback()  # a fresh read: what the server committed since
    found = session.exec(select(func.count()).select_from(model).where(model.test_id == test_id))
    count = int(found.one())
    session.rollback()
    return count


def _open_test(page: Any, base: str, email: str, test_id: int) -> None:
    page.goto(f"{base}/sign-in")
    page.get_by_label("Email address").fill(email)
    page.get_by_label("Password").fill(PASSWORD)
    page.get_by_role("button", name="Sign in").click()
    page.wait_for_url(f"{base}/")
    page.goto(f"{base}/tests/{test_id}")
    # The service worker is active and has kept the page (and its files) for offline use;
    # it need not control this first load: a reload is a navigation it answers.
    page.evaluate("async () => { await navigator.serviceWorker.ready; }")
    deadline = time.monotonic() + 15
    kept = "async () => !!(await caches.match(location.pathname, {ignoreVary: true}))"
    while not page.evaluate(kept):
        assert time.monotonic() < deadline, "the service worker did not keep the page"
        page.wait_for_timeout(100)


def _type_trial(page: Any, entries: tuple[str, str, str, str]) -> None:
    form = page.locator("#trial-form")
    labels = ("Head at start", "Head at end", "Duration", "Temperature")
    for label, value in zip(labels, entries, strict=True):
        form.get_by_label(label, exact=True).fill(value)
    form.get_by_role("button", name="Save trial").click()


def _kept_count(page: Any) -> str:
    return str(page.get_by_test_id("outbox-count").inner_text())


def _watch(page: Any) -> list[str]:
    errors: list[str] = []
    page.on("pageerror", lambda exc: errors.append(str(exc)))
    return errors


@pytest.mark.parametrize(("viewport", "name"), [(PHONE, "phone"), (TABLET, "tablet")])
def test_entries_kept_offline_survive_a_reload_and_land_once(
    live_server: str, chromium: Any, session: Session, artifacts: Path, viewport: Any, name: str
) -> None:
    email, test_id = _d5084_test(session, f"offline-{name}")
    context = chromium.new_context(viewport=viewport)
    page = context.new_page()
    errors = _watch(page)

    def shot(step: str) -> None:
        path = artifacts / f"offline-{step}-{name}.png"
        page.screenshot(path=str(path), full_page=True, caret="initial")

    try:
        _open_test(page, live_server, email, test_id)
        context.set_offline(True)
        for n, entries in enumerate(TRIALS, start=1):
            _type_trial(page, entries)
            page.get_by_text(f"Kept on this tablet, not yet sent ({n})").wait_for()
            if n == 1:  # a gloved double tap keeps one entry, not a second empty one
                page.locator("#trial-form").get_by_role("button", name="Save trial").click()
                page.wait_for_timeout(300)
                assert "(1)" in _kept_count(page)
            # The form is clear for the next trial; the figures typed stay in view.
            assert page.locator("#trial-form").get_by_label("Head at start").input_value() == ""
        kept_trials = page.locator("#outbox-for-trial-form > li")
        assert kept_trials.count() == 3
        assert "69.5 cm" in kept_trials.nth(2).inner_text()
        # The live preview says it waits for the connection (no reduction in the browser).
        page.locator("#trial-form").get_by_label("Head at start").fill("100.0 cm")
        page.get_by_text("the live result will update when the connection returns").wait_for()
        page.locator("#trial-form").get_by_label("Head at start").fill("")
        saturation = page.locator("#saturation-form")
        saturation.get_by_label("Back pressure").fill("345 kPa")
        saturation.get_by_label("B-value after the step").fill("0.96")
        saturation.get_by_role("button", name="Add saturation step").click()
        page.get_by_text("Kept on this tablet, not yet sent (4)").wait_for()
        check_accessibility_basics(page)
        shot("1-kept")

        # A reload with no connection: the page from the service worker, the entries kept.
        page.reload()
        page.get_by_text("Kept on this tablet, not yet sent (4)").wait_for()
        assert page.locator("#outbox-for-trial-form > li").count() == 3
        assert "345 kPa" in page.locator("#outbox-for-saturation-form").inner_text()
        assert _count(session, Trial, test_id) == 0
        assert _count(session, SaturationStep, test_id) == 0
        shot("2-reloaded-offline")

        # The connection returns: each entry is sent once, in order.
        started = time.perf_counter()
        context.set_offline(False)
        page.wait_for_function(
            "() => !document.querySelector('[data-testid=outbox-count]')", timeout=30000
        )
        flushed = time.perf_counter() - started
        (artifacts / f"offline-flush-{name}.txt").write_text(f"{flushed:.3f} s for 4 entries\n")
        print(f"flush of 4 kept entries ({name}): {flushed:.3f} s")
        page.get_by_text("Trial 3 saved.").wait_for()
        assert page.get_by_test_id("saved-trials").locator("> li").count() == 3
        assert _count(session, Trial, test_id) == 3
        assert _count(session, SaturationStep, test_id) == 1
        by_seq = select(Trial.seq, Trial.entries).where(Trial.test_id == test_id)
        seqs = session.exec(by_seq.order_by(col(Trial.seq))).all()
        session.rollback()
        # Sent in the order they were saved.
        assert [entries["head_final"] for _, entries in seqs] == ["70.0 cm", "71.0 cm", "69.5 cm"]
        # A second flush (as after a lost answer) changes nothing: keys make it idempotent.
        page.evaluate("window.dispatchEvent(new Event('online'))")
        page.wait_for_timeout(500)
        assert _count(session, Trial, test_id) == 3
        report = checkpoints.verify_logs(session)
        session.rollback()
        assert report.ok
        shot("3-sent")
        assert errors == []
    except Exception:
        shot("failed")
        raise
    finally:
        context.close()


def test_a_test_sent_back_while_offline_shows_the_conflict_and_keeps_the_entries(
    live_server: str, chromium: Any, session: Session, artifacts: Path
) -> None:
    email, test_id = _d5084_test(session, "offline-conflict")
    lab = make_organisation(session, kind=OrganisationKind.LAB, name="Invented Review Desk")
    reviewer = make_user(session, role=Role.REVIEWER, organisation=lab, email="rev@example.test")
    session.commit()
    context = chromium.new_context(viewport=PHONE)
    page = context.new_page()
    errors = _watch(page)
    answers: list[str] = []
    accept: list[bool] = []

    def answer(dialog: Any) -> None:
        answers.append(dialog.message)
        if accept:
            dialog.accept()
        else:
            dialog.dismiss()

    def shot(step: str) -> None:
        path = artifacts / f"offline-conflict-{step}-phone.png"
        page.screenshot(path=str(path), full_page=True, caret="initial")

    try:
        _open_test(page, live_server, email, test_id)
        # Online, a refused entry comes back into the form with the message beside the field.
        _type_trial(page, ("100.0 cm", "70.0 cm", "3600 kg", "18.0 degC"))
        page.locator("#err-trial-duration").get_by_text("3600 kg").wait_for()
        assert page.locator("#trial-form").get_by_label("Duration").input_value() == "3600 kg"
        assert page.get_by_test_id("outbox-count").count() == 0
        _type_trial(page, TRIALS[0])  # online: lands at once (the test starts running)
        page.get_by_text("Trial 1 saved.").wait_for()
        context.set_offline(True)
        _type_trial(page, TRIALS[1])
        _type_trial(page, TRIALS[2])
        page.get_by_text("Kept on this tablet, not yet sent (2)").wait_for()

        # Meanwhile, elsewhere: the test is submitted and a reviewer sends it back.
        test = session.get(PermeabilityTest, test_id)
        assert test is not None
        apply_changes(session, test, {"state": TestState.SUBMITTED}, actor_id=reviewer.id)
        lab_tests.send_back(
            session,
            test_id,
            SendBackRequest(reason="Recheck the temperature probe before more trials."),
            actor=reviewer,
        )
        session.commit()

        context.set_offline(False)
        page.locator("#outbox-for-trial-form [data-testid=both-versions]").first.wait_for(
            timeout=30000
        )
        kept = page.locator("#outbox-for-trial-form > li")
        assert kept.count() == 2
        conflict = kept.nth(0).inner_text()
        assert "Recheck the temperature probe" in conflict  # the test as it is now
        assert "71.0 cm" in conflict  # and the entry as typed
        assert _count(session, Trial, test_id) == 1  # nothing stale landed
        assert "(2)" in _kept_count(page)
        check_accessibility_basics(page)
        shot("1-conflict")

        # Signing out asks first; declining keeps everything.
        page.on("dialog", lambda dialog: answer(dialog))
        page.get_by_role("button", name="Sign out").click()
        page.wait_for_timeout(300)
        assert "not yet sent" in answers[-1]
        assert page.locator("#outbox-for-trial-form > li").count() == 2

        # The technician resolves: the first is sent again as new, the second discarded.
        kept.nth(0).get_by_role("button", name="Send again as a new entry").click()
        page.get_by_text("Trial 2 saved.").wait_for(timeout=15000)
        assert _count(session, Trial, test_id) == 2
        accept.append(True)
        page.locator("#outbox-for-trial-form > li").first.get_by_role(
            "button", name="Discard…"
        ).click()
        page.wait_for_function(
            "() => !document.querySelector('[data-testid=outbox-count]')", timeout=10000
        )
        assert _count(session, Trial, test_id) == 2
        shot("2-resolved")
        # Nothing kept: signing out asks nothing, and the pages kept for offline use go.
        asked = len(answers)
        page.get_by_role("button", name="Sign out").click()
        page.wait_for_url(f"{live_server}/sign-in*")
        assert len(answers) == asked
        pages_kept = "async () => (await caches.keys()).includes('seepline-pages')"
        assert page.evaluate(pages_kept) is False
        assert errors == []
    except Exception:
        shot("failed")
        raise
    finally:
        context.close()
