"""The whole job walked in the browser at 1024×768, counting what it costs the people doing
it: clicks (taps, choices and ticks), typed fields, screens (full page loads) and sign-ins.

The lab manager receives a sample with its test requested at receipt and assigns it; the
technician records the specimen and three constant-head trials and submits; the manager
(still signed in at the desk) previews the draft certificate, approves and issues; the
client downloads the certificate and checks it on the verification page. The counts are
printed, written to test-artifacts/walk-counts.txt and held under upper bounds: the walk
before this round took 51 clicks, 57 typed fields, 10 screens and 5 sign-ins."""

from __future__ import annotations

import re
from pathlib import Path
from typing import Any
from urllib.parse import urlsplit

import pytest
from sqlmodel import Session, select

from service.apparatus.models import Apparatus
from service.common import TestState
from service.demo import DEMO_PASSWORDS, load_demo
from service.lab_tests.models import PermeabilityTest
from service.projects.models import Project
from service.samples.models import Sample
from tests.browser.conftest import TABLET
from tests.browser.test_full_flow import fresh, user_named, wait_for_test

pytestmark = pytest.mark.browser

MANAGER = "manager@larkspur-lab.example"
TECHNICIAN = "tech.brannagh@larkspur-lab.example"
CLIENT = "engineer@fennickvale-water.example"
PROJECT = "FV-2026-021"  # constant head, rigid-wall permeameter PRM-R01
APPARATUS = ("PRM-R01", "BAL-01", "THM-04", "CAL-02")
CLIENT_SAMPLE_ID = "TP-01/B44"
# Constant-head trials: volume collected in 120 s under the head across the ports.
TRIALS = (("355 mL", "4.50 cm"), ("352 mL", "4.50 cm"), ("361 mL", "4.55 cm"))
# Upper bounds: the walk before this round, halved where the pages now allow it.
BASELINE = {"clicks": 51, "typed": 57, "screens": 10, "sign_ins": 5}
BOUNDS = {"clicks": 40, "typed": 30, "screens": 20, "sign_ins": 3}


class Walk:
    """Does each step through the page and counts it."""

    def __init__(self, artifacts: Path) -> None:
        self.counts = dict.fromkeys(BASELINE, 0)
        self.artifacts = artifacts
        self.paths: set[str] = set()

    def _loaded(self, page: Any) -> None:
        self._count("screens")
        self.paths.add(re.sub(r"\d+", "N", urlsplit(page.url).path))

    def watch(self, page: Any) -> Any:
        page.on("load", self._loaded)
        return page

    def _count(self, what: str, n: int = 1) -> None:
        self.counts[what] += n

    def click(self, locator: Any) -> None:
        locator.click()
        self._count("clicks")

    def choose(self, locator: Any, **option: str) -> None:
        locator.select_option(**option)
        self._count("clicks")

    def tick(self, locator: Any) -> None:
        locator.check()
        self._count("clicks")

    def type(self, locator: Any, text: str) -> None:
        locator.fill(text)
        self._count("typed")

    def sign_in(self, context: Any, base_url: str, email: str) -> Any:
        """Open the service (its address typed once) and sign in."""
        page = self.watch(context.new_page())
        page.goto(f"{base_url}/")
        self.type(page.get_by_label("Email address"), email)
        self.type(page.get_by_label("Password"), DEMO_PASSWORDS[email][1])
        self.click(page.get_by_role("button", name="Sign in"))
        page.wait_for_url(f"{base_url}/")
        self._count("sign_ins")
        return page

    def shot(self, page: Any, name: str) -> None:
        page.screenshot(path=str(self.artifacts / f"walk-{name}.png"), full_page=True)


def test_walk_receive_to_verified_certificate(
    live_server: str, chromium: Any, session: Session, artifacts: Path
) -> None:
    load_demo(session)
    session.commit()
    project = session.exec(select(Project).where(Project.number == PROJECT)).one()
    apparatus_ids = [
        a.id
        for a in session.exec(
            select(Apparatus).where(Apparatus.identifier.in_(APPARATUS))  # type: ignore[attr-defined]
        ).all()
    ]
    technician = user_named(session, TECHNICIAN)
    walk = Walk(artifacts)
    desk = chromium.new_context(viewport=TABLET)
    try:
        # 1. The manager receives the sample; the client's instructions ask for a
        #    constant-head test, requested on the same form.
        page = walk.sign_in(desk, live_server, MANAGER)
        walk.click(page.get_by_role("navigation", name="Main").get_by_role("link", name="Receive"))
        walk.choose(page.get_by_label("Project", exact=True), value=str(project.id))
        walk.click(page.get_by_role("button", name="Continue"))
        walk.type(page.get_by_label("Delivered by"), "Site team, van 2")
        walk.choose(page.get_by_label("Test to request on every sample"), value="constant_head")
        walk.choose(page.get_by_label("Standard of that test"), value="ASTM D2434")
        row = page.locator("#row-0")
        walk.type(row.get_by_label("Client's sample ID"), CLIENT_SAMPLE_ID)
        walk.choose(row.get_by_label("Location"), label="TP-01")
        walk.type(row.get_by_label("Depth, top"), "2.40")
        walk.type(row.get_by_label("Depth, bottom"), "2.90")
        walk.choose(row.get_by_label("Type"), value="bulk")
        walk.type(row.get_by_label("Description"), "Clean brown medium SAND")
        walk.click(page.get_by_role("button", name="Receive and give lab IDs"))
        page.get_by_test_id("tests-requested").wait_for()
        lab_id = page.get_by_test_id("lab-ids").locator(".lab-id").first.inner_text().strip()
        walk.shot(page, "1-received")
        sample = fresh(session).exec(select(Sample).where(Sample.lab_id == lab_id)).one()
        assert sample.id is not None
        test = wait_for_test(session, sample.id, lambda t: t is not None, "test at receipt")
        assert test.method == "constant_head"

        # 2. ... and assigns the technician and apparatus from the queue.
        walk.click(page.get_by_role("navigation", name="Main").get_by_role("link", name="Queue"))
        walk.choose(page.get_by_label("Project", exact=True), value=str(project.id))
        queue_row = page.locator(f"tr[data-test-id='{test.id}']")
        queue_row.wait_for()
        walk.click(queue_row.get_by_role("link", name=re.compile("Assign")))
        form = page.get_by_test_id("assign-form")
        form.wait_for()
        walk.choose(form.get_by_label("Technician"), value=str(technician.id))
        for apparatus_id in apparatus_ids:
            walk.tick(form.locator(f"input[name=apparatus_ids][value='{apparatus_id}']"))
        walk.shot(page, "2-assign")
        walk.click(form.get_by_role("button", name="Save assignment"))
        wait_for_test(session, sample.id, lambda t: t.technician_id is not None, "assignment")

        # 3. The technician records the specimen and the trials, and submits.
        bench = chromium.new_context(viewport=TABLET)
        try:
            tech = walk.sign_in(bench, live_server, TECHNICIAN)
            walk.click(tech.get_by_test_id("my-tests").get_by_role("link", name=re.compile(lab_id)))
            specimen = tech.locator("#specimen-section")
            walk.choose(specimen.get_by_label("Preparation"), value="remoulded")
            for label, typed in (
                ("Diameter", "101.6 mm"),
                ("Length", "200.0 mm"),
                ("Wet mass", "3150.0 g"),
                ("Water content", "5.5 %"),
                ("Specific gravity", "2.65"),
            ):
                walk.type(specimen.get_by_label(label, exact=True), typed)
            walk.click(specimen.get_by_role("button", name="Save specimen"))
            tech.locator("#test-header [data-state=running]").wait_for()
            for number, (volume, head) in enumerate(TRIALS, start=1):
                trial = tech.locator("#trial-form")
                walk.type(trial.get_by_label("Volume collected"), volume)
                walk.type(trial.get_by_label("Duration", exact=True), "120 s")
                walk.type(trial.get_by_label("Head difference"), head)
                walk.type(trial.get_by_label("Temperature"), "20.5 degC")
                walk.click(trial.get_by_test_id("save-trial"))
                tech.wait_for_function(
                    "() => document.querySelectorAll('[data-testid=saved-trials] > li')"
                    f".length >= {number}"
                )
            submit = tech.locator("#submit-section")
            walk.type(submit.get_by_label("Your password, to sign"), DEMO_PASSWORDS[TECHNICIAN][1])
            walk.click(submit.get_by_role("button", name="Sign and submit"))
            tech.get_by_test_id("sign-offs").wait_for()
            walk.shot(tech, "3-submitted")
        finally:
            bench.close()
        wait_for_test(session, sample.id, lambda t: t.state == TestState.SUBMITTED, "submit")

        # 4. The manager, still signed in, approves, previews the draft and issues.
        walk.click(page.get_by_role("link", name="Seepline, home"))
        walk.click(page.get_by_role("link", name=re.compile(lab_id)))
        actions = page.get_by_test_id("review-actions")
        walk.type(actions.get_by_label("Your password"), DEMO_PASSWORDS[MANAGER][1])
        walk.click(actions.get_by_role("button", name="Approve and sign"))
        wait_for_test(session, sample.id, lambda t: t.state == TestState.APPROVED, "approval")
        draft_link = page.get_by_test_id("draft-certificate")
        draft_link.wait_for()
        # The draft opens in a tab of its own: one click and one screen.
        draft = desk.request.get(f"{live_server}{draft_link.get_attribute('href')}")
        walk._count("clicks")
        walk._count("screens")
        walk.paths.add("/tests/N/review/draft.pdf")
        assert draft.headers["content-type"] == "application/pdf"
        assert draft.body().startswith(b"%PDF")
        walk.shot(page, "4-approved")
        walk.click(page.get_by_role("button", name="Issue certificate"))
        page.get_by_test_id("issued-certificate").wait_for()
        walk.shot(page, "5-issued")
        test = wait_for_test(session, sample.id, lambda t: t.state == TestState.ISSUED, "issue")
    finally:
        desk.close()

    # 5. The client downloads the certificate and checks it.
    office = chromium.new_context(viewport=TABLET, accept_downloads=True)
    try:
        page = walk.sign_in(office, live_server, CLIENT)
        walk.click(page.get_by_role("link", name=re.compile(PROJECT)))
        certificates = page.get_by_test_id("certificates")
        with page.expect_download() as got:
            walk.click(certificates.get_by_role("link", name=re.compile("^PDF")).first)
        pdf_path = artifacts / "walk-certificate.pdf"
        got.value.save_as(pdf_path)
        assert pdf_path.read_bytes().startswith(b"%PDF")
        walk.click(certificates.get_by_role("link", name=re.compile("^Verify")).first)
        status = page.get_by_test_id("verify-status")
        assert status.get_attribute("data-state") == "issued"
        page.get_by_label("Certificate PDF", exact=True).set_input_files(str(pdf_path))
        walk._count("clicks")  # choosing the file
        walk.click(page.get_by_role("button", name="Check the file"))
        result = page.get_by_test_id("upload-result")
        result.wait_for()
        walk.shot(page, "6-verified")
        assert "genuine" in result.inner_text().lower()
    finally:
        office.close()

    fresh(session)
    assert session.get(PermeabilityTest, test.id) is not None
    counts = walk.counts
    report = ", ".join(f"{k} {counts[k]} (was {BASELINE[k]})" for k in BASELINE)
    report += f"; distinct screens {len(walk.paths)}: {', '.join(sorted(walk.paths))}"
    print(f"walk: {report}")
    (artifacts / "walk-counts.txt").write_text(report + "\n", encoding="utf-8")
    for what, bound in BOUNDS.items():
        assert counts[what] <= bound, f"{what}: {counts[what]} > {bound}"
