"""The whole job in the browser on a fresh demo database: a lab manager receives a sample,
requests a test and assigns it; the technician times trials with the stopwatch, sees k live
and submits; a reviewer approves; the client sees the result and the k20-against-depth plot.

Each step goes through its page when the app has that page. Where a page does not exist
(yet), the step is arranged through the same service functions the pages call, and the step
list written to test-artifacts/full-flow-steps.txt says which way each step went. A page that
exists but breaks fails the test: nothing here is skipped."""

from __future__ import annotations

import importlib
import pkgutil
import re
import time
from pathlib import Path
from typing import Any

import pytest
from fastapi import APIRouter
from sqlmodel import Session, select

import service.web
from service.accounts.models import User
from service.apparatus.models import Apparatus
from service.common import TestMethod, TestState
from service.demo import DEMO_PASSWORDS, load_demo
from service.lab_tests import service as lab_tests
from service.lab_tests.models import PermeabilityTest
from service.lab_tests.schemas import SignOffRequest, SpecimenWrite, TestCreate, TestUpdate
from service.projects.models import Project
from service.samples.models import Sample
from service.samples.service import SampleBatch, SampleIn, receive_samples
from tests.browser.conftest import PHONE, TABLET
from tests.browser.test_bench_browser import check_accessibility_basics

pytestmark = pytest.mark.browser

MANAGER = "manager@larkspur-lab.example"
TECHNICIAN = "tech.brannagh@larkspur-lab.example"
REVIEWER = "reviewer@larkspur-lab.example"
CLIENT = "engineer@fennickvale-water.example"
PROJECT = "FV-2026-021"  # constant head, rigid-wall permeameter PRM-R01 (ports at 150 mm)
APPARATUS = ("PRM-R01", "BAL-01", "THM-04", "CAL-02")  # not the overdue timer
CLIENT_SAMPLE_ID = "TP-01/B31"
# Three constant-head trials: volume collected in 120 s under the head across the ports.
TRIALS = (("355 mL", "4.50 cm"), ("352 mL", "4.50 cm"), ("361 mL", "4.55 cm"))


def page_routes() -> set[tuple[str, str]]:
    """(method, path) of every page route, read from the page modules' own routers (the
    same modules create_app() includes), to tell which pages exist."""
    found = set()
    for info in pkgutil.iter_modules(service.web.__path__):
        router = getattr(importlib.import_module(f"service.web.{info.name}"), "router", None)
        if not isinstance(router, APIRouter):
            continue
        for route in router.routes:
            for method in getattr(route, "methods", None) or ():
                found.add((method, getattr(route, "path", "")))
    return found


class Steps:
    """Which way each step went, for the report."""

    def __init__(self) -> None:
        self.lines: list[str] = []

    def page(self, step: str, url: str) -> None:
        self.lines.append(f"{step}: page {url}")

    def service(self, step: str, why: str) -> None:
        self.lines.append(f"{step}: arranged through services ({why})")


def sign_in(context: Any, base_url: str, email: str, next_path: str) -> Any:
    page = context.new_page()
    page.goto(f"{base_url}/sign-in?next={next_path}")
    page.get_by_label("Email address").fill(email)
    page.get_by_label("Password").fill(DEMO_PASSWORDS[email][1])
    page.get_by_role("button", name="Sign in").click()
    page.wait_for_url(f"{base_url}{next_path}")
    return page


def user_named(session: Session, email: str) -> User:
    return session.exec(select(User).where(User.email == email)).one()


def fresh(session: Session) -> Session:
    """End the session's read snapshot so it sees what the server wrote since (and may
    write itself: SQLite refuses a write from a stale snapshot)."""
    session.rollback()
    return session


def wait_for_test(
    session: Session, sample_id: int, check: Any, what: str, timeout_s: float = 15.0
) -> PermeabilityTest:
    """Poll the database until the sample's test satisfies `check` (a page's write landed)."""
    deadline = time.monotonic() + timeout_s
    while True:
        test = the_test(session, sample_id)
        if check(test):
            return test
        if time.monotonic() > deadline:
            pytest.fail(f"{what}: not seen in the database within {timeout_s:.0f} s ({test!r})")
        time.sleep(0.1)


def the_test(session: Session, sample_id: int) -> PermeabilityTest:
    fresh(session)
    return session.exec(
        select(PermeabilityTest).where(PermeabilityTest.sample_id == sample_id)
    ).one()


def test_receive_to_client_portal(
    live_server: str, chromium: Any, session: Session, artifacts: Path
) -> None:
    load_demo(session)
    session.commit()
    routes = page_routes()
    assert ("GET", "/portal/projects/{project_id}") in routes  # the detection itself works
    steps = Steps()
    project = session.exec(select(Project).where(Project.number == PROJECT)).one()
    manager = user_named(session, MANAGER)
    technician = user_named(session, TECHNICIAN)
    apparatus_ids = [
        a.id
        for a in session.exec(
            select(Apparatus).where(Apparatus.identifier.in_(APPARATUS))  # type: ignore[attr-defined]
        ).all()
    ]
    shots: list[str] = []

    def shot(page: Any, name: str) -> None:
        page.screenshot(path=str(artifacts / f"flow-{name}.png"), full_page=True)
        shots.append(name)

    lab = chromium.new_context(viewport=TABLET)
    try:
        # 1. The lab manager receives the sample.
        page = sign_in(lab, live_server, MANAGER, "/")
        if ("POST", "/reception") in routes:
            page.goto(f"{live_server}/reception?project_id={project.id}")
            page.get_by_label("Delivered by").fill("Site team, van 2")
            row = page.locator("#row-0")
            row.get_by_label("Client's sample ID").fill(CLIENT_SAMPLE_ID)
            row.get_by_label("Location").select_option(label="TP-01")
            row.get_by_label("Depth, top").fill("2.40")
            row.get_by_label("Depth, bottom").fill("2.90")
            row.get_by_label("Type").select_option("bulk")
            row.get_by_label("Description").fill("Clean brown medium SAND")
            page.get_by_role("button", name="Receive and give lab IDs").click()
            page.get_by_test_id("received").wait_for()
            lab_id = page.get_by_test_id("lab-ids").locator(".lab-id").first.inner_text().strip()
            shot(page, "received")
            steps.page("receive", "/reception")
        else:
            received = receive_samples(
                fresh(session),
                project.id or 0,
                SampleBatch(
                    samples=[
                        SampleIn(
                            client_sample_id=CLIENT_SAMPLE_ID,
                            location="TP-01",
                            depth_top="2.40 m",
                            depth_bottom="2.90 m",
                            sample_type="bulk",
                        )
                    ]
                ),
                actor=manager,
            )
            session.commit()
            lab_id = received[0].lab_id
            steps.service("receive", "no /reception page")
        sample = fresh(session).exec(select(Sample).where(Sample.lab_id == lab_id)).one()
        assert sample.id is not None
        assert sample.client_sample_id == CLIENT_SAMPLE_ID

        # 2. The manager requests a constant-head test and assigns technician and apparatus.
        if ("POST", "/samples/{sample_id}/tests") in routes:
            page.goto(f"{live_server}/samples/{sample.id}")
            form = page.locator("#test-request-form")
            form.get_by_label("Method").select_option(TestMethod.CONSTANT_HEAD.value)
            form.get_by_label("Standard").select_option("ASTM D2434")
            form.get_by_role("button", name="Request the test").click()
            page.wait_for_function("() => !document.querySelector('#sample-tests .htmx-request')")
            page.locator("#sample-tests").get_by_text(re.compile("constant", re.I)).first.wait_for()
            steps.page("request test", f"/samples/{sample.id}")
            test = the_test(session, sample.id)
        else:
            test = lab_tests.request_test(
                session,
                sample.id,
                TestCreate(method=TestMethod.CONSTANT_HEAD, standard="ASTM D2434"),
                actor=manager,
            )
            session.commit()
            steps.service("request test", "no test request form on the sample page")
        assert test.id is not None
        if ("POST", "/tests/{test_id}/assign") in routes:
            page.goto(f"{live_server}/tests/{test.id}/assign")
            form = page.get_by_test_id("assign-form")
            form.get_by_label("Technician").select_option(str(technician.id))
            for apparatus_id in apparatus_ids:
                form.locator(f"input[name=apparatus_ids][value='{apparatus_id}']").check()
            shot(page, "assign")
            form.get_by_role("button", name="Save assignment").click()
            steps.page("assign", f"/tests/{test.id}/assign")
        else:
            lab_tests.update_test(
                session,
                test.id,
                TestUpdate(
                    version=test.version,
                    technician_id=technician.id,
                    apparatus_ids=apparatus_ids,
                ),
                actor=manager,
            )
            session.commit()
            steps.service("assign", "no assign page")
        test = wait_for_test(
            session, sample.id, lambda t: t.technician_id == technician.id, "assignment"
        )
        page.close()
        test_id = test.id
        assert test_id is not None

        # The specimen as prepared (the test page's specimen form is the technician
        # engineer's to test; here it is written through the service).
        lab_tests.write_specimen(
            fresh(session),
            test_id,
            SpecimenWrite(
                preparation="remoulded",
                diameter="101.6 mm",
                length="200.0 mm",
                wet_mass="3150.0 g",
                water_content="5.5 %",
                specific_gravity=2.65,
                d10="0.30 mm",
                max_particle_size="9.5 mm",
            ),
            actor=technician,
        )
        session.commit()
        steps.service("specimen", "specimen entry is not part of this flow's check")

        # 3. The technician times the trials, sees k live, and submits with a sign-off.
        tech = chromium.new_context(viewport=TABLET)
        try:
            page = sign_in(tech, live_server, TECHNICIAN, "/")
            if ("GET", "/tests/{test_id}") in routes:
                page.goto(f"{live_server}/tests/{test.id}")
                check_accessibility_basics(page)
                for number, (volume, head) in enumerate(TRIALS, start=1):
                    form = page.locator("#trial-form")
                    form.get_by_label("Volume collected").fill(volume)
                    form.get_by_role("button", name="Start timing").click()
                    page.wait_for_timeout(1100)
                    form.get_by_role("button", name="Stop timing").click()
                    timed = form.get_by_label("Duration").input_value()
                    assert re.fullmatch(r"\d+\.\d", timed), timed
                    # The run itself lasted 120 s; the stopwatch above stands in for it.
                    form.get_by_label("Duration").fill("120 s")
                    form.get_by_label("Head difference").fill(head)
                    form.get_by_label("Temperature").fill("20.5 degC")
                    live_k = page.get_by_test_id("live-k")
                    page.wait_for_function(
                        "() => /m\\/s/.test(document.querySelector('[data-testid=live-k]')"
                        "?.textContent || '')"
                    )
                    assert "m/s" in live_k.inner_text()
                    if number == 1:
                        shot(page, "technician-live-k")
                    form.get_by_test_id("save-trial").click()
                    page.wait_for_function(
                        f"() => document.querySelectorAll('[data-testid=saved-trials] > li')"
                        f".length >= {number}"
                    )
                page.get_by_label("Your password, to sign").fill(DEMO_PASSWORDS[TECHNICIAN][1])
                page.get_by_role("button", name="Sign and submit").click()
                page.get_by_test_id("sign-offs").wait_for()
                shot(page, "technician-submitted")
                steps.page("trials with stopwatch, live k, submit", f"/tests/{test.id}")
            else:
                pytest.fail("the technician's test page /tests/{test_id} is missing")
        finally:
            tech.close()
        test = wait_for_test(
            session, sample.id, lambda t: t.state == TestState.SUBMITTED, "submission"
        )
        assert test.result_k_ref_m_per_s is not None

        # 4. A reviewer approves.
        review = chromium.new_context(viewport=TABLET)
        try:
            page = sign_in(review, live_server, REVIEWER, "/")
            if ("GET", "/tests/{test_id}/review") in routes:
                page.goto(f"{live_server}/tests/{test.id}/review")
                actions = page.get_by_test_id("review-actions")
                actions.get_by_label("Your password").fill(DEMO_PASSWORDS[REVIEWER][1])
                shot(page, "reviewer-review")
                actions.get_by_role("button", name="Approve and sign").click()
                wait_for_test(
                    session, sample.id, lambda t: t.state == TestState.APPROVED, "approval"
                )
                page.wait_for_load_state("networkidle")
                shot(page, "reviewer-approved")
                steps.page("approve", f"/tests/{test.id}/review")
            else:
                lab_tests.approve_test(
                    fresh(session),
                    test_id,
                    SignOffRequest(password=DEMO_PASSWORDS[REVIEWER][1]),
                    actor=user_named(session, REVIEWER),
                )
                session.commit()
                steps.service("approve", "no review page")
        finally:
            review.close()
        test = the_test(session, sample.id)
        assert test.state == TestState.APPROVED
    finally:
        lab.close()

    # 5. The client sees the result, marked not yet certified, and the plot.
    for viewport, name in ((TABLET, "tablet"), (PHONE, "phone")):
        context = chromium.new_context(viewport=viewport)
        try:
            page = sign_in(context, live_server, CLIENT, "/portal")
            page.get_by_role("link", name=re.compile(PROJECT)).click()
            page.wait_for_url(f"{live_server}/portal/projects/{project.id}")
            check_accessibility_basics(page)
            row = page.locator(f"tr[data-lab-id='{lab_id}']")
            assert row.locator("[data-status]").inner_text() == "Approved"
            k20 = row.get_by_test_id("k20").inner_text()
            assert "m/s" in k20
            assert "Not yet certified" in k20
            plot = page.get_by_test_id("k-depth-plot")
            assert plot.locator("[data-location='TP-01 (not yet certified)']").count() == 1
            shot(page, f"client-portal-{name}")
        finally:
            context.close()
    steps.page("client sees result and plot", f"/portal/projects/{project.id}")
    (artifacts / "full-flow-steps.txt").write_text("\n".join(steps.lines) + "\n", encoding="utf-8")
    assert len(shots) >= 6
